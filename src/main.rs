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
        Some(Command::Tune(a)) => cli::tune::run(a),
        Some(Command::Linktest(a)) => cli::linktest::run(a),
        Some(Command::Analyze(a)) => cli::analyze::run(a),
        Some(Command::Cockpit(m)) => servotty::cockpit::run(m),
        None => servotty::cockpit::run(&cli.machine),
    };
    ExitCode::from(code)
}
