//! Peak memory of scanning a long 16384 Hz channel from a `.npy` file.
//!
//! Writes `GLITCHBOOK_LONG_HOURS` hours (default 24) of float32 white noise
//! at 16384 Hz into a temporary file (streamed, never held in memory), scans
//! it with the default parameters and prints the peak resident memory
//! (VmHWM) and throughput. Not run in CI: 24 h is 5.7 GB on disk.
//!
//! Run: `cargo bench --bench long_channel` (or `GLITCHBOOK_LONG_HOURS=2 cargo bench --bench long_channel`).

use glitchbook::io::{ChannelSpec, Role};
use glitchbook::scan::{scan_channel, ScanParams};
use rand::SeedableRng;
use rand_distr::{Distribution, StandardNormal};
use std::io::Write;
use std::time::Instant;

fn peak_rss_mib() -> f64 {
    let status = std::fs::read_to_string("/proc/self/status").unwrap_or_default();
    status
        .lines()
        .find(|l| l.starts_with("VmHWM:"))
        .and_then(|l| l.split_whitespace().nth(1))
        .and_then(|kb| kb.parse::<f64>().ok())
        .map_or(f64::NAN, |kb| kb / 1024.0)
}

fn main() {
    let hours: f64 = std::env::var("GLITCHBOOK_LONG_HOURS")
        .ok()
        .and_then(|s| s.parse().ok())
        .unwrap_or(24.0);
    let fs = 16384.0;
    let n = (hours * 3600.0 * fs) as usize;
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("long.npy");
    let t = Instant::now();
    {
        let mut header = format!("{{'descr': '<f4', 'fortran_order': False, 'shape': ({n},), }}");
        let unpadded = 10 + header.len() + 1;
        header.push_str(&" ".repeat((64 - unpadded % 64) % 64));
        header.push('\n');
        let mut w =
            std::io::BufWriter::with_capacity(1 << 22, std::fs::File::create(&path).unwrap());
        w.write_all(b"\x93NUMPY\x01\x00").unwrap();
        w.write_all(&(header.len() as u16).to_le_bytes()).unwrap();
        w.write_all(header.as_bytes()).unwrap();
        let mut rng = rand_xoshiro::Xoshiro256Plus::seed_from_u64(5);
        for _ in 0..n {
            let z: f32 = StandardNormal.sample(&mut rng);
            w.write_all(&(1e-21 * z).to_le_bytes()).unwrap();
        }
        w.flush().unwrap();
    }
    println!(
        "long channel: {hours} h at {fs} Hz ({n} float32 samples, {:.2} GB) written in {:.1} s; peak RSS so far {:.0} MiB",
        n as f64 * 4.0 / 1e9,
        t.elapsed().as_secs_f64(),
        peak_rss_mib()
    );
    let spec = ChannelSpec {
        name: "LONG:STRAIN".into(),
        file: path.clone(),
        files: vec![path.clone()],
        format: glitchbook::io::DataFormat::Npy,
        rate: fs,
        start: 1_400_000_000.0,
        role: Role::Target,
        fmin: None,
        fmax: None,
    };
    let t = Instant::now();
    let scan = scan_channel(&spec, &ScanParams::default(), None, &|_| {}).unwrap();
    let secs = t.elapsed().as_secs_f64();
    println!(
        "  scan: {:.1} s ({:.0}x real time), {} triggers, {:.0} s analysed; peak RSS {:.0} MiB",
        secs,
        hours * 3600.0 / secs,
        scan.triggers.len(),
        scan.analysed.total(),
        peak_rss_mib()
    );
}
