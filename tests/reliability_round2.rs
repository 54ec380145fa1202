//! Reliability, round two (issue 15), through the real binary: read-only
//! catalogues, GPS times that cannot wrap, bounded work, safe report output,
//! quoted batch scripts and checked shards. Each refusal exits 2 with one
//! line naming the file, line or flag, and leaves the catalogue unchanged.
use crate::cli_util::{trigger_csv, Dir};

/// A catalogue with content, so "unchanged" is a real check.
fn seeded() -> Dir {
    let d = Dir::new();
    d.write("good.csv", &trigger_csv(50, 1_400_000_000.0));
    d.ok(&["import", "good.csv", "--channel", "Z1:GOOD"]);
    d
}

/// Run, require exit 2 and one stderr line holding every needle, and the
/// catalogue's logical content unchanged.
fn refused(d: &Dir, args: &[&str], needles: &[&str]) -> String {
    let before = d.checksum();
    let out = d.run(args);
    let err = String::from_utf8_lossy(&out.stderr).to_string();
    assert_eq!(out.status.code(), Some(2), "{args:?}: {err}");
    assert_eq!(err.lines().count(), 1, "one error line for {args:?}: {err}");
    for n in needles {
        assert!(err.contains(n), "{args:?}: {err} lacks {n:?}");
    }
    assert_eq!(before, d.checksum(), "catalogue changed by {args:?}");
    err
}

/// A one-channel bundle `b/` of 64 s of seeded white noise at 256 Hz.
fn small_bundle(d: &Dir, start: &str) {
    use rand::SeedableRng;
    use rand_distr::{Distribution, Normal};
    let mut rng = rand_xoshiro::Xoshiro256Plus::seed_from_u64(11);
    let normal = Normal::new(0.0, 1.0).unwrap();
    let x: Vec<f64> = (0..64 * 256).map(|_| normal.sample(&mut rng)).collect();
    std::fs::create_dir_all(d.path().join("b")).unwrap();
    glitchbook::io::write_npy(&d.path().join("b/x.npy"), &x, false).unwrap();
    d.write(
        "b/bundle.toml",
        &format!(
            "[[channel]]\nname = \"Z1:NOISE\"\nfile = \"x.npy\"\nrate = 256\n\
             start = {start}\nrole = \"target\"\n"
        ),
    );
}

#[test]
fn gps_times_beyond_the_nanosecond_range_are_refused() {
    let d = seeded();
    // 9.3e9 s was once stored as -9146744073.7 s, 1e300 as -1.
    d.write(
        "far.csv",
        "time,frequency,snr\n1400000100,50,7\n9.3e9,60,8\n",
    );
    refused(
        &d,
        &["import", "far.csv", "--channel", "Z1:FAR"],
        &["far.csv:3", "time", "9e9"],
    );
    d.write("huge.csv", "time,frequency,snr\n1e300,60,8\n");
    refused(
        &d,
        &["import", "huge.csv", "--channel", "Z1:FAR"],
        &["huge.csv:2", "time"],
    );
    d.write("seg.txt", "1400000000 9300000000\n");
    d.write("ok.csv", &trigger_csv(3, 1_400_001_000.0));
    refused(
        &d,
        &[
            "import",
            "ok.csv",
            "--channel",
            "Z1:X",
            "--segments",
            "seg.txt",
        ],
        &["seg.txt:1", "end"],
    );
    // Listing bounds: --since 1e12 no longer matches a row at 3.88e9.
    refused(&d, &["triggers", "--since", "1e12"], &["--since", "9e9"]);
    refused(
        &d,
        &["rates", "--since", "-1e9", "--until", "1e10"],
        &["--until", "9e9"],
    );
    // A bundle starting at 9.3e9 s.
    small_bundle(&d, "9.3e9");
    refused(&d, &["scan", "b"], &["bundle.toml", "start"]);
}

#[cfg(unix)]
#[test]
fn endless_text_inputs_are_refused_early() {
    let d = seeded();
    let t = std::time::Instant::now();
    refused(
        &d,
        &["import", "/dev/zero", "--channel", "Z1:Z"],
        &["/dev/zero", "line longer than"],
    );
    d.write("ok.csv", &trigger_csv(3, 1_400_001_000.0));
    refused(
        &d,
        &[
            "import",
            "ok.csv",
            "--channel",
            "Z1:Z",
            "--segments",
            "/dev/zero",
        ],
        &["/dev/zero", "line longer than"],
    );
    // Read 1 MiB, not gigabytes (it took 19-33 s before the cap).
    assert!(t.elapsed().as_secs_f64() < 10.0, "{:?}", t.elapsed());
}

#[test]
fn absurd_bins_and_tilings_are_refused_up_front() {
    let d = seeded();
    refused(&d, &["rates", "--bin", "0.000001"], &["--bin", "bins"]);
    let out = d.path().join("r").display().to_string();
    refused(
        &d,
        &["report", "--out", &out, "--bin", "0.0001"],
        &["--bin", "bins"],
    );
    assert!(!d.path().join("r/index.html").exists());
    small_bundle(&d, "1400000000");
    let t = std::time::Instant::now();
    refused(
        &d,
        &["scan", "b", "--mismatch", "0.0001"],
        &["--mismatch", "tiles per block"],
    );
    assert!(t.elapsed().as_secs_f64() < 10.0, "{:?}", t.elapsed());
}

#[cfg(unix)]
#[test]
fn report_replaces_planted_links_instead_of_following_them() {
    let d = seeded();
    let victim = d.write("victim.txt", "precious\n");
    let out = d.path().join("rep");
    std::fs::create_dir(&out).unwrap();
    std::os::unix::fs::symlink(&victim, out.join("index.html")).unwrap();
    d.ok(&["report", "--out", &out.display().to_string()]);
    assert_eq!(std::fs::read_to_string(&victim).unwrap(), "precious\n");
    let meta = std::fs::symlink_metadata(out.join("index.html")).unwrap();
    assert!(meta.file_type().is_file());
    assert!(std::fs::read_to_string(out.join("index.html"))
        .unwrap()
        .contains("<html"));
    // No staging directory is left behind.
    let left: Vec<_> = std::fs::read_dir(&out)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().to_string())
        .filter(|n| n.starts_with('.'))
        .collect();
    assert!(left.is_empty(), "{left:?}");
    // A linked image directory is refused; its target gets nothing.
    let elsewhere = d.path().join("elsewhere");
    std::fs::create_dir(&elsewhere).unwrap();
    let out2 = d.path().join("rep2");
    std::fs::create_dir(&out2).unwrap();
    std::os::unix::fs::symlink(&elsewhere, out2.join("img")).unwrap();
    refused(
        &d,
        &["report", "--out", &out2.display().to_string()],
        &["img", "symbolic link"],
    );
    assert_eq!(std::fs::read_dir(&elsewhere).unwrap().count(), 0);
}

#[test]
fn batch_script_values_are_validated_and_quoted() {
    let d = Dir::new();
    small_bundle(&d, "1400000000");
    let p = |s: &str| d.path().join(s).display().to_string();
    // A newline in --partition would inject a shell line into the job.
    let out = d.run(&[
        "plan",
        &p("b"),
        "--out",
        &p("w1"),
        "--partition",
        "short\ntouch /tmp/owned",
    ]);
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(err.lines().count(), 1, "{err}");
    assert!(err.contains("--partition"), "{err}");
    assert!(!d.path().join("w1").exists(), "nothing written on refusal");
    // An output directory with a space: the #SBATCH lines quote it.
    d.ok(&[
        "plan",
        &p("b"),
        "--out",
        &p("work dir"),
        "--partition",
        "gpu-a,cpu_b",
    ]);
    let script = std::fs::read_to_string(d.path().join("work dir/run-array.sh")).unwrap();
    let dir = std::fs::canonicalize(d.path().join("work dir")).unwrap();
    assert!(
        script.contains(&format!(
            "#SBATCH --output=\"{}/logs/shard-%a.log\"\n",
            dir.display()
        )),
        "{script}"
    );
    assert!(
        script.contains("#SBATCH --partition=gpu-a,cpu_b\n"),
        "{script}"
    );
    // `bash -n` parses the script (syntax only).
    let st = std::process::Command::new("bash")
        .arg("-n")
        .arg(d.path().join("work dir/run-array.sh"))
        .status()
        .unwrap();
    assert!(st.success());
    // A directory whose name Slurm would read as a pattern is refused.
    let out = d.run(&["plan", &p("b"), "--out", &p("w%j")]);
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("--out"));
}

#[test]
fn merge_refuses_shards_of_another_schema_naming_them() {
    let d = Dir::new();
    small_bundle(&d, "1400000000");
    let p = |s: &str| d.path().join(s).display().to_string();
    d.ok(&["plan", &p("b"), "--out", &p("w"), "--shards", "2"]);
    let shard0 = d.path().join("w/shards/shard-0.db");
    {
        let c = rusqlite::Connection::open(&shard0).unwrap();
        c.pragma_update(None, "user_version", 99).unwrap();
    }
    let out = d.run(&["merge", &p("w"), "--into", &p("m.db")]);
    let err = String::from_utf8_lossy(&out.stderr);
    assert_ne!(out.status.code(), Some(0), "{err}");
    assert!(err.contains("shard-0.db") && err.contains("99"), "{err}");
    // A junk shard is named too.
    std::fs::remove_file(&shard0).unwrap();
    std::fs::write(&shard0, b"this is not a database at all, just text").unwrap();
    let out = d.run(&["merge", &p("w"), "--into", &p("m.db")]);
    let err = String::from_utf8_lossy(&out.stderr);
    assert_ne!(out.status.code(), Some(0), "{err}");
    assert!(err.contains("shard-0.db"), "{err}");
}

/// Every listing command reads without writing anything: the catalogue's
/// bytes and the directory's entries are unchanged, even with no `-wal` /
/// `-shm` beside it. (As root, file permissions cannot show this;
/// `.ci/readonly.sh` runs the same listings as an unprivileged user on a
/// read-only directory.)
#[cfg(unix)]
#[test]
fn listings_open_the_catalogue_read_only() {
    let d = seeded();
    let cat = d.path().join("ro");
    std::fs::create_dir(&cat).unwrap();
    let db = cat.join("c.db");
    {
        // A clean copy without -wal/-shm (VACUUM INTO writes one file).
        let c = rusqlite::Connection::open(d.db()).unwrap();
        c.execute("VACUUM INTO ?1", [db.display().to_string()])
            .unwrap();
    }
    let bytes = std::fs::read(&db).unwrap();
    let listing = || {
        let mut v: Vec<String> = std::fs::read_dir(&cat)
            .unwrap()
            .map(|e| e.unwrap().file_name().to_string_lossy().to_string())
            .collect();
        v.sort();
        v
    };
    let before = listing();
    let out_dir = d.path().join("rep").display().to_string();
    for args in [
        &["triggers"][..],
        &["channels"],
        &["families"],
        &["rates"],
        &["check"],
        &["report", "--out", &out_dir],
    ] {
        let out = std::process::Command::new(crate::cli_util::BIN)
            .arg("--db")
            .arg(&db)
            .args(args)
            .output()
            .unwrap();
        assert!(
            out.status.success(),
            "{args:?}: {}",
            String::from_utf8_lossy(&out.stderr)
        );
        assert_eq!(std::fs::read(&db).unwrap(), bytes, "{args:?} wrote");
        assert_eq!(
            listing(),
            before,
            "{args:?} left files beside the catalogue"
        );
    }
}
