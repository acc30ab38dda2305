//! Message types, kind codes and their byte layouts (the payload inside a frame).
//!
//! A payload is `[version u8][kind u8][body…]`; every multi-byte integer is little-endian.
//! Kind codes carry the direction in their top bit (0 = host → board, 1 = board → host), so a
//! frame travelling the wrong way is reported as [`DecodeError::WrongDirection`] rather than
//! misread. Body lengths are exact: a v1 receiver rejects a body of any other length.

use super::{DecodeError, PROTOCOL_VERSION};

/// Longest board name carried on the wire, in bytes of UTF-8.
pub const BOARD_NAME_MAX_LEN: usize = 16;

/// Kind codes (second payload byte).
pub mod kind {
    use std::ops::RangeInclusive;

    /// Set in every board → host kind, clear in every host → board kind.
    pub const BOARD_TO_HOST: u8 = 0x80;

    /// Host → board: ask for the board's capabilities; stops streaming, motor off.
    pub const HOST_HELLO: u8 = 0x01;
    /// Host → board: set tick rate and watchdog timeout, start streaming telemetry.
    pub const CONFIGURE: u8 = 0x02;
    /// Host → board: apply a duty.
    pub const DUTY: u8 = 0x03;
    /// Host → board: motor off at once.
    pub const STOP: u8 = 0x04;

    /// Board → host: capabilities, the answer to a host Hello.
    pub const BOARD_HELLO: u8 = 0x81;
    /// Board → host: one tick's sample.
    pub const TELEMETRY: u8 = 0x82;

    /// Host → board kinds reserved for a later board-side loop mode
    /// ([`super::super::features::BOARD_LOOP`]).
    pub const BOARD_LOOP_HOST: RangeInclusive<u8> = 0x40..=0x4f;
    /// Board → host kinds reserved for a later board-side loop mode.
    pub const BOARD_LOOP_BOARD: RangeInclusive<u8> = 0xc0..=0xcf;
    /// Host → board kinds never assigned by this protocol: free for local experiments.
    pub const LOCAL_HOST: RangeInclusive<u8> = 0x70..=0x7f;
    /// Board → host kinds never assigned by this protocol: free for local experiments.
    pub const LOCAL_BOARD: RangeInclusive<u8> = 0xf0..=0xff;
}

/// Body length of each message, in bytes (after version and kind).
const HOST_HELLO_BODY: usize = 0;
const CONFIGURE_BODY: usize = 4;
const DUTY_BODY: usize = 4;
const STOP_BODY: usize = 2;
const TELEMETRY_BODY: usize = 14;
/// Board Hello without its name bytes: protocol_version, max_tick_hz, features, name_len.
const BOARD_HELLO_FIXED_BODY: usize = 6;

/// Payload lengths (version + kind + body), used by the frame-length constants.
pub(crate) const HOST_HELLO_PAYLOAD: usize = 2 + HOST_HELLO_BODY;
pub(crate) const CONFIGURE_PAYLOAD: usize = 2 + CONFIGURE_BODY;
pub(crate) const DUTY_PAYLOAD: usize = 2 + DUTY_BODY;
pub(crate) const STOP_PAYLOAD: usize = 2 + STOP_BODY;
pub(crate) const TELEMETRY_PAYLOAD: usize = 2 + TELEMETRY_BODY;
pub(crate) const BOARD_HELLO_MAX_PAYLOAD: usize = 2 + BOARD_HELLO_FIXED_BODY + BOARD_NAME_MAX_LEN;

/// What a board announces in its Hello.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Capabilities {
    /// Newest protocol version the board implements. The frame header carries the version the
    /// board speaks in this session (the host's); a board that also knows a newer one says so
    /// here.
    pub protocol_version: u8,
    /// Fastest tick the board can run, in Hz (the most it accepts in Configure).
    pub max_tick_hz: u16,
    /// Bits from [`super::features`].
    pub features: u16,
    /// Free-form name for the operator, at most [`BOARD_NAME_MAX_LEN`] bytes of UTF-8 on the
    /// wire: a longer name is cut at the last character boundary that fits when encoding.
    /// Invalid UTF-8 received is shown with replacement characters rather than rejected,
    /// because the name is only for display.
    pub board_name: String,
}

/// One tick's sample, sent by the board every tick while streaming.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Telemetry {
    /// Increments by one every tick (wrapping); a gap tells the host frames were lost.
    pub seq: u16,
    /// Board clock at the sampling instant, µs, wrapping (about every 71.6 min). The host takes
    /// dt from wrapping differences of this, never from its own clock.
    pub board_time_us: u32,
    /// Encoder count, wrapping: the host unwraps it with wrapping differences.
    pub count: i32,
    /// Bits from [`super::inputs`].
    pub inputs: u8,
    /// Bits from [`super::status`].
    pub status: u8,
    /// `seq` of the last valid Duty or Stop the board received (0 until the first one).
    pub ack_seq: u16,
}

/// Messages from board to host.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum BoardMessage {
    /// Answer to a host Hello.
    Hello(Capabilities),
    /// Sent every tick while streaming.
    Telemetry(Telemetry),
}

/// Messages from host to board.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum HostMessage {
    /// Ask for capabilities. The board stops streaming, switches the motor off and answers
    /// with [`BoardMessage::Hello`].
    Hello,
    /// Start (or restart) streaming: motor off, telemetry every `1/tick_hz` s, watchdog armed
    /// with `watchdog_ms`. Ignored by the board if `tick_hz` is 0 or above its `max_tick_hz`,
    /// or if `watchdog_ms` is 0.
    Configure {
        /// Tick rate in Hz.
        tick_hz: u16,
        /// Watchdog timeout in ms.
        watchdog_ms: u16,
    },
    /// Apply `duty` (±[`super::DUTY_FULL_SCALE`]) at once and restart the watchdog.
    Duty {
        /// Echoed in [`Telemetry::ack_seq`]; servotty sends the seq of the telemetry frame it
        /// answers.
        seq: u16,
        /// Signed duty, ±10 000 = ±100.00 %.
        duty: i16,
    },
    /// Motor off at once (it stays off until the next Duty); restarts the watchdog.
    Stop {
        /// Echoed in [`Telemetry::ack_seq`].
        seq: u16,
    },
}

/// A message that can be carried in a frame.
pub trait Message: Sized {
    /// Appends the payload (version, kind, body) to `out`, leaving earlier bytes alone.
    fn encode_payload(&self, out: &mut Vec<u8>);
    /// Parses a payload (version, kind, body; CRC already checked and removed).
    ///
    /// # Errors
    /// [`DecodeError::Version`], [`DecodeError::WrongDirection`], [`DecodeError::UnknownKind`],
    /// [`DecodeError::Length`] or [`DecodeError::Short`] when the payload is not a valid v1
    /// message for this direction.
    fn decode_payload(payload: &[u8]) -> Result<Self, DecodeError>;
}

/// Splits a payload into kind and body after checking version and direction.
fn header(payload: &[u8], board_to_host: bool) -> Result<(u8, &[u8]), DecodeError> {
    let [version, kind, body @ ..] = payload else {
        return Err(DecodeError::Short(payload.len()));
    };
    if *version != PROTOCOL_VERSION {
        return Err(DecodeError::Version(*version));
    }
    let kind = *kind;
    if kind & kind::BOARD_TO_HOST != 0 && !board_to_host
        || kind & kind::BOARD_TO_HOST == 0 && board_to_host && kind != 0
    {
        return Err(DecodeError::WrongDirection(kind));
    }
    Ok((kind, body))
}

/// The body as a fixed-size array, so that field offsets below cannot go out of bounds.
fn exact<const N: usize>(kind: u8, body: &[u8]) -> Result<&[u8; N], DecodeError> {
    body.try_into().map_err(|_| DecodeError::Length { kind, len: body.len() })
}

fn le16(b: [u8; 2]) -> u16 {
    u16::from_le_bytes(b)
}

/// The longest prefix of `name` that fits the wire limit without splitting a character.
fn wire_name(name: &str) -> &str {
    let mut end = name.len().min(BOARD_NAME_MAX_LEN);
    while !name.is_char_boundary(end) {
        end -= 1;
    }
    &name[..end]
}

impl Message for BoardMessage {
    fn encode_payload(&self, out: &mut Vec<u8>) {
        match self {
            BoardMessage::Hello(caps) => {
                let name = wire_name(&caps.board_name);
                out.extend_from_slice(&[
                    PROTOCOL_VERSION,
                    kind::BOARD_HELLO,
                    caps.protocol_version,
                ]);
                out.extend_from_slice(&caps.max_tick_hz.to_le_bytes());
                out.extend_from_slice(&caps.features.to_le_bytes());
                // wire_name caps the length at 16, so the cast cannot truncate.
                out.push(name.len() as u8);
                out.extend_from_slice(name.as_bytes());
            }
            BoardMessage::Telemetry(t) => {
                out.extend_from_slice(&[PROTOCOL_VERSION, kind::TELEMETRY]);
                out.extend_from_slice(&t.seq.to_le_bytes());
                out.extend_from_slice(&t.board_time_us.to_le_bytes());
                out.extend_from_slice(&t.count.to_le_bytes());
                out.extend_from_slice(&[t.inputs, t.status]);
                out.extend_from_slice(&t.ack_seq.to_le_bytes());
            }
        }
    }

    fn decode_payload(payload: &[u8]) -> Result<Self, DecodeError> {
        let (kind, body) = header(payload, true)?;
        match kind {
            kind::TELEMETRY => {
                let b = exact::<TELEMETRY_BODY>(kind, body)?;
                Ok(BoardMessage::Telemetry(Telemetry {
                    seq: le16([b[0], b[1]]),
                    board_time_us: u32::from_le_bytes([b[2], b[3], b[4], b[5]]),
                    count: i32::from_le_bytes([b[6], b[7], b[8], b[9]]),
                    inputs: b[10],
                    status: b[11],
                    ack_seq: le16([b[12], b[13]]),
                }))
            }
            kind::BOARD_HELLO => {
                let bad_len = DecodeError::Length { kind, len: body.len() };
                let (fixed, name) = body.split_at_checked(BOARD_HELLO_FIXED_BODY).ok_or(bad_len)?;
                let f = exact::<BOARD_HELLO_FIXED_BODY>(kind, fixed)?;
                let name_len = usize::from(f[5]);
                if name_len > BOARD_NAME_MAX_LEN || name.len() != name_len {
                    return Err(DecodeError::Length { kind, len: body.len() });
                }
                Ok(BoardMessage::Hello(Capabilities {
                    protocol_version: f[0],
                    max_tick_hz: le16([f[1], f[2]]),
                    features: le16([f[3], f[4]]),
                    board_name: String::from_utf8_lossy(name).into_owned(),
                }))
            }
            other => Err(DecodeError::UnknownKind(other)),
        }
    }
}

impl Message for HostMessage {
    fn encode_payload(&self, out: &mut Vec<u8>) {
        match *self {
            HostMessage::Hello => out.extend_from_slice(&[PROTOCOL_VERSION, kind::HOST_HELLO]),
            HostMessage::Configure { tick_hz, watchdog_ms } => {
                out.extend_from_slice(&[PROTOCOL_VERSION, kind::CONFIGURE]);
                out.extend_from_slice(&tick_hz.to_le_bytes());
                out.extend_from_slice(&watchdog_ms.to_le_bytes());
            }
            HostMessage::Duty { seq, duty } => {
                out.extend_from_slice(&[PROTOCOL_VERSION, kind::DUTY]);
                out.extend_from_slice(&seq.to_le_bytes());
                out.extend_from_slice(&duty.to_le_bytes());
            }
            HostMessage::Stop { seq } => {
                out.extend_from_slice(&[PROTOCOL_VERSION, kind::STOP]);
                out.extend_from_slice(&seq.to_le_bytes());
            }
        }
    }

    fn decode_payload(payload: &[u8]) -> Result<Self, DecodeError> {
        let (kind, body) = header(payload, false)?;
        match kind {
            kind::HOST_HELLO => {
                exact::<HOST_HELLO_BODY>(kind, body)?;
                Ok(HostMessage::Hello)
            }
            kind::CONFIGURE => {
                let b = exact::<CONFIGURE_BODY>(kind, body)?;
                Ok(HostMessage::Configure {
                    tick_hz: le16([b[0], b[1]]),
                    watchdog_ms: le16([b[2], b[3]]),
                })
            }
            kind::DUTY => {
                let b = exact::<DUTY_BODY>(kind, body)?;
                Ok(HostMessage::Duty {
                    seq: le16([b[0], b[1]]),
                    duty: i16::from_le_bytes([b[2], b[3]]),
                })
            }
            kind::STOP => {
                let b = exact::<STOP_BODY>(kind, body)?;
                Ok(HostMessage::Stop { seq: le16([b[0], b[1]]) })
            }
            other => Err(DecodeError::UnknownKind(other)),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn long_names_are_cut_at_a_character_boundary() {
        assert_eq!(wire_name("short"), "short");
        assert_eq!(wire_name("exactly-16-bytes"), "exactly-16-bytes");
        assert_eq!(wire_name("seventeen-bytes!!"), "seventeen-bytes!");
        // 'é' is two bytes: 15 ASCII + 'é' would need 17, so the 'é' goes whole.
        assert_eq!(wire_name("aaaaaaaaaaaaaaaé"), "aaaaaaaaaaaaaaa");
        // Four-byte characters: four fit exactly.
        assert_eq!(wire_name("🦀🦀🦀🦀🦀"), "🦀🦀🦀🦀");
    }

    #[test]
    fn kind_zero_and_0x80_are_never_valid() {
        assert_eq!(BoardMessage::decode_payload(&[1, 0x00]), Err(DecodeError::UnknownKind(0)));
        assert_eq!(HostMessage::decode_payload(&[1, 0x80]), Err(DecodeError::WrongDirection(0x80)));
        assert_eq!(BoardMessage::decode_payload(&[1, 0x80]), Err(DecodeError::UnknownKind(0x80)));
        assert_eq!(HostMessage::decode_payload(&[1, 0x00]), Err(DecodeError::UnknownKind(0)));
    }

    #[test]
    fn reserved_kinds_are_unknown_in_v1() {
        for k in kind::BOARD_LOOP_HOST.chain(kind::LOCAL_HOST) {
            assert_eq!(HostMessage::decode_payload(&[1, k]), Err(DecodeError::UnknownKind(k)));
        }
        for k in kind::BOARD_LOOP_BOARD.chain(kind::LOCAL_BOARD) {
            assert_eq!(BoardMessage::decode_payload(&[1, k]), Err(DecodeError::UnknownKind(k)));
        }
    }

    #[test]
    fn short_payloads_are_rejected() {
        assert_eq!(HostMessage::decode_payload(&[]), Err(DecodeError::Short(0)));
        assert_eq!(BoardMessage::decode_payload(&[1]), Err(DecodeError::Short(1)));
    }

    #[test]
    fn hello_name_length_must_match() {
        let mut p = Vec::new();
        BoardMessage::Hello(Capabilities {
            protocol_version: 1,
            max_tick_hz: 1000,
            features: 0,
            board_name: "abc".into(),
        })
        .encode_payload(&mut p);
        assert!(BoardMessage::decode_payload(&p).is_ok());
        let mut longer = p.clone();
        longer.push(b'd');
        assert_eq!(
            BoardMessage::decode_payload(&longer),
            Err(DecodeError::Length { kind: kind::BOARD_HELLO, len: 10 })
        );
        // A name_len above the wire limit is refused even when the bytes are there.
        let mut too_long = p[..7].to_vec();
        too_long.push(17);
        too_long.extend_from_slice(&[b'x'; 17]);
        assert!(matches!(BoardMessage::decode_payload(&too_long), Err(DecodeError::Length { .. })));
        assert!(matches!(BoardMessage::decode_payload(&p[..5]), Err(DecodeError::Length { .. })));
    }
}
