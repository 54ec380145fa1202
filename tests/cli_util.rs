//! Harness for tests that run the real `glitchbook` binary: a fresh
//! temporary directory per test, helpers to write inputs and run commands.
#![allow(dead_code)]
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

/// Path of the binary under test.
pub const BIN: &str = env!("CARGO_BIN_EXE_glitchbook");

/// A fresh directory holding a catalogue `c.db` and test inputs.
pub struct Dir {
    tmp: tempfile::TempDir,
}

impl Dir {
    pub fn new() -> Dir {
        Dir {
            tmp: tempfile::tempdir().unwrap(),
        }
    }
    pub fn path(&self) -> &Path {
        self.tmp.path()
    }
    pub fn db(&self) -> PathBuf {
        self.path().join("c.db")
    }
    /// Write `content` to `name` inside the directory.
    pub fn write(&self, name: &str, content: &str) -> PathBuf {
        let p = self.path().join(name);
        if let Some(parent) = p.parent() {
            std::fs::create_dir_all(parent).unwrap();
        }
        std::fs::write(&p, content).unwrap();
        p
    }
    /// A command with `--db c.db`, run in the directory.
    pub fn cmd(&self, args: &[&str]) -> Command {
        let mut c = Command::new(BIN);
        c.current_dir(self.path())
            .arg("--db")
            .arg(self.db())
            .args(args);
        c
    }
    pub fn run(&self, args: &[&str]) -> Output {
        self.cmd(args).output().unwrap()
    }
    /// Run and require success; returns stdout.
    pub fn ok(&self, args: &[&str]) -> String {
        let out = self.run(args);
        assert!(
            out.status.success(),
            "glitchbook {args:?} failed ({:?}):\nstdout: {}\nstderr: {}",
            out.status,
            String::from_utf8_lossy(&out.stdout),
            String::from_utf8_lossy(&out.stderr)
        );
        String::from_utf8(out.stdout).unwrap()
    }
    /// Logical content checksum of the catalogue (None when it does not exist).
    pub fn checksum(&self) -> Option<String> {
        checksum(&self.db())
    }
}

pub fn checksum(db: &Path) -> Option<String> {
    if !db.exists() {
        return None;
    }
    let conn = glitchbook::catalogue::open(db).unwrap();
    Some(glitchbook::catalogue::logical_checksum(&conn).unwrap())
}

/// A trigger CSV of `n` rows starting at `t0` \[GPS s\], one every 0.5 s, with
/// SNR 6..16 and frequency 40..540 Hz (deterministic).
pub fn trigger_csv(n: usize, t0: f64) -> String {
    let mut s = String::from("time,frequency,snr,duration,bandwidth,q\n");
    for i in 0..n {
        let t = t0 + 0.5 * i as f64;
        let f = 40.0 + (i * 37 % 500) as f64;
        let snr = 6.0 + (i * 13 % 100) as f64 / 10.0;
        s.push_str(&format!("{t},{f},{snr},0.25,{},8\n", f / 4.0));
    }
    s
}

/// Count rows of a table.
pub fn count(db: &Path, table: &str) -> i64 {
    let conn = rusqlite::Connection::open(db).unwrap();
    conn.query_row(&format!("SELECT COUNT(*) FROM {table}"), [], |r| r.get(0))
        .unwrap()
}
