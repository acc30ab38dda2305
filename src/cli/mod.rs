//! Command-line front end: argument parsing and the headless subcommands.
//!
//! Parsing is two-phase: clap checks the words ([`Cli`]), then each subcommand loads and
//! validates the configuration before anything opens a port. Every subcommand returns an
//! [`ExitCode`]-like number: 0 success, 1 the machine did not do it (a trip, a refusal),
//! 2 bad arguments or configuration.

use std::path::PathBuf;

use clap::{Args, Parser, Subcommand};

use crate::config::{ConfigSource, MachineConfig};
use crate::engine::PortOverride;

pub mod analyze;
pub mod check;
pub mod home_cmd;
pub mod linktest;
pub mod move_cmd;
pub mod sim_pty;
pub mod tune;

/// Exit code: done.
pub const EXIT_OK: u8 = 0;
/// Exit code: the machine could not do it (trip, refusal, link failure).
pub const EXIT_FAILED: u8 = 1;
/// Exit code: bad arguments or configuration.
pub const EXIT_USAGE: u8 = 2;

/// servotty: bring up, tune and run small DC-servo machines from a terminal.
///
/// With no subcommand it opens the cockpit on the configured machine (the built-in simulated
/// demo machine when no --config is given).
#[derive(Debug, Parser)]
#[command(name = "servotty", version, about, long_about = None)]
pub struct Cli {
    /// What to do; the cockpit when omitted.
    #[command(subcommand)]
    pub command: Option<Command>,
    /// Machine options for the cockpit when no subcommand is given.
    #[command(flatten)]
    pub machine: MachineArgs,
}

/// The subcommands.
#[derive(Debug, Subcommand)]
pub enum Command {
    /// Open the cockpit (the default).
    Cockpit(MachineArgs),
    /// Check a configuration file and print a summary of its axes.
    Check {
        /// The TOML file to check.
        file: PathBuf,
    },
    /// Serve each simulated axis of a configuration on a pseudo-terminal.
    Sim(SimArgs),
    /// Link, enable, move axes with profiles, wait until settled, disable.
    Move(MoveArgs),
    /// Link and home every axis in the configured order.
    Home(HomeArgs),
    /// Commissioning steps on one axis: direction, breakaway, identify, relay, step.
    Tune(tune::TuneArgs),
    /// Measure each link: frame rate, host turnaround, bad and missed frames, CPU share.
    Linktest(LinktestArgs),
    /// Analyse a recorded file (no machine needed), e.g. the metrics of a step test.
    Analyze(analyze::AnalyzeArgs),
}

/// Which machine to talk to.
#[derive(Debug, Args, Clone, Default)]
pub struct MachineArgs {
    /// Machine configuration (TOML); the built-in simulated demo machine when omitted.
    #[arg(long, short = 'c', value_name = "FILE")]
    pub config: Option<PathBuf>,
    /// Put AXIS on a serial device instead of its configured transport (repeatable).
    #[arg(long = "port", value_name = "AXIS=PATH")]
    pub ports: Vec<PortOverride>,
}

impl MachineArgs {
    /// Loads the configuration these arguments name.
    ///
    /// # Errors
    /// A message naming the file, line, column and key.
    pub fn load(&self) -> Result<(MachineConfig, ConfigSource), crate::config::ConfigError> {
        MachineConfig::load_or_demo(self.config.as_deref())
    }
}

/// `servotty sim`.
#[derive(Debug, Args)]
pub struct SimArgs {
    /// Machine configuration; the built-in demo when omitted.
    #[arg(long, short = 'c', value_name = "FILE")]
    pub config: Option<PathBuf>,
    /// Serve each simulated axis on a new pseudo-terminal (the only way for now).
    #[arg(long)]
    pub pty: bool,
}

/// `servotty move`.
#[derive(Debug, Args)]
pub struct MoveArgs {
    /// Which machine.
    #[command(flatten)]
    pub machine: MachineArgs,
    /// Targets in axis units: AXIS=POS, comma-separated or repeated (e.g. --to x=300,y=150).
    #[arg(long, value_name = "AXIS=POS[,AXIS=POS...]", required = true, value_delimiter = ',')]
    pub to: Vec<Target>,
    /// Home the axes (in the configured order) before moving.
    #[arg(long)]
    pub home: bool,
    /// Print one JSON object instead of a table.
    #[arg(long)]
    pub json: bool,
}

/// `servotty home`.
#[derive(Debug, Args)]
pub struct HomeArgs {
    /// Which machine.
    #[command(flatten)]
    pub machine: MachineArgs,
    /// Print one JSON object instead of a table.
    #[arg(long)]
    pub json: bool,
}

/// `servotty linktest`.
#[derive(Debug, Args)]
pub struct LinktestArgs {
    /// Which machine.
    #[command(flatten)]
    pub machine: MachineArgs,
    /// How long to measure, s.
    #[arg(long, default_value_t = 5.0, value_name = "N")]
    pub seconds: f64,
    /// Print one JSON object instead of a table.
    #[arg(long)]
    pub json: bool,
}

/// `AXIS=POS`.
#[derive(Debug, Clone, PartialEq)]
pub struct Target {
    /// Axis name.
    pub axis: String,
    /// Position in the axis's units.
    pub position: f64,
}

impl std::str::FromStr for Target {
    type Err = String;

    fn from_str(s: &str) -> Result<Self, Self::Err> {
        let (a, p) = s
            .split_once('=')
            .ok_or_else(|| format!("expected AXIS=POS (e.g. x=300), found {s:?}"))?;
        let position: f64 =
            p.trim().parse().map_err(|_| format!("{p:?} is not a number (in {s:?})"))?;
        if !position.is_finite() || a.trim().is_empty() {
            return Err(format!("expected AXIS=POS with a finite number, found {s:?}"));
        }
        Ok(Self { axis: a.trim().to_owned(), position })
    }
}

/// Loads the configuration and builds the runtime; errors are printed and become the exit
/// code (2 for configuration, 1 for the runtime).
///
/// # Errors
/// The exit code to return.
pub fn prepare(
    config: Option<&std::path::Path>,
) -> Result<(MachineConfig, ConfigSource, tokio::runtime::Runtime), u8> {
    let (cfg, source) = MachineConfig::load_or_demo(config).map_err(|e| {
        eprintln!("servotty: {e}");
        EXIT_USAGE
    })?;
    let rt = runtime().map_err(|e| {
        eprintln!("servotty: cannot start the runtime: {e}");
        EXIT_FAILED
    })?;
    Ok((cfg, source, rt))
}

/// Loads the configuration, starts the machine with its recorder on a current-thread
/// runtime, runs `body`, and always shuts the machine down (motors off). Errors before the
/// machine exists are printed and give [`EXIT_USAGE`].
pub fn with_machine<F, Fut>(args: &MachineArgs, body: F) -> u8
where
    F: FnOnce(crate::engine::MachineHandle) -> Fut,
    Fut: std::future::Future<Output = u8>,
{
    let (cfg, source, rt) = match prepare(args.config.as_deref()) {
        Ok(p) => p,
        Err(code) => return code,
    };
    rt.block_on(async {
        // Before the machine starts: a signal during link-up must not kill the process.
        let mut signals = match crate::signals::Signals::install() {
            Ok(s) => s,
            Err(e) => {
                eprintln!("servotty: cannot watch for signals: {e}");
                return EXIT_FAILED;
            }
        };
        let paths = crate::engine::recorder::RecorderPaths::resolve(&cfg, &source);
        let machine = match crate::engine::Machine::start_with(&cfg, &args.ports, Some(paths)) {
            Ok(m) => m,
            Err(e) => {
                eprintln!("servotty: {e}");
                return EXIT_USAGE;
            }
        };
        let h = machine.handle();
        let code = tokio::select! {
            c = body(h.clone()) => c,
            sig = signals.recv() => {
                eprintln!("servotty: interrupted by {}; motors off", sig.name());
                h.emit(crate::engine::events::EventKind::Interrupted {
                    signal: sig.name().to_owned(),
                });
                sig.exit_code()
            }
        };
        machine.shutdown().await;
        code
    })
}

/// A current-thread runtime: one core is plenty for the host loop of several axes (measured,
/// docs/performance.md) and it leaves the other core of a small computer to the UI and OS.
///
/// # Errors
/// When the OS refuses the runtime's resources.
pub fn runtime() -> std::io::Result<tokio::runtime::Runtime> {
    tokio::runtime::Builder::new_current_thread().enable_all().build()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn targets_parse_and_reject_nonsense() {
        let t: Target = "x=300.5".parse().expect("valid");
        assert_eq!(t, Target { axis: "x".into(), position: 300.5 });
        assert!("x".parse::<Target>().is_err());
        assert!("x=abc".parse::<Target>().is_err());
        assert!("x=inf".parse::<Target>().is_err());
        assert!("=3".parse::<Target>().is_err());
    }

    #[test]
    fn cli_is_well_formed() {
        use clap::CommandFactory;
        Cli::command().debug_assert();
    }

    #[test]
    fn move_takes_comma_separated_targets() {
        let cli =
            Cli::try_parse_from(["servotty", "move", "--to", "x=1,y=2", "--json"]).expect("parses");
        let Some(Command::Move(m)) = cli.command else { panic!("not a move") };
        assert_eq!(m.to.len(), 2);
        assert!(m.json);
    }
}
