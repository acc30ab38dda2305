//! The servotty binary: parses arguments, dispatches, and is the one place that prints a
//! failure and picks the exit code (everything else is in the library).

use std::process::ExitCode;

use clap::Parser;
use servotty::cli::{self, Cli, Failure};
use servotty::process::EXIT_FAILED;

fn main() -> ExitCode {
    let cli = Cli::parse();
    let json = cli.json();
    ExitCode::from(report(cli::dispatch(&cli).map_err(anyhow::Error::from), json))
}

/// Prints a failure once, on stderr (and as a JSON object on stdout for `--json`), and
/// returns the exit code; a reader that closed the pipe gets nothing and no error code.
fn report(result: anyhow::Result<u8>, json: bool) -> u8 {
    let err = match result {
        Ok(code) => return code,
        Err(e) => e,
    };
    let failure = err.downcast_ref::<Failure>();
    if failure.is_some_and(Failure::is_quiet) {
        return failure.map_or(EXIT_FAILED, Failure::exit_code);
    }
    let code = failure.map_or(EXIT_FAILED, Failure::exit_code);
    let message = format!("{err:#}");
    eprintln!("servotty: {message}");
    if json {
        // If stdout is gone too there is nobody left to tell.
        let _ = cli::emit_json(&cli::failure_json(&message, code));
    }
    code
}
