//! The `glitchbook` binary: parse → validated parameters → library call → print.
use clap::Parser;
use std::process::ExitCode;

mod cli;

fn main() -> ExitCode {
    let args = cli::Cli::parse();
    match cli::run(args) {
        Ok(code) => code,
        Err(err) => {
            // The whole anyhow cause chain on one line.
            let msg = format!("{err:#}").replace('\n', " ");
            eprintln!("glitchbook: error: {msg}");
            ExitCode::from(2)
        }
    }
}
