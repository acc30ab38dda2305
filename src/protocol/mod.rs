//! Wire protocol v1 (stub: the protocol work replaces this file).
#![allow(missing_docs)]

pub const PROTOCOL_VERSION: u8 = 1;
/// Duty on the wire: ±10 000 = ±100.00 %.
pub const DUTY_FULL_SCALE: i16 = 10_000;

pub mod status {
    pub const MOTOR_ON: u8 = 1 << 0;
    pub const WATCHDOG_TRIPPED: u8 = 1 << 1;
    pub const DRIVER_FAULT: u8 = 1 << 2;
}
pub mod inputs {
    pub const HOME: u8 = 1 << 0;
    pub const LIMIT_LOW: u8 = 1 << 1;
    pub const LIMIT_HIGH: u8 = 1 << 2;
    pub const INDEX: u8 = 1 << 3;
}
pub mod features {
    pub const INDEX_PULSE: u16 = 1 << 0;
    pub const HOME_INPUT: u16 = 1 << 1;
    pub const LIMIT_INPUTS: u16 = 1 << 2;
    /// Reserved for a later mode in which the board closes the loop itself.
    pub const BOARD_LOOP: u16 = 1 << 15;
}

#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Capabilities {
    pub protocol_version: u8,
    pub max_tick_hz: u16,
    pub features: u16,
    pub board_name: String,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Telemetry {
    pub seq: u16,
    pub board_time_us: u32,
    pub count: i32,
    pub inputs: u8,
    pub status: u8,
    pub ack_seq: u16,
}

#[derive(Debug, Clone, PartialEq, Eq)]
pub enum BoardMessage {
    Hello(Capabilities),
    Telemetry(Telemetry),
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum HostMessage {
    Hello,
    Configure { tick_hz: u16, watchdog_ms: u16 },
    Duty { seq: u16, duty: i16 },
    Stop { seq: u16 },
}

#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum DecodeError {
    #[error("bad COBS encoding")]
    Cobs,
    #[error("CRC mismatch")]
    Crc,
    #[error("unsupported protocol version {0}")]
    Version(u8),
    #[error("unknown message kind 0x{0:02x}")]
    UnknownKind(u8),
    #[error("bad length for message kind 0x{kind:02x}: {len} bytes")]
    Length { kind: u8, len: usize },
    #[error("frame longer than {0} bytes")]
    Oversize(usize),
}

pub trait Message: Sized {
    fn encode_payload(&self, out: &mut Vec<u8>);
    fn decode_payload(payload: &[u8]) -> Result<Self, DecodeError>;
}

impl Message for BoardMessage {
    fn encode_payload(&self, _out: &mut Vec<u8>) {
        todo!()
    }
    fn decode_payload(_payload: &[u8]) -> Result<Self, DecodeError> {
        todo!()
    }
}
impl Message for HostMessage {
    fn encode_payload(&self, _out: &mut Vec<u8>) {
        todo!()
    }
    fn decode_payload(_payload: &[u8]) -> Result<Self, DecodeError> {
        todo!()
    }
}

pub fn write_frame<M: Message>(_msg: &M, _out: &mut Vec<u8>) {
    todo!()
}

#[derive(Debug, Default)]
pub struct FrameDecoder {}
impl FrameDecoder {
    pub fn new() -> Self {
        Self::default()
    }
    pub fn extend(&mut self, _bytes: &[u8]) {
        todo!()
    }
    pub fn next_message<M: Message>(&mut self) -> Option<Result<M, DecodeError>> {
        todo!()
    }
    pub fn clear(&mut self) {}
}
