//! Time and peak memory of the 2 h demo scenario (`glitchbook::demo::write_scenario`).
//! Run: `cargo bench --bench demo_generation` (prints figures; no harness).
use glitchbook::demo::{write_scenario, DemoOptions};

fn peak_rss_mib() -> Option<f64> {
    let status = std::fs::read_to_string("/proc/self/status").ok()?;
    let line = status.lines().find(|l| l.starts_with("VmHWM:"))?;
    let kib: f64 = line.split_whitespace().nth(1)?.parse().ok()?;
    Some(kib / 1024.0)
}

fn main() -> anyhow::Result<()> {
    let hours: f64 = std::env::var("DEMO_HOURS")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(2.0);
    let dir = tempfile::tempdir()?;
    let t = std::time::Instant::now();
    let s = write_scenario(dir.path(), &DemoOptions { seed: 1, hours })?;
    let wall = t.elapsed().as_secs_f64();
    let bytes: u64 = std::fs::read_dir(dir.path())?
        .map(|e| {
            e.map(|e| e.metadata().map(|m| m.len()).unwrap_or(0))
                .unwrap_or(0)
        })
        .sum();
    println!(
        "demo {hours} h: {wall:.2} s wall ({} rayon threads), peak RSS {:.0} MiB, {:.0} MB written",
        rayon::current_num_threads(),
        peak_rss_mib().unwrap_or(f64::NAN),
        bytes as f64 / 1e6
    );
    for f in &s.families {
        println!(
            "  {:<7} {:>4} injected, {:>4} witnessed",
            f.name, f.n_injected, f.n_witnessed
        );
    }
    Ok(())
}
