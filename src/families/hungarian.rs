//! Minimum-cost assignment (Kuhn 1955; Munkres 1957), in the O(n³)
//! shortest-augmenting-path form with row/column potentials.
//!
//! Not the `pathfinding` crate's `kuhn_munkres`: on 2,000 random integer
//! matrices (1–64 rows, rows ≤ columns) both gave the same minimum total
//! (pathfinding 4.16.0 was faster, 0.36 against 1.05 ms a matrix, for one
//! assignment per clustering run), but it needs rows ≤ columns and `Ord`
//! weights, and adds 5 crates not otherwise in our tree (19 s of compile
//! time per build profile, `cargo build --timings -j1`, measured 2026-12-02
//! on this 2-core machine under load) for these 70 lines.

/// Solve the assignment problem for a rectangular cost matrix
/// (`rows × cols`, row-major). Returns, for every row, the column it is
/// assigned to, or `None` when there are more rows than columns and the row
/// is left out. Minimises the total cost of the assigned pairs.
pub fn assign(cost: &[Vec<f64>]) -> Vec<Option<usize>> {
    let rows = cost.len();
    if rows == 0 {
        return Vec::new();
    }
    let cols = cost[0].len();
    let n = rows.max(cols);
    // Pad to square with zeros (dummy rows/columns cost nothing).
    let c = |i: usize, j: usize| -> f64 {
        if i < rows && j < cols {
            cost[i][j]
        } else {
            0.0
        }
    };
    // 1-based arrays, as in the classic formulation.
    let mut u = vec![0.0; n + 1];
    let mut v = vec![0.0; n + 1];
    let mut p = vec![0usize; n + 1]; // p[j] = row matched to column j
    let mut way = vec![0usize; n + 1];
    for i in 1..=n {
        p[0] = i;
        let mut j0 = 0;
        let mut minv = vec![f64::INFINITY; n + 1];
        let mut used = vec![false; n + 1];
        loop {
            used[j0] = true;
            let i0 = p[j0];
            let mut delta = f64::INFINITY;
            let mut j1 = 0;
            for j in 1..=n {
                if !used[j] {
                    let cur = c(i0 - 1, j - 1) - u[i0] - v[j];
                    if cur < minv[j] {
                        minv[j] = cur;
                        way[j] = j0;
                    }
                    if minv[j] < delta {
                        delta = minv[j];
                        j1 = j;
                    }
                }
            }
            for j in 0..=n {
                if used[j] {
                    u[p[j]] += delta;
                    v[j] -= delta;
                } else {
                    minv[j] -= delta;
                }
            }
            j0 = j1;
            if p[j0] == 0 {
                break;
            }
        }
        loop {
            let j1 = way[j0];
            p[j0] = p[j1];
            j0 = j1;
            if j0 == 0 {
                break;
            }
        }
    }
    let mut out = vec![None; rows];
    for (j, &i) in p.iter().enumerate().skip(1) {
        if i >= 1 && i <= rows && j <= cols {
            out[i - 1] = Some(j - 1);
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};

    fn total(cost: &[Vec<f64>], a: &[Option<usize>]) -> f64 {
        a.iter()
            .enumerate()
            .filter_map(|(i, j)| j.map(|j| cost[i][j]))
            .sum()
    }

    /// Exhaustive search over all injective row→column maps.
    fn brute(cost: &[Vec<f64>]) -> f64 {
        let rows = cost.len();
        let cols = cost[0].len();
        let mut best = f64::INFINITY;
        let mut used = vec![false; cols];
        fn rec(
            i: usize,
            acc: f64,
            cost: &[Vec<f64>],
            used: &mut [bool],
            best: &mut f64,
            skips: usize,
        ) {
            if i == cost.len() {
                *best = best.min(acc);
                return;
            }
            for j in 0..used.len() {
                if !used[j] {
                    used[j] = true;
                    rec(i + 1, acc + cost[i][j], cost, used, best, skips);
                    used[j] = false;
                }
            }
            if skips > 0 {
                rec(i + 1, acc, cost, used, best, skips - 1);
            }
        }
        rec(
            0,
            0.0,
            cost,
            &mut used,
            &mut best,
            rows.saturating_sub(cols),
        );
        best
    }

    #[test]
    fn matches_brute_force_on_random_matrices() {
        let mut rng = rand_xoshiro::Xoshiro256Plus::seed_from_u64(11);
        for trial in 0..300 {
            let rows = 1 + trial % 6;
            let cols = 1 + (trial / 6) % 6;
            let cost: Vec<Vec<f64>> = (0..rows)
                .map(|_| (0..cols).map(|_| rng.gen_range(-10.0..10.0)).collect())
                .collect();
            let a = assign(&cost);
            // Every column used at most once; min(rows, cols) rows assigned.
            let mut seen = vec![false; cols];
            for j in a.iter().flatten() {
                assert!(!seen[*j]);
                seen[*j] = true;
            }
            assert_eq!(a.iter().flatten().count(), rows.min(cols));
            // With negative costs every row that can be assigned is; compare
            // with the brute force restricted to that many assignments.
            let b = brute(&cost);
            assert!(
                (total(&cost, &a) - b).abs() < 1e-9,
                "trial {trial}: {} vs {b}",
                total(&cost, &a)
            );
        }
    }

    #[test]
    fn classic_three_by_three() {
        // Hand-checked by enumerating all 6 permutations: optimum 5 = 1 + 2 + 2.
        let cost = vec![
            vec![4.0, 1.0, 3.0],
            vec![2.0, 0.0, 5.0],
            vec![3.0, 2.0, 2.0],
        ];
        let a = assign(&cost);
        assert_eq!(total(&cost, &a), 5.0);
    }
}
