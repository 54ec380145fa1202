//! Coupling throughput: the full witness table for 300 aux channels × 24 h
//! (10^4 aux triggers each, 2×10^4 target triggers in 4 families, 8 SNR
//! thresholds per channel (its quantiles) × 6 windows, all triggers + every
//! family), first at zero lag only (target ≤ 10 s on a 2-core machine),
//! then with the time-slide background (500 slides per channel, target
//! ≤ 30 s), then the veto rounds on the same data. Prints wall-clock
//! figures. `GLITCHBOOK_BENCH_SLIDES` changes the number of slides.
//!
//! Run: `cargo bench --bench coupling` (or `--profile test` to reuse the
//! test build).

use glitchbook::coupling::veto::{veto_report, VetoParams};
use glitchbook::coupling::{
    witness_table, AuxChannel, AuxTrigger, Grid, TargetSet, TargetTrigger, DEFAULT_SLIDES,
};
use glitchbook::segments::{Segment, SegmentList};
use rand::{Rng, SeedableRng};
use rand_xoshiro::Xoshiro256Plus;
use std::time::Instant;

/// CPU time (user + system) of this process so far \[s\], from
/// /proc/self/stat (Linux; clock ticks assumed 100 Hz); `None` elsewhere.
fn cpu_s() -> Option<f64> {
    let stat = std::fs::read_to_string("/proc/self/stat").ok()?;
    let rest = &stat[stat.rfind(')')? + 2..];
    let f: Vec<&str> = rest.split_whitespace().collect();
    let ticks: f64 = f.get(11)?.parse::<f64>().ok()? + f.get(12)?.parse::<f64>().ok()?;
    Some(ticks / 100.0)
}

fn main() {
    let t0 = 1_300_000_000.0;
    let day_s = 86_400.0;
    let mut rng = Xoshiro256Plus::seed_from_u64(1);
    // Analysed time with a few gaps (dropouts).
    let analysed = SegmentList::from_segments(
        (0..24)
            .map(|h| Segment::new(t0 + h as f64 * 3600.0, t0 + h as f64 * 3600.0 + 3400.0))
            .collect(),
    );
    let targets: Vec<TargetTrigger> = (0..20_000)
        .map(|i| TargetTrigger {
            t_peak: t0 + rng.gen_range(0.0..day_s),
            snr: rng.gen_range(6.0..40.0),
            f_peak: rng.gen_range(20.0..1000.0),
            family: Some((i % 4) as i64 + 1),
        })
        .collect();
    let targets = TargetSet::new(targets, analysed.clone());
    let aux: Vec<AuxChannel> = (0..300)
        .map(|c| {
            let trig = (0..10_000)
                .map(|_| {
                    let t = t0 + rng.gen_range(0.0..day_s);
                    let half = 0.5 * rng.gen_range(0.0..0.2);
                    AuxTrigger {
                        t_peak: t,
                        t_start: t - half,
                        t_end: t + half,
                        snr: 6.0 + rng.gen::<f64>().powi(4) * 200.0,
                        f_peak: rng.gen_range(5.0..2000.0),
                    }
                })
                .collect();
            AuxChannel::new(c, &format!("AV1:BENCH_AUX_{c:03}"), trig, analysed.clone())
        })
        .collect();
    let sets = [None, Some(1), Some(2), Some(3), Some(4)];
    let grid = Grid::default();
    let threads = rayon::current_num_threads();

    let slides: usize = std::env::var("GLITCHBOOK_BENCH_SLIDES")
        .ok()
        .and_then(|s| s.parse().ok())
        .unwrap_or(DEFAULT_SLIDES);
    for (what, k, target) in [
        ("witness table, zero lag only", 0, 10.0),
        ("witness table with time-slide background", slides, 30.0),
    ] {
        let (start, cpu0) = (Instant::now(), cpu_s());
        let rows = witness_table(&targets, &sets, &aux, &grid, k, 0.01);
        let wall = start.elapsed().as_secs_f64();
        let cpu = cpu_s().zip(cpu0).map_or(f64::NAN, |(b, a)| b - a);
        let beyond = rows.iter().filter(|r| r.beyond_chance).count();
        println!(
            "{what} ({k} slides): {} rows (300 channels × 48 cells × {} sets), wall {:.2} s on {} \
             threads, CPU {:.2} s (≈ {:.2} s wall on {} idle cores; target ≤ {target} s); \
             {beyond} rows beyond chance (none expected: every channel is unrelated)",
            rows.len(),
            sets.len(),
            wall,
            threads,
            cpu,
            cpu / threads as f64,
            threads
        );
    }

    let params = VetoParams {
        per_family: false,
        ..VetoParams::default()
    };
    let (start, cpu0) = (Instant::now(), cpu_s());
    let report = veto_report(&targets, &aux, &params, None);
    let cpu = cpu_s().zip(cpu0).map_or(f64::NAN, |(b, a)| b - a);
    println!(
        "veto rounds (mode all, unrelated channels, {} slides per candidate): {} rounds (none \
         expected), wall {:.2} s, CPU {:.2} s",
        params.slides,
        report.rounds.len(),
        start.elapsed().as_secs_f64(),
        cpu
    );
}
