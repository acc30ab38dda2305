//! Shell completions and the manual page, generated from the clap definition so they never
//! drift from the real options (`servotty completions SHELL`, `servotty man`).

use std::io::Write as _;

use clap::CommandFactory as _;

use crate::cli::{Cli, EXIT_FAILED, EXIT_OK};

/// Prints the completion script for `shell` to stdout.
pub fn completions(shell: clap_complete::Shell) -> u8 {
    let mut cmd = Cli::command();
    let mut out = std::io::stdout().lock();
    clap_complete::generate(shell, &mut cmd, "servotty", &mut out);
    finish(out.flush())
}

/// Prints the manual page (roff, section 1) to stdout.
pub fn man_page() -> u8 {
    let page = clap_mangen::Man::new(Cli::command());
    let mut out = std::io::stdout().lock();
    finish(page.render(&mut out).and_then(|()| out.flush()))
}

fn finish(r: std::io::Result<()>) -> u8 {
    match r {
        Ok(()) => EXIT_OK,
        // `servotty man | head` closing the pipe is not a failure.
        Err(e) if e.kind() == std::io::ErrorKind::BrokenPipe => EXIT_OK,
        Err(e) => {
            eprintln!("servotty: cannot write: {e}");
            EXIT_FAILED
        }
    }
}
