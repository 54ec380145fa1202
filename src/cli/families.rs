//! `glitchbook cluster | assign | families | label | merge-families |
//! split-family | move-triggers | history | classify | thumbnail`: families
//! of target-channel triggers, the scientists' edits of them, and the
//! classifier that learns their labels.
//!
//! Fingerprints need the data: `cluster`, `assign` and `thumbnail` reopen the
//! bundles recorded by the scans (`scans.source_path`), so bundles must stay
//! where they were scanned from.
use super::Global;
use anyhow::{bail, Result};
use glitchbook::catalogue;
use glitchbook::families::classifier::{ClassifierParams, CrossValidation, LabelScore};
use glitchbook::families::{self, classifier_db, ClusterParams, FamilySummary};
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
    /// Seeded starts of the selection; the family partition that agrees
    /// best with the other starts' is kept (1: a single fit).
    #[arg(long, default_value_t = 5, value_name = "N")]
    pub starts: usize,
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

/// Merge one family into another (history kept; later `cluster` runs keep it).
#[derive(Debug, clap::Args)]
pub struct MergeFamiliesArgs {
    /// The family merged away.
    pub family: i64,
    /// The family it joins.
    #[arg(long, value_name = "FAMILY")]
    pub into: i64,
    /// A free-text note.
    #[arg(long, value_name = "TEXT")]
    pub note: Option<String>,
    /// Who edits (default: $USER).
    #[arg(long, value_name = "NAME")]
    pub author: Option<String>,
}

/// Split members of a family into a new family (history kept; later
/// `cluster` runs keep it).
#[derive(Debug, clap::Args)]
pub struct SplitFamilyArgs {
    /// The family split.
    pub family: i64,
    /// Trigger ids moved to the new family (see `triggers --format json`).
    #[arg(required = true, num_args = 1..)]
    pub trigger_ids: Vec<i64>,
    /// Label of the new family.
    #[arg(long, value_name = "NAME")]
    pub label: Option<String>,
    /// A free-text note.
    #[arg(long, value_name = "TEXT")]
    pub note: Option<String>,
    /// Who edits (default: $USER).
    #[arg(long, value_name = "NAME")]
    pub author: Option<String>,
}

/// Move triggers into a family (history kept; later `cluster` runs keep it).
#[derive(Debug, clap::Args)]
pub struct MoveTriggersArgs {
    /// Trigger ids.
    #[arg(required = true, num_args = 1..)]
    pub trigger_ids: Vec<i64>,
    /// Destination family.
    #[arg(long, value_name = "FAMILY")]
    pub to: i64,
    /// A free-text note.
    #[arg(long, value_name = "TEXT")]
    pub note: Option<String>,
    /// Who edits (default: $USER).
    #[arg(long, value_name = "NAME")]
    pub author: Option<String>,
}

/// A family's history: label changes, clustering events and edits (JSON).
#[derive(Debug, clap::Args)]
pub struct HistoryArgs {
    /// Family id.
    pub family: i64,
}

/// Train a classifier by label on the labelled families' members, print its
/// cross-validated confusion matrix and per-label precision/recall, and
/// classify every clustered target trigger (`assign` then classifies new ones).
#[derive(Debug, clap::Args)]
pub struct ClassifyArgs {
    /// A trigger gets a label only with at least this probability.
    #[arg(long, default_value_t = 0.8, value_name = "P")]
    pub min_probability: f64,
    /// L2 penalty weight of the logistic regression.
    #[arg(long, default_value_t = 1.0, value_name = "ALPHA")]
    pub alpha: f64,
    /// Linear features only (default: with squares and pairwise products).
    #[arg(long)]
    pub linear: bool,
    /// Cross-validation folds.
    #[arg(long, default_value_t = 5, value_name = "K")]
    pub folds: usize,
    /// Seed of the fold assignment.
    #[arg(long, default_value_t = 0)]
    pub seed: u64,
    /// Output format of the per-label table (JSON: the whole report).
    #[arg(long, value_enum, default_value_t = Format::Table)]
    pub format: Format,
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
        starts: a.starts,
        ..Default::default()
    };
    params.check()?;
    let mut conn = catalogue::open_existing(&g.db)?;
    let src = maps(&conn)?;
    if a.assign_only {
        return assign(g, &mut conn, &src);
    }
    let rep = families::cluster_catalogue(&mut conn, &params, &src)?;
    warn_without_data(&rep.without_data);
    g.info(&format!(
        "clustered {} triggers with SNR >= {} into {} families, then placed {} quieter ones \
         ({} left unclassified as quiet); {} new fingerprints, run {}",
        rep.n_clustered,
        params.min_snr,
        rep.families.len(),
        rep.n_quiet_placed,
        rep.n_quiet,
        rep.n_features_computed,
        rep.run_id
    ));
    say_starts(g, &rep.starts);
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

/// Say which seeded start was kept and how far the starts agreed; warn
/// when the families depend on the seed.
fn say_starts(g: &Global, starts: &[families::StartSummary]) {
    let Some((kept, least)) = families::model::kept_start(starts) else {
        return;
    };
    g.info(&format!(
        "kept seed {} of {} seeded starts ({} families): mean agreement (adjusted Rand index) \
         with the other starts {:.2}; least agreeing start {:.2}",
        kept.seed,
        starts.len(),
        kept.families,
        kept.agreement,
        least
    ));
    if kept.agreement < families::model::SEED_AGREEMENT_WARN {
        super::warn(&format!(
            "the families depend on the clustering seed (the kept start agrees with the others \
             only to {:.2}): check them before labelling, e.g. with split-family or a run with \
             more --starts",
            kept.agreement
        ));
    }
}

/// Say which target channels' triggers were left out for want of raw data.
fn warn_without_data(without: &[(String, usize)]) {
    for (channel, n) in without {
        super::warn(&format!(
            "{channel}: {n} target triggers left without a family: they were imported without \
             raw data, so they have no fingerprint (scan the channel's data to classify them)"
        ));
    }
}

fn assign(g: &Global, conn: &mut Connection, src: &BundleMaps) -> Result<ExitCode> {
    let rep = families::assign_new(conn, src)?;
    warn_without_data(&rep.without_data);
    g.info(&format!(
        "assigned {} triggers; {} novel; {} quiet (below the clustering SNR, not placed with confidence)",
        rep.n_assigned, rep.n_novel, rep.n_quiet
    ));
    if rep.n_class_labelled + rep.n_class_unclassified > 0 {
        g.info(&format!(
            "classifier: {} labelled, {} left unclassified",
            rep.n_class_labelled, rep.n_class_unclassified
        ));
    }
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

/// JSON keeps the contract's fields and adds the rate flag and, for a
/// labelled family, the latest classifier's cross-validated figures for
/// its label.
#[derive(Debug, Serialize)]
struct FamilyJson<'a> {
    #[serde(flatten)]
    summary: &'a FamilySummary,
    rate_changed: bool,
    #[serde(skip_serializing_if = "Option::is_none")]
    classifier: Option<LabelJson>,
}

/// The cross-validation of one label: precision, recall, support, and its
/// row of the confusion matrix (true label → predicted label → count).
#[derive(Debug, Serialize)]
struct LabelJson {
    #[serde(flatten)]
    score: LabelScore,
    predicted_as: std::collections::BTreeMap<String, usize>,
    cv_accuracy: f64,
    cv_folds: usize,
}

fn label_json(cv: &CrossValidation, label: &str) -> Option<LabelJson> {
    let c = cv.labels.iter().position(|l| l == label)?;
    Some(LabelJson {
        score: cv.per_label[c].clone(),
        predicted_as: cv
            .labels
            .iter()
            .cloned()
            .zip(cv.confusion[c].iter().copied())
            .filter(|x| x.1 > 0)
            .collect(),
        cv_accuracy: cv.accuracy,
        cv_folds: cv.folds,
    })
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
        let cv = classifier_db::latest_classifier(conn)?.map(|c| c.2);
        let rows: Vec<FamilyJson> = fams
            .iter()
            .map(|f| FamilyJson {
                summary: f,
                rate_changed: changed.contains(&f.id),
                classifier: cv
                    .as_ref()
                    .zip(f.label.as_deref())
                    .and_then(|(cv, l)| label_json(cv, l)),
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

fn author(a: Option<String>) -> String {
    a.unwrap_or_else(families::default_author)
}

/// Run `merge-families`.
pub fn run_merge_families(g: &Global, a: MergeFamiliesArgs) -> Result<ExitCode> {
    let mut conn = catalogue::open_existing(&g.db)?;
    let e = families::merge_families(
        &mut conn,
        a.family,
        a.into,
        &author(a.author),
        a.note.as_deref(),
    )?;
    g.info(&format!(
        "family {} merged into family {} ({} triggers; edit {})",
        a.family,
        a.into,
        e.trigger_ids.len(),
        e.id
    ));
    Ok(ExitCode::SUCCESS)
}

/// Run `split-family`.
pub fn run_split_family(g: &Global, a: SplitFamilyArgs) -> Result<ExitCode> {
    let mut conn = catalogue::open_existing(&g.db)?;
    let e = families::split_family(
        &mut conn,
        a.family,
        &a.trigger_ids,
        a.label.as_deref(),
        &author(a.author),
        a.note.as_deref(),
    )?;
    let new = e.other_family_id.expect("a split names the new family");
    g.info(&format!(
        "{} triggers of family {} split into new family {new} (edit {})",
        e.trigger_ids.len(),
        a.family,
        e.id
    ));
    println!("{new}");
    Ok(ExitCode::SUCCESS)
}

/// Run `move-triggers`.
pub fn run_move_triggers(g: &Global, a: MoveTriggersArgs) -> Result<ExitCode> {
    let mut conn = catalogue::open_existing(&g.db)?;
    let e = families::move_triggers(
        &mut conn,
        &a.trigger_ids,
        a.to,
        &author(a.author),
        a.note.as_deref(),
    )?;
    g.info(&format!(
        "{} triggers moved into family {} (edit {})",
        e.trigger_ids.len(),
        a.to,
        e.id
    ));
    Ok(ExitCode::SUCCESS)
}

/// A family's history for `history`.
#[derive(Debug, Serialize)]
struct History {
    family_id: i64,
    labels: Vec<families::LabelChange>,
    runs: Vec<RunEvent>,
    edits: Vec<families::FamilyEdit>,
}

/// A clustering run's identity event concerning the family.
#[derive(Debug, Serialize)]
struct RunEvent {
    run_id: i64,
    #[serde(flatten)]
    event: families::FamilyEvent,
}

/// Run `history`.
pub fn run_history(g: &Global, a: HistoryArgs) -> Result<ExitCode> {
    let conn = catalogue::open_read_only(&g.db)?;
    let exists: bool = conn
        .prepare("SELECT 1 FROM families WHERE id = ?1")?
        .exists([a.family])?;
    if !exists {
        return Err(glitchbook::Error::not_found(
            "family",
            a.family,
            format!("no family with id {}", a.family),
        )
        .into());
    }
    let h = History {
        family_id: a.family,
        labels: families::label_history(&conn, a.family)?,
        runs: families::family_events(&conn)?
            .into_iter()
            .filter(|(_, e)| e.family_id == a.family || e.other_family_id == Some(a.family))
            .map(|(run_id, event)| RunEvent { run_id, event })
            .collect(),
        edits: families::edit_history(&conn, Some(a.family))?,
    };
    let out = &mut std::io::stdout().lock();
    serde_json::to_writer_pretty(&mut *out, &h)?;
    use std::io::Write;
    writeln!(out)?;
    Ok(ExitCode::SUCCESS)
}

/// One row of the `classify` table: a label's cross-validated figures.
#[derive(Debug, Default, Serialize)]
struct ClassRow {
    label: String,
    support: usize,
    precision: f64,
    recall: f64,
    predicted_as: String,
}

/// Run `classify`.
pub fn run_classify(g: &Global, a: ClassifyArgs) -> Result<ExitCode> {
    let p = ClassifierParams {
        alpha: a.alpha,
        quadratic: !a.linear,
        min_probability: a.min_probability,
        folds: a.folds,
        seed: a.seed,
        ..Default::default()
    };
    p.check()?;
    let mut conn = catalogue::open_existing(&g.db)?;
    let rep = classifier_db::train_and_classify(&mut conn, &p)?;
    let cv = &rep.cross_validation;
    g.info(&format!(
        "classifier {}: trained on {} members of {} classes; {}-fold cross-validated accuracy          {:.3}; {} triggers labelled, {} left unclassified",
        rep.classifier_id,
        rep.n_train,
        cv.labels.len(),
        cv.folds,
        cv.accuracy,
        rep.n_labelled,
        rep.n_unclassified
    ));
    let out = &mut std::io::stdout().lock();
    if a.format == Format::Json {
        serde_json::to_writer_pretty(&mut *out, &rep)?;
        use std::io::Write;
        writeln!(out)?;
        return Ok(ExitCode::SUCCESS);
    }
    let rows: Vec<ClassRow> = cv
        .per_label
        .iter()
        .enumerate()
        .map(|(c, l)| ClassRow {
            label: l.label.clone(),
            support: l.support,
            precision: l.precision,
            recall: l.recall,
            predicted_as: cv
                .labels
                .iter()
                .zip(&cv.confusion[c])
                .filter(|x| *x.1 > 0)
                .map(|(name, n)| format!("{name}:{n}"))
                .collect::<Vec<_>>()
                .join(" "),
        })
        .collect();
    write_rows(out, a.format, &rows)?;
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
