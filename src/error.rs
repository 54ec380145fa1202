//! The library's error at its boundary: [`Error`].
//!
//! Functions whose failures users cause (bad input files, bad parameters,
//! a catalogue too new, a missing family or trigger) return or wrap an
//! [`Error`], so a caller can tell the cases apart without reading message
//! text: the CLI maps [`Error::InvalidParameter`]'s field names to its flag
//! names, tests match kinds. Internal plumbing (SQLite, JSON, numerics) may
//! still use `anyhow` and reach callers as [`Error::Other`] or inside an
//! `anyhow::Error`; find the typed error in a chain with [`Error::find`].
//!
//! Messages are one line and name the file (and line and field) or the
//! parameter; they never use command-line words (`--bin`): that mapping is
//! the binary's.

use std::path::{Path, PathBuf};

/// What went wrong, by kind.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum Error {
    /// An input file is malformed: `path[:line[:column]]: message`.
    #[error("{}", parse_text(path, *line, *column, message))]
    Parse {
        /// The file (or the name given to an in-memory input).
        path: PathBuf,
        /// 1-based line, if known.
        line: Option<u64>,
        /// 1-based column (character) in the line, if known.
        column: Option<u64>,
        /// The field or CSV column at fault, if any (also named in `message`).
        field: Option<String>,
        /// What is wrong.
        message: String,
    },
    /// The catalogue was written by a newer glitchbook (it is left unmodified).
    #[error(
        "{}: catalogue schema version {found} is newer than this glitchbook supports \
         ({supported}); use a newer glitchbook (the file was not modified)",
        path.display()
    )]
    SchemaTooNew {
        /// The catalogue file.
        path: PathBuf,
        /// Its schema version.
        found: i64,
        /// The newest version this build knows.
        supported: i64,
    },
    /// A named thing does not exist (a family, trigger, catalogue, bundle,
    /// shard, channel); `message` says which and what to do.
    #[error("{message}")]
    NotFound {
        /// Kind of thing (`family`, `trigger`, `catalogue`, ...).
        what: &'static str,
        /// Its id, name or path.
        id: String,
        /// The whole message.
        message: String,
    },
    /// A parameter is out of its range: `field reason`. `reason` may name
    /// other fields as `{name}` (see [`Error::describe`]).
    #[error("{}", self.describe(&|f| f.to_string()))]
    InvalidParameter {
        /// The parameter's field name (`bin_s`, `fmin`, ...).
        field: String,
        /// What is wrong, e.g. `must be a positive number of seconds, got 0`.
        reason: String,
    },
    /// Reading or writing a file failed: `path: action: error`.
    #[error("{}: {action}: {source}", path.display())]
    Io {
        /// The file.
        path: PathBuf,
        /// What was being done (`cannot read`, `cannot open`, ...).
        action: String,
        /// The operating system's error.
        source: std::io::Error,
    },
    /// Any other failure (SQLite, JSON, numerics), with its context chain.
    #[error(transparent)]
    Other(#[from] anyhow::Error),
}

/// A result with [`Error`].
pub type Result<T, E = Error> = std::result::Result<T, E>;

fn parse_text(path: &Path, line: Option<u64>, column: Option<u64>, message: &str) -> String {
    let mut s = path.display().to_string();
    for n in [line, column].into_iter().flatten() {
        s.push_str(&format!(":{n}"));
    }
    s.push_str(": ");
    s.push_str(message);
    s
}

impl Error {
    /// An [`Error::InvalidParameter`].
    pub fn invalid(field: impl Into<String>, reason: impl Into<String>) -> Error {
        Error::InvalidParameter {
            field: field.into(),
            reason: reason.into(),
        }
    }

    /// An [`Error::Parse`] naming only the file.
    pub fn parse(path: impl Into<PathBuf>, message: impl Into<String>) -> Error {
        Error::Parse {
            path: path.into(),
            line: None,
            column: None,
            field: None,
            message: message.into(),
        }
    }

    /// This parse error at a 1-based line (and column, if given).
    pub fn at(mut self, line_no: u64, col: Option<u64>) -> Error {
        if let Error::Parse { line, column, .. } = &mut self {
            *line = Some(line_no);
            *column = col;
        }
        self
    }

    /// This parse error in a field (the message names it already).
    pub fn in_field(mut self, name: &str) -> Error {
        if let Error::Parse { field, .. } = &mut self {
            *field = Some(name.to_string());
        }
        self
    }

    /// An [`Error::NotFound`] with its whole message.
    pub fn not_found(what: &'static str, id: impl ToString, message: impl Into<String>) -> Error {
        Error::NotFound {
            what,
            id: id.to_string(),
            message: message.into(),
        }
    }

    /// An [`Error::Io`].
    pub fn io(
        path: impl Into<PathBuf>,
        action: impl Into<String>,
        source: std::io::Error,
    ) -> Error {
        Error::Io {
            path: path.into(),
            action: action.into(),
            source,
        }
    }

    /// The message of an [`Error::InvalidParameter`] with every field name
    /// (the field itself and each `{name}` in the reason) written by
    /// `name`; the CLI passes its flag names. Other kinds: their message.
    pub fn describe(&self, name: &dyn Fn(&str) -> String) -> String {
        match self {
            Error::InvalidParameter { field, reason } => {
                format!("{} {}", name(field), fill_fields(reason, name))
            }
            other => other.to_string(),
        }
    }

    /// The first [`Error`] in an `anyhow` chain, if any (through contexts
    /// and [`Error::Other`]).
    pub fn find(err: &anyhow::Error) -> Option<&Error> {
        err.chain()
            .find_map(|e| e.downcast_ref::<Error>())
            .map(|e| match e {
                Error::Other(inner) => Error::find(inner).unwrap_or(e),
                _ => e,
            })
    }
}

/// Replace each `{name}` in `text` by `name(name)`; other text is kept.
fn fill_fields(text: &str, name: &dyn Fn(&str) -> String) -> String {
    let mut out = String::with_capacity(text.len());
    let mut rest = text;
    while let Some(i) = rest.find('{') {
        out.push_str(&rest[..i]);
        match rest[i + 1..].find('}') {
            Some(j)
                if j > 0
                    && rest[i + 1..i + 1 + j]
                        .chars()
                        .all(|c| c.is_ascii_alphanumeric() || c == '_') =>
            {
                out.push_str(&name(&rest[i + 1..i + 1 + j]));
                rest = &rest[i + 2 + j..];
            }
            _ => {
                out.push('{');
                rest = &rest[i + 1..];
            }
        }
    }
    out.push_str(rest);
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parameter_messages_name_fields_or_flags() {
        let e = Error::invalid("until_gps", "(2) must be after {since_gps} (3)");
        assert_eq!(e.to_string(), "until_gps (2) must be after since_gps (3)");
        let flag = |f: &str| format!("--{}", f.trim_end_matches("_gps"));
        assert_eq!(e.describe(&flag), "--until (2) must be after --since (3)");
        // Braces that do not hold a field name are kept.
        let e = Error::invalid("x", "got {1, 2} and { y}");
        assert_eq!(e.to_string(), "x got {1, 2} and { y}");
    }

    #[test]
    fn parse_messages_name_file_line_and_column() {
        let e = Error::parse("t.csv", "column 'snr': -1 must be > 0")
            .at(4, None)
            .in_field("snr");
        assert_eq!(e.to_string(), "t.csv:4: column 'snr': -1 must be > 0");
        assert!(matches!(e, Error::Parse { field: Some(f), line: Some(4), .. } if f == "snr"));
        let e = Error::parse("b.toml", "channel #1: field 'rate' = 0 must be > 0").at(3, Some(8));
        assert_eq!(
            e.to_string(),
            "b.toml:3:8: channel #1: field 'rate' = 0 must be > 0"
        );
        assert_eq!(
            Error::parse("b.toml", "no channels").to_string(),
            "b.toml: no channels"
        );
    }

    #[test]
    fn typed_errors_are_found_through_context() {
        use anyhow::Context;
        let r: anyhow::Result<()> =
            Err(Error::invalid("bin_s", "must be positive")).context("reading flags");
        let e = r.unwrap_err();
        assert!(matches!(
            Error::find(&e),
            Some(Error::InvalidParameter { field, .. }) if field == "bin_s"
        ));
        let wrapped = anyhow::Error::new(Error::Other(anyhow::Error::new(Error::not_found(
            "family",
            3,
            "no such family",
        ))));
        assert!(matches!(
            Error::find(&wrapped),
            Some(Error::NotFound { what: "family", .. })
        ));
    }
}
