//! The servotty binary: parses arguments and dispatches; everything else is in the library.

use std::process::ExitCode;

use clap::Parser;
use servotty::cli::{self, Cli};

fn main() -> ExitCode {
    ExitCode::from(cli::dispatch(&Cli::parse()))
}
