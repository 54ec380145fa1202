//! The binary's `witnesses`, `vetoes`, `rates` and `report` commands on a
//! small imported catalogue with a planted witness, worked by hand:
//!
//! - target `Z1:STRAIN <main> & co`: 100 triggers at T0 + 10 + 20 i s
//!   (i = 0..99), SNR 10, analysed [T0, T0 + 2000);
//! - witness `Z1:SEIS_X "pier" <b>`: 40 triggers 0.02 s before targets
//!   i = 0..39 (SNR 25) and 60 quiet ones (SNR 9) 7 s after targets
//!   i = 40..99;
//! - unrelated `Z1:MAG_Y`: 50 triggers at T0 + 15 + 40 k (SNR 30), ≥ 5 s from
//!   any target.
//!
//! The witness channel's own thresholds (quantiles of its SNRs, kept counts
//! 100, 72, 52, 37, 27, 19, 14, 10) are 9 and 25. Best cell: threshold 25
//! (the 40 loud triggers), window ±0.05 s (the smallest containing the
//! 0.02 s lag): 40 targets hit, deadtime 40 × 0.1 s / 2000 s = 0.002,
//! expected 100 × 0.002 = 0.2, every used aux trigger hits (fraction 1).
//! Reference numbers: tests/data/cli/cli_coupling.json (SciPy 1.17.1, script
//! beside it).
use crate::cli_util::Dir;
use serde_json::Value;

const T0: f64 = 1_400_000_000.0;
const TARGET: &str = "Z1:STRAIN <main> & co";
const WITNESS: &str = "Z1:SEIS_X \"pier\" <b>";
const OTHER: &str = "Z1:MAG_Y";

fn fixture() -> Value {
    let s = std::fs::read_to_string(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/data/cli/cli_coupling.json"
    ))
    .unwrap();
    serde_json::from_str(&s).unwrap()
}

fn target_time(i: usize) -> f64 {
    T0 + 10.0 + 20.0 * i as f64
}

fn csv(rows: &[(f64, f64, f64)]) -> String {
    let mut s = String::from("time,frequency,snr\n");
    for (t, f, snr) in rows {
        s.push_str(&format!("{t:.3},{f},{snr}\n"));
    }
    s
}

/// The catalogue described in the module header.
fn catalogue() -> Dir {
    let d = Dir::new();
    d.write("seg.txt", &format!("{T0} {}\n", T0 + 2000.0));
    let target: Vec<_> = (0..100).map(|i| (target_time(i), 100.0, 10.0)).collect();
    let mut witness: Vec<_> = (0..40)
        .map(|i| (target_time(i) - 0.02, 100.0, 25.0))
        .collect();
    witness.extend((40..100).map(|i| (target_time(i) + 7.0, 30.0, 9.0)));
    let other: Vec<_> = (0..50)
        .map(|k| (T0 + 15.0 + 40.0 * k as f64, 60.0, 30.0))
        .collect();
    d.write("target.csv", &csv(&target));
    d.write("witness.csv", &csv(&witness));
    d.write("other.csv", &csv(&other));
    for (file, name, role) in [
        ("target.csv", TARGET, "target"),
        ("witness.csv", WITNESS, "aux"),
        ("other.csv", OTHER, "aux"),
    ] {
        d.ok(&[
            "import",
            file,
            "--channel",
            name,
            "--role",
            role,
            "--segments",
            "seg.txt",
        ]);
    }
    d
}

fn json(d: &Dir, args: &[&str]) -> Value {
    serde_json::from_str(&d.ok(args)).unwrap()
}

#[test]
fn witnesses_rank_the_planted_channel_first() {
    let d = catalogue();
    let fx = fixture();
    let v = json(&d, &["witnesses", "--format", "json"]);
    let w = v["witnesses"].as_array().unwrap();
    assert_eq!(w.len(), 2, "one best row per aux channel: {v}");
    let best = &w[0];
    assert_eq!(best["aux_channel"], WITNESS);
    assert_eq!(best["family_id"], Value::Null, "all target triggers");
    // Hand-worked (module header).
    assert_eq!(best["aux_min_snr"].as_f64(), Some(25.0));
    assert_eq!(best["window_s"].as_f64(), Some(0.05));
    assert_eq!(best["targets"].as_u64(), Some(100));
    assert_eq!(best["targets_hit"].as_u64(), Some(40));
    assert_eq!(best["aux_triggers"].as_u64(), Some(40));
    assert_eq!(best["aux_hit_fraction"].as_f64(), Some(1.0));
    assert!((best["deadtime"].as_f64().unwrap() - 0.002).abs() < 1e-8);
    assert!((best["targets_hit_chance"].as_f64().unwrap() - 0.2).abs() < 1e-6);
    // Targets 20 s apart do not clump: the fast Poisson figure on targets,
    // P(N ≥ 40 | Poisson 0.2): SciPy 1.17.1 `poisson.logsf(39, 0.2)`
    // (fixture, as −log10). Tolerance covers the f64 rounding of window
    // edges at GPS ~1.4e9.
    assert_eq!(best["chance_basis"], "targets_poisson");
    let want = fx["witness"]["significance"].as_f64().unwrap();
    let got = -best["chance_p"].as_f64().unwrap().log10();
    assert!((got - want).abs() < 1e-3, "{best}");
    // 500 time slides resolve nothing this extreme: the tail extrapolation.
    // The targets here are exactly periodic (20 s), so the slides whose
    // offset is near a multiple of 20 s line the witness up with other
    // targets: they measure a large effective number of cells, and the
    // false-alarm probability (about 1e-14) is far above the chance
    // probability (1e-76) — still far beyond chance.
    assert_eq!(best["slides"].as_u64(), Some(500));
    assert_eq!(best["false_alarm_basis"], "slides_tail");
    let fa = best["false_alarm_any"].as_f64().unwrap();
    assert!(
        fa < 1e-8 && fa > best["chance_p"].as_f64().unwrap(),
        "{best}"
    );
    assert_eq!(best["beyond_chance"], true);
    // The unrelated channel never coincides within ±1 s.
    assert_eq!(w[1]["aux_channel"], OTHER);
    assert_eq!(w[1]["targets_hit"].as_u64(), Some(0));
    assert_eq!(w[1]["chance_p"].as_f64(), Some(1.0));
    assert_eq!(w[1]["beyond_chance"], false);
    // Lag summary of the best witness: t_aux − t_target = −0.02 s.
    assert!(v["lag_definition"]
        .as_str()
        .unwrap()
        .starts_with("t_aux - t_target"));
    let lag = &v["lags"][0];
    assert_eq!(lag["aux_channel"], WITNESS);
    assert_eq!(lag["pairs"].as_u64(), Some(40));
    assert!((lag["lag_median_s"].as_f64().unwrap() + 0.02).abs() < 1e-6);
    assert_eq!(lag["freq_relation"], "same");

    // The whole grid: the witness has 2 thresholds of its own, the other
    // channel (all SNR 30) one; 6 default windows.
    let all = json(&d, &["witnesses", "--all-rows", "--format", "json"]);
    assert_eq!(all["witnesses"].as_array().unwrap().len(), (2 + 1) * 6);
    // A custom grid, and CSV: header + one row per channel.
    let out = d.ok(&[
        "witnesses",
        "--thresholds",
        "8,24",
        "--windows",
        "0.03",
        "--format",
        "csv",
    ]);
    let lines: Vec<&str> = out.lines().collect();
    assert_eq!(lines.len(), 3, "{out}");
    assert!(lines[0].starts_with("family_id,aux_channel_id,aux_channel,aux_min_snr,"));
    // Table: header, then the witness channel's row first.
    let table = d.ok(&["witnesses"]);
    let rows: Vec<&str> = table.lines().collect();
    assert!(rows[0].starts_with("set"), "{table}");
    assert!(rows[1].contains(WITNESS), "{table}");
}

#[test]
fn vetoes_write_segments_and_metadata_with_the_caution() {
    let d = catalogue();
    // 30 injections 7 s or more from every witness trigger (safe), plus two
    // outside the analysed time (warned about, ignored).
    let mut inj = String::from("time\n");
    for j in 0..30 {
        inj.push_str(&format!("{}\n", T0 + 3.0 + 60.0 * j as f64));
    }
    inj.push_str(&format!("{}\n{}\n", T0 - 100.0, T0 + 5000.0));
    d.write("inj.csv", &inj);
    let out = d.run(&[
        "vetoes",
        "--injections",
        "inj.csv",
        "--out",
        "vetoes",
        "--format",
        "json",
    ]);
    assert!(out.status.success());
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.lines().any(|l| l.starts_with(
            "glitchbook: warning: 2 of 32 injections lie outside the target analysed time"
        )),
        "{err}"
    );
    let v: Value = serde_json::from_slice(&out.stdout).unwrap();
    let caution = glitchbook::coupling::VETO_CAUTION;
    assert_eq!(v["caution"], caution);
    let rounds = v["rounds"].as_array().unwrap();
    assert_eq!(rounds.len(), 1, "one round, then nothing significant: {v}");
    let r = &rounds[0];
    assert_eq!(
        (r["mode"].as_str(), r["round"].as_u64()),
        (Some("all"), Some(1))
    );
    assert_eq!(r["aux_channel"], WITNESS);
    assert_eq!(r["targets_hit"].as_u64(), Some(40));
    assert!((r["total_efficiency"].as_f64().unwrap() - 0.4).abs() < 1e-12);
    // Safety: 30 injections inside, none vetoed: P(X ≥ 0) = 1.
    assert_eq!(r["injections"].as_u64(), Some(30));
    assert_eq!(r["injections_vetoed"].as_u64(), Some(0));
    assert_eq!(r["safety_binomial_p"].as_f64(), Some(1.0));
    assert_eq!(r["safety_poisson_p"].as_f64(), Some(1.0));
    assert_eq!(r["safety"], "safe");
    let p = &v["proposals"][0];
    assert_eq!(
        (p["aux_channel"].as_str(), p["state"].as_str()),
        (Some(WITNESS), Some("proposed"))
    );
    assert!((p["deadtime"].as_f64().unwrap() - 0.002).abs() < 1e-8);

    // Segment file: the 40 windows [t − 0.02 − 0.05, t − 0.02 + 0.05).
    let dir = d.path().join("vetoes");
    let stem = "veto_Z1_SEIS_X__pier___b_";
    let txt = std::fs::read_to_string(dir.join(format!("{stem}.txt"))).unwrap();
    assert!(txt.contains(caution), "{txt}");
    let segs: Vec<(f64, f64)> = txt
        .lines()
        .filter(|l| !l.starts_with('#'))
        .map(|l| {
            let mut it = l.split_whitespace().map(|x| x.parse::<f64>().unwrap());
            (it.next().unwrap(), it.next().unwrap())
        })
        .collect();
    assert_eq!(segs.len(), 40);
    assert!(
        (segs[0].0 - (target_time(0) - 0.07)).abs() < 1e-5,
        "{:?}",
        segs[0]
    );
    assert!((segs[39].1 - (target_time(39) + 0.03)).abs() < 1e-5);
    let meta: Value =
        serde_json::from_str(&std::fs::read_to_string(dir.join(format!("{stem}.json"))).unwrap())
            .unwrap();
    assert_eq!(meta["caution"], caution);
    assert_eq!(meta["state"], "proposed");
    assert_eq!(meta["proposal"]["injections_vetoed"].as_u64(), Some(0));
    let summary: Value =
        serde_json::from_str(&std::fs::read_to_string(dir.join("vetoes.json")).unwrap()).unwrap();
    assert_eq!(summary["caution"], caution);

    // Table and CSV carry the caution too.
    let table = d.ok(&["vetoes"]);
    assert!(table.contains(&format!("CAUTION: {caution}")), "{table}");
    assert!(table.contains("Safety: NOT CHECKED"), "{table}");
    assert!(table.contains("UNCHECKED"), "{table}");
    let out = d.run(&["vetoes", "--format", "csv"]);
    let csv_out = String::from_utf8(out.stdout).unwrap();
    let mut rdr = csv::Reader::from_reader(csv_out.as_bytes());
    let head = rdr.headers().unwrap().clone();
    let col = head.iter().position(|h| h == "caution").unwrap();
    let rows: Vec<csv::StringRecord> = rdr.records().map(|r| r.unwrap()).collect();
    assert_eq!(rows.len(), 1);
    assert_eq!(&rows[0][col], caution);
    let safety = head.iter().position(|h| h == "safety").unwrap();
    assert_eq!(&rows[0][safety], "unchecked");
    let state = head.iter().position(|h| h == "proposal_state").unwrap();
    assert_eq!(&rows[0][state], "unchecked");
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("safety NOT CHECKED"), "{err}");
}

#[test]
fn unsafe_veto_is_not_proposed_and_writes_no_segments() {
    let d = catalogue();
    let fx = fixture();
    // 20 injections at the witnessed target times: all inside the veto.
    let mut inj = String::from("time,comment\n");
    for i in 0..20 {
        inj.push_str(&format!("{:.3},hw\n", target_time(i)));
    }
    d.write("inj.csv", &inj);
    let v = json(
        &d,
        &[
            "vetoes",
            "--injections",
            "inj.csv",
            "--out",
            "v",
            "--format",
            "json",
        ],
    );
    let r = &v["rounds"][0];
    assert_eq!(r["aux_channel"], WITNESS);
    assert_eq!(
        (r["injections"].as_u64(), r["injections_vetoed"].as_u64()),
        (Some(20), Some(20))
    );
    assert_eq!(r["safety"], "unsafe");
    // Decides: P(X ≥ 20 | Binomial(20, 0.002)) = 0.002^20 (every injection
    // vetoed; exact by hand).
    let got = r["safety_binomial_p"].as_f64().unwrap();
    assert!((got / 0.002f64.powi(20) - 1.0).abs() < 1e-3, "{got}");
    // Reference: P(N ≥ 20 | Poisson 20 × 0.002): SciPy 1.17.1
    // `poisson.sf(19, 0.04)` (fixture).
    let want = fx["unsafe_veto"]["safety_p"].as_f64().unwrap();
    let got = r["safety_poisson_p"].as_f64().unwrap();
    assert!((got / want - 1.0).abs() < 1e-3, "{got} vs {want}");
    assert_eq!(v["proposals"].as_array().unwrap().len(), 0, "{v}");
    let files: Vec<String> = std::fs::read_dir(d.path().join("v"))
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().to_string())
        .collect();
    assert_eq!(
        files,
        vec!["vetoes.json".to_string()],
        "no proposed veto, no segment file"
    );
}

#[test]
fn rates_json_has_bins_with_poisson_limits() {
    let d = catalogue();
    let fx = fixture();
    let v = json(&d, &["rates", "--bin", "500", "--format", "json"]);
    assert_eq!(v["channel"]["name"], TARGET);
    assert_eq!(v["live_s"].as_f64(), Some(2000.0));
    let s = &v["series"][0];
    assert_eq!(s["family_id"], Value::Null);
    assert_eq!(s["n_events"].as_u64(), Some(100));
    let bins = s["bins"].as_array().unwrap();
    assert_eq!(bins.len(), 4);
    let rb = &fx["rate_bin"];
    for b in bins {
        assert_eq!(b["count"].as_u64(), Some(25));
        assert_eq!(b["live_s"].as_f64(), Some(500.0));
        assert_eq!(b["rate_per_hour"].as_f64(), Some(180.0));
        // Gehrels (1986) limits at CL 0.9 via SciPy 1.17.1 chi2.ppf (fixture).
        for k in ["lower_per_hour", "upper_per_hour"] {
            let (got, want) = (b[k].as_f64().unwrap(), rb[k].as_f64().unwrap());
            assert!((got / want - 1.0).abs() < 1e-6, "{k}: {got} vs {want}");
        }
    }
    // A constant rate: one Bayesian block, no change point.
    assert_eq!(s["change_times_gps"].as_array().unwrap().len(), 0);
    // --since/--until cut the span; CSV has one row per bin.
    let out = d.ok(&[
        "rates",
        "--bin",
        "500",
        "--since",
        &format!("{}", T0 + 1000.0),
        "--format",
        "csv",
    ]);
    assert_eq!(out.lines().count(), 1 + 2, "{out}");
    assert!(out.starts_with("subject,family_id,start_gps,"));
    assert!(d.ok(&["rates"]).contains("== all: 100 events"));
}

#[test]
fn report_escapes_channel_names_and_prints_index_path() {
    let d = catalogue();
    d.ok(&["witnesses"]);
    d.ok(&["vetoes"]);
    let out = d.ok(&["report", "--out", "site"]);
    let index = std::path::PathBuf::from(out.trim());
    assert_eq!(index, d.path().join("site").join("index.html"));
    let html = std::fs::read_to_string(&index).unwrap();
    // HTML escaping of user text (the five characters of html_escape).
    assert!(html.contains("Z1:STRAIN &lt;main&gt; &amp; co"));
    assert!(html.contains("Z1:SEIS_X &quot;pier&quot; &lt;b&gt;"));
    assert!(!html.contains(WITNESS) && !html.contains(TARGET));
    assert!(html.contains(OTHER));
    // Both the latest witnesses run (its table has the false-alarm columns)
    // and the latest vetoes run (its table carries the caution) are shown.
    assert!(html.contains("<th>false alarm, any channel</th>"));
    assert!(
        html.contains("UNCHECKED"),
        "no injections: nothing shown as safe"
    );
    assert!(html.contains(glitchbook::report::VETO_CAUTION));
    assert!(html.matches("Z1:SEIS_X &quot;pier&quot; &lt;b&gt;").count() >= 3);
}

#[test]
fn tables_escape_control_characters_in_channel_names() {
    let d = catalogue();
    // An aux channel whose name would recolour the terminal and fake a line.
    let name = "Z1:EVIL\x1b[31m\rred\ttab";
    d.write("evil.csv", &csv(&[(target_time(3) + 0.001, 50.0, 40.0)]));
    d.ok(&[
        "import",
        "evil.csv",
        "--channel",
        name,
        "--role",
        "aux",
        "--segments",
        "seg.txt",
    ]);
    // (vetoes and rates tables go through the same escaping; the evil
    // channel is listed by witnesses only, being too weak for a veto.)
    let out = d.ok(&["witnesses"]);
    assert!(!out.contains('\x1b') && !out.contains('\r'), "{out:?}");
    assert!(out.contains("Z1:EVIL\\u{1b}[31m\\rred\\ttab"), "{out}");
    // JSON keeps the exact name (escaped by JSON itself).
    let v = json(&d, &["witnesses", "--format", "json"]);
    let names: Vec<&str> = v["witnesses"]
        .as_array()
        .unwrap()
        .iter()
        .map(|w| w["aux_channel"].as_str().unwrap())
        .collect();
    assert!(names.contains(&name), "{names:?}");
}

#[test]
fn bad_flags_are_one_error_line_and_change_nothing() {
    let d = catalogue();
    let before = d.checksum();
    for (args, flag) in [
        (&["rates", "--bin", "0"][..], "--bin"),
        (&["rates", "--cl", "1.5"][..], "--cl"),
        (&["rates", "--family", "9"][..], "--family 9"),
        (&["vetoes", "--safety-p", "2"][..], "--safety-p"),
        (&["vetoes", "--false-alarm", "0"][..], "--false-alarm"),
        (
            &["vetoes", "--injections", "missing.csv"][..],
            "missing.csv",
        ),
        (&["witnesses", "--windows", "0.1,0"][..], "--windows"),
        (&["witnesses", "--family", "3"][..], "--family 3"),
        (&["report", "--out", "r", "--p0", "0"][..], "--p0"),
        (&["report", "--out", "seg.txt"][..], "--out"),
    ] {
        let out = d.run(args);
        assert_eq!(out.status.code(), Some(2), "{args:?}");
        let err = String::from_utf8_lossy(&out.stderr);
        let lines: Vec<&str> = err.lines().collect();
        assert_eq!(lines.len(), 1, "{args:?}: {err}");
        assert!(
            lines[0].starts_with("glitchbook: error: ") && lines[0].contains(flag),
            "{args:?}: {err}"
        );
    }
    assert_eq!(before, d.checksum());
    // Read commands never create a catalogue.
    let e = Dir::new();
    for cmd in ["witnesses", "vetoes", "rates"] {
        assert_eq!(e.run(&[cmd]).status.code(), Some(2));
    }
    assert!(!e.db().exists());
}

#[test]
fn a_reader_that_stops_early_is_not_an_error() {
    let d = catalogue();
    // `glitchbook rates --bin 1 | head -0`: the read end is closed before
    // the binary writes, so every write meets a broken pipe.
    let mut child = d
        .cmd(&["rates", "--bin", "1"])
        .stdout(std::process::Stdio::piped())
        .stderr(std::process::Stdio::piped())
        .spawn()
        .unwrap();
    drop(child.stdout.take());
    let out = child.wait_with_output().unwrap();
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(out.status.success(), "{err}");
    assert!(!err.contains("error"), "{err}");
}
