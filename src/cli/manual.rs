//! Shell completions and the manual page, generated from the clap definition so they never
//! drift from the real options (`servotty completions SHELL`, `servotty man`).

use clap::CommandFactory as _;

use crate::cli::{emit, Cli, Failure, EXIT_OK};

/// Prints the completion script for `shell` to stdout.
///
/// # Errors
/// [`Failure::Output`].
pub fn completions(shell: clap_complete::Shell) -> Result<u8, Failure> {
    let mut cmd = Cli::command();
    let mut out = Vec::new();
    clap_complete::generate(shell, &mut cmd, "servotty", &mut out);
    emit(&String::from_utf8_lossy(&out))?;
    Ok(EXIT_OK)
}

/// Prints the manual page (roff, section 1) to stdout.
///
/// # Errors
/// [`Failure::Output`].
pub fn man_page() -> Result<u8, Failure> {
    let mut out = Vec::new();
    clap_mangen::Man::new(Cli::command()).render(&mut out)?;
    emit(&String::from_utf8_lossy(&out))?;
    Ok(EXIT_OK)
}
