//! Running shards: one shard in this process, all shards on a workstation,
//! the per-shard catalogue, and `plan status`.
use super::{load_plan, now_utc, shard_job_of, ShardChannelJob, TOOL_VERSION};
use crate::scan::ChannelScan;
use crate::segments::SegmentList;
use anyhow::{bail, Context, Result};
use rusqlite::params;
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};

/// `DIR/shards/shard-K.db`.
pub fn shard_db_path(plan_dir: &Path, k: usize) -> PathBuf {
    plan_dir.join("shards").join(format!("shard-{k}.db"))
}

fn log_path(plan_dir: &Path, k: usize) -> PathBuf {
    plan_dir.join("logs").join(format!("shard-{k}.log"))
}

fn failed_path(plan_dir: &Path, k: usize) -> PathBuf {
    plan_dir.join("status").join(format!("shard-{k}.failed"))
}

/// One argument of the command line that runs a shard.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum ShardArg {
    /// Literal text.
    Text(String),
    /// The shard index K.
    Index,
    /// The plan's work directory.
    PlanDir,
    /// The shard's catalogue, `DIR/shards/shard-K.db`.
    ShardDb,
}

/// The command line that runs shard K of a plan, after the executable. The
/// library does not know the executable's syntax: the caller (the CLI)
/// passes it to [`super::make_plan`] (for the batch script) and
/// [`run_local`]. The command must write the shard catalogue
/// ([`run_shard`] does).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ShardCommand {
    /// The arguments, in order.
    pub args: Vec<ShardArg>,
}

impl ShardCommand {
    /// The arguments for shard `k` of the plan in `dir`.
    pub fn args_for(&self, dir: &Path, k: usize) -> Vec<std::ffi::OsString> {
        self.args
            .iter()
            .map(|a| match a {
                ShardArg::Text(s) => s.into(),
                ShardArg::Index => k.to_string().into(),
                ShardArg::PlanDir => dir.as_os_str().to_owned(),
                ShardArg::ShardDb => shard_db_path(dir, k).into_os_string(),
            })
            .collect()
    }

    /// The arguments as shell words for the batch script, where the shell
    /// variables `K` and `DIR` hold the shard index and the work directory.
    pub fn shell_words(&self) -> String {
        self.args
            .iter()
            .map(|a| match a {
                ShardArg::Text(s) => super::slurm::shell_word(s),
                ShardArg::Index => "\"$K\"".to_string(),
                ShardArg::PlanDir => "\"$DIR\"".to_string(),
                ShardArg::ShardDb => "\"$DIR/shards/shard-$K.db\"".to_string(),
            })
            .collect::<Vec<_>>()
            .join(" ")
    }
}

/// Keep what shard owns: triggers with `t_peak` in `keep`, analysed time ∩ `keep`.
pub fn clip_to_shard(mut scan: ChannelScan, keep: &SegmentList) -> ChannelScan {
    scan.triggers.retain(|t| keep.contains(t.t_peak));
    scan.analysed = scan.analysed.intersection(keep);
    scan
}

/// Write the scans of shard `k` to `DIR/shards/shard-K.db` atomically (a
/// temporary file renamed into place), replacing an older one: re-running a
/// shard is safe. Each scan comes with its bundle directory, recorded as the
/// scan's source path (later commands reopen the data from there). Rows are
/// written by [`crate::catalogue::record_scans`], as `scan` does, plus
/// one `shard_runs` row naming the plan and shard.
///
/// # Errors
/// An unwritable directory or SQLite errors.
pub fn write_shard_catalogue(
    plan_dir: &Path,
    plan_id: &str,
    k: usize,
    scans: &[(ChannelScan, PathBuf)],
) -> Result<PathBuf> {
    let db = shard_db_path(plan_dir, k);
    let tmp = db.with_extension("db.tmp");
    for p in [
        &tmp,
        &tmp.with_extension("tmp-wal"),
        &tmp.with_extension("tmp-shm"),
    ] {
        let _ = std::fs::remove_file(p);
    }
    {
        let mut conn = crate::catalogue::open(&tmp)?;
        crate::catalogue::record_scans(&mut conn, scans, |tx| {
            tx.execute(
                "INSERT INTO shard_runs(plan_id, shard, tool_version, created_utc) VALUES (?1, ?2, ?3, ?4)",
                params![plan_id, k as i64, TOOL_VERSION, now_utc()],
            )?;
            Ok(())
        })?;
        // Fold the WAL back so the renamed file is self-contained.
        conn.pragma_update(None, "journal_mode", "DELETE")?;
    }
    std::fs::rename(&tmp, &db)
        .with_context(|| format!("renaming {} to {}", tmp.display(), db.display()))?;
    Ok(db)
}

/// Run shard `k` with a caller-supplied scan function (one call per
/// channel with something to scan), clip each result to the shard's keep
/// span and write the shard catalogue. On error a failure marker
/// `status/shard-K.failed` is written and the error returned.
///
/// # Errors
/// An unreadable plan, a bad `k`, or the first scan or write error.
pub fn run_shard_with(
    plan_dir: &Path,
    k: usize,
    scan: &dyn Fn(&ShardChannelJob, &crate::scan::ScanParams) -> Result<ChannelScan>,
) -> Result<PathBuf> {
    let res = (|| -> Result<PathBuf> {
        let plan = load_plan(plan_dir)?;
        let job = shard_job_of(&plan, k)?;
        let mut out = Vec::new();
        for c in job.channels.iter().filter(|c| !c.scan.is_empty()) {
            let s = scan(c, &job.params).with_context(|| {
                format!(
                    "shard {k}: channel {} of {}",
                    c.channel.name,
                    c.channel.bundle.display()
                )
            })?;
            out.push((clip_to_shard(s, &c.keep), c.channel.bundle.clone()));
        }
        write_shard_catalogue(plan_dir, &plan.plan_id, k, &out)
    })();
    match res {
        Ok(p) => {
            let _ = std::fs::remove_file(failed_path(plan_dir, k));
            Ok(p)
        }
        Err(e) => {
            let _ = std::fs::create_dir_all(plan_dir.join("status"));
            let _ = std::fs::write(failed_path(plan_dir, k), format!("{e:#}\n"));
            Err(e)
        }
    }
}

/// Run shard `k` of the plan in `plan_dir` on the bundle files (what
/// `glitchbook scan --shard K --plan DIR` does). Input files whose size or
/// mtime changed since planning are refused.
///
/// # Errors
/// As [`run_shard_with`].
pub fn run_shard(plan_dir: &Path, k: usize) -> Result<PathBuf> {
    run_shard_with(plan_dir, k, &|c, params| {
        let ch = &c.channel;
        let bundle = crate::io::Bundle::open(&ch.bundle)?;
        let Some(spec) = bundle.channels.iter().find(|s| s.name == ch.name) else {
            bail!(
                "{}: channel {} is no longer in the bundle",
                ch.bundle.display(),
                ch.name
            );
        };
        let meta = std::fs::metadata(&spec.file)
            .with_context(|| format!("{}: cannot stat", spec.file.display()))?;
        let mtime = meta
            .modified()
            .ok()
            .and_then(|t| t.duration_since(std::time::UNIX_EPOCH).ok())
            .map_or(0, |d| d.as_secs() as i64);
        if meta.len() != ch.file_size || mtime != ch.mtime_unix {
            bail!(
                "{}: file changed since the plan was made (size/mtime differ); make a new plan",
                spec.file.display()
            );
        }
        crate::scan::scan_channel(spec, params, Some(&c.scan), &|_| {})
    })
}

/// State of one shard.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ShardState {
    /// Its catalogue exists.
    Done,
    /// It ran and failed (marker present, no catalogue).
    Failed,
    /// Not run yet (or still running).
    Missing,
}

/// One row of `plan status`.
#[derive(Debug, Clone)]
pub struct ShardStatus {
    /// Shard index.
    pub index: usize,
    /// State.
    pub state: ShardState,
    /// Its log file.
    pub log: PathBuf,
    /// Its catalogue file.
    pub db: PathBuf,
    /// Failure message (first line of the marker), if failed.
    pub message: Option<String>,
}

/// Done / failed / missing for every shard of the plan in `dir`.
///
/// # Errors
/// An unreadable plan.
pub fn status(dir: &Path) -> Result<Vec<ShardStatus>> {
    let plan = load_plan(dir)?;
    Ok((0..plan.shards.len())
        .map(|k| {
            let db = shard_db_path(dir, k);
            let fail = failed_path(dir, k);
            let (state, message) = if db.exists() {
                (ShardState::Done, None)
            } else if fail.exists() {
                let msg = std::fs::read_to_string(&fail).unwrap_or_default();
                (
                    ShardState::Failed,
                    Some(msg.lines().next().unwrap_or("").to_string()),
                )
            } else {
                (ShardState::Missing, None)
            };
            ShardStatus {
                index: k,
                state,
                log: log_path(dir, k),
                db,
                message,
            }
        })
        .collect())
}

/// Run every shard not yet done on this machine, `jobs` at a time, each as
/// `exe` with the arguments of `command` (for glitchbook's CLI: `--db
/// DIR/shards/shard-K.db scan --shard K --plan DIR`), output in
/// `DIR/logs/shard-K.log`. Returns the final status of all shards.
///
/// # Errors
/// An unreadable plan, a process that cannot be started, or (after all
/// shards ran) one error listing every failed shard with its log path.
pub fn run_local(
    dir: &Path,
    jobs: usize,
    exe: &Path,
    command: &ShardCommand,
) -> Result<Vec<ShardStatus>> {
    let jobs = jobs.max(1);
    let todo: Vec<usize> = status(dir)?
        .into_iter()
        .filter(|s| s.state != ShardState::Done)
        .map(|s| s.index)
        .collect();
    std::fs::create_dir_all(dir.join("logs"))?;
    std::fs::create_dir_all(dir.join("status"))?;
    let mut queue = todo.into_iter();
    let mut running: Vec<(usize, Child)> = Vec::new();
    loop {
        while running.len() < jobs {
            let Some(k) = queue.next() else { break };
            let _ = std::fs::remove_file(failed_path(dir, k));
            let log = std::fs::File::create(log_path(dir, k))
                .with_context(|| format!("creating {}", log_path(dir, k).display()))?;
            let child = Command::new(exe)
                .args(command.args_for(dir, k))
                .stdin(Stdio::null())
                .stdout(log.try_clone()?)
                .stderr(log)
                .spawn()
                .with_context(|| format!("starting {}", exe.display()))?;
            running.push((k, child));
        }
        if running.is_empty() {
            break;
        }
        let mut i = 0;
        while i < running.len() {
            if let Some(st) = running[i].1.try_wait()? {
                let k = running[i].0;
                if !st.success() && !failed_path(dir, k).exists() {
                    std::fs::write(
                        failed_path(dir, k),
                        format!("{st}; log {}\n", log_path(dir, k).display()),
                    )?;
                }
                running.swap_remove(i);
            } else {
                i += 1;
            }
        }
        std::thread::sleep(std::time::Duration::from_millis(20));
    }
    let st = status(dir)?;
    let bad: Vec<String> = st
        .iter()
        .filter(|s| s.state != ShardState::Done)
        .map(|s| format!("shard {} failed (log {})", s.index, s.log.display()))
        .collect();
    if !bad.is_empty() {
        bail!(
            "{} of {} shards failed: {}",
            bad.len(),
            st.len(),
            bad.join("; ")
        );
    }
    Ok(st)
}

/// `plan status` as text: a count line, then one line per shard that is not
/// done (failed ones with their message and log path).
pub fn status_text(statuses: &[ShardStatus]) -> String {
    let count = |s: ShardState| statuses.iter().filter(|x| x.state == s).count();
    let mut out = format!(
        "{} shards: {} done, {} failed, {} missing\n",
        statuses.len(),
        count(ShardState::Done),
        count(ShardState::Failed),
        count(ShardState::Missing)
    );
    for s in statuses {
        match s.state {
            ShardState::Done => {}
            ShardState::Failed => out.push_str(&format!(
                "shard {}: failed: {} (log {})\n",
                s.index,
                s.message.as_deref().unwrap_or(""),
                s.log.display()
            )),
            ShardState::Missing => out.push_str(&format!(
                "shard {}: missing (not run, or still running; log {})\n",
                s.index,
                s.log.display()
            )),
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn shard_command_fills_in_index_and_paths() {
        let cmd = ShardCommand {
            args: vec![
                ShardArg::Text("--db".into()),
                ShardArg::ShardDb,
                ShardArg::Text("scan it".into()),
                ShardArg::Index,
                ShardArg::PlanDir,
            ],
        };
        let dir = Path::new("/w/run a");
        let args: Vec<String> = cmd
            .args_for(dir, 7)
            .into_iter()
            .map(|a| a.into_string().unwrap())
            .collect();
        assert_eq!(
            args,
            [
                "--db",
                "/w/run a/shards/shard-7.db",
                "scan it",
                "7",
                "/w/run a"
            ]
        );
        assert_eq!(
            cmd.shell_words(),
            r#"--db "$DIR/shards/shard-$K.db" 'scan it' "$K" "$DIR""#
        );
    }
}
