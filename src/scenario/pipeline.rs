//! Run the tool's stages on a written scenario through the library — scan
//! (every channel of every day's bundle, inside `segments.txt`), families,
//! witnesses, vetoes (with `injections.csv`) — and score each stage against
//! the truth ([`super::score`]). Used by the `scenario_stages` bench, the
//! `scenario` example and the tests.

use super::score::{score_catalogue, ScenarioScore, ScoreParams};
use super::ScenarioSummary;
use crate::catalogue::{self, InsertOutcome};
use crate::coupling::{self, VetoParams, WitnessParams};
use crate::families::{self, ClusterParams};
use crate::io::{read_injections, read_segments_file, Bundle};
use crate::maps::BundleMaps;
use crate::scan::{scan_channel, ScanParams};
use anyhow::{Context, Result};
use serde::Serialize;
use std::path::Path;
use std::time::Instant;

/// What to run.
#[derive(Debug, Clone)]
pub struct StageOptions {
    /// Scan parameters (default: the tool's defaults).
    pub scan: ScanParams,
    /// Only these channels (None: all).
    pub channels: Option<Vec<String>>,
    /// Run `cluster` (and then witnesses per family).
    pub families: bool,
    /// Clustering parameters.
    pub cluster: ClusterParams,
    /// Run witnesses and vetoes.
    pub coupling: bool,
    /// Witness parameters.
    pub witness: WitnessParams,
    /// Veto parameters.
    pub veto: VetoParams,
    /// Scoring parameters.
    pub score: ScoreParams,
}

impl Default for StageOptions {
    fn default() -> Self {
        StageOptions {
            scan: ScanParams::default(),
            channels: None,
            families: true,
            cluster: ClusterParams::default(),
            coupling: true,
            witness: WitnessParams::default(),
            veto: VetoParams::default(),
            score: ScoreParams::default(),
        }
    }
}

/// Wall-clock time of each stage \[s\].
#[derive(Debug, Clone, Default, Serialize)]
pub struct StageTimes {
    /// Scan and catalogue insert.
    pub scan_s: f64,
    /// Families.
    pub cluster_s: f64,
    /// Witness table.
    pub witnesses_s: f64,
    /// Veto rounds.
    pub vetoes_s: f64,
}

/// Result of [`run_stages`].
#[derive(Debug, Clone, Serialize)]
pub struct StageRun {
    /// Triggers stored, all channels.
    pub n_triggers: usize,
    /// Families after `cluster`.
    pub n_families: Option<usize>,
    /// Stage times.
    pub times: StageTimes,
    /// The scores.
    pub score: ScenarioScore,
}

/// Scan, cluster, find witnesses and vetoes for the scenario `sc` into the
/// catalogue `db` (created if needed), then score.
///
/// # Errors
/// Any stage's error (with the stage named).
pub fn run_stages(sc: &ScenarioSummary, db: &Path, o: &StageOptions) -> Result<StageRun> {
    let mut conn = catalogue::open(db)?;
    let (segments, _warnings) = read_segments_file(&sc.segments_txt)?;
    let mut times = StageTimes::default();

    let t = Instant::now();
    let mut n_triggers = 0;
    for dir in &sc.bundles {
        let bundle = Bundle::open(dir)?;
        let canon =
            std::fs::canonicalize(dir).with_context(|| format!("resolving {}", dir.display()))?;
        let scans = bundle
            .channels
            .iter()
            .filter(|c| o.channels.as_ref().is_none_or(|v| v.contains(&c.name)))
            .map(|spec| scan_channel(spec, &o.scan, Some(&segments), &|_| {}))
            .collect::<Result<Vec<_>>>()
            .context("scan")?;
        let tx = conn.transaction_with_behavior(rusqlite::TransactionBehavior::Immediate)?;
        for s in &scans {
            if let InsertOutcome::Inserted { n_triggers: n, .. } =
                catalogue::insert_channel_scan(&tx, s, &canon)?
            {
                n_triggers += n;
            }
        }
        tx.commit()?;
    }
    times.scan_s = t.elapsed().as_secs_f64();

    let mut n_families = None;
    if o.families {
        let t = Instant::now();
        let src = BundleMaps::from_catalogue(&conn).context("families: opening the bundles")?;
        let rep = families::cluster_catalogue(&mut conn, &o.cluster, &src).context("families")?;
        n_families = Some(rep.families.len());
        times.cluster_s = t.elapsed().as_secs_f64();
    }
    let (mut wit, mut vet) = (None, None);
    if o.coupling {
        let t = Instant::now();
        wit = Some(coupling::run_witnesses(&mut conn, &o.witness).context("witnesses")?);
        times.witnesses_s = t.elapsed().as_secs_f64();
        let t = Instant::now();
        let inj = read_injections(&sc.injections_csv)?;
        vet = Some(coupling::run_vetoes(&mut conn, &o.veto, Some(&inj)).context("vetoes")?);
        times.vetoes_s = t.elapsed().as_secs_f64();
    }
    let score = score_catalogue(&conn, &sc.dir, wit.as_ref(), vet.as_ref(), &o.score)?;
    Ok(StageRun {
        n_triggers,
        n_families,
        times,
        score,
    })
}
