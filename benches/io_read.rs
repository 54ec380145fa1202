//! Throughput of the `.npy` reader: positional range reads and the dropout
//! scan (`valid_stretches`) over a 64 MB float32 file (2^24 samples, 1024 s
//! at 16384 Hz) and a 128 MB float64 file. Prints figures; run with
//! `cargo bench --bench io_read`. The files are written to a temp dir, so the
//! first pass may come from the page cache (warm reads are what is timed).
use glitchbook::io::{write_npy, NpyReader};
use std::time::Instant;

fn main() -> anyhow::Result<()> {
    let tmp = tempfile::TempDir::new()?;
    let n: usize = 1 << 24;
    let rate_hz = 16384.0;
    let mut data: Vec<f64> = (0..n).map(|i| ((i % 977) as f64 - 488.0) * 1e-3).collect();
    // A one-second dropout every 100 s.
    for k in 0..(n / (100 * 16384)) {
        let s = k * 100 * 16384 + 5000;
        for x in &mut data[s..s + 16384] {
            *x = f64::NAN;
        }
    }
    for as_f32 in [true, false] {
        let path = tmp.path().join("bench.npy");
        write_npy(&path, &data, as_f32)?;
        let r = NpyReader::open(&path)?;
        let mut buf = vec![0.0; 1 << 20];
        // Warm-up pass, then timed passes.
        let mut sum = 0.0;
        for pass in 0..3 {
            let t0 = Instant::now();
            let mut start = 0;
            while start < n {
                let m = buf.len().min(n - start);
                r.read_f64(start, &mut buf[..m])?;
                sum += buf[0];
                start += m;
            }
            let dt = t0.elapsed().as_secs_f64();
            if pass > 0 {
                println!(
                    "read_f64  {}: {n} samples in {dt:.3} s = {:.0} Msamples/s",
                    if as_f32 { "<f4" } else { "<f8" },
                    n as f64 / dt / 1e6
                );
            }
        }
        let t0 = Instant::now();
        let stretches = r.valid_stretches(rate_hz, 1_000_000_000.0)?;
        let dt = t0.elapsed().as_secs_f64();
        println!(
            "valid_stretches {}: {n} samples in {dt:.3} s = {:.0} Msamples/s ({} stretches, {:.1} s valid)",
            if as_f32 { "<f4" } else { "<f8" },
            n as f64 / dt / 1e6,
            stretches.segments().len(),
            stretches.total()
        );
        std::hint::black_box(sum);
    }
    Ok(())
}
