//! The fuzz targets' checks (`fuzz/checks.rs`) compiled into the test suite
//! and run on every seed in `fuzz/seeds/` (including the one crash the
//! fuzzer found, `trigger_csv/regress_multiline_cell.csv`), so the fuzz
//! code builds with the library and the seeds stay valid regressions.
//! Fuzzing itself needs cargo-fuzz (fuzz/README.md).

#[path = "../fuzz/checks.rs"]
mod checks;

use std::path::Path;

fn replay(target: &str, check: fn(&[u8])) {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("fuzz/seeds")
        .join(target);
    let mut n = 0;
    for entry in std::fs::read_dir(&dir).unwrap() {
        let p = entry.unwrap().path();
        check(&std::fs::read(&p).unwrap());
        n += 1;
    }
    assert!(n > 0, "no seeds in {}", dir.display());
}

#[test]
fn seeds_pass_the_fuzz_checks() {
    replay("npy_header", checks::npy_header);
    replay("bundle_toml", checks::bundle_toml);
    replay("segments", checks::segments);
    replay("trigger_csv", checks::trigger_csv);
}
