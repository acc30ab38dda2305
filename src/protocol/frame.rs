//! Frames: CRC, COBS encoding and the streaming decoder.
//!
//! On the wire a frame is `COBS(payload ‖ CRC-16 little-endian) ‖ 0x00`. COBS removes every
//! zero byte from the encoded part, so `0x00` only ever marks the end of a frame and a
//! receiver can resynchronise at the next one after any garbage.

use super::message::{
    BOARD_HELLO_MAX_PAYLOAD, CONFIGURE_PAYLOAD, DUTY_PAYLOAD, HOST_HELLO_PAYLOAD, STOP_PAYLOAD,
    TELEMETRY_PAYLOAD,
};
use super::{DecodeError, Message};

/// The CRC's catalogue parameters: CRC-16/IBM-3740 (also known as CRC-16/CCITT-FALSE): width
/// 16, poly 0x1021, init 0xFFFF, refin false, refout false, xorout 0x0000, check 0x29B1.
pub const CRC_ALGORITHM: &crc::Algorithm<u16> = &crc::CRC_16_IBM_3740;

/// Table-driven (256 entries, built at compile time): a few ns per telemetry frame.
const CRC16: crc::Crc<u16> = crc::Crc::<u16>::new(CRC_ALGORITHM);

/// Bytes of CRC after the payload.
const CRC_LEN: usize = 2;

/// Longest run of bytes between delimiters that a receiver accepts. v1 frames are at most
/// [`BOARD_HELLO_MAX_FRAME_LEN`] bytes; the margin leaves room for later message kinds while
/// bounding the memory a stream of garbage can take.
pub const MAX_FRAME_LEN: usize = 256;

/// CRC of `bytes` with [`CRC_ALGORITHM`], as carried after the payload.
pub fn checksum(bytes: &[u8]) -> u16 {
    CRC16.checksum(bytes)
}

/// Bytes on the wire for a payload of `payload_len` bytes: CRC, COBS overhead (one byte per
/// started 254-byte block, at least one) and the delimiter.
pub const fn frame_len(payload_len: usize) -> usize {
    cobs::max_encoding_length(payload_len + CRC_LEN) + 1
}

/// Wire bytes of a Telemetry frame.
pub const TELEMETRY_FRAME_LEN: usize = frame_len(TELEMETRY_PAYLOAD);
/// Wire bytes of a Duty frame.
pub const DUTY_FRAME_LEN: usize = frame_len(DUTY_PAYLOAD);
/// Wire bytes of a Stop frame.
pub const STOP_FRAME_LEN: usize = frame_len(STOP_PAYLOAD);
/// Wire bytes of a Configure frame.
pub const CONFIGURE_FRAME_LEN: usize = frame_len(CONFIGURE_PAYLOAD);
/// Wire bytes of a host Hello frame.
pub const HOST_HELLO_FRAME_LEN: usize = frame_len(HOST_HELLO_PAYLOAD);
/// Wire bytes of a board Hello frame with a 16-byte name (shorter names save a byte each).
pub const BOARD_HELLO_MAX_FRAME_LEN: usize = frame_len(BOARD_HELLO_MAX_PAYLOAD);

/// Payloads up to this size are staged on the stack while COBS-encoding; every v1 message
/// fits, so the hot path allocates nothing once `out` has capacity.
const STAGE_LEN: usize = 64;

/// Appends one complete frame for `msg` to `out`: COBS(payload ‖ CRC) then `0x00`.
///
/// Bytes already in `out` are kept, so a caller can queue several frames and reuse one buffer
/// across ticks without allocating.
pub fn write_frame<M: Message>(msg: &M, out: &mut Vec<u8>) {
    let base = out.len();
    msg.encode_payload(out);
    let crc = checksum(&out[base..]);
    out.extend_from_slice(&crc.to_le_bytes());

    // COBS cannot encode in place (the output runs ahead of the input), so the raw bytes move
    // to a stack buffer and are encoded back into `out`.
    let raw_len = out.len() - base;
    let mut stage = [0u8; STAGE_LEN];
    let spilled;
    let raw: &[u8] = if raw_len <= STAGE_LEN {
        stage[..raw_len].copy_from_slice(&out[base..]);
        &stage[..raw_len]
    } else {
        spilled = out[base..].to_vec();
        &spilled
    };
    out.resize(base + cobs::max_encoding_length(raw_len), 0);
    // The destination has exactly the documented worst-case size, so encoding cannot run out
    // of room.
    let written = cobs::encode(raw, &mut out[base..]);
    out.truncate(base + written);
    out.push(0);
}

/// Streaming frame decoder: feed it bytes as they arrive, take messages out.
///
/// It handles several frames in one read, frames split across reads, garbage before or
/// between frames, and never panics on any input. Each bad frame is reported once and
/// skipped. Empty frames (two delimiters in a row) are skipped silently: a sender may emit a
/// lone `0x00` to flush a receiver that might hold a partial frame.
///
/// Call [`FrameDecoder::next_message`] until it returns `None` after each
/// [`FrameDecoder::extend`]; then at most [`MAX_FRAME_LEN`] bytes stay buffered.
#[derive(Debug, Default)]
pub struct FrameDecoder {
    /// Received bytes; `buf[start..]` is not yet consumed.
    buf: Vec<u8>,
    /// First unconsumed byte.
    start: usize,
    /// `buf[start..scanned]` is known to hold no delimiter, so it is not searched again.
    scanned: usize,
    /// After an Oversize report, bytes are dropped until the next delimiter.
    discarding: bool,
}

impl FrameDecoder {
    /// An empty decoder.
    pub fn new() -> Self {
        Self::default()
    }

    /// Appends received bytes.
    pub fn extend(&mut self, bytes: &[u8]) {
        let mut bytes = bytes;
        if self.discarding {
            match bytes.iter().position(|&b| b == 0) {
                // Still inside the oversize run: nothing worth keeping.
                None => return,
                Some(end) => {
                    bytes = &bytes[end + 1..];
                    self.discarding = false;
                }
            }
        }
        self.compact();
        self.buf.extend_from_slice(bytes);
    }

    /// The next message, if a complete frame is buffered.
    ///
    /// `None`: more bytes are needed. `Some(Err(_))`: one bad frame was skipped (the decoder
    /// is already past it, so the next call continues with the following frame; after
    /// [`DecodeError::Oversize`] bytes up to the next delimiter are dropped as they arrive).
    pub fn next_message<M: Message>(&mut self) -> Option<Result<M, DecodeError>> {
        loop {
            let from = self.scanned.max(self.start);
            let Some(offset) = self.buf.get(from..)?.iter().position(|&b| b == 0) else {
                self.scanned = self.buf.len();
                if self.buf.len() - self.start > MAX_FRAME_LEN {
                    self.buf.clear();
                    self.start = 0;
                    self.scanned = 0;
                    self.discarding = true;
                    return Some(Err(DecodeError::Oversize(MAX_FRAME_LEN)));
                }
                return None;
            };
            let end = from + offset;
            let frame_start = self.start;
            self.start = end + 1;
            self.scanned = self.start;
            if end == frame_start {
                continue;
            }
            if end - frame_start > MAX_FRAME_LEN {
                return Some(Err(DecodeError::Oversize(MAX_FRAME_LEN)));
            }
            return Some(decode_frame(&mut self.buf[frame_start..end]));
        }
    }

    /// Drops every buffered byte (on reconnect or after flushing the port).
    pub fn clear(&mut self) {
        self.buf.clear();
        self.start = 0;
        self.scanned = 0;
        self.discarding = false;
    }

    /// Moves the unconsumed tail to the front so the buffer does not grow with traffic.
    fn compact(&mut self) {
        if self.start == 0 {
            return;
        }
        if self.start >= self.buf.len() {
            self.buf.clear();
        } else {
            self.buf.drain(..self.start);
        }
        self.scanned = self.scanned.saturating_sub(self.start);
        self.start = 0;
    }
}

/// Decodes the bytes between two delimiters (COBS, in place), checks the CRC and parses.
fn decode_frame<M: Message>(encoded: &mut [u8]) -> Result<M, DecodeError> {
    let len = cobs::decode_in_place(encoded).map_err(|_| DecodeError::Cobs)?;
    let decoded = encoded.get(..len).ok_or(DecodeError::Cobs)?;
    if decoded.len() < 2 + CRC_LEN {
        return Err(DecodeError::Short(decoded.len()));
    }
    let (payload, crc) = decoded.split_at(decoded.len() - CRC_LEN);
    if crc != checksum(payload).to_le_bytes() {
        return Err(DecodeError::Crc);
    }
    M::decode_payload(payload)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::protocol::{BoardMessage, HostMessage, Telemetry};

    /// Bit-by-bit CRC written from the catalogue parameters alone (width 16, poly 0x1021,
    /// init 0xFFFF, no reflection, xorout 0), as an independent check of the crate's table.
    fn reference_crc(bytes: &[u8]) -> u16 {
        let mut crc: u16 = 0xffff;
        for &byte in bytes {
            crc ^= u16::from(byte) << 8;
            for _ in 0..8 {
                crc = if crc & 0x8000 != 0 { (crc << 1) ^ 0x1021 } else { crc << 1 };
            }
        }
        crc
    }

    #[test]
    fn crc_check_value_matches_catalogue() {
        // Check value = CRC of the ASCII bytes "123456789" (convention of R. N. Williams, "A
        // Painless Guide to CRC Error Detection Algorithms", 1993, the CHECK field of the
        // parametrised model). CRC-16/IBM-3740 check 0x29B1 from G. Cook, "Catalogue of
        // parametrised CRC algorithms" (reveng.sourceforge.io), from memory.
        assert_eq!(checksum(b"123456789"), 0x29b1);
        assert_eq!(CRC_ALGORITHM.check, 0x29b1);
        assert_eq!(reference_crc(b"123456789"), 0x29b1);
        assert_eq!(
            (CRC_ALGORITHM.width, CRC_ALGORITHM.poly, CRC_ALGORITHM.init),
            (16, 0x1021, 0xffff)
        );
        assert!(!CRC_ALGORITHM.refin && !CRC_ALGORITHM.refout && CRC_ALGORITHM.xorout == 0);
    }

    #[test]
    fn crc_table_agrees_with_bitwise_reference() {
        let mut data = Vec::new();
        for i in 0..300u32 {
            data.push((i.wrapping_mul(151) ^ (i >> 3)) as u8);
            assert_eq!(checksum(&data), reference_crc(&data), "length {}", data.len());
        }
    }

    #[test]
    fn cobs_matches_published_examples() {
        // Examples from S. Cheshire and M. Baker, "Consistent Overhead Byte Stuffing",
        // IEEE/ACM Trans. Networking 7(2), 1999, as tabulated in the Wikipedia article
        // "Consistent Overhead Byte Stuffing" (from memory).
        let cases: [(&[u8], &[u8]); 6] = [
            (&[0x00], &[0x01, 0x01]),
            (&[0x00, 0x00], &[0x01, 0x01, 0x01]),
            (&[0x00, 0x11, 0x00], &[0x01, 0x02, 0x11, 0x01]),
            (&[0x11, 0x22, 0x00, 0x33], &[0x03, 0x11, 0x22, 0x02, 0x33]),
            (&[0x11, 0x22, 0x33, 0x44], &[0x05, 0x11, 0x22, 0x33, 0x44]),
            (&[0x11, 0x00, 0x00, 0x00], &[0x02, 0x11, 0x01, 0x01, 0x01]),
        ];
        for (raw, encoded) in cases {
            let mut out = vec![0; cobs::max_encoding_length(raw.len())];
            let n = cobs::encode(raw, &mut out);
            assert_eq!(&out[..n], encoded);
            let mut back = encoded.to_vec();
            let m = cobs::decode_in_place(&mut back).expect("valid COBS");
            assert_eq!(&back[..m], raw);
        }
        // 254 non-zero bytes fill one block exactly: 0xFF then the data, no trailing code.
        let raw: Vec<u8> = (1..=254).collect();
        let mut out = vec![0; cobs::max_encoding_length(raw.len())];
        let n = cobs::encode(&raw, &mut out);
        assert_eq!(n, 255);
        assert_eq!(out[0], 0xff);
        assert_eq!(&out[1..255], &raw[..]);
    }

    #[test]
    fn decoder_buffer_stays_bounded_under_garbage() {
        let mut dec = FrameDecoder::new();
        let junk = [0x5au8; 100];
        let mut oversize = 0;
        for _ in 0..100 {
            dec.extend(&junk);
            while let Some(r) = dec.next_message::<BoardMessage>() {
                assert_eq!(r, Err(DecodeError::Oversize(MAX_FRAME_LEN)));
                oversize += 1;
            }
            assert!(dec.buf.len() - dec.start <= MAX_FRAME_LEN + junk.len());
        }
        // One report for the whole run, not one per read.
        assert_eq!(oversize, 1);
        // The run ends at the next delimiter; a frame after it decodes.
        let t = Telemetry { seq: 1, board_time_us: 2, count: 3, inputs: 0, status: 0, ack_seq: 0 };
        let mut bytes = vec![0x33, 0x44, 0x00];
        write_frame(&BoardMessage::Telemetry(t), &mut bytes);
        dec.extend(&bytes);
        assert_eq!(dec.next_message::<BoardMessage>(), Some(Ok(BoardMessage::Telemetry(t))));
        assert_eq!(dec.next_message::<BoardMessage>(), None);
        assert!(dec.buf.len() - dec.start == 0);
    }

    #[test]
    fn consumed_bytes_are_released_between_reads() {
        let mut dec = FrameDecoder::new();
        let mut frame = Vec::new();
        write_frame(&HostMessage::Duty { seq: 7, duty: -1234 }, &mut frame);
        for _ in 0..10_000 {
            dec.extend(&frame);
            assert!(matches!(dec.next_message::<HostMessage>(), Some(Ok(_))));
            assert_eq!(dec.next_message::<HostMessage>(), None);
        }
        assert!(dec.buf.len() <= frame.len());
    }

    #[test]
    fn write_frame_keeps_earlier_bytes_and_long_payloads_spill_correctly() {
        /// A payload longer than the stack stage and than one COBS block.
        struct Long;
        impl Message for Long {
            fn encode_payload(&self, out: &mut Vec<u8>) {
                out.extend((0..300u32).map(|i| (i % 7) as u8));
            }
            fn decode_payload(payload: &[u8]) -> Result<Self, DecodeError> {
                let expect: Vec<u8> = (0..300u32).map(|i| (i % 7) as u8).collect();
                if payload == expect.as_slice() {
                    Ok(Long)
                } else {
                    Err(DecodeError::UnknownKind(0))
                }
            }
        }
        let mut out = vec![0xaa, 0xbb];
        write_frame(&Long, &mut out);
        assert_eq!(&out[..2], &[0xaa, 0xbb]);
        assert_eq!(out.iter().skip(2).filter(|&&b| b == 0).count(), 1);
        // Too long for MAX_FRAME_LEN: the receiver refuses it as oversize.
        let mut dec = FrameDecoder::new();
        dec.extend(&out[2..]);
        assert!(matches!(dec.next_message::<Long>(), Some(Err(DecodeError::Oversize(_)))));
        let mut raw = out[2..out.len() - 1].to_vec();
        assert!(decode_frame::<Long>(&mut raw).is_ok());
    }
}
