//! Safe output for the report: everything is written into a fresh staging
//! directory made inside `--out` (a new, unguessable name, so nothing can be
//! planted in it), then each file is renamed into place. A rename replaces
//! a symbolic link planted at the destination instead of writing through
//! it, and subdirectories of `--out` that are links are refused, so a
//! report never writes outside its directory. A failed run leaves the
//! previous report as it was and removes the staging directory.

use anyhow::{bail, Context, Result};
use std::path::{Path, PathBuf};

/// A staging directory inside the report's output directory.
#[derive(Debug)]
pub struct Staging {
    out: PathBuf,
    dir: PathBuf,
}

impl Staging {
    /// Make `out` (if needed) and a fresh staging directory inside it.
    ///
    /// # Errors
    /// `out` exists and is not a directory, or a directory cannot be made.
    pub fn new(out: &Path) -> Result<Staging> {
        if out.exists() && !out.is_dir() {
            bail!("{}: exists and is not a directory", out.display());
        }
        std::fs::create_dir_all(out).with_context(|| format!("creating {}", out.display()))?;
        let nanos = std::time::SystemTime::now()
            .duration_since(std::time::UNIX_EPOCH)
            .map_or(0, |d| d.subsec_nanos());
        for attempt in 0..100u32 {
            let dir = out.join(format!(
                ".staging-{}-{nanos:09}-{attempt}",
                std::process::id()
            ));
            // create_dir fails on anything already there (link included).
            match std::fs::create_dir(&dir) {
                Ok(()) => {
                    return Ok(Staging {
                        out: out.to_path_buf(),
                        dir,
                    })
                }
                Err(e) if e.kind() == std::io::ErrorKind::AlreadyExists => continue,
                Err(e) => {
                    return Err(e).with_context(|| format!("creating {}", dir.display()));
                }
            }
        }
        bail!("{}: cannot make a staging directory", out.display())
    }

    /// Where to write: the staging directory.
    pub fn path(&self) -> &Path {
        &self.dir
    }

    /// Move every file of the staging directory (and of its
    /// subdirectories, two levels: a per-channel report and its images) to
    /// the same place under `out`, replacing
    /// what is there. Returns the final path of `index.html`.
    ///
    /// # Errors
    /// A destination subdirectory that is a symbolic link or not a
    /// directory, or a rename that fails.
    pub fn publish(self) -> Result<PathBuf> {
        self.publish_dir(&self.dir, &self.out, 0)?;
        Ok(self.out.join("index.html"))
    }

    fn publish_dir(&self, from: &Path, to: &Path, depth: usize) -> Result<()> {
        let mut entries: Vec<_> = std::fs::read_dir(from)
            .with_context(|| format!("reading {}", from.display()))?
            .collect::<std::io::Result<_>>()?;
        entries.sort_by_key(|e| e.file_name());
        for e in entries {
            let src = e.path();
            let dst = to.join(e.file_name());
            let kind = e.file_type()?;
            if kind.is_dir() && depth <= 1 {
                match std::fs::symlink_metadata(&dst) {
                    Ok(m) if m.file_type().is_symlink() => bail!(
                        "{}: is a symbolic link; the report writes only into real \
                         directories (remove it and run again)",
                        dst.display()
                    ),
                    Ok(m) if !m.is_dir() => {
                        bail!("{}: exists and is not a directory", dst.display())
                    }
                    Ok(_) => {}
                    Err(_) => std::fs::create_dir(&dst)
                        .with_context(|| format!("creating {}", dst.display()))?,
                }
                self.publish_dir(&src, &dst, depth + 1)?;
            } else if kind.is_file() {
                if std::fs::symlink_metadata(&dst).is_ok_and(|m| m.is_dir()) {
                    bail!("{}: exists and is a directory", dst.display());
                }
                std::fs::rename(&src, &dst)
                    .with_context(|| format!("moving {} into place", dst.display()))?;
            }
        }
        Ok(())
    }
}

impl Drop for Staging {
    fn drop(&mut self) {
        // remove_dir_all removes links themselves, never their targets.
        let _ = std::fs::remove_dir_all(&self.dir);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[cfg(unix)]
    #[test]
    fn planted_links_are_replaced_not_followed() {
        let d = tempfile::tempdir().unwrap();
        let victim = d.path().join("victim.txt");
        std::fs::write(&victim, "precious").unwrap();
        let out = d.path().join("out");
        std::fs::create_dir(&out).unwrap();
        std::os::unix::fs::symlink(&victim, out.join("index.html")).unwrap();
        let s = Staging::new(&out).unwrap();
        std::fs::write(s.path().join("index.html"), "report").unwrap();
        std::fs::create_dir(s.path().join("img")).unwrap();
        std::fs::write(s.path().join("img/a.svg"), "svg").unwrap();
        let staging = s.path().to_path_buf();
        let index = s.publish().unwrap();
        assert_eq!(std::fs::read_to_string(&victim).unwrap(), "precious");
        assert_eq!(std::fs::read_to_string(index).unwrap(), "report");
        assert!(!std::fs::symlink_metadata(out.join("index.html"))
            .unwrap()
            .file_type()
            .is_symlink());
        assert_eq!(
            std::fs::read_to_string(out.join("img/a.svg")).unwrap(),
            "svg"
        );
        assert!(!staging.exists());

        // A linked subdirectory is refused; the victim directory stays empty.
        let vdir = d.path().join("vdir");
        std::fs::create_dir(&vdir).unwrap();
        let out2 = d.path().join("out2");
        std::fs::create_dir(&out2).unwrap();
        std::os::unix::fs::symlink(&vdir, out2.join("img")).unwrap();
        let s = Staging::new(&out2).unwrap();
        std::fs::create_dir(s.path().join("img")).unwrap();
        std::fs::write(s.path().join("img/a.svg"), "svg").unwrap();
        let e = s.publish().unwrap_err();
        assert!(format!("{e:#}").contains("symbolic link"), "{e:#}");
        assert_eq!(std::fs::read_dir(&vdir).unwrap().count(), 0);
    }
}
