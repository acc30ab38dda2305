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
pub mod ask;
pub mod check;
pub mod home_cmd;
pub mod json_round;
pub mod linktest;
pub mod manual;
pub mod move_cmd;
pub mod progress;
pub mod run;
pub mod sim_pty;
pub mod tune;

pub use crate::process::{
    emit, emit_json, failure_json, runtime, Failure, EXIT_FAILED, EXIT_OK, EXIT_USAGE,
};

/// servotty: bring up, tune and run small DC-servo machines from a terminal.
///
/// With no subcommand it opens the cockpit on the configured machine (the built-in simulated
/// demo machine when no --config is given). --config and --port may stand before or after
/// the subcommand.
///
/// The software stop-all is not a safety function: wire a hardware emergency stop that
/// removes motor power.
#[derive(Debug, Parser)]
#[command(
    name = "servotty",
    version,
    about,
    // Wrapped to the terminal, at most 80 columns (also when piped): help is read on small
    // screens and over SSH.
    max_term_width = 80,
    after_help = "Examples:\n  \
    servotty                            cockpit on the simulated demo gantry\n  \
    servotty -c gantry.toml check       check a configuration\n  \
    servotty -c gantry.toml home        home every axis in the configured order\n  \
    servotty -c gantry.toml --port x=/dev/serial/by-id/usb-X move --to x=300\n\n\
    Shell completions and the manual page: servotty completions SHELL, servotty man\n\
    (see README.md)."
)]
pub struct Cli {
    /// What to do; the cockpit when omitted.
    #[command(subcommand)]
    pub command: Option<Command>,
    /// Which machine (for the cockpit, and handed down to the subcommand).
    #[command(flatten)]
    pub machine: MachineArgs,
}

/// The subcommands.
#[derive(Debug, Subcommand)]
pub enum Command {
    /// Open the cockpit (the default).
    #[command(after_help = "Example:\n  servotty cockpit -c gantry.toml")]
    Cockpit(MachineArgs),
    /// Check a configuration file and print a summary of its axes.
    #[command(
        after_help = "Examples:\n  servotty check gantry.toml\n  servotty -c gantry.toml check"
    )]
    Check {
        /// The TOML file to check (or give it with --config).
        file: Option<PathBuf>,
        /// Which machine (only --config applies).
        #[command(flatten)]
        machine: MachineArgs,
    },
    /// Serve each simulated axis of a configuration on a pseudo-terminal.
    #[command(after_help = "Example:\n  servotty sim --pty -c gantry.toml > ptys.txt")]
    Sim(SimArgs),
    /// Link, enable, move axes with profiles, wait until settled, disable.
    #[command(after_help = "Examples:\n  servotty move --to x=300,y=150\n  \
        servotty -c gantry.toml move --home --to z=20 --json")]
    Move(MoveArgs),
    /// Carry out a move list: moves, dwells and waits, step by step (or check it: --dry-run).
    #[command(
        after_help = "Examples:\n  servotty run configs/tray-inspection-list.toml --home --dry-run\n  \
        servotty -c gantry.toml run trays.toml --home --from 4 --json"
    )]
    Run(run::RunArgs),
    /// Link and home every axis in the configured order.
    #[command(after_help = "Example:\n  servotty -c gantry.toml home")]
    Home(HomeArgs),
    /// Tune one axis: direction, breakaway, identify, relay, step, or all of them in turn.
    #[command(after_help = "Examples:\n  servotty tune direction x --travel 10\n  \
        servotty -c gantry.toml tune identify z --apply --save")]
    Tune(tune::TuneArgs),
    /// Measure each link: frame rate, host turnaround, bad and missed frames, CPU share.
    #[command(after_help = "Example:\n  servotty -c gantry.toml linktest --seconds 10")]
    Linktest(LinktestArgs),
    /// Analyse a recorded file (no machine needed), e.g. the metrics of a step trial.
    #[command(after_help = "Example:\n  servotty analyze step x-step.csv --band 2")]
    Analyze(analyze::AnalyzeArgs),
    /// Print a shell completion script to stdout (bash, zsh, fish, elvish, powershell).
    #[command(
        hide = true,
        after_help = "Example:\n  \
        servotty completions bash > ~/.local/share/bash-completion/completions/servotty"
    )]
    Completions {
        /// The shell.
        #[arg(value_enum)]
        shell: clap_complete::Shell,
    },
    /// Print the manual page (roff) to stdout.
    #[command(
        hide = true,
        after_help = "Example:\n  \
        servotty man > ~/.local/share/man/man1/servotty.1"
    )]
    Man,
}

/// Which machine to talk to.
#[derive(Debug, Args, Clone, Default)]
pub struct MachineArgs {
    /// Machine configuration (TOML); the built-in simulated demo machine when omitted.
    // Global: accepted before or after the subcommand; clap hands a value given before the
    // subcommand down to it, so every command sees the same machine.
    #[arg(long, short = 'c', value_name = "FILE", global = true)]
    pub config: Option<PathBuf>,
    /// Put AXIS on a serial device instead of its configured transport (repeatable).
    #[arg(long = "port", value_name = "AXIS=PATH", global = true)]
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
    /// Which machine (only --config applies).
    #[command(flatten)]
    pub machine: MachineArgs,
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
    /// Targets in axis units: AXIS=POS, or @SPOT for a named position of the configuration's
    /// [spots] table; comma-separated or repeated (e.g. --to x=300,y=150 or --to @tray3).
    #[arg(long, value_name = "AXIS=POS|@SPOT[,...]", required = true, value_delimiter = ',')]
    pub to: Vec<move_cmd::Destination>,
    /// Home the axes (in the configured order) before moving.
    #[arg(long)]
    pub home: bool,
    /// Confirm that the axes may move (asked on a terminal; required without one).
    #[arg(long)]
    pub yes: bool,
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
    /// Confirm that the axes may move (asked on a terminal; required without one).
    #[arg(long)]
    pub yes: bool,
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
    // Negative numbers reach the range check, which says what is allowed, instead of clap's
    // "unexpected argument '-1'".
    #[arg(long, default_value_t = 5.0, value_name = "N", allow_negative_numbers = true)]
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

/// Runs what the command line asks for; returns the exit code, or the failure for the
/// binary to print (once) and turn into the exit code.
///
/// # Errors
/// [`Failure`].
pub fn dispatch(cli: &Cli) -> Result<u8, Failure> {
    match &cli.command {
        Some(Command::Check { file, machine }) => {
            refuse_ports("check", machine)?;
            match (file, &machine.config) {
                (Some(f), Some(c)) if f != c => Err(Failure::Usage(format!(
                    "check: two files given ({} and --config {}); give one",
                    f.display(),
                    c.display()
                ))),
                (Some(f), _) | (None, Some(f)) => check::run(f),
                (None, None) => {
                    Err(Failure::Usage("check needs a file: servotty check FILE".to_owned()))
                }
            }
        }
        Some(Command::Sim(a)) => sim_pty::run(a),
        Some(Command::Move(a)) => move_cmd::run(a),
        Some(Command::Run(a)) => run::run(a),
        Some(Command::Home(a)) => home_cmd::run(a),
        Some(Command::Tune(a)) => tune::run(a),
        Some(Command::Linktest(a)) => linktest::run(a),
        Some(Command::Analyze(a)) => {
            refuse_machine("analyze", &cli.machine)?;
            analyze::run(a)
        }
        Some(Command::Completions { shell }) => {
            refuse_machine("completions", &cli.machine)?;
            manual::completions(*shell)
        }
        Some(Command::Man) => {
            refuse_machine("man", &cli.machine)?;
            manual::man_page()
        }
        Some(Command::Cockpit(m)) => crate::cockpit::run(m.config.as_deref(), &m.ports),
        None => crate::cockpit::run(cli.machine.config.as_deref(), &cli.machine.ports),
    }
}

impl Cli {
    /// Whether the command asked for JSON, so that a failure is a JSON object too.
    pub fn json(&self) -> bool {
        match &self.command {
            Some(Command::Move(a)) => a.json,
            Some(Command::Run(a)) => a.json,
            Some(Command::Home(a)) => a.json,
            Some(Command::Linktest(a)) => a.json,
            Some(Command::Tune(a)) => a.json,
            Some(Command::Analyze(a)) => a.json(),
            _ => false,
        }
    }
}

/// Refuses `--port` for a command that opens no machine.
fn refuse_ports(what: &str, m: &MachineArgs) -> Result<(), Failure> {
    match m.ports.first() {
        Some(p) => Err(Failure::Usage(format!(
            "--port {}=… does not apply to {what} (it opens no machine)",
            p.axis
        ))),
        None => Ok(()),
    }
}

/// Refuses `--config` and `--port` for a command that reads no machine configuration.
fn refuse_machine(what: &str, m: &MachineArgs) -> Result<(), Failure> {
    if let Some(c) = &m.config {
        return Err(Failure::Usage(format!(
            "--config {} does not apply to {what} (it reads no machine configuration)",
            c.display()
        )));
    }
    refuse_ports(what, m)
}

/// Warns (stderr) about old key names the configuration still uses.
pub fn warn_renamed(cfg: &MachineConfig) {
    for w in &cfg.renamed_keys {
        eprintln!("servotty: warning: {w}");
    }
}

/// Loads the configuration and builds the runtime.
///
/// # Errors
/// [`Failure::Config`], or [`Failure::Machine`] when the OS refuses the runtime.
pub fn prepare(
    config: Option<&std::path::Path>,
) -> Result<(MachineConfig, ConfigSource, tokio::runtime::Runtime), Failure> {
    let (cfg, source) = MachineConfig::load_or_demo(config)?;
    warn_renamed(&cfg);
    let rt = runtime().map_err(|e| Failure::Machine(format!("cannot start the runtime: {e}")))?;
    Ok((cfg, source, rt))
}

/// Loads the configuration, starts the machine with its recorder on the engine's own thread
/// ([`crate::engine::EngineThread`]), runs `body` on this thread's runtime (so whatever the
/// command does — waiting, analysis, printing, files — never holds up an axis loop), and
/// always shuts the machine down (motors off). An axis task that ended while the machine
/// ran, or one that did not stop at shutdown, is a failure.
///
/// # Errors
/// [`Failure`] from loading, starting, `body`, or the shutdown report.
pub fn with_machine<F, Fut>(args: &MachineArgs, body: F) -> Result<u8, Failure>
where
    F: FnOnce(crate::engine::MachineHandle) -> Fut,
    Fut: std::future::Future<Output = Result<u8, Failure>>,
{
    use crate::engine::{EngineStartError, EngineThread};
    let (cfg, source, rt) = prepare(args.config.as_deref())?;
    // Before the machine starts: a signal during link-up must not kill the process.
    let mut signals = rt
        .block_on(async { crate::signals::Signals::install() })
        .map_err(|e| Failure::Machine(format!("cannot watch for signals: {e}")))?;
    let paths = crate::engine::recorder::RecorderPaths::resolve(&cfg, &source);
    let engine =
        EngineThread::start(cfg, args.ports.clone(), Some(paths)).map_err(|e| match e {
            EngineStartError::Start(s) => Failure::Start(s),
            e @ EngineStartError::Os(_) => Failure::Machine(e.to_string()),
        })?;
    let h = engine.handle().clone();
    let result = rt.block_on(async {
        tokio::select! {
            r = body(h.clone()) => r,
            sig = signals.recv() => {
                h.emit(crate::engine::events::EventKind::Interrupted {
                    signal: sig.name().to_owned(),
                });
                Err(Failure::Interrupted(sig))
            }
        }
    });
    let report = engine.shutdown();
    if report.is_clean() {
        return result;
    }
    match result {
        Ok(_) => Err(Failure::Machine(report.to_string())),
        Err(e) => {
            // The command's own failure is the one reported; this is what shutdown found.
            eprintln!("servotty: {report}");
            Err(e)
        }
    }
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
    fn machine_options_reach_the_subcommand_from_either_side() {
        for args in [
            &["servotty", "-c", "m.toml", "--port", "x=/dev/a", "home"][..],
            &["servotty", "home", "-c", "m.toml", "--port", "x=/dev/a"][..],
        ] {
            let cli = Cli::try_parse_from(args).expect("parses");
            let Some(Command::Home(h)) = cli.command else { panic!("not home") };
            assert_eq!(
                h.machine.config.as_deref(),
                Some(std::path::Path::new("m.toml")),
                "{args:?}"
            );
            assert_eq!(h.machine.ports.len(), 1, "{args:?}");
        }
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
