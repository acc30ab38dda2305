//! The servotty binary: parses arguments and dispatches; every failure goes through the one
//! printer, [`servotty::process::report`], which also picks the exit code (everything else is
//! in the library).

use std::process::ExitCode;

use clap::Parser;
use servotty::cli::{self, Cli};
use servotty::process;

fn main() -> ExitCode {
    let cli = Cli::parse();
    let json = cli.json();
    ExitCode::from(process::report(cli::dispatch(&cli).map_err(anyhow::Error::from), json))
}
