//! Command-line interface: one file per subcommand. Each defines its clap
//! `Args`, a `validate` step that checks every flag before any I/O, and a
//! `run` that calls the library and prints.
use clap::{Parser, Subcommand};
use std::path::PathBuf;
use std::process::ExitCode;

mod bundle;
mod channels;
mod check;
mod common;
mod demo;
mod families;
mod import;
mod plan;
mod rates;
mod report;
mod scan;
mod triggers;
mod vetoes;
mod witnesses;

pub use common::error_message;

/// glitchbook: find, sort, track and trace noise transients in
/// gravitational-wave detector data.
#[derive(Debug, Parser)]
#[command(name = "glitchbook", version, about)]
pub struct Cli {
    #[command(flatten)]
    pub global: Global,
    #[command(subcommand)]
    pub command: Command,
}

/// Options every command takes.
#[derive(Debug, Clone, clap::Args)]
pub struct Global {
    /// Catalogue file (SQLite) [default: glitchbook.db; for `demo`:
    /// DIR/glitchbook.db].
    #[arg(
        long,
        global = true,
        value_name = "PATH",
        default_value = "glitchbook.db",
        hide_default_value = true
    )]
    pub db: PathBuf,
    /// Print only warnings, errors and requested listings.
    #[arg(long, global = true)]
    pub quiet: bool,
}

impl Global {
    /// Print an informational line to stderr unless `--quiet`.
    pub fn info(&self, msg: &str) {
        if !self.quiet {
            eprintln!("glitchbook: {msg}");
        }
    }
}

/// Print a warning to stderr (always, even with `--quiet`).
pub fn warn(msg: &str) {
    eprintln!("glitchbook: warning: {msg}");
}

/// The subcommands. Later stages add their variants here (cluster, families,
/// label, assign, witnesses, vetoes, rates, report, demo, plan), each with
/// its own file in `src/cli/`.
#[derive(Debug, Subcommand)]
pub enum Command {
    /// Write DIR/bundle.toml describing the channels of frame, HDF5 and .npy files.
    Bundle(bundle::BundleArgs),
    /// Search channels of a bundle for transients and record the triggers.
    Scan(scan::ScanArgs),
    /// Record triggers from an external CSV file.
    Import(import::ImportArgs),
    /// List triggers.
    Triggers(triggers::TriggersArgs),
    /// List channels with their scan and trigger counts and analysed time.
    Channels(channels::ChannelsArgs),
    /// Check the catalogue's integrity (exit status 1 when a check fails).
    Check(check::CheckArgs),
    /// Sort target triggers into families (keeps ids and labels of earlier runs).
    Cluster(families::ClusterArgs),
    /// Place new target triggers into existing families; mark novel ones.
    Assign(families::AssignArgs),
    /// List families.
    Families(families::FamiliesArgs),
    /// Name a family (history kept).
    Label(families::LabelArgs),
    /// Merge one family into another (history kept, kept by later `cluster` runs).
    MergeFamilies(families::MergeFamiliesArgs),
    /// Split triggers of a family into a new family (history kept, kept by later runs).
    SplitFamily(families::SplitFamilyArgs),
    /// Move triggers into a family (history kept, kept by later runs).
    MoveTriggers(families::MoveTriggersArgs),
    /// A family's history: labels, clustering events, edits (JSON).
    History(families::HistoryArgs),
    /// Train a classifier on the families' labels and classify the triggers.
    Classify(families::ClassifyArgs),
    /// Write a PNG spectrogram image of one trigger.
    Thumbnail(families::ThumbnailArgs),
    /// Write the invented demo scenario and run the whole loop on it.
    Demo(demo::DemoArgs),
    /// Aux channels that witness target triggers (coincidence statistics).
    Witnesses(witnesses::WitnessesArgs),
    /// Propose vetoes (round-based, with a safety check against injections).
    Vetoes(vetoes::VetoesArgs),
    /// Trigger rates over live time with Poisson limits and change points.
    Rates(rates::RatesArgs),
    /// Write a static HTML report.
    Report(report::ReportArgs),
    /// Split a scan into shards for a Slurm job array or `run-plan`; `plan status DIR`.
    Plan(plan::PlanArgs),
    /// Run the shards of a plan on this machine, J at a time.
    RunPlan(plan::RunPlanArgs),
    /// Merge the shard catalogues of a plan into one catalogue.
    Merge(plan::MergeArgs),
    /// Write the demo bundle (helper for end-to-end checks).
    #[command(hide = true)]
    DemoData(plan::DemoDataArgs),
    /// Compare the triggers of two catalogues (helper for end-to-end checks).
    #[command(hide = true)]
    CompareCatalogues(plan::CompareArgs),
}

/// Run one command.
pub fn run(cli: Cli) -> anyhow::Result<ExitCode> {
    let g = &cli.global;
    match cli.command {
        Command::Bundle(a) => bundle::run(g, a),
        Command::Scan(a) => scan::run(g, a),
        Command::Import(a) => import::run(g, a),
        Command::Triggers(a) => triggers::run(g, a),
        Command::Channels(a) => channels::run(g, a),
        Command::Check(a) => check::run(g, a),
        Command::Cluster(a) => families::run_cluster(g, a),
        Command::Assign(a) => families::run_assign(g, a),
        Command::Families(a) => families::run_families(g, a),
        Command::Label(a) => families::run_label(g, a),
        Command::MergeFamilies(a) => families::run_merge_families(g, a),
        Command::SplitFamily(a) => families::run_split_family(g, a),
        Command::MoveTriggers(a) => families::run_move_triggers(g, a),
        Command::History(a) => families::run_history(g, a),
        Command::Classify(a) => families::run_classify(g, a),
        Command::Thumbnail(a) => families::run_thumbnail(g, a),
        Command::Demo(a) => demo::run(g, a),
        Command::Witnesses(a) => witnesses::run(g, a),
        Command::Vetoes(a) => vetoes::run(g, a),
        Command::Rates(a) => rates::run(g, a),
        Command::Report(a) => report::run(g, a),
        Command::Plan(a) => plan::run(g, a),
        Command::RunPlan(a) => plan::run_plan(g, a),
        Command::Merge(a) => plan::run_merge(g, a),
        Command::DemoData(a) => plan::run_demo_data(g, a),
        Command::CompareCatalogues(a) => plan::run_compare(g, a),
    }
}

/// Parse `args` (without a program name) as one command's flags; for the
/// commands' flag tests.
#[cfg(test)]
pub fn parse_flags<A: clap::Args + clap::FromArgMatches>(args: &[&str]) -> A {
    use clap::Parser;
    #[derive(Parser)]
    struct Wrap<A: clap::Args + clap::FromArgMatches> {
        #[command(flatten)]
        a: A,
    }
    Wrap::<A>::try_parse_from(std::iter::once("t").chain(args.iter().copied()))
        .expect("flags parse")
        .a
}

#[cfg(test)]
mod tests {
    use super::*;
    use clap::CommandFactory;

    #[test]
    fn cli_definition_is_consistent() {
        Cli::command().debug_assert();
    }
}
