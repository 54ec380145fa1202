//! Laboratory for the clustered-tile statistic (`src/clusters.rs`): noise
//! clusters' significance and extended glitches' equivalent SNR in white
//! Gaussian noise, with the standard plan at 4096 Hz and 32-s blocks.
//!
//! `cargo run --release --example cluster_lab -- noise HOURS [PIXEL_S]`
//! `cargo run --release --example cluster_lab -- inject N [PIXEL_S]`
use glitchbook::clusters::TileCluster;
use glitchbook::scan::{Conditioner, InMemory};
use glitchbook::tails::{STANDARD_HIGHPASS, STANDARD_TILING};
use glitchbook::tf::{QPlan, Tile};
use glitchbook::trigger::energy_from_snr;
use glitchbook::waveforms::Waveform;
use rand::{Rng, SeedableRng};
use rand_distr::{Distribution, StandardNormal};
use rayon::prelude::*;

const FS: f64 = 4096.0;
const BLOCK_S: f64 = 32.0;
const PAD_S: f64 = 2.0;

fn block(
    plan: &QPlan,
    cond: &Conditioner,
    data: Vec<f64>,
    pixel_s: f64,
) -> (Vec<Tile>, Vec<TileCluster>) {
    let src = InMemory {
        data,
        rate_hz: FS,
        start_gps: 0.0,
    };
    let mut cb = cond.buffers();
    let mut ws = plan.workspace();
    cond.whiten_block_with(&src, 0, &mut cb).expect("whiten");
    let (mut tiles, mut clusters) = (Vec::new(), Vec::new());
    if pixel_s.is_infinite() {
        plan.transform(
            &cb.whitened,
            0.0,
            (PAD_S, BLOCK_S - PAD_S),
            energy_from_snr(5.5),
            &mut ws,
            &mut tiles,
        );
        return (tiles, clusters);
    }
    plan.transform_clustered(
        &cb.whitened,
        0.0,
        (PAD_S, BLOCK_S - PAD_S),
        energy_from_snr(5.5),
        glitchbook::tf::ClusterSpec {
            pixel_s,
            min_significance: std::env::var("MINSIG")
                .ok()
                .and_then(|s| s.parse().ok())
                .unwrap_or(20.0),
            grow: (PAD_S, BLOCK_S - PAD_S),
        },
        &mut ws,
        &mut tiles,
        &mut clusters,
    );
    (tiles, clusters)
}

fn noise(rng: &mut impl Rng, n: usize) -> Vec<f64> {
    (0..n).map(|_| StandardNormal.sample(rng)).collect()
}

fn main() {
    let args: Vec<String> = std::env::args().collect();
    let mode = args.get(1).map_or("noise", String::as_str);
    let amount: f64 = args.get(2).and_then(|s| s.parse().ok()).unwrap_or(1.0);
    let pixel_s: f64 = args.get(3).and_then(|s| s.parse().ok()).unwrap_or(4.0);
    let bn = (BLOCK_S * FS) as usize;
    let plan = QPlan::new(
        FS,
        bn,
        &STANDARD_TILING,
        STANDARD_HIGHPASS,
        &mut rustfft::FftPlanner::new(),
    )
    .unwrap();
    let cond = Conditioner::new(
        bn,
        FS,
        (PAD_S * FS) as usize,
        FS as usize,
        STANDARD_HIGHPASS,
    )
    .unwrap()
    .with_top(plan.top_hz());
    let kept_s = BLOCK_S - 2.0 * PAD_S;
    if mode == "noise" {
        let n_blocks = (amount * 3600.0 / kept_s).ceil() as u64;
        let t = std::time::Instant::now();
        let res: Vec<(usize, Vec<TileCluster>)> = (0..n_blocks)
            .into_par_iter()
            .map(|i| {
                let mut rng = rand_xoshiro::Xoshiro256Plus::seed_from_u64(77 ^ (i << 20));
                let (tiles, cl) = block(&plan, &cond, noise(&mut rng, bn), pixel_s);
                (tiles.len(), cl)
            })
            .collect();
        let hours = n_blocks as f64 * kept_s / 3600.0;
        let tiles: usize = res.iter().map(|r| r.0).sum();
        let all: Vec<&TileCluster> = res.iter().flat_map(|r| &r.1).collect();
        println!(
            "{hours:.2} h in {:.1} s; single tiles above threshold {:.1}/h; clusters {:.0}/h",
            t.elapsed().as_secs_f64(),
            tiles as f64 / hours,
            all.len() as f64 / hours
        );
        println!("significance  all/h   no-loud-tile/h   median dof   max pixels");
        for s in [20.0, 25.0, 30.0, 32.5, 35.0, 37.5, 40.0, 50.0] {
            let over: Vec<&&TileCluster> = all.iter().filter(|c| c.significance >= s).collect();
            let quiet = over
                .iter()
                .filter(|c| c.peak.2 < energy_from_snr(5.5))
                .count();
            let mut dof: Vec<f64> = over.iter().map(|c| c.dof).collect();
            dof.sort_by(f64::total_cmp);
            println!(
                "{s:>6.0}  {:>9.2}  {:>9.2}   {:>8.2}   {}",
                over.len() as f64 / hours,
                quiet as f64 / hours,
                dof.get(dof.len() / 2).copied().unwrap_or(f64::NAN),
                over.iter().map(|c| c.n_pixels).max().unwrap_or(0)
            );
        }
        // Per plane: rate of clusters with significance ≥ 20 and ≥ 30.
        for q in plan.planes.iter().map(|p| p.q) {
            let n20 = all
                .iter()
                .filter(|c| c.q == q && c.significance >= 20.0)
                .count();
            let n30 = all
                .iter()
                .filter(|c| c.q == q && c.significance >= 30.0)
                .count();
            println!(
                "  Q {q:>6.1}: ≥20 {:.2}/h  ≥30 {:.2}/h",
                n20 as f64 / hours,
                n30 as f64 / hours
            );
        }
        return;
    }
    // Injections.
    let n = amount as usize;
    let psd = |_f: f64| 2.0 / FS;
    let kinds = ["arch", "sweep", "tone", "sg10"];
    for kind in kinds {
        for &rho in &[8.0, 10.0, 12.0, 20.0] {
            let rows: Vec<(f64, f64, f64, f64)> = (0..n)
                .into_par_iter()
                .map(|i| {
                    let mut rng = rand_xoshiro::Xoshiro256Plus::seed_from_u64(
                        1000 + i as u64 * 31 + rho as u64,
                    );
                    let ph = rng.gen_range(0.0..std::f64::consts::TAU);
                    let w = match kind {
                        "arch" => Waveform::Arch {
                            f_top_hz: rng.gen_range(40.0..60.0),
                            f_edge_hz: 20.0,
                            duration_s: rng.gen_range(0.5..2.0),
                            edge_frac: 0.2,
                            phase_rad: ph,
                        },
                        "sweep" => Waveform::Sweep {
                            f_start_hz: 35.0,
                            f_end_hz: rng.gen_range(150.0..300.0),
                            duration_s: rng.gen_range(0.2..1.0),
                            edge_frac: 0.2,
                            phase_rad: ph,
                        },
                        "tone" => Waveform::Tone {
                            f0_hz: 410.0,
                            duration_s: rng.gen_range(0.1..0.5),
                            edge_frac: 0.2,
                            phase_rad: ph,
                        },
                        _ => Waveform::SineGaussian {
                            f0_hz: rng.gen_range(60.0..300.0),
                            q: 10.0,
                            phase_rad: ph,
                        },
                    };
                    let mut data = noise(&mut rng, bn);
                    let tc = 16.0 + rng.gen_range(-0.01..0.01);
                    let amp = w.amplitude_for_snr(rho, FS, &psd);
                    w.add_to(&mut data, 0.0, FS, tc, amp);
                    let (t0, t1, _, _) = w.extent();
                    let (lo, hi) = (tc + t0 - 0.1, tc + t1 + 0.1);
                    let (tiles, cl) = block(&plan, &cond, data, pixel_s);
                    let best_tile = tiles
                        .iter()
                        .filter(|t| t.t_gps >= lo && t.t_gps <= hi)
                        .map(|t| t.energy)
                        .fold(0.0, f64::max);
                    let tile_snr = glitchbook::trigger::snr_from_energy(best_tile);
                    let best = cl
                        .iter()
                        .filter(|c| c.t_end >= lo && c.t_start <= hi)
                        .max_by(|a, b| a.significance.total_cmp(&b.significance));
                    let _ = pixel_s;
                    (
                        tile_snr,
                        best.map_or(0.0, |c| c.significance),
                        best.map_or(0.0, |c| c.snr()),
                        best.map_or(0.0, |c| c.dof),
                    )
                })
                .collect();
            let med = |mut v: Vec<f64>| {
                v.sort_by(f64::total_cmp);
                v[v.len() / 2]
            };
            let tile_rec = rows.iter().filter(|r| r.0 >= 5.5).count() as f64 / n as f64;
            let mut line = format!(
                "{kind:>6} ρ {rho:>4.0}: tile recall {tile_rec:.2}  tile/ρ {:.2}  cluster sig med {:.1} eq/ρ {:.2} dof {:.1}",
                med(rows.iter().map(|r| r.0 / rho).collect()),
                med(rows.iter().map(|r| r.1).collect()),
                med(rows.iter().map(|r| r.2.max(r.0) / rho).collect()),
                med(rows.iter().map(|r| r.3).collect()),
            );
            for thr in [25.0, 30.0, 35.0, 40.0] {
                let rec =
                    rows.iter().filter(|r| r.0 >= 5.5 || r.1 >= thr).count() as f64 / n as f64;
                line += &format!("  rec@{thr:.0} {rec:.2}");
            }
            println!("{line}");
        }
    }
}
