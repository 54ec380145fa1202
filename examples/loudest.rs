//! Scan one `.npy` channel with the library and print its loudest triggers.
//!
//! ```sh
//! cargo run --release --example loudest -- FILE.npy RATE_HZ START_GPS [N]
//! # e.g. on the demo bundle:
//! cargo run --release --example loudest -- glitchbook-demo/AV1-STRAIN.npy 4096 1400000000 5
//! ```
use glitchbook::io::{ChannelSpec, Role};
use glitchbook::scan::{scan_channel, ScanParams};
use std::path::PathBuf;

fn main() -> anyhow::Result<()> {
    let args: Vec<String> = std::env::args().skip(1).collect();
    if args.len() < 3 {
        anyhow::bail!("usage: loudest FILE.npy RATE_HZ START_GPS [N]");
    }
    let spec = ChannelSpec {
        name: "channel".into(),
        file: PathBuf::from(&args[0]),
        files: vec![PathBuf::from(&args[0])],
        format: glitchbook::io::DataFormat::Npy,
        rate: args[1].parse()?,
        start: args[2].parse()?,
        role: Role::Target,
        fmin: None,
        fmax: None,
    };
    let n: usize = args.get(3).map_or(Ok(10), |s| s.parse())?;
    let scan = scan_channel(&spec, &ScanParams::default(), None, &|_| {})?;
    println!(
        "{} triggers in {:.0} s analysed (fmin {} Hz, fmax {} Hz, Q {}-{})",
        scan.triggers.len(),
        scan.analysed.total(),
        scan.params.fmin,
        scan.params.fmax,
        scan.params.qmin,
        scan.params.qmax
    );
    let mut loud = scan.triggers.clone();
    loud.sort_by(|a, b| b.snr.total_cmp(&a.snr));
    println!(
        "{:>18} {:>9} {:>7} {:>6}",
        "t_peak [GPS s]", "f [Hz]", "SNR", "Q"
    );
    for t in loud.iter().take(n) {
        println!(
            "{:>18.4} {:>9.1} {:>7.1} {:>6.1}",
            t.t_peak, t.f_peak, t.snr, t.q
        );
    }
    Ok(())
}
