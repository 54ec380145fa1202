//! Scan throughput on one hour of 4096 Hz data with `--fmin 16 --fmax 1024
//! --qmin 4 --qmax 64`: single-threaded and with all cores, as "× real
//! time", against the plan's FFTs alone (same blocks, same row FFTs).
//!
//! Each figure is the fastest of three runs (this machine is a shared VM:
//! the minimum is the figure least disturbed by other load).
//!
//! Run: `cargo bench --bench scan_throughput` (set GLITCHBOOK_BENCH_SECONDS
//! to change the span, default 3600, and GLITCHBOOK_BENCH_BLOCK_S to set
//! the block length instead of the default, and GLITCHBOOK_BENCH_QMAX the
//! highest Q instead of 64).
//!
//! The clustered tiles' cost (`--no-clusters` against the default) is
//! measured as alternating pairs in one process, 1 thread: the ratio of
//! two runs moments apart is steadier on a shared machine than figures
//! taken minutes apart. GLITCHBOOK_BENCH_PAIRS sets the number of pairs
//! (default 7, 0 to skip).

mod common;

use glitchbook::scan::{resolve_params, scan_source, Conditioner, ScanParams};
use glitchbook::tf::QPlan;
use std::time::Instant;

fn main() {
    let secs = common::env_f64("GLITCHBOOK_BENCH_SECONDS").unwrap_or(3600.0);
    let fs = 4096.0;
    let n = (fs * secs) as usize;
    let src = common::white_noise(secs, fs, 1e-21, 1_400_000_000.0, 1);
    let block_s = common::env_f64("GLITCHBOOK_BENCH_BLOCK_S");
    let qmax = common::env_f64("GLITCHBOOK_BENCH_QMAX").unwrap_or(64.0);
    let params = ScanParams {
        fmin: Some(16.0),
        fmax: Some(1024.0),
        qmin: 4.0,
        qmax,
        block_s,
        // GLITCHBOOK_BENCH_CLUSTERS=0: single tiles only (`--no-clusters`).
        clusters: common::env_f64("GLITCHBOOK_BENCH_CLUSTERS").is_none_or(|c| c != 0.0),
        ..ScanParams::default()
    };
    let rp = resolve_params(&params, fs, None, None).unwrap();
    println!(
        "scan throughput: {secs} s of {fs} Hz, fmin 16, fmax 1024, Q 4-{qmax}, block {} s, pad {} s",
        rp.block_s, rp.pad_s
    );

    // FFT-only baseline: the plan's FFTs (one forward FFT of each block, f64,
    // and the inverse FFT of every row, f32) for as many blocks as the scan
    // processes, single-threaded.
    let block_n = (rp.block_s * fs) as usize;
    let step = block_n - 2 * (rp.pad_s * fs) as usize;
    let n_blocks = (n - block_n).div_ceil(step) + 1;
    let tiling = glitchbook::tf::Tiling {
        qmax,
        ..common::TILING
    };
    let plan = QPlan::new(
        fs,
        block_n,
        &tiling,
        common::HIGHPASS,
        &mut rustfft::FftPlanner::new(),
    )
    .unwrap();
    let mut ws = plan.workspace();
    let fwd = realfft::RealFftPlanner::<f64>::new().plan_fft_forward(block_n);
    let (mut x, mut spec) = (fwd.make_input_vec(), fwd.make_output_vec());
    let mut scratch = fwd.make_scratch_vec();
    let fft_s = best_of_3(|| {
        for _ in 0..n_blocks {
            // The block's forward FFT (whitening and the Q-transform share
            // it), then every row's inverse FFT.
            fwd.process_with_scratch(&mut x, &mut spec, &mut scratch)
                .unwrap();
            plan.ffts_only(&mut ws);
        }
    });
    println!(
        "  FFT-only baseline (1 thread): {n_blocks} blocks x {} tiles: {fft_s:.2} s = {:.0}x real time",
        plan.tiles_per_block(),
        secs / fft_s
    );

    // Conditioning alone (read, Welch PSD, taper, FFT, whitening) for the same blocks.
    let pad = (rp.pad_s * fs) as usize;
    let welch_n = (rp.welch_s * fs) as usize;
    let cond = Conditioner::new(block_n, fs, pad, welch_n, common::HIGHPASS)
        .unwrap()
        .with_top(plan.top_hz());
    let mut bufs = cond.buffers();
    let cond_s = best_of_3(|| {
        let mut i0 = 0;
        for _ in 0..n_blocks {
            let start = i0.min(n - block_n);
            cond.whiten_block_with(&src, start, &mut bufs).unwrap();
            std::hint::black_box(&bufs.whitened);
            i0 += step;
        }
    });
    println!("  conditioning only (1 thread): {cond_s:.2} s");
    // Of which the Welch median PSD of each block (its segment FFTs and
    // per-bin medians), the largest cost outside the plan's FFTs.
    let welch = glitchbook::condition::Welch::new(welch_n, welch_n / 2).unwrap();
    let mut wb = welch.buffers();
    let welch_s = best_of_3(|| {
        let mut i0 = 0;
        for _ in 0..n_blocks {
            let start = i0.min(n - block_n);
            welch
                .estimate_band(
                    &src.data[start..start + block_n],
                    fs,
                    plan.top_hz(),
                    &mut wb,
                )
                .unwrap();
            i0 += step;
        }
    });
    println!("    of which Welch PSD: {welch_s:.2} s");

    let run = |threads: usize| -> (f64, usize) {
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .unwrap();
        pool.install(|| {
            let mut n_trig = 0;
            let t = best_of_3(|| {
                let (_, _, trig, _) =
                    scan_source(&src, &params, (None, None), None, &|_| {}).unwrap();
                n_trig = trig.len();
            });
            (t, n_trig)
        })
    };
    let (t1, n1) = run(1);
    println!(
        "  scan, 1 thread: {t1:.2} s = {:.0}x real time ({n1} triggers); total / FFT-only = {:.2}",
        secs / t1,
        t1 / fft_s
    );
    cluster_cost(&src, &params);
    let cores = std::thread::available_parallelism().map_or(1, |n| n.get());
    let (tn, _) = run(cores);
    println!(
        "  scan, {cores} threads: {tn:.2} s = {:.0}x real time; speed-up {:.2}x",
        secs / tn,
        t1 / tn
    );
}

/// Alternating 1-thread scans without and with clustered tiles: each
/// one's fastest run, the ratio of those, and the median and range of the
/// pairs' ratios.
fn cluster_cost(src: &glitchbook::scan::InMemory, params: &ScanParams) {
    let pairs = common::env_f64("GLITCHBOOK_BENCH_PAIRS").map_or(7, |p| p as usize);
    if pairs == 0 {
        return;
    }
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(1)
        .build()
        .unwrap();
    let time = |clusters: bool| -> f64 {
        let p = ScanParams {
            clusters,
            ..params.clone()
        };
        pool.install(|| {
            let t = Instant::now();
            scan_source(src, &p, (None, None), None, &|_| {}).unwrap();
            t.elapsed().as_secs_f64()
        })
    };
    let runs: Vec<(f64, f64)> = (0..pairs).map(|_| (time(false), time(true))).collect();
    let best = |f: fn(&(f64, f64)) -> f64| runs.iter().map(f).fold(f64::INFINITY, f64::min);
    let (off, on) = (best(|r| r.0), best(|r| r.1));
    let mut ratios: Vec<f64> = runs.iter().map(|r| r.1 / r.0).collect();
    ratios.sort_by(f64::total_cmp);
    println!(
        "  clustered tiles, 1 thread, {pairs} alternating pairs: {off:.3} s without, {on:.3} s with (fastest each: {:.3}x); pair ratios median {:.3}x, {:.3}-{:.3}x",
        on / off,
        ratios[pairs / 2],
        ratios[0],
        ratios[pairs - 1]
    );
}

/// The fastest of three runs of `f` \[s\].
fn best_of_3(mut f: impl FnMut()) -> f64 {
    (0..3)
        .map(|_| {
            let t = Instant::now();
            f();
            t.elapsed().as_secs_f64()
        })
        .fold(f64::INFINITY, f64::min)
}
