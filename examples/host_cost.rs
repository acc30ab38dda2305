//! The host-cost bench: servotty's host against the bare host, on the same simulated boards,
//! in one sitting.
//!
//! ```sh
//! cargo run --release --example host_cost -- --axes 8 --seconds 20
//! cargo run --release --example host_cost -- --axes 16 --seconds 20 --rounds 3
//! cargo run --release --example host_cost -- --axes 8 --seconds 20 --rounds 3 --together
//! ```
//!
//! Each round runs, one after the other and each against a fresh `servotty sim --pty` serving
//! `configs/bench-N-axes.toml`: the bare host (`examples/bare_host.rs`), then
//! `servotty linktest`. Both measure themselves the same way over the same length of time
//! once every axis streams: process CPU from /proc, turnaround (read returned → reply written)
//! and missed frames with servotty's link meter. When each host is done the simulator is sent
//! SIGTERM and its per-axis report (late replies, watchdog trips, longest gap between
//! replies, its own rushed ticks and longest stall) is added. It then prints one table row per
//! host and round and the ratio servotty/bare of CPU per round. With `--together` both hosts
//! run at the same time, each on its own N boards of one simulator serving 2N: on a machine
//! shared with other work that gives the steadiest ratio, since any load weighs on both.
//!
//! Run under `cargo run`, it first brings `servotty` and `bare_host` up to date with the same
//! cargo (a no-op when they are). The figures are ratios measured side by side: other load on
//! the machine moves both; repeat rounds to see the spread. Targets (docs/performance.md):
//! servotty CPU ≤ 1.5× bare, p99 ≤ 50 µs on an otherwise idle machine, zero missed.

use std::io::{BufRead, BufReader};
use std::path::{Path, PathBuf};
use std::process::{Child, ChildStdout, Command, Stdio};

use clap::Parser;
use serde_json::Value;

/// Command line.
#[derive(Parser, Debug)]
#[command(about = "Host CPU and turnaround: servotty against a bare host, same boards")]
struct Args {
    /// Simulated axes: 8 or 16 (configs/bench-N-axes.toml).
    #[arg(long, default_value_t = 8)]
    axes: u32,
    /// Seconds each host is measured.
    #[arg(long, default_value_t = 20.0)]
    seconds: f64,
    /// Rounds (bare, then servotty, each round).
    #[arg(long, default_value_t = 2)]
    rounds: u32,
    /// Run both hosts at once, each on its own N boards of one simulator, so that whatever
    /// else the machine does weighs on both alike (the steadiest ratio on a shared machine).
    #[arg(long)]
    together: bool,
    /// Also write every host's and simulator's raw JSON here, one line each.
    #[arg(long)]
    raw: Option<PathBuf>,
}

/// One host's run.
struct Run {
    host: String,
    round: u32,
    cpu_pct: f64,
    p50: u64,
    p99: u64,
    max: u64,
    missed: u64,
    frames: u64,
    sim: SimFigures,
}

/// The simulator's closing report, summed or maximised over its axes.
#[derive(Default)]
struct SimFigures {
    late_replies: u64,
    host_replies: u64,
    watchdog_trips: u64,
    longest_reply_gap_ms: f64,
    rushed_ticks: u64,
    ticks: u64,
    longest_tick_gap_ms: f64,
    /// The simulator's CPU over its life, % of one core, and its ticks per second per axis.
    cpu_pct: f64,
    ticks_per_s: f64,
}

fn main() -> std::process::ExitCode {
    let args = Args::parse();
    match run(&args) {
        Ok(()) => std::process::ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("host_cost: {e}");
            std::process::ExitCode::FAILURE
        }
    }
}

fn run(args: &Args) -> Result<(), String> {
    if !(args.seconds.is_finite() && args.seconds > 0.0) {
        return Err(format!("--seconds must be positive, found {}", args.seconds));
    }
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let config = root.join(format!("configs/bench-{}-axes.toml", args.axes));
    if !config.exists() {
        return Err(format!("{} not found (8 and 16 axes are provided)", config.display()));
    }
    let (servotty, bare) = binaries()?;
    let mut raw = match &args.raw {
        Some(p) => Some(std::fs::File::create(p).map_err(|e| format!("{}: {e}", p.display()))?),
        None => None,
    };
    let mut runs = Vec::new();
    for round in 1..=args.rounds {
        if args.together {
            // One simulator with 2N boards; each host takes N of them, at the same time.
            let both = double_config(&config, args.axes)?;
            let sim = Sim::start(&servotty, both.path(), 2 * args.axes)?;
            let n = args.axes as usize;
            let (bare_ports, servotty_ports) = sim.ports.split_at(n);
            let renamed: Vec<(String, String)> = servotty_ports
                .iter()
                .enumerate()
                .map(|(i, (_, p))| (format!("a{}", i + 1), p.clone()))
                .collect();
            let b = host_command(&bare, &servotty, &config, "bare", bare_ports, args.seconds);
            let s = host_command(&bare, &servotty, &config, "servotty", &renamed, args.seconds);
            let (b, s) = (spawn(b, "bare")?, spawn(s, "servotty")?);
            let (b, s) = (finish(b, "bare"), finish(s, "servotty"));
            let sim_wall = sim.started.elapsed().as_secs_f64();
            let (sim_lines, sim_cpu) = sim.stop()?;
            let (bare_sim, servotty_sim) = sim_lines.split_at(n.min(sim_lines.len()));
            for (host, v, sim_part) in [("bare", b?, bare_sim), ("servotty", s?, servotty_sim)] {
                write_raw(&mut raw, round, host, &v, sim_part);
                let mut r = summarise(host, round, &v, sim_part)?;
                // One simulator served both: its CPU is for 2N boards.
                r.sim.cpu_pct = sim_cpu;
                r.sim.ticks_per_s = r.sim.ticks as f64 / f64::from(args.axes) / sim_wall;
                runs.push(r);
            }
            eprintln!("host_cost: round {round} done");
            continue;
        }
        for host in ["bare", "servotty"] {
            let sim = Sim::start(&servotty, &config, args.axes)?;
            let c = host_command(&bare, &servotty, &config, host, &sim.ports, args.seconds);
            let v = spawn(c, host).and_then(|c| finish(c, host));
            let sim_wall = sim.started.elapsed().as_secs_f64();
            let (sim_lines, sim_cpu) = sim.stop()?;
            let v = v?;
            write_raw(&mut raw, round, host, &v, &sim_lines);
            let mut r = summarise(host, round, &v, &sim_lines)?;
            r.sim.cpu_pct = sim_cpu;
            r.sim.ticks_per_s = r.sim.ticks as f64 / f64::from(args.axes) / sim_wall;
            runs.push(r);
            eprintln!("host_cost: round {round}, {host} done");
        }
    }
    print_table(args, &runs);
    Ok(())
}

/// The command line of one host on `ports` (`AXIS`, `PATH`) for `seconds`.
fn host_command(
    bare: &Path,
    servotty: &Path,
    config: &Path,
    host: &str,
    ports: &[(String, String)],
    seconds: f64,
) -> Command {
    let secs = format!("{seconds}");
    if host == "bare" {
        let mut c = Command::new(bare);
        c.args(["--seconds", &secs]);
        c.args(ports.iter().map(|(a, p)| format!("{a}={p}")));
        return c;
    }
    let mut c = Command::new(servotty);
    c.arg("linktest").arg("--config").arg(config);
    c.args(["--seconds", &secs, "--json"]);
    for (a, p) in ports {
        c.args(["--port", &format!("{a}={p}")]);
    }
    // Keep servotty's state files (logs) out of the user's directories.
    c.env("XDG_STATE_HOME", std::env::temp_dir());
    c
}

fn spawn(mut c: Command, host: &str) -> Result<Child, String> {
    c.stdout(Stdio::piped()).stderr(Stdio::piped()).spawn().map_err(|e| format!("{host}: {e}"))
}

/// Waits for a host and parses the JSON it printed.
fn finish(c: Child, host: &str) -> Result<Value, String> {
    let out = c.wait_with_output().map_err(|e| format!("{host}: {e}"))?;
    if !out.status.success() {
        return Err(format!("{host}: {}", String::from_utf8_lossy(&out.stderr).trim()));
    }
    let text = String::from_utf8_lossy(&out.stdout);
    serde_json::from_str(text.trim()).map_err(|e| format!("{host} printed no JSON ({e}): {text}"))
}

fn write_raw(raw: &mut Option<std::fs::File>, round: u32, host: &str, v: &Value, sim: &[Value]) {
    if let Some(f) = raw {
        use std::io::Write as _;
        let line = serde_json::json!({"round": round, "host": host, "result": v, "sim": sim});
        let _ = writeln!(f, "{line}");
    }
}

/// The bench configuration with every axis twice (`aK` then `bK`), in a temporary file.
fn double_config(config: &Path, axes: u32) -> Result<tempfile::NamedTempFile, String> {
    let text = std::fs::read_to_string(config).map_err(|e| format!("{}: {e}", config.display()))?;
    let mut cfg = servotty::config::MachineConfig::from_toml_str(&text, "bench")
        .map_err(|e| e.to_string())?;
    let mut twins = cfg.axes.clone();
    for (i, a) in twins.iter_mut().enumerate() {
        a.name = format!("b{}", i + 1);
    }
    cfg.axes.extend(twins);
    debug_assert_eq!(cfg.axes.len(), 2 * axes as usize);
    let out = tempfile::Builder::new().suffix(".toml").tempfile().map_err(|e| e.to_string())?;
    let body = toml::to_string(&cfg).map_err(|e| e.to_string())?;
    std::fs::write(out.path(), body).map_err(|e| e.to_string())?;
    Ok(out)
}

/// Paths of the servotty binary and the bare host, built first when run under cargo.
fn binaries() -> Result<(PathBuf, PathBuf), String> {
    let me = std::env::current_exe().map_err(|e| e.to_string())?;
    let examples = me.parent().ok_or("no directory for this program")?.to_path_buf();
    let profile_dir = examples.parent().ok_or("no profile directory")?.to_path_buf();
    if let Ok(cargo) = std::env::var("CARGO") {
        let release = profile_dir.file_name().is_some_and(|n| n == "release");
        let mut c = Command::new(cargo);
        c.args(["build", "--quiet", "--bin", "servotty", "--example", "bare_host"]);
        c.current_dir(env!("CARGO_MANIFEST_DIR"));
        if release {
            c.arg("--release");
        }
        let ok = c.status().map_err(|e| format!("cargo build: {e}"))?.success();
        if !ok {
            return Err("cargo build of servotty and bare_host failed".to_owned());
        }
    }
    let servotty = profile_dir.join("servotty");
    let bare = examples.join("bare_host");
    for p in [&servotty, &bare] {
        if !p.exists() {
            return Err(format!(
                "{} not found: build with `cargo build --release --bin servotty --example bare_host`",
                p.display()
            ));
        }
    }
    Ok((servotty, bare))
}

/// A running `servotty sim --pty`.
struct Sim {
    child: Child,
    lines: std::io::Lines<BufReader<ChildStdout>>,
    ports: Vec<(String, String)>,
    started: std::time::Instant,
}

impl Sim {
    fn start(servotty: &Path, config: &Path, axes: u32) -> Result<Self, String> {
        let mut child = Command::new(servotty)
            .arg("sim")
            .arg("--pty")
            .arg("--config")
            .arg(config)
            .stdout(Stdio::piped())
            .stderr(Stdio::inherit())
            .spawn()
            .map_err(|e| format!("sim: {e}"))?;
        let stdout = child.stdout.take().ok_or("sim: no stdout")?;
        let mut sim = Self {
            child,
            lines: BufReader::new(stdout).lines(),
            ports: Vec::new(),
            started: std::time::Instant::now(),
        };
        for _ in 0..axes {
            let line = match sim.lines.next() {
                Some(Ok(l)) => l,
                _ => return Err("sim ended before printing its devices".to_owned()),
            };
            let (a, p) = line.split_once(' ').ok_or_else(|| format!("sim printed {line:?}"))?;
            sim.ports.push((a.to_owned(), p.to_owned()));
        }
        Ok(sim)
    }

    /// SIGTERM, then its closing report, one JSON value per axis, and its CPU use over its
    /// life (% of one core).
    fn stop(mut self) -> Result<(Vec<Value>, f64), String> {
        let pid = self.child.id().to_string();
        let cpu_pct = match (cpu_seconds(self.child.id()), self.started.elapsed().as_secs_f64()) {
            (Some(c), wall) if wall > 0.0 => 100.0 * c / wall,
            _ => 0.0,
        };
        let sent = Command::new("kill").args(["-TERM", &pid]).status();
        if !sent.is_ok_and(|s| s.success()) {
            let _ = self.child.kill();
            return Err("could not signal the simulator".to_owned());
        }
        let mut out = Vec::new();
        for line in self.lines.by_ref() {
            let line = line.map_err(|e| e.to_string())?;
            out.push(serde_json::from_str(&line).map_err(|e| format!("sim report: {e}"))?);
        }
        let _ = self.child.wait();
        Ok((out, cpu_pct))
    }
}

/// User plus system CPU time of process `pid`, s (proc(5): fields 14 and 15, USER_HZ 100).
fn cpu_seconds(pid: u32) -> Option<f64> {
    let stat = std::fs::read_to_string(format!("/proc/{pid}/stat")).ok()?;
    let rest = &stat[stat.rfind(')')? + 2..];
    let f: Vec<&str> = rest.split_whitespace().collect();
    Some((f.get(11)?.parse::<f64>().ok()? + f.get(12)?.parse::<f64>().ok()?) / 100.0)
}

fn summarise(host: &str, round: u32, v: &Value, sim: &[Value]) -> Result<Run, String> {
    let axes = v["axes"].as_array().ok_or("no axes in the host's result")?;
    let u = |a: &Value, k: &str| a[k].as_u64().unwrap_or(0);
    let t = |a: &Value, k: &str| a["turnaround_us"][k].as_u64().unwrap_or(0);
    let f = |a: &Value, k: &str| a[k].as_f64().unwrap_or(0.0);
    let mut s = SimFigures::default();
    for a in sim {
        s.late_replies += u(a, "late_replies");
        s.host_replies += u(a, "host_replies");
        s.watchdog_trips += u(a, "watchdog_trips");
        s.rushed_ticks += u(a, "rushed_ticks");
        s.ticks += u(a, "ticks");
        s.longest_reply_gap_ms = s.longest_reply_gap_ms.max(f(a, "longest_reply_gap_ms"));
        s.longest_tick_gap_ms = s.longest_tick_gap_ms.max(f(a, "longest_tick_gap_ms"));
    }
    Ok(Run {
        host: host.to_owned(),
        round,
        cpu_pct: v["cpu_pct"].as_f64().unwrap_or(0.0),
        // Per-axis medians are alike; the worst axis's p99 and max are what a loop sees.
        p50: axes.iter().map(|a| t(a, "p50")).max().unwrap_or(0),
        p99: axes.iter().map(|a| t(a, "p99")).max().unwrap_or(0),
        max: axes.iter().map(|a| t(a, "max")).max().unwrap_or(0),
        missed: axes.iter().map(|a| u(a, "missed")).sum(),
        frames: axes.iter().map(|a| u(a, "frames")).sum(),
        sim: s,
    })
}

fn print_table(args: &Args, runs: &[Run]) {
    println!(
        "{} axes at 1 kHz, {} s per host; turnaround µs (worst axis); sim: its whole run \
         (late replies, watchdog trips, longest reply gap, rushed ticks, longest stall ms, CPU, \
         ticks/s per axis)",
        args.axes, args.seconds
    );
    println!(
        "{:<5} {:<8} {:>6} {:>5} {:>5} {:>6} {:>6} {:>8} | {:>7} {:>5} {:>7} {:>7} {:>7} {:>7} {:>7}",
        "round",
        "host",
        "cpu %",
        "p50",
        "p99",
        "max",
        "missed",
        "frames/s",
        "late %",
        "wdog",
        "gap ms",
        "rush %",
        "stall",
        "cpu %",
        "ticks/s"
    );
    for r in runs {
        let pct = |n: u64, d: u64| if d == 0 { 0.0 } else { 100.0 * n as f64 / d as f64 };
        println!(
            "{:<5} {:<8} {:>6.2} {:>5} {:>5} {:>6} {:>6} {:>8.0} | {:>7.2} {:>5} {:>7.1} {:>7.1} {:>7.1} {:>7.1} {:>7.1}",
            r.round,
            r.host,
            r.cpu_pct,
            r.p50,
            r.p99,
            r.max,
            r.missed,
            r.frames as f64 / args.seconds,
            pct(r.sim.late_replies, r.sim.host_replies),
            r.sim.watchdog_trips,
            r.sim.longest_reply_gap_ms,
            pct(r.sim.rushed_ticks, r.sim.ticks),
            r.sim.longest_tick_gap_ms,
            r.sim.cpu_pct,
            r.sim.ticks_per_s,
        );
    }
    let ratios: Vec<String> = (1..=args.rounds)
        .filter_map(|round| {
            let cpu = |h: &str| runs.iter().find(|r| r.round == round && r.host == h);
            match (cpu("servotty"), cpu("bare")) {
                (Some(s), Some(b)) if b.cpu_pct > 0.0 => {
                    Some(format!("{:.2}", s.cpu_pct / b.cpu_pct))
                }
                _ => None,
            }
        })
        .collect();
    println!("cpu servotty/bare per round: {}", ratios.join(", "));
}
