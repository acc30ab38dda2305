//! The trellis firmware's portable C core (`firmware/core`), compiled for the host, behind a
//! safe Rust interface, so that `cargo test` drives the same C that runs on the board against
//! servotty's own protocol code (tests/core.rs).
//!
//! Two layers: the pure wire functions (CRC, COBS, frames, payload writers), and one
//! in-memory board (`fake_board.c`) running the session. The C side keeps a single board, so
//! [`Board`] holds a lock for as long as a test uses it; tests in parallel threads then take
//! turns instead of sharing it.

use std::ffi::CString;
use std::sync::{Mutex, MutexGuard, PoisonError};

/// The only unsafe code of the crate: declarations of the C functions and one-line safe
/// wrappers. Every C function here takes plain integers or a pointer with its length, reads or
/// writes only within that length, and keeps no pointer after returning (the board name is
/// copied), which is what makes each wrapper sound.
#[allow(unsafe_code)]
mod ffi {
    use std::ffi::{c_char, c_long};

    extern "C" {
        fn trellis_crc16(bytes: *const u8, len: usize) -> u16;
        fn trellis_cobs_encode(src: *const u8, len: usize, dst: *mut u8) -> usize;
        fn trellis_cobs_decode(src: *const u8, len: usize, dst: *mut u8, cap: usize) -> c_long;
        fn trellis_frame(payload: *const u8, len: usize, out: *mut u8) -> usize;
        fn trellis_unframe(encoded: *const u8, len: usize, payload: *mut u8, cap: usize) -> c_long;
        fn fake_power_up(max_tick_hz: u16, features: u16, name: *const c_char);
        fn fake_hello_payload(out: *mut u8) -> usize;
        fn fake_telemetry_payload(
            seq: u16,
            time_us: u32,
            count: i32,
            inputs: u8,
            status: u8,
            ack_seq: u16,
            out: *mut u8,
        ) -> usize;
        fn fake_set_time(us: u32);
        fn fake_set_count(count: i32);
        fn fake_set_inputs(inputs: u8);
        fn fake_set_fault(fault: bool);
        fn fake_rx(bytes: *const u8, len: usize);
        fn fake_tick();
        fn fake_take_tx(out: *mut u8, cap: usize) -> usize;
        fn fake_motor_enabled() -> bool;
        fn fake_motor_duty() -> i16;
        fn fake_tick_hz() -> u16;
        fn fake_bad_frames() -> u16;
    }

    pub fn crc16(b: &[u8]) -> u16 {
        unsafe { trellis_crc16(b.as_ptr(), b.len()) }
    }
    /// `dst` must hold `src.len() + src.len() / 254 + 1` bytes (checked).
    pub fn cobs_encode(src: &[u8], dst: &mut [u8]) -> usize {
        assert!(dst.len() > src.len() + src.len() / 254);
        unsafe { trellis_cobs_encode(src.as_ptr(), src.len(), dst.as_mut_ptr()) }
    }
    pub fn cobs_decode(src: &[u8], dst: &mut [u8]) -> c_long {
        unsafe { trellis_cobs_decode(src.as_ptr(), src.len(), dst.as_mut_ptr(), dst.len()) }
    }
    /// `out` must hold `payload.len() + 4` bytes; payloads over 64 bytes are refused (0).
    pub fn frame(payload: &[u8], out: &mut [u8]) -> usize {
        assert!(out.len() >= payload.len() + 4);
        unsafe { trellis_frame(payload.as_ptr(), payload.len(), out.as_mut_ptr()) }
    }
    pub fn unframe(encoded: &[u8], payload: &mut [u8]) -> c_long {
        unsafe {
            trellis_unframe(encoded.as_ptr(), encoded.len(), payload.as_mut_ptr(), payload.len())
        }
    }
    /// The C side copies at most 16 bytes of the name; `out` buffers below are 64 bytes, more
    /// than the longest payload (24).
    pub fn power_up(max_tick_hz: u16, features: u16, name: &std::ffi::CStr) {
        unsafe { fake_power_up(max_tick_hz, features, name.as_ptr()) }
    }
    pub fn hello_payload(out: &mut [u8; 64]) -> usize {
        unsafe { fake_hello_payload(out.as_mut_ptr()) }
    }
    pub fn telemetry_payload(f: (u16, u32, i32, u8, u8, u16), out: &mut [u8; 64]) -> usize {
        unsafe { fake_telemetry_payload(f.0, f.1, f.2, f.3, f.4, f.5, out.as_mut_ptr()) }
    }
    pub fn set_time(us: u32) {
        unsafe { fake_set_time(us) }
    }
    pub fn set_count(c: i32) {
        unsafe { fake_set_count(c) }
    }
    pub fn set_inputs(i: u8) {
        unsafe { fake_set_inputs(i) }
    }
    pub fn set_fault(f: bool) {
        unsafe { fake_set_fault(f) }
    }
    pub fn rx(b: &[u8]) {
        unsafe { fake_rx(b.as_ptr(), b.len()) }
    }
    pub fn tick() {
        unsafe { fake_tick() }
    }
    pub fn take_tx(out: &mut [u8]) -> usize {
        unsafe { fake_take_tx(out.as_mut_ptr(), out.len()) }
    }
    pub fn motor() -> (bool, i16) {
        unsafe { (fake_motor_enabled(), fake_motor_duty()) }
    }
    pub fn tick_hz() -> u16 {
        unsafe { fake_tick_hz() }
    }
    pub fn bad_frames() -> u16 {
        unsafe { fake_bad_frames() }
    }
}

/// CRC-16/IBM-3740 of `bytes`, as the firmware computes it.
pub fn crc16(bytes: &[u8]) -> u16 {
    ffi::crc16(bytes)
}

/// COBS encoding of `src` by the firmware (no delimiter).
pub fn cobs_encode(src: &[u8]) -> Vec<u8> {
    let mut out = vec![0u8; src.len() + src.len() / 254 + 1];
    let n = ffi::cobs_encode(src, &mut out);
    out.truncate(n);
    out
}

/// COBS decoding by the firmware; `None` when it rejects the input.
pub fn cobs_decode(src: &[u8]) -> Option<Vec<u8>> {
    let mut out = vec![0u8; src.len()];
    let n = usize::try_from(ffi::cobs_decode(src, &mut out)).ok()?;
    out.truncate(n);
    Some(out)
}

/// The firmware's wire frame for `payload` (at most 64 bytes): COBS(payload ‖ CRC) ‖ 0x00.
pub fn frame(payload: &[u8]) -> Option<Vec<u8>> {
    let mut out = vec![0u8; payload.len() + 4];
    let n = ffi::frame(payload, &mut out);
    (n > 0).then(|| {
        out.truncate(n);
        out
    })
}

/// The firmware's receive checks on one frame (bytes between delimiters): the payload, or
/// `None` when COBS, length or CRC fail.
pub fn unframe(encoded: &[u8]) -> Option<Vec<u8>> {
    let mut out = vec![0u8; 64];
    let n = usize::try_from(ffi::unframe(encoded, &mut out)).ok()?;
    out.truncate(n);
    Some(out)
}

/// Telemetry fields, in wire order.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct TelemetryFields {
    /// Tick number.
    pub seq: u16,
    /// Board clock, µs.
    pub board_time_us: u32,
    /// Encoder count.
    pub count: i32,
    /// Input bits.
    pub inputs: u8,
    /// Status bits.
    pub status: u8,
    /// Last acknowledged command seq.
    pub ack_seq: u16,
}

/// The firmware's Telemetry payload for `t`.
pub fn telemetry_payload(t: TelemetryFields) -> Vec<u8> {
    let mut out = [0u8; 64];
    let n = ffi::telemetry_payload(
        (t.seq, t.board_time_us, t.count, t.inputs, t.status, t.ack_seq),
        &mut out,
    );
    out[..n].to_vec()
}

static BOARD: Mutex<()> = Mutex::new(());

/// The in-memory board running the firmware's session, freshly powered up. Only one exists at
/// a time (the value holds a lock).
pub struct Board {
    _only_one: MutexGuard<'static, ()>,
}

impl Board {
    /// Powers the board up with this identity (the name is cut at a NUL byte and at 16 bytes).
    pub fn power_up(max_tick_hz: u16, features: u16, name: &str) -> Board {
        let guard = BOARD.lock().unwrap_or_else(PoisonError::into_inner);
        let name = name.split('\0').next().unwrap_or_default();
        let name = CString::new(name).unwrap_or_default();
        ffi::power_up(max_tick_hz, features, &name);
        Board { _only_one: guard }
    }

    /// The Hello payload this board sends.
    pub fn hello_payload(&self) -> Vec<u8> {
        let mut out = [0u8; 64];
        let n = ffi::hello_payload(&mut out);
        out[..n].to_vec()
    }

    /// Sets the board clock, µs.
    pub fn set_time_us(&self, us: u32) {
        ffi::set_time(us);
    }
    /// Sets the encoder count.
    pub fn set_count(&self, count: i32) {
        ffi::set_count(count);
    }
    /// Sets the input bits (INDEX clears itself when sampled).
    pub fn set_inputs(&self, inputs: u8) {
        ffi::set_inputs(inputs);
    }
    /// Sets the driver-fault input.
    pub fn set_fault(&self, fault: bool) {
        ffi::set_fault(fault);
    }
    /// Feeds received bytes to the firmware.
    pub fn rx(&self, bytes: &[u8]) {
        ffi::rx(bytes);
    }
    /// Runs one tick.
    pub fn tick(&self) {
        ffi::tick();
    }
    /// Takes every byte the firmware has queued for the UART.
    pub fn take_tx(&self) -> Vec<u8> {
        let mut out = vec![0u8; 4096];
        let n = ffi::take_tx(&mut out);
        out.truncate(n);
        out
    }
    /// The bridge: `Some(duty)` while enabled, `None` while off.
    pub fn motor(&self) -> Option<i16> {
        let (on, duty) = ffi::motor();
        on.then_some(duty)
    }
    /// The tick rate the firmware asked the port for (0: stopped).
    pub fn tick_hz(&self) -> u16 {
        ffi::tick_hz()
    }
    /// Frames the firmware dropped.
    pub fn bad_frames(&self) -> u16 {
        ffi::bad_frames()
    }
}
