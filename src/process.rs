//! What every front end (the cockpit, the headless commands) shares about the process: the
//! exit codes and the runtime the engine runs on.

/// Exit code: done.
pub const EXIT_OK: u8 = 0;
/// Exit code: the machine could not do it (trip, refusal, link failure).
pub const EXIT_FAILED: u8 = 1;
/// Exit code: bad arguments or configuration.
pub const EXIT_USAGE: u8 = 2;

/// A current-thread runtime: one core is plenty for the host loop of several axes (measured,
/// docs/performance.md) and it leaves the other core of a small computer to the UI and OS.
/// Its blocking pool's threads (slow work: captures, analysis, files) run at a lower
/// priority than the thread that drives the runtime, so on two cores they never take a core
/// from the axis loops.
///
/// # Errors
/// When the OS refuses the runtime's resources.
pub fn runtime() -> std::io::Result<tokio::runtime::Runtime> {
    tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .on_thread_start(crate::engine::thread::background_priority)
        .build()
}
