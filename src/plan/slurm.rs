//! The Slurm batch script (one job array over the shards) and the README note.
use super::{Plan, ShardCommand};
use serde::{Deserialize, Serialize};
use std::path::Path;

/// Resources requested per array task.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SlurmOptions {
    /// Job name.
    pub job_name: String,
    /// Partition (None = the cluster default).
    pub partition: Option<String>,
    /// Wall-clock limit per shard, `HH:MM:SS`.
    pub time_limit: String,
    /// Memory per shard \[MB\].
    pub mem_mb: u64,
    /// CPUs per shard (the scan uses them through rayon).
    pub cpus: u32,
    /// At most this many shards at once (None = no limit).
    pub max_parallel: Option<usize>,
    /// Path of the glitchbook executable on the compute nodes.
    pub exe: String,
}

impl Default for SlurmOptions {
    fn default() -> Self {
        SlurmOptions {
            job_name: "glitchbook-scan".into(),
            partition: None,
            time_limit: "02:00:00".into(),
            mem_mb: 2000,
            cpus: 2,
            max_parallel: None,
            exe: "glitchbook".into(),
        }
    }
}

impl SlurmOptions {
    /// Check the resources (no I/O).
    ///
    /// # Errors
    /// [`crate::Error::InvalidParameter`] naming the field: zero CPUs,
    /// memory or parallel limit, or a time limit not in one of Slurm's
    /// `--time` forms (`MM`, `MM:SS`, `HH:MM:SS`, `D-HH`, `D-HH:MM`,
    /// `D-HH:MM:SS`).
    pub fn check(&self) -> crate::Result<()> {
        use crate::Error;
        if self.cpus == 0 {
            return Err(Error::invalid("cpus", "must be at least 1"));
        }
        if self.mem_mb == 0 {
            return Err(Error::invalid("mem_mb", "must be at least 1"));
        }
        if self.max_parallel == Some(0) {
            return Err(Error::invalid("max_parallel", "must be at least 1"));
        }
        // Written into `#SBATCH` lines: only characters Slurm takes in these
        // names, so no value can start a new line or break the script.
        let name_ok = |x: &str, extra: &str| {
            !x.is_empty()
                && x.len() <= 200
                && x.chars()
                    .all(|c| c.is_ascii_alphanumeric() || "_.-".contains(c) || extra.contains(c))
        };
        if !name_ok(&self.job_name, "+") {
            return Err(Error::invalid(
                "job_name",
                format!(
                    "{:?}: use letters, digits and _ . + - only (at most 200)",
                    self.job_name
                ),
            ));
        }
        if let Some(p) = &self.partition {
            if !(name_ok(p, ",") && !p.starts_with(',') && !p.ends_with(',') && !p.contains(",,")) {
                return Err(Error::invalid(
                    "partition",
                    format!(
                        "{p:?}: a Slurm partition name (letters, digits, _ . -), or several \
                         separated by commas"
                    ),
                ));
            }
        }
        if self.exe.is_empty() || self.exe.chars().any(char::is_control) {
            return Err(Error::invalid(
                "exe",
                format!("{:?}: must be a path without control characters", self.exe),
            ));
        }
        let t = &self.time_limit;
        let (days, rest) = t.split_once('-').unwrap_or(("0", t));
        let parts: Vec<&str> = rest.split(':').collect();
        let digits = |x: &str| !x.is_empty() && x.chars().all(|c| c.is_ascii_digit());
        if !(digits(days) && parts.len() <= 3 && parts.iter().all(|p| digits(p))) {
            return Err(Error::invalid(
                "time_limit",
                format!("must look like HH:MM:SS or D-HH:MM:SS (Slurm's time limit), got {t:?}"),
            ));
        }
        Ok(())
    }
}

/// Check a plan directory can be written into the batch script: its path
/// goes into `#SBATCH --output="..."` lines, where Slurm reads `%` as a
/// file-name pattern and a double quote or backslash would end or escape
/// the quoted path, and into the shell, where a control character would
/// break the line.
///
/// # Errors
/// [`crate::Error::InvalidParameter`] (field `plan_dir`) naming the
/// character.
pub fn check_batch_dir(dir: &Path) -> crate::Result<()> {
    let s = dir.display().to_string();
    if let Some(c) = s
        .chars()
        .find(|&c| c.is_control() || c == '"' || c == '\\' || c == '%')
    {
        return Err(crate::Error::invalid(
            "plan_dir",
            format!(
                "{s:?}: the path holds {c:?}, which cannot be written into the batch script's \
                 #SBATCH lines; choose a directory without it"
            ),
        ));
    }
    Ok(())
}

/// Shell-quote a string (single quotes).
fn sq(s: &str) -> String {
    format!("'{}'", s.replace('\'', r"'\''"))
}

/// A shell word for `s`: as is when it holds only characters the shell
/// leaves alone, else single-quoted.
pub(crate) fn shell_word(s: &str) -> String {
    let plain = !s.is_empty()
        && s.chars()
            .all(|c| c.is_ascii_alphanumeric() || "-_./=:,+@%".contains(c));
    if plain {
        s.to_string()
    } else {
        sq(s)
    }
}

/// The batch script for `plan` living in `dir` (absolute); each array task
/// runs the executable with the arguments of `command`.
pub fn slurm_script(plan: &Plan, dir: &Path, command: &ShardCommand) -> String {
    let o = &plan.slurm;
    let n = plan.shards.len();
    let dir_s = dir.display().to_string();
    let mut s = String::new();
    s.push_str("#!/bin/bash\n");
    s.push_str(&format!("#SBATCH --job-name={}\n", o.job_name));
    match o.max_parallel {
        Some(m) => s.push_str(&format!("#SBATCH --array=0-{}%{m}\n", n - 1)),
        None => s.push_str(&format!("#SBATCH --array=0-{}\n", n - 1)),
    }
    if let Some(p) = &o.partition {
        s.push_str(&format!("#SBATCH --partition={p}\n"));
    }
    s.push_str(&format!(
        "#SBATCH --ntasks=1\n#SBATCH --cpus-per-task={}\n",
        o.cpus
    ));
    s.push_str(&format!("#SBATCH --mem={}M\n", o.mem_mb));
    s.push_str(&format!("#SBATCH --time={}\n", o.time_limit));
    // Quoted: sbatch reads a double-quoted value as one argument, so a
    // directory with spaces works (see check_batch_dir for what cannot).
    s.push_str(&format!("#SBATCH --output=\"{dir_s}/logs/shard-%a.log\"\n"));
    s.push_str(&format!("#SBATCH --error=\"{dir_s}/logs/shard-%a.log\"\n"));
    s.push_str(&format!(
        "# glitchbook plan {} ({} shards), tool version {}\n",
        plan.plan_id, n, plan.tool_version
    ));
    s.push_str(&format!(
        r#"set -u
K=${{SLURM_ARRAY_TASK_ID:?run this script with sbatch (job array)}}
DIR={dir}
EXE=${{GLITCHBOOK_EXE:-{exe}}}
export RAYON_NUM_THREADS=${{SLURM_CPUS_PER_TASK:-{cpus}}}
echo "shard $K on $(hostname) at $(date -u +%FT%TZ)"
rm -f "$DIR/status/shard-$K.failed"
if [ -n "${{GLITCHBOOK_SHARD_CMD:-}}" ]; then
    # Stand-in command (tests of the batch machinery): K and DIR are exported.
    export K DIR
    bash -c "$GLITCHBOOK_SHARD_CMD"
else
    # The real per-shard scan: writes $DIR/shards/shard-$K.db atomically.
    "$EXE" {args}
fi
rc=$?
if [ $rc -ne 0 ]; then
    echo "exit $rc on $(hostname) at $(date -u +%FT%TZ); log $DIR/logs/shard-$K.log" > "$DIR/status/shard-$K.failed"
fi
echo "shard $K finished with exit $rc at $(date -u +%FT%TZ)"
exit $rc
"#,
        dir = sq(&dir_s),
        exe = sq(&o.exe),
        cpus = o.cpus,
        args = command.shell_words(),
    ));
    s
}

/// The README note written beside the plan.
pub fn readme(plan: &Plan, dir: &Path) -> String {
    let d = dir.display();
    format!(
        "glitchbook work directory for plan {id}\n\
         {n} shards over {c} channels; tool version {v}; created {t}.\n\n\
         Submit on a Slurm cluster (one array task per shard):\n\
         \x20   sbatch {d}/run-array.sh          # or: sbatch --wait ... to block until done\n\
         Set GLITCHBOOK_EXE if glitchbook is not on the compute nodes' PATH.\n\n\
         Or run on this workstation, J shards at a time:\n\
         \x20   glitchbook run-plan {d} --jobs J\n\n\
         Check progress (done / failed / missing, with log paths):\n\
         \x20   glitchbook plan status {d}\n\
         Re-submit only what failed or is missing, e.g.:\n\
         \x20   sbatch --array=3,7 {d}/run-array.sh\n\
         (a shard writes shards/shard-K.db atomically, so re-running it is safe).\n\n\
         Merge into one catalogue (one transaction per shard; merging twice changes nothing):\n\
         \x20   glitchbook merge {d} --into CATALOGUE.db\n\
         Shards made with other parameters or another tool version are refused\n\
         unless --force is given.\n",
        id = plan.plan_id,
        n = plan.shards.len(),
        c = plan.channels.len(),
        v = plan.tool_version,
        t = plan.created_utc,
    )
}
