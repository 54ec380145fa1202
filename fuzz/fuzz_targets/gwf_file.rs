//! Fuzz the frame-file reader on whole files: open (header, FrEndOfFile,
//! table of contents), the dictionary, every channel's info and index, a
//! few bounded sample reads, the file checksum. No panic; errors are one
//! line; what is accepted is consistent (finite rates and start times,
//! reads of the reported length succeed or fail cleanly).
#![no_main]
use glitchbook::io::gwf::GwfFile;
use glitchbook::scan::SampleSource;
use libfuzzer_sys::fuzz_target;

fn one_line(e: &anyhow::Error) {
    let m = format!("{e:#}");
    assert!(!m.contains('\n'), "multi-line error: {m}");
}

fuzz_target!(|data: &[u8]| {
    // The reader works on files (positional reads): a file on tmpfs per run.
    let path = std::path::PathBuf::from(format!("/dev/shm/glitchbook-fuzz-{}.gwf", std::process::id()));
    std::fs::write(&path, data).unwrap();
    let f = match GwfFile::open(&path) {
        Ok(f) => f,
        Err(e) => return one_line(&e),
    };
    for fr in f.frames() {
        assert!(fr.duration_s.is_finite() && fr.duration_s > 0.0);
    }
    if let Err(e) = f.dictionary() {
        one_line(&e);
    }
    if let Err(e) = f.verify_file_checksum() {
        one_line(&e);
    }
    let names: Vec<String> = f.channel_names().map(|(n, _)| n.to_string()).collect();
    for name in names.iter().take(16) {
        match f.channel_info(name) {
            Ok(i) => assert!(i.rate_hz.is_finite() && i.rate_hz > 0.0),
            Err(e) => one_line(&e),
        }
        let ch = match f.channel(name) {
            Ok(c) => c,
            Err(e) => {
                one_line(&e);
                continue;
            }
        };
        assert!(ch.rate_hz().is_finite() && ch.start_gps().is_finite());
        let n = ch.len();
        let mut buf = vec![0.0; n.min(4096)];
        for start in [0, n / 2, n.saturating_sub(buf.len())] {
            let m = buf.len().min(n - start);
            if let Err(e) = ch.read_samples(start, &mut buf[..m]) {
                one_line(&e);
            }
        }
    }
});
