//! Terminal lifecycle: raw mode and the alternate screen on the way in, and the way out on
//! every path — normal exit, early `?` return (the [`Session`] guard's `Drop`) and panic
//! (a chained panic hook).
//!
//! Each restore step reports its own failure on stderr and carries on with the next: a
//! half-restored terminal is still better than one left raw. Output goes through one large
//! buffer so each frame is a single write, not one per line-buffer's worth.

use std::io::{self, BufWriter, Stdout, Write as _};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Once;

use crossterm::{cursor, execute, terminal};
use ratatui::backend::CrosstermBackend;
use ratatui::Terminal;

/// Frame output buffer: larger than a full 200×60 repaint with styles, so a frame is one write.
const OUTPUT_BUFFER: usize = 256 * 1024;

/// True while the cockpit owns the terminal (raw mode, alternate screen).
static ACTIVE: AtomicBool = AtomicBool::new(false);
/// Set by the panic hook: any thread panicked, the UI must end.
static PANICKED: AtomicBool = AtomicBool::new(false);
/// Set while the terminal reports key releases (keyboard enhancement protocol), so that
/// restore pops the flags it pushed.
static RELEASES: AtomicBool = AtomicBool::new(false);
static HOOK: Once = Once::new();

/// The terminal type the cockpit draws on.
pub type Tui = Terminal<CrosstermBackend<BufWriter<Stdout>>>;

/// Owns the terminal while the cockpit runs; dropping it restores the terminal.
pub struct Session {
    /// The ratatui terminal.
    pub terminal: Tui,
}

impl Session {
    /// Installs the panic hook, enters raw mode and the alternate screen, hides the cursor.
    ///
    /// # Errors
    /// When the terminal refuses; whatever was already changed is restored first.
    pub fn enter() -> io::Result<Self> {
        install_panic_hook();
        terminal::enable_raw_mode()?;
        ACTIVE.store(true, Ordering::SeqCst);
        let setup = (|| {
            execute!(io::stdout(), terminal::EnterAlternateScreen, cursor::Hide)?;
            // Where the terminal can say when a key is let go, a held jog stops on release
            // instead of waiting out the deadman.
            if terminal::supports_keyboard_enhancement().unwrap_or(false) {
                use crossterm::event::{KeyboardEnhancementFlags, PushKeyboardEnhancementFlags};
                execute!(
                    io::stdout(),
                    PushKeyboardEnhancementFlags(KeyboardEnhancementFlags::REPORT_EVENT_TYPES)
                )?;
                RELEASES.store(true, Ordering::SeqCst);
            }
            let backend =
                CrosstermBackend::new(BufWriter::with_capacity(OUTPUT_BUFFER, io::stdout()));
            let mut t = Terminal::new(backend)?;
            t.clear()?;
            Ok(t)
        })();
        match setup {
            Ok(terminal) => Ok(Self { terminal }),
            Err(e) => {
                restore();
                Err(e)
            }
        }
    }
}

impl Drop for Session {
    fn drop(&mut self) {
        // After a panic the screen is already restored: leftover frame bytes must not follow.
        if !panicked() {
            let _ = self.terminal.backend_mut().flush();
        }
        restore();
    }
}

/// Leaves the alternate screen, shows the cursor and ends raw mode, if the cockpit had
/// changed them. Safe to call more than once and from a panic hook; never panics.
pub fn restore() {
    if !ACTIVE.swap(false, Ordering::SeqCst) {
        return;
    }
    let mut out = io::stdout();
    if RELEASES.swap(false, Ordering::SeqCst) {
        if let Err(e) = execute!(out, crossterm::event::PopKeyboardEnhancementFlags) {
            eprintln!("servotty: could not reset the keyboard mode: {e}");
        }
    }
    if let Err(e) = execute!(out, terminal::LeaveAlternateScreen) {
        eprintln!("servotty: could not leave the alternate screen: {e}");
    }
    if let Err(e) = execute!(out, cursor::Show) {
        eprintln!("servotty: could not show the cursor: {e}");
    }
    if let Err(e) = terminal::disable_raw_mode() {
        eprintln!("servotty: could not end raw mode (try `reset`): {e}");
    }
}

/// True once any thread has panicked while the hook was installed.
pub fn panicked() -> bool {
    PANICKED.load(Ordering::SeqCst)
}

/// Restores the terminal before the previous hook prints the panic, so the message lands on
/// the normal screen where it can be read, and flags the UI to end.
fn install_panic_hook() {
    HOOK.call_once(|| {
        let previous = std::panic::take_hook();
        std::panic::set_hook(Box::new(move |info| {
            PANICKED.store(true, Ordering::SeqCst);
            restore();
            tracing::error!(target: "servotty::cockpit", "panic: {info}");
            previous(info);
        }));
    });
}
