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
    let (cfg, _, rt) = match crate::cli::prepare(args.config.as_deref()) {
        Ok(p) => p,
        Err(code) => return code,
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
