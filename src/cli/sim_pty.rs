//! `servotty sim --pty`: serve each simulated axis on a pseudo-terminal so that the engine
//! (or any other program) talks to it over a real tty device.

use crate::cli::{SimArgs, EXIT_FAILED, EXIT_OK, EXIT_USAGE};
use crate::config::TransportConfig;
use crate::sim::board::SimBoard;

/// `servotty sim`.
pub fn run(args: &SimArgs) -> u8 {
    if !args.pty {
        eprintln!("servotty: sim needs --pty (serve each simulated axis on a pseudo-terminal)");
        return EXIT_USAGE;
    }
    if let Some(p) = args.machine.ports.first() {
        eprintln!(
            "servotty: --port {}=… does not apply to sim (it serves simulated axes; give the \
             printed devices to the other command's --port)",
            p.axis
        );
        return EXIT_USAGE;
    }
    let cfg = match crate::config::MachineConfig::load_or_demo(args.machine.config.as_deref()) {
        Ok((c, _)) => c,
        Err(e) => {
            eprintln!("servotty: {e}");
            return EXIT_USAGE;
        }
    };
    // Unlike the host, the simulated boards pay a PTY read and write per tick each, which on
    // a small VM costs most of a core for eight boards: spread them over two workers so the
    // boards keep their tick (the host they test stays on one thread).
    let rt =
        match tokio::runtime::Builder::new_multi_thread().worker_threads(2).enable_all().build() {
            Ok(rt) => rt,
            Err(e) => {
                eprintln!("servotty: cannot start the runtime: {e}");
                return EXIT_FAILED;
            }
        };
    rt.block_on(async {
        let mut served = 0;
        for (i, axis) in cfg.axes.iter().enumerate() {
            let TransportConfig::Sim(sim) = &axis.transport else {
                eprintln!("servotty: axis {} is not simulated; skipped", axis.name);
                continue;
            };
            let (board_end, host_end) = match tokio_serial::SerialStream::pair() {
                Ok(p) => p,
                Err(e) => {
                    eprintln!("servotty: cannot create a pseudo-terminal: {e}");
                    return EXIT_FAILED;
                }
            };
            let Some(path) = serialport::SerialPort::name(&host_end) else {
                eprintln!("servotty: the pseudo-terminal has no name");
                return EXIT_FAILED;
            };
            // The host opens the path itself (exclusively), so our handle must go.
            drop(host_end);
            println!("{} {}", axis.name, path);
            let board = SimBoard::new(&sim.plant, &sim.faults, 0x5E12_0770 + i as u64).persistent();
            tokio::spawn(board.run(board_end));
            served += 1;
        }
        if served == 0 {
            eprintln!("servotty: no simulated axes to serve");
            return EXIT_USAGE;
        }
        // Others read these lines from a pipe to find the devices.
        use std::io::Write as _;
        let _ = std::io::stdout().flush();
        let _ = tokio::signal::ctrl_c().await;
        EXIT_OK
    })
}
