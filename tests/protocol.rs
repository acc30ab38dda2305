//! Wire protocol v1 through its public API: round trips, framing under partial and merged
//! reads, garbage, corruption, and agreement between docs/protocol.md and the encoder.

use proptest::prelude::*;
use servotty::protocol::{
    features, inputs, kind, status, write_frame, BoardMessage, Capabilities, DecodeError,
    FrameDecoder, HostMessage, Message, Telemetry, BOARD_HELLO_MAX_FRAME_LEN, CONFIGURE_FRAME_LEN,
    DUTY_FRAME_LEN, HOST_HELLO_FRAME_LEN, MAX_FRAME_LEN, PROTOCOL_VERSION, STOP_FRAME_LEN,
    TELEMETRY_FRAME_LEN,
};

const DOC: &str = include_str!("../docs/protocol.md");

/// Any payload bytes, framed with a valid CRC: lets tests build frames the typed messages
/// cannot (other versions, wrong lengths, unknown kinds).
#[derive(Debug, PartialEq)]
struct Raw(Vec<u8>);

impl Message for Raw {
    fn encode_payload(&self, out: &mut Vec<u8>) {
        out.extend_from_slice(&self.0);
    }
    fn decode_payload(payload: &[u8]) -> Result<Self, DecodeError> {
        Ok(Raw(payload.to_vec()))
    }
}

fn frame<M: Message>(msg: &M) -> Vec<u8> {
    let mut out = Vec::new();
    write_frame(msg, &mut out);
    out
}

/// Everything the decoder yields for `bytes` fed in one piece.
fn decode_all<M: Message>(bytes: &[u8]) -> Vec<Result<M, DecodeError>> {
    let mut dec = FrameDecoder::new();
    dec.extend(bytes);
    drain(&mut dec)
}

fn drain<M: Message>(dec: &mut FrameDecoder) -> Vec<Result<M, DecodeError>> {
    let mut got = Vec::new();
    while let Some(r) = dec.next_message() {
        got.push(r);
    }
    got
}

fn sample_telemetry() -> Telemetry {
    Telemetry {
        seq: 0x1235,
        board_time_us: 1_000_000,
        count: -5,
        inputs: inputs::HOME,
        status: status::MOTOR_ON,
        ack_seq: 0x1234,
    }
}

fn sample_caps() -> Capabilities {
    Capabilities {
        protocol_version: 1,
        max_tick_hz: 2000,
        features: features::INDEX_PULSE | features::HOME_INPUT | features::LIMIT_INPUTS,
        board_name: "demo-board".into(),
    }
}

fn board_samples() -> Vec<BoardMessage> {
    vec![
        BoardMessage::Hello(sample_caps()),
        BoardMessage::Hello(Capabilities {
            protocol_version: 1,
            max_tick_hz: 0,
            features: 0,
            board_name: String::new(),
        }),
        BoardMessage::Telemetry(sample_telemetry()),
        BoardMessage::Telemetry(Telemetry {
            seq: u16::MAX,
            board_time_us: u32::MAX,
            count: i32::MIN,
            inputs: 0xff,
            status: 0xff,
            ack_seq: 0,
        }),
    ]
}

fn host_samples() -> Vec<HostMessage> {
    vec![
        HostMessage::Hello,
        HostMessage::Configure { tick_hz: 1000, watchdog_ms: 50 },
        HostMessage::Duty { seq: 0x1234, duty: -2500 },
        HostMessage::Duty { seq: 0, duty: i16::MIN },
        HostMessage::Stop { seq: 0x1235 },
    ]
}

#[test]
fn every_message_round_trips() {
    for msg in board_samples() {
        assert_eq!(decode_all::<BoardMessage>(&frame(&msg)), vec![Ok(msg.clone())]);
        let mut payload = Vec::new();
        msg.encode_payload(&mut payload);
        assert_eq!(payload[0], PROTOCOL_VERSION);
        assert_eq!(BoardMessage::decode_payload(&payload), Ok(msg));
    }
    for msg in host_samples() {
        assert_eq!(decode_all::<HostMessage>(&frame(&msg)), vec![Ok(msg)]);
        let mut payload = Vec::new();
        msg.encode_payload(&mut payload);
        assert_eq!(HostMessage::decode_payload(&payload), Ok(msg));
    }
}

#[test]
fn payload_bytes_follow_the_documented_layout() {
    // Expected bytes written by hand from the layout tables in docs/protocol.md.
    let cases: Vec<(Vec<u8>, Vec<u8>)> = vec![
        (payload(&HostMessage::Hello), vec![0x01, 0x01]),
        (
            payload(&HostMessage::Configure { tick_hz: 1000, watchdog_ms: 50 }),
            vec![0x01, 0x02, 0xe8, 0x03, 0x32, 0x00],
        ),
        (
            payload(&HostMessage::Duty { seq: 0x1234, duty: -2500 }),
            vec![0x01, 0x03, 0x34, 0x12, 0x3c, 0xf6],
        ),
        (payload(&HostMessage::Stop { seq: 0x1235 }), vec![0x01, 0x04, 0x35, 0x12]),
        (
            payload(&BoardMessage::Telemetry(sample_telemetry())),
            vec![
                0x01, 0x82, 0x35, 0x12, 0x40, 0x42, 0x0f, 0x00, 0xfb, 0xff, 0xff, 0xff, 0x01, 0x01,
                0x34, 0x12,
            ],
        ),
        (
            payload(&BoardMessage::Hello(sample_caps())),
            [&[0x01, 0x81, 0x01, 0xd0, 0x07, 0x07, 0x00, 10][..], b"demo-board"].concat(),
        ),
    ];
    for (got, want) in cases {
        assert_eq!(got, want);
    }
}

fn payload<M: Message>(msg: &M) -> Vec<u8> {
    let mut out = Vec::new();
    msg.encode_payload(&mut out);
    out
}

#[test]
fn frame_lengths_match_constants() {
    assert_eq!(frame(&BoardMessage::Telemetry(sample_telemetry())).len(), TELEMETRY_FRAME_LEN);
    assert_eq!(frame(&HostMessage::Duty { seq: 1, duty: 2 }).len(), DUTY_FRAME_LEN);
    assert_eq!(frame(&HostMessage::Stop { seq: 1 }).len(), STOP_FRAME_LEN);
    assert_eq!(
        frame(&HostMessage::Configure { tick_hz: 1, watchdog_ms: 1 }).len(),
        CONFIGURE_FRAME_LEN
    );
    assert_eq!(frame(&HostMessage::Hello).len(), HOST_HELLO_FRAME_LEN);
    let mut caps = sample_caps();
    caps.board_name = "sixteen-byte-nam".into();
    assert_eq!(frame(&BoardMessage::Hello(caps)).len(), BOARD_HELLO_MAX_FRAME_LEN);
    // COBS only adds one byte below 254 bytes, whatever the field values: lengths are fixed.
    for msg in board_samples().into_iter().skip(2) {
        assert_eq!(frame(&msg).len(), TELEMETRY_FRAME_LEN);
    }
    const { assert!(BOARD_HELLO_MAX_FRAME_LEN <= MAX_FRAME_LEN) };
}

#[test]
fn long_board_names_are_truncated_on_the_wire() {
    let mut caps = sample_caps();
    caps.board_name = "tray-gantry-lift-axis-Z".into();
    let got = decode_all::<BoardMessage>(&frame(&BoardMessage::Hello(caps.clone())));
    caps.board_name = "tray-gantry-lift".into();
    assert_eq!(got, vec![Ok(BoardMessage::Hello(caps))]);
}

#[test]
fn several_frames_in_one_read() {
    let msgs = board_samples();
    let bytes: Vec<u8> = msgs.iter().flat_map(frame).collect();
    let got: Vec<_> = decode_all::<BoardMessage>(&bytes);
    assert_eq!(got, msgs.into_iter().map(Ok).collect::<Vec<_>>());
}

#[test]
fn frames_split_at_every_boundary() {
    let msgs = board_samples();
    let bytes: Vec<u8> = msgs.iter().flat_map(frame).collect();
    let want: Vec<_> = msgs.into_iter().map(Ok).collect();
    // Every pair of cut points (which includes every single cut and no cut at all).
    for a in 0..=bytes.len() {
        for b in a..=bytes.len() {
            let mut dec = FrameDecoder::new();
            let mut got = Vec::new();
            for piece in [&bytes[..a], &bytes[a..b], &bytes[b..]] {
                dec.extend(piece);
                got.extend(drain::<BoardMessage>(&mut dec));
            }
            assert_eq!(got, want, "cut at {a} and {b}");
        }
    }
    // And one byte at a time.
    let mut dec = FrameDecoder::new();
    let mut got = Vec::new();
    for byte in &bytes {
        dec.extend(std::slice::from_ref(byte));
        got.extend(drain::<BoardMessage>(&mut dec));
    }
    assert_eq!(got, want);
}

#[test]
fn every_single_bit_error_in_a_telemetry_frame_is_detected() {
    let good = frame(&BoardMessage::Telemetry(sample_telemetry()));
    let mut crc_reports = 0;
    for bit in 0..good.len() * 8 {
        let mut bad = good.clone();
        bad[bit / 8] ^= 1 << (bit % 8);
        // A trailing delimiter ends the frame even when the flip hit the original one.
        bad.push(0);
        let got = decode_all::<BoardMessage>(&bad);
        assert!(got.iter().all(Result::is_err), "bit {bit} not detected: {got:?}");
        assert!(!got.is_empty(), "bit {bit}: corruption produced no report");
        crc_reports += got.iter().filter(|r| **r == Err(DecodeError::Crc)).count();
        // The decoder is usable again straight away.
        let mut dec = FrameDecoder::new();
        dec.extend(&bad);
        drain::<BoardMessage>(&mut dec);
        dec.extend(&good);
        assert_eq!(
            drain::<BoardMessage>(&mut dec),
            vec![Ok(BoardMessage::Telemetry(sample_telemetry()))]
        );
    }
    // Flips in data bytes (not COBS codes or the delimiter) reach the CRC check.
    assert!(crc_reports >= 8 * 15, "only {crc_reports} CRC reports");
}

#[test]
fn other_protocol_version_is_reported() {
    let mut p = payload(&HostMessage::Stop { seq: 3 });
    p[0] = 2;
    assert_eq!(decode_all::<HostMessage>(&frame(&Raw(p))), vec![Err(DecodeError::Version(2))]);
    let mut p = payload(&BoardMessage::Telemetry(sample_telemetry()));
    p[0] = 0;
    assert_eq!(decode_all::<BoardMessage>(&frame(&Raw(p))), vec![Err(DecodeError::Version(0))]);
}

#[test]
fn frames_sent_the_wrong_way_are_reported() {
    for msg in host_samples() {
        let k = payload(&msg)[1];
        assert_eq!(
            decode_all::<BoardMessage>(&frame(&msg)),
            vec![Err(DecodeError::WrongDirection(k))]
        );
    }
    for msg in board_samples() {
        let k = payload(&msg)[1];
        assert_eq!(
            decode_all::<HostMessage>(&frame(&msg)),
            vec![Err(DecodeError::WrongDirection(k))]
        );
    }
}

#[test]
fn unknown_kinds_and_bad_lengths_are_reported() {
    assert_eq!(
        decode_all::<HostMessage>(&frame(&Raw(vec![1, 0x05]))),
        vec![Err(DecodeError::UnknownKind(0x05))]
    );
    assert_eq!(
        decode_all::<BoardMessage>(&frame(&Raw(vec![1, 0x83]))),
        vec![Err(DecodeError::UnknownKind(0x83))]
    );
    let mut p = payload(&HostMessage::Duty { seq: 1, duty: 1 });
    p.push(0);
    assert_eq!(
        decode_all::<HostMessage>(&frame(&Raw(p))),
        vec![Err(DecodeError::Length { kind: kind::DUTY, len: 5 })]
    );
    let p = payload(&BoardMessage::Telemetry(sample_telemetry()));
    assert_eq!(
        decode_all::<BoardMessage>(&frame(&Raw(p[..15].to_vec()))),
        vec![Err(DecodeError::Length { kind: kind::TELEMETRY, len: 13 })]
    );
    // Too short to hold version, kind and CRC.
    assert_eq!(decode_all::<HostMessage>(&[0x02, 0x01, 0x00]), vec![Err(DecodeError::Short(1))]);
    // A COBS code pointing past the delimiter.
    assert_eq!(decode_all::<HostMessage>(&[0x09, 0x01, 0x00]), vec![Err(DecodeError::Cobs)]);
}

#[test]
fn oversize_runs_are_reported_once_and_discarded() {
    let good = frame(&HostMessage::Stop { seq: 9 });
    // In one read, with the delimiter present.
    let mut bytes = vec![0x41; MAX_FRAME_LEN + 1];
    bytes.push(0);
    bytes.extend_from_slice(&good);
    assert_eq!(
        decode_all::<HostMessage>(&bytes),
        vec![Err(DecodeError::Oversize(MAX_FRAME_LEN)), Ok(HostMessage::Stop { seq: 9 })]
    );
    // Exactly MAX_FRAME_LEN bytes is still a frame (here a bad one), not an oversize run.
    let mut bytes = vec![0x41; MAX_FRAME_LEN];
    bytes.push(0);
    assert_eq!(decode_all::<HostMessage>(&bytes), vec![Err(DecodeError::Cobs)]);
    // Across many reads without a delimiter.
    let mut dec = FrameDecoder::new();
    let mut got = Vec::new();
    for _ in 0..1000 {
        dec.extend(&[0x41; 37]);
        got.extend(drain::<HostMessage>(&mut dec));
    }
    dec.extend(&[0x41, 0x00]);
    dec.extend(&good);
    got.extend(drain::<HostMessage>(&mut dec));
    assert_eq!(
        got,
        vec![Err(DecodeError::Oversize(MAX_FRAME_LEN)), Ok(HostMessage::Stop { seq: 9 })]
    );
}

#[test]
fn empty_frames_are_skipped_and_clear_drops_partial_frames() {
    let good = frame(&HostMessage::Hello);
    let bytes = [&[0u8, 0, 0][..], &good, &[0, 0]].concat();
    assert_eq!(decode_all::<HostMessage>(&bytes), vec![Ok(HostMessage::Hello)]);

    let mut dec = FrameDecoder::new();
    dec.extend(&good[..3]);
    assert_eq!(dec.next_message::<HostMessage>(), None);
    dec.clear();
    dec.extend(&good);
    assert_eq!(drain::<HostMessage>(&mut dec), vec![Ok(HostMessage::Hello)]);
}

#[test]
fn garbage_before_a_frame_costs_one_report() {
    // A port opened mid-stream: the tail of a frame, then whole frames.
    let t = frame(&BoardMessage::Telemetry(sample_telemetry()));
    let bytes = [&t[7..], &t[..], &t[..]].concat();
    let got = decode_all::<BoardMessage>(&bytes);
    assert_eq!(got.len(), 3);
    assert!(got[0].is_err());
    assert!(got[1..].iter().all(|r| *r == Ok(BoardMessage::Telemetry(sample_telemetry()))));
}

// ---- docs/protocol.md agrees with the encoder -------------------------------------------

fn hex(bytes: &[u8]) -> String {
    bytes.iter().map(|b| format!("{b:02x}")).collect::<Vec<_>>().join(" ")
}

/// Digits in groups of three separated by spaces, as written in the doc tables.
fn grouped(n: u64) -> String {
    let s = n.to_string();
    let mut out = String::new();
    for (i, c) in s.chars().enumerate() {
        if i > 0 && (s.len() - i).is_multiple_of(3) {
            out.push(' ');
        }
        out.push(c);
    }
    out
}

fn doc_contains(needle: &str) {
    assert!(DOC.contains(needle), "docs/protocol.md lacks:\n{needle}");
}

#[test]
fn documented_example_frames_match_the_encoder() {
    let host = host_samples();
    let board = board_samples();
    let examples: Vec<Vec<u8>> = vec![
        payload(&host[0]),
        payload(&host[1]),
        payload(&host[2]),
        payload(&host[4]),
        payload(&board[0]),
        payload(&board[2]),
    ];
    let frames = [
        frame(&host[0]),
        frame(&host[1]),
        frame(&host[2]),
        frame(&host[4]),
        frame(&board[0]),
        frame(&board[2]),
    ];
    for (p, f) in examples.iter().zip(frames.iter()) {
        let crc = servotty::protocol::checksum(p);
        doc_contains(&format!("payload  {}\n", hex(p)));
        doc_contains(&format!("crc      {} (0x{crc:04X})\n", hex(&crc.to_le_bytes())));
        doc_contains(&format!("wire     {}\n", hex(f)));
    }
}

#[test]
fn documented_frame_sizes_match_the_encoder() {
    let rows = [
        ("Hello (host)", HOST_HELLO_FRAME_LEN),
        ("Configure", CONFIGURE_FRAME_LEN),
        ("Duty", DUTY_FRAME_LEN),
        ("Stop", STOP_FRAME_LEN),
        ("Hello (board)", BOARD_HELLO_MAX_FRAME_LEN),
        ("Telemetry", TELEMETRY_FRAME_LEN),
    ];
    for (name, wire) in rows {
        // payload + 2 CRC bytes + 1 COBS byte + 1 delimiter for every v1 frame.
        let payload = wire - 4;
        let row = format!("| {name} | {payload} | {} | {} | {wire} |", payload + 2, payload + 3);
        doc_contains(&row);
    }
}

#[test]
fn documented_bandwidth_table_matches_the_encoder() {
    let (t, d) = (TELEMETRY_FRAME_LEN as u64, DUTY_FRAME_LEN as u64);
    for hz in [250u64, 500, 1000, 2000] {
        // 8N1 framing: start bit, 8 data bits, stop bit = 10 bits per byte (common practice,
        // no source).
        let row = format!(
            "| {hz} Hz | {} | {} | {} | {} |",
            grouped(t * hz),
            grouped(d * hz),
            grouped(t * hz * 10),
            grouped(d * hz * 10)
        );
        doc_contains(&row);
        let mut row = format!("| {hz} Hz |");
        for baud in [115_200u64, 230_400, 460_800, 921_600] {
            let load = 100.0 * (t * hz * 10) as f64 / baud as f64;
            let round_trip = 100.0 * ((t + d) * hz * 10) as f64 / baud as f64;
            row.push_str(&format!(" {load:.1} % / {round_trip:.1} % |"));
        }
        doc_contains(&row);
    }
    for baud in [115_200u64, 230_400, 460_800, 921_600] {
        let us = |bytes: u64| 1e6 * (bytes * 10) as f64 / baud as f64;
        doc_contains(&format!(
            "| {} | {:.0} µs | {:.0} µs | {:.0} µs |",
            grouped(baud),
            us(t),
            us(d),
            us(t + d)
        ));
    }
}

// ---- independent reference encoder ------------------------------------------------------

/// Bit-by-bit CRC from the catalogue parameters of CRC-16/IBM-3740 (width 16, poly 0x1021,
/// init 0xFFFF, no reflection, xorout 0), written without the `crc` crate.
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

/// COBS as defined by S. Cheshire and M. Baker, "Consistent Overhead Byte Stuffing",
/// IEEE/ACM Trans. Networking 7(2), 1999 (from memory), written without the `cobs` crate:
/// each block is a code byte (block length + 1) and up to 254 non-zero bytes; a code below
/// 0xFF stands for a zero after its block, except the last.
fn reference_cobs(data: &[u8]) -> Vec<u8> {
    let mut out = Vec::new();
    let mut block = Vec::new();
    for &b in data {
        if b == 0 {
            out.push(block.len() as u8 + 1);
            out.append(&mut block);
        } else {
            block.push(b);
            if block.len() == 254 {
                out.push(0xff);
                out.append(&mut block);
            }
        }
    }
    out.push(block.len() as u8 + 1);
    out.append(&mut block);
    out
}

fn reference_frame<M: Message>(msg: &M) -> Vec<u8> {
    let mut raw = payload(msg);
    raw.extend_from_slice(&reference_crc(&raw).to_le_bytes());
    let mut out = reference_cobs(&raw);
    out.push(0);
    out
}

#[test]
fn reference_crc_has_the_catalogue_check_value() {
    // Check value convention: R. N. Williams, "A Painless Guide to CRC Error Detection
    // Algorithms", 1993 (CRC of ASCII "123456789"); value 0x29B1 for CRC-16/IBM-3740 from
    // G. Cook, "Catalogue of parametrised CRC algorithms" (from memory).
    assert_eq!(reference_crc(b"123456789"), 0x29b1);
    assert_eq!(servotty::protocol::checksum(b"123456789"), 0x29b1);
}

#[test]
fn sample_frames_match_the_reference_encoder() {
    for msg in board_samples() {
        assert_eq!(frame(&msg), reference_frame(&msg));
    }
    for msg in host_samples() {
        assert_eq!(frame(&msg), reference_frame(&msg));
    }
    // Long payloads cross the 254-byte COBS block boundary.
    for len in [253, 254, 255, 300, 600] {
        let raw = Raw((0..len).map(|i| (i % 251) as u8).collect());
        assert_eq!(frame(&raw), reference_frame(&raw), "payload length {len}");
    }
}

// ---- property tests ------------------------------------------------------------------------

fn any_telemetry() -> impl Strategy<Value = Telemetry> {
    (any::<u16>(), any::<u32>(), any::<i32>(), any::<u8>(), any::<u8>(), any::<u16>()).prop_map(
        |(seq, board_time_us, count, inputs, status, ack_seq)| Telemetry {
            seq,
            board_time_us,
            count,
            inputs,
            status,
            ack_seq,
        },
    )
}

fn any_board_message() -> impl Strategy<Value = BoardMessage> {
    prop_oneof![
        any_telemetry().prop_map(BoardMessage::Telemetry),
        (any::<u8>(), any::<u16>(), any::<u16>(), "\\PC{0,16}").prop_map(
            |(protocol_version, max_tick_hz, features, board_name)| {
                BoardMessage::Hello(Capabilities {
                    protocol_version,
                    max_tick_hz,
                    features,
                    board_name,
                })
            }
        ),
    ]
}

fn any_host_message() -> impl Strategy<Value = HostMessage> {
    prop_oneof![
        Just(HostMessage::Hello),
        (any::<u16>(), any::<u16>())
            .prop_map(|(tick_hz, watchdog_ms)| HostMessage::Configure { tick_hz, watchdog_ms }),
        (any::<u16>(), any::<i16>()).prop_map(|(seq, duty)| HostMessage::Duty { seq, duty }),
        any::<u16>().prop_map(|seq| HostMessage::Stop { seq }),
    ]
}

/// What the wire carries for a name: the longest prefix of at most 16 bytes that ends on a
/// character boundary.
fn wire_name(name: &str) -> String {
    let mut end = name.len().min(16);
    while !name.is_char_boundary(end) {
        end -= 1;
    }
    name[..end].to_string()
}

fn feed_in_chunks<M: Message>(bytes: &[u8], cuts: &[usize]) -> Vec<Result<M, DecodeError>> {
    let mut dec = FrameDecoder::new();
    let mut got = Vec::new();
    let mut rest = bytes;
    for &cut in cuts {
        let (head, tail) = rest.split_at(cut.min(rest.len()));
        dec.extend(head);
        got.extend(drain::<M>(&mut dec));
        rest = tail;
    }
    dec.extend(rest);
    got.extend(drain::<M>(&mut dec));
    got
}

proptest! {
    #[test]
    fn board_messages_round_trip(msg in any_board_message()) {
        let expect = match &msg {
            BoardMessage::Hello(c) => {
                BoardMessage::Hello(Capabilities { board_name: wire_name(&c.board_name), ..c.clone() })
            }
            other => other.clone(),
        };
        prop_assert_eq!(frame(&msg), reference_frame(&msg));
        prop_assert_eq!(decode_all::<BoardMessage>(&frame(&msg)), vec![Ok(expect)]);
    }

    #[test]
    fn host_messages_round_trip(msg in any_host_message()) {
        prop_assert_eq!(frame(&msg), reference_frame(&msg));
        prop_assert_eq!(decode_all::<HostMessage>(&frame(&msg)), vec![Ok(msg)]);
    }

    #[test]
    fn message_streams_survive_any_chunking(
        msgs in proptest::collection::vec(any_telemetry(), 1..20),
        cuts in proptest::collection::vec(0usize..40, 0..30),
    ) {
        let bytes: Vec<u8> =
            msgs.iter().flat_map(|t| frame(&BoardMessage::Telemetry(*t))).collect();
        let want: Vec<_> = msgs.into_iter().map(|t| Ok(BoardMessage::Telemetry(t))).collect();
        prop_assert_eq!(feed_in_chunks::<BoardMessage>(&bytes, &cuts), want);
    }

    #[test]
    fn byte_soup_never_panics(
        soup in proptest::collection::vec(any::<u8>(), 0..2000),
        cuts in proptest::collection::vec(0usize..600, 0..10),
    ) {
        let board = feed_in_chunks::<BoardMessage>(&soup, &cuts);
        let host = feed_in_chunks::<HostMessage>(&soup, &cuts);
        // At most one report per delimiter, plus oversize runs.
        let bound = soup.iter().filter(|&&b| b == 0).count() + soup.len() / MAX_FRAME_LEN + 1;
        prop_assert!(board.len() <= bound && host.len() <= bound);
    }

    #[test]
    fn sparse_zero_soup_never_panics(
        // Mostly non-zero bytes with COBS-like codes: exercises long runs and code chains.
        soup in proptest::collection::vec(prop_oneof![8 => 1u8..=255, 1 => Just(0u8)], 0..3000),
        cuts in proptest::collection::vec(0usize..700, 0..10),
    ) {
        feed_in_chunks::<BoardMessage>(&soup, &cuts);
        feed_in_chunks::<HostMessage>(&soup, &cuts);
    }

    #[test]
    fn frame_after_garbage_is_decoded(
        garbage in proptest::collection::vec(any::<u8>(), 0..1000),
        msg in any_host_message(),
        cuts in proptest::collection::vec(0usize..300, 0..5),
    ) {
        let mut bytes = garbage;
        bytes.push(0);
        bytes.extend_from_slice(&frame(&msg));
        let got = feed_in_chunks::<HostMessage>(&bytes, &cuts);
        prop_assert_eq!(got.last(), Some(&Ok(msg)));
    }

    #[test]
    fn raw_payloads_match_the_reference_and_round_trip(
        data in proptest::collection::vec(any::<u8>(), 0..250),
    ) {
        let raw = Raw(data);
        let bytes = frame(&raw);
        prop_assert_eq!(&bytes, &reference_frame(&raw));
        // Frames of 2 bytes or more decode; shorter ones cannot hold a CRC and a header.
        let got = decode_all::<Raw>(&bytes);
        if raw.0.len() >= 2 {
            prop_assert_eq!(got, vec![Ok(raw)]);
        } else {
            prop_assert_eq!(got, vec![Err(DecodeError::Short(raw.0.len() + 2))]);
        }
    }

    #[test]
    fn payload_decoding_never_panics(payload in proptest::collection::vec(any::<u8>(), 0..40)) {
        let _ = BoardMessage::decode_payload(&payload);
        let _ = HostMessage::decode_payload(&payload);
    }
}
