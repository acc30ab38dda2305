//! The servotty binary: parses arguments and dispatches; everything else is in the library.

use std::process::ExitCode;

use clap::Parser;
use servotty::cli::{self, Cli, Command};

fn main() -> ExitCode {
    let cli = Cli::parse();
    let code = match &cli.command {
        Some(Command::Check { file }) => cli::check::run(file),
        Some(Command::Sim(a)) => cli::sim_pty::run(a),
        Some(Command::Move(a)) => cli::move_cmd::run(a),
        Some(Command::Home(a)) => cli::home_cmd::run(a),
        Some(Command::Linktest(a)) => cli::linktest::run(a),
        Some(Command::Analyze(a)) => cli::analyze::run(a),
        Some(Command::Cockpit(m)) => cli_cockpit(m),
        None => cli_cockpit(&cli.machine),
    };
    ExitCode::from(code)
}

fn cli_cockpit(_m: &cli::MachineArgs) -> u8 {
    eprintln!("servotty: the cockpit is not built yet; see `servotty --help`");
    cli::EXIT_FAILED
}
