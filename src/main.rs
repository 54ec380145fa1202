//! The `glitchbook` binary: parse → validated parameters → library call → print.
use clap::Parser;
use std::process::ExitCode;

mod cli;

fn main() -> ExitCode {
    let args = cli::Cli::parse();
    match cli::run(args) {
        Ok(code) => code,
        // The reader of our output went away (`glitchbook triggers | head`):
        // nothing is wrong and nothing more can be said; stop quietly. Any
        // write to the catalogue has committed or rolled back by now.
        Err(err) if broken_pipe(&err) => ExitCode::SUCCESS,
        Err(err) => {
            // The whole cause chain on one line, library fields named as flags.
            let msg = cli::error_message(&err);
            eprintln!("glitchbook: error: {msg}");
            ExitCode::from(2)
        }
    }
}

/// Whether `err` comes from writing to a closed pipe.
fn broken_pipe(err: &anyhow::Error) -> bool {
    err.chain().any(|e| {
        e.downcast_ref::<std::io::Error>()
            .is_some_and(|io| io.kind() == std::io::ErrorKind::BrokenPipe)
            || e.downcast_ref::<csv::Error>().is_some_and(|c| {
                matches!(c.kind(), csv::ErrorKind::Io(io) if io.kind() == std::io::ErrorKind::BrokenPipe)
            })
            || e.downcast_ref::<serde_json::Error>()
                .and_then(|j| j.io_error_kind())
                .is_some_and(|k| k == std::io::ErrorKind::BrokenPipe)
    })
}
