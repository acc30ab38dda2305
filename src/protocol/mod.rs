//! Wire protocol v1 between the host and a motor-driver board.
//!
//! This module owns everything that crosses the wire: the message types, their byte layouts,
//! the frame format (payload + CRC, COBS-encoded, `0x00`-delimited) and a streaming decoder
//! that survives partial reads, several frames per read, garbage and corruption. It does no
//! I/O: transports feed it bytes and send what it writes. The board side (firmware, or the
//! simulator's board emulation) uses the same code with the direction reversed.
//!
//! `docs/protocol.md` is the specification a firmware author works from: layouts, the
//! handshake, the watchdog contract and a bandwidth table. Tests check that its numbers and
//! example frames match this code.
//!
//! # Layout
//! - [`message`]: the messages, their kind codes and byte layouts ([`Message`]).
//! - [`frame`]: CRC, COBS framing ([`write_frame`]) and the streaming [`FrameDecoder`].

pub mod frame;
pub mod message;

pub use frame::{
    checksum, frame_len, write_frame, FrameDecoder, BOARD_HELLO_MAX_FRAME_LEN, CONFIGURE_FRAME_LEN,
    CRC_ALGORITHM, DUTY_FRAME_LEN, HOST_HELLO_FRAME_LEN, MAX_FRAME_LEN, STOP_FRAME_LEN,
    TELEMETRY_FRAME_LEN,
};
pub use message::{
    kind, BoardMessage, Capabilities, HostMessage, Message, Telemetry, BOARD_NAME_MAX_LEN,
};

/// Version byte carried first in every payload. A receiver rejects any other value
/// ([`DecodeError::Version`]); framing, CRC and the position of this byte never change between
/// versions so that a mismatch is always recognisable as such.
pub const PROTOCOL_VERSION: u8 = 1;

/// Duty on the wire: ±10 000 = ±100.00 %. Positive duty drives the motor in the direction the
/// board calls forward. Boards clamp values beyond ±`DUTY_FULL_SCALE`; hosts never send them.
pub const DUTY_FULL_SCALE: i16 = 10_000;

/// Bits of [`Telemetry::status`]. Unlisted bits are sent as 0 and ignored by hosts.
pub mod status {
    /// The board is applying the last Duty. Clear after power-up, Stop, a watchdog trip or a
    /// driver fault, until the next valid Duty.
    pub const MOTOR_ON: u8 = 1 << 0;
    /// The watchdog fired (no valid Duty or Stop for `watchdog_ms`): the motor was switched
    /// off. Stays set until the next valid Duty.
    pub const WATCHDOG_TRIPPED: u8 = 1 << 1;
    /// The driver stage reports a fault (over-current, over-temperature, under-voltage…); the
    /// motor is off while it is set.
    pub const DRIVER_FAULT: u8 = 1 << 2;
}

/// Bits of [`Telemetry::inputs`], sampled at the same instant as the encoder count. A bit is 1
/// when the input is active, whatever the electrical polarity of the switch.
pub mod inputs {
    /// Home switch active.
    pub const HOME: u8 = 1 << 0;
    /// Limit switch at the low (negative count) end active.
    pub const LIMIT_LOW: u8 = 1 << 1;
    /// Limit switch at the high (positive count) end active.
    pub const LIMIT_HIGH: u8 = 1 << 2;
    /// The encoder index pulse was seen since the previous telemetry frame.
    pub const INDEX: u8 = 1 << 3;
}

/// Bits of [`Capabilities::features`]: what the board can report or do.
pub mod features {
    /// The board reports the encoder index pulse ([`super::inputs::INDEX`]).
    pub const INDEX_PULSE: u16 = 1 << 0;
    /// The board has a home switch input ([`super::inputs::HOME`]).
    pub const HOME_INPUT: u16 = 1 << 1;
    /// The board has limit switch inputs ([`super::inputs::LIMIT_LOW`], `LIMIT_HIGH`).
    pub const LIMIT_INPUTS: u16 = 1 << 2;
    /// Reserved for a later mode in which the board closes the loop itself. Such a board will
    /// accept the kinds in [`super::kind::BOARD_LOOP_HOST`] and send those in
    /// [`super::kind::BOARD_LOOP_BOARD`]; v1 defines no message in those ranges.
    pub const BOARD_LOOP: u16 = 1 << 15;
}

/// Why one frame was rejected. The decoder has skipped the frame; the next call continues.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum DecodeError {
    /// The bytes between two delimiters are not valid COBS (a length code points past the end).
    #[error("bad COBS encoding")]
    Cobs,
    /// The CRC does not match the payload: the frame was corrupted (or is a partial frame seen
    /// right after connecting).
    #[error("CRC mismatch")]
    Crc,
    /// The version byte is not [`PROTOCOL_VERSION`]; the value found is carried.
    #[error("unsupported protocol version {0}")]
    Version(u8),
    /// A kind code in this direction's range that v1 does not define (or a reserved one).
    #[error("unknown message kind 0x{0:02x}")]
    UnknownKind(u8),
    /// The body (bytes after version and kind) has the wrong length for its kind.
    #[error("bad length for message kind 0x{kind:02x}: {len} bytes")]
    Length {
        /// The kind code.
        kind: u8,
        /// Length of the body found, in bytes.
        len: usize,
    },
    /// More than the given number of bytes arrived without a delimiter; they were discarded.
    #[error("frame longer than {0} bytes")]
    Oversize(usize),
    /// A kind code meant for the other direction: host and board swapped, or the line echoes
    /// what the host sends.
    #[error("message kind 0x{0:02x} belongs to the other direction (echo on the line?)")]
    WrongDirection(u8),
    /// Too few bytes to hold the header (and, for a frame, the CRC); the count found is
    /// carried.
    #[error("frame too short: {0} bytes")]
    Short(usize),
}
