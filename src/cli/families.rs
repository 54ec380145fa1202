//! `glitchbook cluster | assign | families | label | thumbnail`: families of
//! target-channel triggers.
//!
//! Fingerprints need the data: `cluster`, `assign` and `thumbnail` reopen the
//! bundles recorded by the scans (`scans.source_path`), so bundles must stay
//! where they were scanned from.
use super::Global;
use anyhow::{bail, Result};
use glitchbook::catalogue;
use glitchbook::families::{self, ClusterParams, FamilySummary};
use glitchbook::maps::BundleMaps;
use glitchbook::output::{write_rows, Format};
use glitchbook::rates::{self, RateParams};
use rusqlite::Connection;
use serde::Serialize;
use std::path::PathBuf;
use std::process::ExitCode;

/// Sort target triggers into families (fingerprints, PCA, Gaussian mixture
/// with the number of families chosen by BIC); keeps family ids and labels
/// of earlier runs.
#[derive(Debug, clap::Args)]
pub struct ClusterArgs {
    /// Seed of every random choice (same seed, same catalogue → same families).
    #[arg(long, default_value_t = 0)]
    pub seed: u64,
    /// Leave target triggers below this SNR unclustered.
    #[arg(long, default_value_t = 7.0, value_name = "X")]
    pub min_snr: f64,
    /// Largest number of mixture components tried.
    #[arg(long, default_value_t = 12, value_name = "K")]
    pub k_max: usize,
    /// PCA components of the peak-normalised fingerprint maps added to the
    /// clustering vector (default 0: peak frequency and Q only; see
    /// `families::ClusterParams`).
    #[arg(long, default_value_t = 0, value_name = "N")]
    pub map_components: usize,
    /// Choose the number of families with diagonal-covariance mixtures
    /// (steadier for small catalogues; the final mixture is full).
    #[arg(long)]
    pub select_diagonal: bool,
    /// Only place new triggers into the existing families (same as `assign`).
    #[arg(long)]
    pub assign_only: bool,
}

/// Place newly scanned target triggers into the existing families without
/// refitting; triggers far from every family are marked novel.
#[derive(Debug, clap::Args)]
pub struct AssignArgs {}

/// List families: id, label, counts, medians, first/last time, examples,
/// and whether the latest rate differs from the run's median.
#[derive(Debug, clap::Args)]
pub struct FamiliesArgs {
    /// Output format.
    #[arg(long, value_enum, default_value_t = Format::Table)]
    pub format: Format,
}

/// Give a family a human label (history is kept).
#[derive(Debug, clap::Args)]
pub struct LabelArgs {
    /// Family id.
    pub family: i64,
    /// The label.
    pub name: String,
    /// A free-text note.
    #[arg(long, value_name = "TEXT")]
    pub note: Option<String>,
    /// Who labels (default: $USER).
    #[arg(long, value_name = "NAME")]
    pub author: Option<String>,
}

/// Write a PNG spectrogram image of one trigger.
#[derive(Debug, clap::Args)]
pub struct ThumbnailArgs {
    /// Trigger id (see `triggers --format json`).
    pub trigger_id: i64,
    /// Output PNG file.
    #[arg(long, value_name = "FILE.png")]
    pub out: PathBuf,
}

fn maps(conn: &Connection) -> Result<BundleMaps> {
    BundleMaps::from_catalogue(conn)
}

/// Run `cluster`.
pub fn run_cluster(g: &Global, a: ClusterArgs) -> Result<ExitCode> {
    let params = ClusterParams {
        seed: a.seed,
        min_snr: a.min_snr,
        k_max: a.k_max,
        n_map_components: a.map_components,
        select_diagonal: a.select_diagonal,
        ..Default::default()
    };
    params.check()?;
    let mut conn = catalogue::open_existing(&g.db)?;
    let src = maps(&conn)?;
    if a.assign_only {
        return assign(g, &mut conn, &src);
    }
    let rep = families::cluster_catalogue(&mut conn, &params, &src)?;
    g.info(&format!(
        "clustered {} triggers into {} families ({} new fingerprints, run {})",
        rep.n_clustered,
        rep.families.len(),
        rep.n_features_computed,
        rep.run_id
    ));
    for e in &rep.events {
        if e.kind != families::EventKind::Kept {
            let other = e
                .other_family_id
                .map(|o| format!(" (with family {o})"))
                .unwrap_or_default();
            g.info(&format!(
                "family {}: {}{other}, {} shared triggers",
                e.family_id, e.kind, e.n_shared
            ));
        }
    }
    print_families(&conn, Format::Table)
}

fn assign(g: &Global, conn: &mut Connection, src: &BundleMaps) -> Result<ExitCode> {
    let rep = families::assign_new(conn, src)?;
    g.info(&format!(
        "assigned {} triggers; {} novel; {} quiet (below the clustering SNR, not placed with confidence)",
        rep.n_assigned, rep.n_novel, rep.n_quiet
    ));
    Ok(ExitCode::SUCCESS)
}

/// Run `assign`.
pub fn run_assign(g: &Global, _a: AssignArgs) -> Result<ExitCode> {
    let mut conn = catalogue::open_existing(&g.db)?;
    let src = maps(&conn)?;
    assign(g, &mut conn, &src)
}

/// A family row for listings (flat for tables and CSV).
#[derive(Debug, Default, Serialize)]
struct FamilyRow {
    id: i64,
    label: String,
    count: usize,
    median_snr: f64,
    f_peak_min_hz: f64,
    f_peak_max_hz: f64,
    duration_min_s: f64,
    duration_max_s: f64,
    first_gps: f64,
    last_gps: f64,
    cohesion: f64,
    rate_changed: bool,
    novel: bool,
    example_trigger_ids: String,
    note: String,
}

/// JSON keeps the contract's fields and adds the rate flag.
#[derive(Debug, Serialize)]
struct FamilyJson<'a> {
    #[serde(flatten)]
    summary: &'a FamilySummary,
    rate_changed: bool,
}

fn print_families(conn: &Connection, format: Format) -> Result<ExitCode> {
    let fams = families::list_families(conn)?;
    // Flag families whose latest Bayesian block rate differs from the run's
    // median: an exact two-sided Poisson test at level 1 − CL, 10% at the
    // default CL 0.9 (rates::RateSeries::latest_differs).
    let changed: Vec<i64> = match rates::rates(conn, &RateParams::default()) {
        Ok(r) => r
            .series
            .iter()
            .filter(|s| s.latest_differs)
            .filter_map(|s| s.family_id)
            .collect(),
        Err(_) => Vec::new(),
    };
    let out = &mut std::io::stdout().lock();
    if format == Format::Json {
        let rows: Vec<FamilyJson> = fams
            .iter()
            .map(|f| FamilyJson {
                summary: f,
                rate_changed: changed.contains(&f.id),
            })
            .collect();
        serde_json::to_writer_pretty(&mut *out, &rows)?;
        use std::io::Write;
        writeln!(out)?;
        return Ok(ExitCode::SUCCESS);
    }
    let rows: Vec<FamilyRow> = fams
        .iter()
        .map(|f| FamilyRow {
            id: f.id,
            label: f.label.clone().unwrap_or_default(),
            count: f.count,
            median_snr: f.median_snr,
            f_peak_min_hz: f.f_peak_min_hz,
            f_peak_max_hz: f.f_peak_max_hz,
            duration_min_s: f.duration_min_s,
            duration_max_s: f.duration_max_s,
            first_gps: f.first_gps,
            last_gps: f.last_gps,
            cohesion: f.cohesion,
            rate_changed: changed.contains(&f.id),
            novel: f.novel,
            example_trigger_ids: f
                .example_trigger_ids
                .iter()
                .map(|i| i.to_string())
                .collect::<Vec<_>>()
                .join(" "),
            note: f.note.clone().unwrap_or_default(),
        })
        .collect();
    write_rows(out, format, &rows)?;
    Ok(ExitCode::SUCCESS)
}

/// Run `families`.
pub fn run_families(g: &Global, a: FamiliesArgs) -> Result<ExitCode> {
    let conn = catalogue::open_read_only(&g.db)?;
    print_families(&conn, a.format)
}

/// Run `label`.
pub fn run_label(g: &Global, a: LabelArgs) -> Result<ExitCode> {
    let mut conn = catalogue::open_existing(&g.db)?;
    let author = a.author.unwrap_or_else(families::default_author);
    families::label(&mut conn, a.family, &a.name, a.note.as_deref(), &author)?;
    g.info(&format!("family {} labelled {:?}", a.family, a.name));
    Ok(ExitCode::SUCCESS)
}

/// Run `thumbnail`.
pub fn run_thumbnail(g: &Global, a: ThumbnailArgs) -> Result<ExitCode> {
    if a.out.extension().and_then(|e| e.to_str()) != Some("png") {
        bail!("--out must name a .png file (got {})", a.out.display());
    }
    let conn = catalogue::open_read_only(&g.db)?;
    let src = maps(&conn)?;
    let (e, scale) = families::render_trigger_thumbnail(
        &conn,
        a.trigger_id,
        &src,
        &a.out,
        families::ImageStyle::Plate,
    )?;
    g.info(&format!(
        "wrote {}: time ±{} s around the peak left to right, {:.1}–{:.0} Hz (log) bottom to top; {}",
        a.out.display(),
        glitchbook::output::fixed(0.5 * e.span_s, 4),
        e.f_edges_hz.0,
        e.f_edges_hz.1,
        scale.describe()
    ));
    Ok(ExitCode::SUCCESS)
}
