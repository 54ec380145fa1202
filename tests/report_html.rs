//! The static report: content, escaping, and a real headless browser.
use crate::rates_catalogue::{demo_catalogue, T0};
use glitchbook::catalogue::open;
use glitchbook::families::{ImageExtent, Thumbnail};
use glitchbook::report::{gather, html_escape, write_report, ReportParams, VETO_CAUTION};
use rusqlite::params;
use std::path::{Path, PathBuf};
use std::process::Command;

/// The column list of a `witness_stats` row, up to `VALUES`.
const INSERT_WITNESS_STATS: &str = "INSERT INTO witness_stats (run_id, family_id, aux_channel_id,
    aux_min_snr, window_s, targets, targets_hit, aux_triggers, aux_hit, covered_s, analysed_s,
    deadtime, efficiency, aux_hit_fraction, lift, targets_hit_chance, aux_hit_chance,
    target_clumping, aux_clumping, chance_p, chance_p_log10, chance_basis, slides, slide_p,
    false_alarm, false_alarm_basis, false_alarm_any, channels_compared, beyond_chance) VALUES";

/// Add one witness run with stats, a lag histogram and veto rounds, and
/// write two small PNG "spectrograms" (gradients made here).
fn add_coupling_and_thumbs(db: &Path, dir: &Path) -> Vec<Thumbnail> {
    let c = open(db).unwrap();
    c.execute(
        "INSERT INTO witness_runs (id, kind, created_utc, params_json, tool_version)
         VALUES (1, 'witnesses', '2026-01-01T00:00:00Z', '{}', 'test'),
                (2, 'vetoes', '2026-01-01T00:00:00Z', '{}', 'test')",
        [],
    )
    .unwrap();
    c.execute(
        &format!(
            "{INSERT_WITNESS_STATS} (1, 1, 2, 8.0, 0.1, 480, 300, 900, 320, 90.0, 82800.0, 0.00109, 0.625, 0.356, 573.4,
                 0.52, 2.1, 1.0, 1.0, 5.0e-251, -250.3, 'targets_poisson', 500, 0.002, 9.0e-250, 'slides_tail',
                 2.7e-249, 3, 1),
                (1, 1, 2, 12.0, 0.1, 480, 200, 400, 210, 60.0, 82800.0, 0.00072, 0.417, 0.525, 579.2,
                 0.21, 0.9, 1.0, 1.0, 2.0e-78, -77.7, 'targets_poisson', 500, 0.002, 3.6e-77, 'slides_tail',
                 1.1e-76, 3, 1)"
        ),
        [],
    )
    .unwrap();
    c.execute(
        "INSERT INTO witness_lags (run_id, family_id, aux_channel_id, aux_min_snr, window_s,
           lag_hist_json, pairs, lag_peak_s, lag_median_s, freq_relation, freq_ratio_median)
         VALUES (1, 1, 2, 8.0, 0.1, ?1, 300, 0.0, 0.0, 'same', 1.01)",
        params![r#"{"lag":"t_aux - t_target","edges_s":[-0.1,-0.05,0.0,0.05,0.1],"counts":[3,40,250,7]}"#],
    )
    .unwrap();
    for (mode, fam) in [("family", Some(1)), ("all", None)] {
        c.execute(
            "INSERT INTO veto_rounds (run_id, mode, family_id, round, aux_channel_id, aux_min_snr,
           window_s, targets, targets_hit, efficiency, deadtime, aux_hit_fraction, lift, chance_p,
           chance_p_log10, chance_basis, false_alarm, false_alarm_basis, channels_compared, covered_s,
           total_efficiency, total_deadtime, injections, injections_vetoed, injections_chance,
           safety_binomial_p, safety_poisson_p, safety)
         VALUES (2, ?1, ?2, 1, 2, 8.0, 0.1, 480, 300, 0.625, 0.00109, 0.356, 573.4, 5.0e-251,
           -250.3, 'targets_poisson', 2.7e-249, 'slides_tail', 3, 90.0, 0.625, 0.00109, 100, 0, 0.11, 1.0,
           1.0, 'safe')",
            params![mode, fam],
        )
        .unwrap();
    }
    c.execute(
        "INSERT INTO veto_proposals (run_id, aux_channel_id, rounds, round_count, segment_count,
           covered_s, analysed_s, deadtime, targets, targets_vetoed, efficiency, injections,
           injections_vetoed, injections_chance, safety_binomial_p, safety_poisson_p, safety, state)
         VALUES (2, 2, 'all#1 (snr>=8, window 0.1 s); family 1#1 (snr>=8, window 0.1 s)', 2, 300,
           90.0, 82800.0, 0.00109, 480, 300, 0.625, 100, 0, 0.11, 1.0, 1.0, 'safe', 'proposed')",
        [],
    )
    .unwrap();
    let mut out = Vec::new();
    for k in 0..2u8 {
        let img = image::RgbImage::from_fn(64, 48, |x, y| {
            image::Rgb([(x * 4) as u8, (y * 5) as u8, 100 + 50 * k])
        });
        let p = dir.join(format!("spec{k}.png"));
        img.save(&p).unwrap();
        out.push(Thumbnail {
            family_id: 1,
            trigger_id: 40 + i64::from(k),
            channel: if k == 1 {
                "AV1:AUX_ONE".into()
            } else {
                "AV1:STRAIN".into()
            },
            witness: k == 1,
            path: p,
            t_peak_gps: T0 + 100.0 * f64::from(k),
            f_peak_hz: 120.0,
            snr: 12.5,
            q: 9.0,
            extent: ImageExtent {
                span_s: 2.0,
                f_edges_hz: (15.0, 2200.0),
            },
            scale: glitchbook::families::ColourScale {
                z_top: 90.0,
                z_threshold: Some(16.1),
            },
        });
    }
    out
}

fn build(dir: &Path) -> PathBuf {
    let db = demo_catalogue(dir, true);
    let thumbs = add_coupling_and_thumbs(&db, dir);
    let c = open(&db).unwrap();
    let p = ReportParams {
        catalogue: db.display().to_string(),
        ..ReportParams::default()
    };
    let data = gather(&c, &p).unwrap();
    assert!(data.has_coupling);
    // For looking at the pages by hand: GLITCHBOOK_KEEP_REPORT=DIR.
    if let Ok(keep) = std::env::var("GLITCHBOOK_KEEP_REPORT") {
        write_report(&data, Path::new(&keep), &thumbs).unwrap();
    }
    let out = dir.join("site");
    write_report(&data, &out, &thumbs).unwrap()
}

#[test]
fn escape_covers_markup() {
    assert_eq!(
        html_escape("<a href=\"x\">&'"),
        "&lt;a href=&quot;x&quot;&gt;&amp;&#39;"
    );
}

#[test]
fn report_has_sections_plots_caution_and_escapes_labels() {
    let dir = tempfile::tempdir().unwrap();
    let index = build(dir.path());
    let html = std::fs::read_to_string(&index).unwrap();
    for id in 1..=3 {
        assert!(
            html.contains(&format!("id=\"family-{id}\"")),
            "family {id} section"
        );
        assert!(index
            .parent()
            .unwrap()
            .join(format!("img/rate_f{id}.svg"))
            .exists());
    }
    assert!(!html.contains("<script>"), "label must be escaped");
    assert!(html.contains("&lt;script&gt;alert(1)&lt;/script&gt;"));
    assert!(html.contains("ZQ1:ENV_FLUXGATE_Y&lt;&amp;&gt;"));
    assert!(html.contains(VETO_CAUTION));
    assert!(html.contains("safety p"));
    // One proposal per channel with its combined deadtime and state.
    assert!(html.contains("Proposals, one per aux channel") && html.contains("all#1 (snr&gt;=8"));
    // The witness table shows each channel's best grid row only.
    assert!(html.contains("5.00e-251") && !html.contains("2.00e-78"));
    assert!(html.contains("beyond chance"));
    // The lag axis says which way the lag goes.
    let lag = std::fs::read_to_string(index.parent().unwrap().join("img/lag_f1_0.svg")).unwrap();
    assert!(lag.contains("t_aux − t_target"), "lag axis label");
    assert!(html.contains("(1 of 2 grid rows;"));
    assert!(html.contains("img/thumb_f1_0.png") && html.contains("img/thumb_f1_1.png"));
    // Each image carries its own colour bar (top and threshold marked); the
    // witness image names the aux channel and the member it stands beside.
    assert!(html.contains(">90</text>") && html.contains(">thr</text>"));
    assert!(html.contains("witness AV1:AUX_ONE at trigger 41"));
    // Spectrograms are drawn with axes (1-2-5 log ticks, 20..2000 Hz inside
    // 15..2200 Hz), the trigger they show, and a colour bar each.
    assert!(html.contains("time from peak [s]") && html.contains("frequency [Hz]"));
    assert!(
        html.contains(">20</text>")
            && html.contains(">2000</text>")
            && !html.contains(">10</text>")
    );
    assert!(html.contains("trigger 40 · GPS"));
    assert_eq!(html.matches("id=\"zf1_").count(), 2);
    assert!(html.contains("img/lag_f1_0.svg"));
    // Provenance in one line at the top, the parameters as a table at the
    // end (no raw JSON on the first screen), a table of contents.
    let params_at = html.find("id=\"parameters\"").unwrap();
    assert!(params_at > html.find("id=\"novel\"").unwrap());
    assert!(html[params_at..].contains("<th scope=\"row\">catalogue</th>"));
    assert!(html.contains(env!("CARGO_PKG_VERSION")) && !html.contains("\"since_gps\""));
    let toc = &html[html.find("id=\"contents\"").unwrap()..];
    assert!(toc.find("href=\"#family-3\"").unwrap() < toc.find("</nav>").unwrap());
    // Families at a glance: best witness with its false alarm, the veto's
    // efficiency and deadtime in % and seconds, safety; UTC beside GPS.
    let triage = &html[html.find("id=\"triage\"").unwrap()..];
    let triage = &triage[..triage.find("</table>").unwrap()];
    assert!(triage.contains("deadtime [% (s)]") && triage.contains("best witness"));
    assert!(
        triage.contains("ZQ1:ENV_FLUXGATE_Y&lt;&amp;&gt;"),
        "{triage}"
    );
    assert!(html.contains(&glitchbook::gpstime::utc_label(T0)));
    assert!(html.contains("id=\"novel\"") && !html.contains("No trigger was marked novel"));
    // The late family is flagged in the summary.
    assert!(html.contains("differs from median"));
    // The SVGs are real plotters output with text labels.
    let svg = std::fs::read_to_string(index.parent().unwrap().join("img/rate_f2.svg")).unwrap();
    assert!(
        svg.starts_with("<svg")
            && svg.contains("<text")
            && svg.contains("hours since 20")
            && svg.contains("UTC (GPS")
    );
    let _ = T0;
}

fn chromium() -> Option<PathBuf> {
    for name in ["chromium", "chromium-browser"] {
        for dir in std::env::var("PATH").unwrap_or_default().split(':') {
            let p = Path::new(dir).join(name);
            if p.is_file() {
                return Some(p);
            }
        }
    }
    None
}

fn browser_args(profile: &Path) -> Vec<String> {
    [
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-quic",
        "--no-first-run",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
    ]
    .iter()
    .map(|s| s.to_string())
    .chain(std::iter::once(format!(
        "--user-data-dir={}",
        profile.display()
    )))
    .collect()
}

/// Open the report in headless Chromium: the DOM has the family sections,
/// images and the escaped label as text; the screenshot is not blank.
#[test]
fn report_renders_in_headless_chromium() {
    let Some(bin) = chromium() else {
        let ci = std::env::var("CI")
            .map(|v| !v.is_empty() && v != "false" && v != "0")
            .unwrap_or(false);
        if ci {
            panic!("chromium not found on PATH but CI is set: the browser test must run under CI");
        }
        eprintln!("\n!!!!!!!! SKIPPING report_renders_in_headless_chromium: chromium not installed (CI unset) !!!!!!!!\n");
        return;
    };
    let dir = tempfile::tempdir().unwrap();
    let index = build(dir.path());
    let url = format!("file://{}", index.canonicalize().unwrap().display());
    let out = Command::new(&bin)
        .args(browser_args(&dir.path().join("profile-dom")))
        .arg("--dump-dom")
        .arg(&url)
        .output()
        .unwrap();
    let dom = String::from_utf8_lossy(&out.stdout);
    assert!(
        dom.contains("<section"),
        "no DOM from chromium: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    for id in 1..=3 {
        assert!(dom.contains(&format!("id=\"family-{id}\"")));
    }
    assert!(
        dom.matches("<img").count() + dom.matches("<image").count() >= 8,
        "images in DOM"
    );
    assert!(dom.contains("src=\"img/rate_f2.svg\"") && dom.contains("src=\"img/tf.svg\""));
    // The label is text, not a script element.
    assert!(!dom.contains("<script>alert(1)"), "label became markup");
    assert!(dom.contains("&lt;script&gt;alert(1)&lt;/script&gt;"));

    let png = dir.path().join("shot.png");
    let status = Command::new(&bin)
        .args(browser_args(&dir.path().join("profile-shot")))
        .arg(format!("--screenshot={}", png.display()))
        .arg("--window-size=1200,2000")
        .arg(&url)
        .output()
        .unwrap();
    assert!(
        png.exists(),
        "no screenshot: {}",
        String::from_utf8_lossy(&status.stderr)
    );
    let img = image::open(&png).unwrap().to_luma8();
    let n = img.pixels().len() as f64;
    let mean = img.pixels().map(|p| p.0[0] as f64).sum::<f64>() / n;
    let var = img
        .pixels()
        .map(|p| (p.0[0] as f64 - mean).powi(2))
        .sum::<f64>()
        / n;
    assert!(
        var > 100.0,
        "screenshot looks blank: grey variance {var:.1}"
    );
}

/// WCAG 2.1 relative luminance of an sRGB colour `#rgb` or `#rrggbb` (W3C
/// Recommendation 2018, definitions "relative luminance" and "contrast
/// ratio").
fn luminance(hex: &str) -> f64 {
    let h = hex.trim_start_matches('#');
    let h: String = if h.len() == 3 {
        h.chars().flat_map(|c| [c, c]).collect()
    } else {
        h.to_string()
    };
    let ch = |i: usize| {
        let c = u8::from_str_radix(&h[i..i + 2], 16).unwrap() as f64 / 255.0;
        if c <= 0.03928 {
            c / 12.92
        } else {
            ((c + 0.055) / 1.055).powf(2.4)
        }
    };
    0.2126 * ch(0) + 0.7152 * ch(2) + 0.0722 * ch(4)
}

fn contrast(a: &str, b: &str) -> f64 {
    let (la, lb) = (luminance(a), luminance(b));
    (la.max(lb) + 0.05) / (la.min(lb) + 0.05)
}

/// The accessibility pass the report must meet (our equivalent of an
/// automated checker, from WCAG 2.1): a page language, every image with
/// alternative text, every SVG figure labelled, headings that never skip a
/// level going down, and every text colour in the style sheet at contrast
/// ≥ 4.5 (criterion 1.4.3, level AA) against its own background or, when it
/// sets none, against each background the page uses.
fn accessibility_pass(html: &str) {
    assert!(html.contains("<html lang=\"en\""));
    for img in html.split("<img ").skip(1) {
        let tag = &img[..img.find('>').unwrap()];
        let alt = tag
            .split("alt=\"")
            .nth(1)
            .map(|a| &a[..a.find('"').unwrap()]);
        assert!(
            alt.is_some_and(|a| !a.trim().is_empty()),
            "img without alt: {tag}"
        );
    }
    for svg in html.split("<svg ").skip(1) {
        let tag = &svg[..svg.find('>').unwrap()];
        assert!(
            tag.contains("role=\"img\"") && tag.contains("aria-label=\""),
            "{tag}"
        );
    }
    let mut last = 0;
    for (i, _) in html.match_indices("<h") {
        let Some(level) = html[i + 2..].chars().next().and_then(|c| c.to_digit(10)) else {
            continue;
        };
        assert!(level <= last + 1, "heading h{level} after h{last}");
        last = level;
    }
    let style = &html[html.find("<style>").unwrap() + 7..html.find("</style>").unwrap()];
    let prop = |body: &str, name: &str| {
        body.split(';')
            .find_map(|d| d.trim().strip_prefix(name).map(str::to_string))
            .filter(|v| v.starts_with('#'))
    };
    let rules: Vec<&str> = style
        .split('}')
        .filter_map(|r| r.split_once('{').map(|(_, b)| b))
        .collect();
    // Text sits on the backgrounds of containers that set no text colour
    // of their own (a rule setting both is a self-contained pair) and on
    // the page's own background (the first rule, body).
    let mut backgrounds: Vec<String> = rules
        .iter()
        .filter(|b| prop(b, "color:").is_none())
        .filter_map(|b| prop(b, "background:"))
        .collect();
    backgrounds.extend(rules.iter().find_map(|b| prop(b, "background:")));
    assert!(backgrounds.len() >= 3, "{backgrounds:?}");
    let mut checked = 0;
    for body in &rules {
        let Some(fg) = prop(body, "color:") else {
            continue;
        };
        let bgs = prop(body, "background:").map_or(backgrounds.clone(), |b| vec![b]);
        for bg in bgs {
            let c = contrast(&fg, &bg);
            assert!(c >= 4.5, "{body}: {fg} on {bg} has contrast {c:.2}");
            checked += 1;
        }
    }
    assert!(checked >= 5, "{checked}");
}

#[test]
fn contrast_reference_values() {
    // WCAG 2.1: black on white is 21:1; #777777 on white is 4.48:1, just
    // short of AA (a common worked example; from memory).
    assert!((contrast("#000", "#ffffff") - 21.0).abs() < 1e-9);
    assert!((contrast("#777777", "#fff") - 4.48).abs() < 0.01);
}

#[test]
fn report_passes_the_accessibility_pass() {
    let dir = tempfile::tempdir().unwrap();
    let index = build(dir.path());
    accessibility_pass(&std::fs::read_to_string(&index).unwrap());
}

/// A later `witnesses --family 2` run holds family 2 only: the report keeps
/// family 1's rows from the earlier run and takes family 2's from the new
/// one (each target set from the latest run that computed it).
#[test]
fn a_one_family_witness_run_does_not_hide_the_others() {
    let dir = tempfile::tempdir().unwrap();
    let db = demo_catalogue(dir.path(), true);
    add_coupling_and_thumbs(&db, dir.path());
    let c = open(&db).unwrap();
    c.execute(
        "INSERT INTO witness_runs (id, kind, created_utc, params_json, tool_version)
         VALUES (3, 'witnesses', '2026-01-02T00:00:00Z', '{\"family\":2}', 'test')",
        [],
    )
    .unwrap();
    c.execute(
        &format!(
            "{INSERT_WITNESS_STATS} (3, 2, 2, 6.0, 0.05, 200, 90, 500, 95, 50.0, 82800.0, 0.0006, 0.45, 0.19, 750.0,
                 0.12, 0.3, 1.0, 1.0, 1.0e-120, -120.0, 'targets_poisson', 500, 0.002, 4.0e-119, 'slides_tail',
                 1.2e-118, 3, 1)"
        ),
        [],
    )
    .unwrap();
    let p = ReportParams {
        catalogue: db.display().to_string(),
        ..ReportParams::default()
    };
    let data = gather(&c, &p).unwrap();
    let fams: Vec<Option<i64>> = data.witnesses.iter().map(|w| w.family_id).collect();
    assert_eq!(fams, vec![Some(1), Some(1), Some(2)], "{fams:?}");
    let best: Vec<i64> = data
        .witnessed_families()
        .iter()
        .map(|(f, _, _)| *f)
        .collect();
    assert_eq!(best, vec![1, 2]);
}
