//! The firmware's C core against servotty's own protocol code: the example frames of
//! docs/protocol.md §14 byte for byte, round trips both ways, corrupted and truncated frames,
//! the watchdog's timing, COBS corner cases and property tests over random messages.
//!
//! servotty's encoder and decoder (`servotty::protocol`) are the reference: the board must
//! agree with the host at the wire, whatever either side's code looks like.

use proptest::prelude::*;
use servotty::protocol::{
    features, inputs, status, write_frame, BoardMessage, Capabilities, FrameDecoder, HostMessage,
    Message, Telemetry,
};
use trellis_hostcheck::{self as fw, Board, TelemetryFields};

const DOC: &str = include_str!("../../../docs/protocol.md");
const ALL_FEATURES: u16 = features::INDEX_PULSE | features::HOME_INPUT | features::LIMIT_INPUTS;

fn host_frame(m: &HostMessage) -> Vec<u8> {
    let mut out = Vec::new();
    write_frame(m, &mut out);
    out
}

fn payload<M: Message>(m: &M) -> Vec<u8> {
    let mut out = Vec::new();
    m.encode_payload(&mut out);
    out
}

/// Every board message in `bytes`, decoded by servotty; any rejected frame fails the test.
fn board_messages(bytes: &[u8]) -> Vec<BoardMessage> {
    let mut dec = FrameDecoder::new();
    dec.extend(bytes);
    let mut got = Vec::new();
    while let Some(m) = dec.next_message::<BoardMessage>() {
        got.push(m.unwrap_or_else(|e| panic!("servotty rejects the firmware's frame: {e}")));
    }
    got
}

fn telemetry(bytes: &[u8]) -> Vec<Telemetry> {
    board_messages(bytes)
        .into_iter()
        .map(|m| match m {
            BoardMessage::Telemetry(t) => t,
            other => panic!("expected telemetry, got {other:?}"),
        })
        .collect()
}

/// One tick and the telemetry frame it sent.
fn tick(b: &Board) -> Telemetry {
    b.tick();
    let t = telemetry(&b.take_tx());
    assert_eq!(t.len(), 1, "one frame per tick");
    t[0]
}

/// A board that has answered Configure { 1000 Hz, `watchdog_ms` } at time 0.
fn streaming_board(watchdog_ms: u16) -> Board {
    let b = Board::power_up(2000, ALL_FEATURES, "trellis-test");
    b.rx(&host_frame(&HostMessage::Configure { tick_hz: 1000, watchdog_ms }));
    b.take_tx();
    b
}

fn parse_hex(line: &str) -> Vec<u8> {
    line.split_whitespace()
        .map(|h| u8::from_str_radix(h, 16).unwrap_or_else(|_| panic!("hex byte {h:?}")))
        .collect()
}

/// The (payload, wire) pairs of docs/protocol.md §14, read from the page itself.
fn documented_examples() -> Vec<(Vec<u8>, Vec<u8>)> {
    let section = DOC.split("## 14. Example frames").nth(1).expect("section 14 exists");
    let mut out = Vec::new();
    let mut payload = None;
    for line in section.lines() {
        if let Some(rest) = line.strip_prefix("payload  ") {
            payload = Some(parse_hex(rest));
        } else if let Some(rest) = line.strip_prefix("wire     ") {
            out.push((payload.take().expect("payload before wire"), parse_hex(rest)));
        }
    }
    assert_eq!(out.len(), 6, "six example frames in §14");
    out
}

#[test]
fn crc_has_the_catalogue_check_value() {
    // CRC-16/IBM-3740 check value 0x29B1 (CRC of ASCII "123456789"): G. Cook, "Catalogue of
    // parametrised CRC algorithms" (reveng), from memory; also servotty's `crc` crate table.
    assert_eq!(fw::crc16(b"123456789"), 0x29b1);
    assert_eq!(fw::crc16(b""), 0xffff, "init 0xFFFF, xorout 0");
}

#[test]
fn documented_example_frames_byte_for_byte() {
    for (payload, wire) in documented_examples() {
        assert_eq!(fw::frame(&payload).as_deref(), Some(&wire[..]), "framing {payload:02x?}");
        let body = &wire[..wire.len() - 1];
        assert_eq!(fw::unframe(body), Some(payload.clone()), "unframing {wire:02x?}");
        if payload[1] & 0x80 != 0 {
            // A board frame: the firmware's payload writer makes it from the fields servotty
            // reads out of the documented bytes.
            let ours = match &board_messages(&wire)[..] {
                [BoardMessage::Telemetry(t)] => fw::telemetry_payload(fields(t)),
                [BoardMessage::Hello(c)] => {
                    Board::power_up(c.max_tick_hz, c.features, &c.board_name).hello_payload()
                }
                other => panic!("{other:?}"),
            };
            assert_eq!(ours, payload);
        }
    }
}

#[test]
fn board_hello_answers_host_hello_as_documented() {
    let b = Board::power_up(2000, ALL_FEATURES, "demo-board");
    assert_eq!(b.take_tx(), [0], "a lone delimiter at power-up");
    assert_eq!(b.motor(), None, "motor off at power-up");
    b.rx(&host_frame(&HostMessage::Hello));
    let examples = documented_examples();
    assert_eq!(b.take_tx(), examples[4].1, "§14 board Hello");
}

fn fields(t: &Telemetry) -> TelemetryFields {
    TelemetryFields {
        seq: t.seq,
        board_time_us: t.board_time_us,
        count: t.count,
        inputs: t.inputs,
        status: t.status,
        ack_seq: t.ack_seq,
    }
}

#[test]
fn session_follows_the_contract() {
    let b = Board::power_up(2000, ALL_FEATURES, "trellis-test");
    b.take_tx();
    // Not streaming before Configure: no telemetry, Duty ignored.
    b.tick();
    assert!(b.take_tx().is_empty());
    b.rx(&host_frame(&HostMessage::Duty { seq: 9, duty: 5000 }));
    assert_eq!(b.motor(), None, "Duty before Configure is ignored");
    // Configures the board refuses leave it as it was.
    for (tick_hz, watchdog_ms) in [(0, 50), (2001, 50), (1000, 0)] {
        b.rx(&host_frame(&HostMessage::Configure { tick_hz, watchdog_ms }));
        b.tick();
        assert!(b.take_tx().is_empty(), "Configure {tick_hz} Hz / {watchdog_ms} ms ignored");
    }
    b.set_time_us(1_000);
    b.set_count(-7);
    b.set_inputs(inputs::HOME | inputs::INDEX);
    b.rx(&host_frame(&HostMessage::Configure { tick_hz: 500, watchdog_ms: 50 }));
    assert_eq!(b.tick_hz(), 500);
    let t = tick(&b);
    assert_eq!(
        t,
        Telemetry {
            seq: 0,
            board_time_us: 1_000,
            count: -7,
            inputs: inputs::HOME | inputs::INDEX,
            status: 0,
            ack_seq: 0
        }
    );
    assert_eq!(tick(&b).inputs, inputs::HOME, "INDEX is reported once per sighting");
    // Duty applies at once, clamped; ack_seq echoes it.
    b.rx(&host_frame(&HostMessage::Duty { seq: 0x1234, duty: -2500 }));
    assert_eq!(b.motor(), Some(-2500));
    let t = tick(&b);
    assert_eq!((t.seq, t.ack_seq, t.status), (2, 0x1234, status::MOTOR_ON));
    b.rx(&host_frame(&HostMessage::Duty { seq: 1, duty: i16::MAX }));
    assert_eq!(b.motor(), Some(10_000), "clamped to +100.00 %");
    b.rx(&host_frame(&HostMessage::Duty { seq: 2, duty: i16::MIN }));
    assert_eq!(b.motor(), Some(-10_000), "clamped to -100.00 %");
    // Stop: off at once, acknowledged.
    b.rx(&host_frame(&HostMessage::Stop { seq: 0x1235 }));
    assert_eq!(b.motor(), None);
    let t = tick(&b);
    assert_eq!((t.ack_seq, t.status), (0x1235, 0));
    // Driver fault: motor off, flagged; Duty does not switch it on.
    b.rx(&host_frame(&HostMessage::Duty { seq: 3, duty: 1000 }));
    b.set_fault(true);
    assert_eq!(tick(&b).status, status::DRIVER_FAULT);
    assert_eq!(b.motor(), None);
    b.rx(&host_frame(&HostMessage::Duty { seq: 4, duty: 1000 }));
    assert_eq!(b.motor(), None, "no drive while the driver reports a fault");
    b.set_fault(false);
    b.rx(&host_frame(&HostMessage::Duty { seq: 5, duty: 1000 }));
    assert_eq!(b.motor(), Some(1000));
    // Hello: motor off, streaming stops, capabilities sent.
    b.rx(&host_frame(&HostMessage::Hello));
    assert_eq!(b.motor(), None);
    assert_eq!(b.tick_hz(), 0);
    match &board_messages(&b.take_tx())[..] {
        [BoardMessage::Hello(c)] => assert_eq!(
            c,
            &Capabilities {
                protocol_version: 1,
                max_tick_hz: 2000,
                features: ALL_FEATURES,
                board_name: "trellis-test".into()
            }
        ),
        other => panic!("{other:?}"),
    }
    b.tick();
    assert!(b.take_tx().is_empty(), "no telemetry after Hello");
    // Configure restarts with fresh sequence numbers and motor off.
    b.rx(&host_frame(&HostMessage::Configure { tick_hz: 1000, watchdog_ms: 50 }));
    let t = tick(&b);
    assert_eq!((t.seq, t.ack_seq, t.status), (0, 0, 0));
}

#[test]
fn seq_wraps_and_counts_every_tick() {
    let b = streaming_board(1000);
    for expected in 0..70_000u32 {
        // Stop keeps the watchdog fed without moving the clock.
        if expected % 1000 == 0 {
            b.rx(&host_frame(&HostMessage::Stop { seq: 0 }));
        }
        assert_eq!(u32::from(tick(&b).seq), expected % 65_536);
    }
}

#[test]
fn watchdog_cuts_the_motor_after_watchdog_ms() {
    // docs/protocol.md §9: off no later than watchdog_ms (+ one tick) after the last valid
    // command; the flag stays until the next valid Duty; Stop restarts the timer only.
    for start in [0u32, u32::MAX - 20_000] {
        let b = Board::power_up(2000, ALL_FEATURES, "trellis-test");
        b.set_time_us(start);
        b.rx(&host_frame(&HostMessage::Configure { tick_hz: 1000, watchdog_ms: 50 }));
        b.rx(&host_frame(&HostMessage::Duty { seq: 1, duty: 3000 }));
        b.take_tx();
        b.set_time_us(start.wrapping_add(49_999));
        assert_eq!(tick(&b).status, status::MOTOR_ON, "still on 1 µs before the timeout");
        assert_eq!(b.motor(), Some(3000));
        b.set_time_us(start.wrapping_add(50_000));
        assert_eq!(tick(&b).status, status::WATCHDOG_TRIPPED, "off at the timeout");
        assert_eq!(b.motor(), None);
        b.set_time_us(start.wrapping_add(60_000));
        b.rx(&host_frame(&HostMessage::Stop { seq: 2 }));
        assert_eq!(tick(&b).status, status::WATCHDOG_TRIPPED, "Stop leaves the flag");
        b.set_time_us(start.wrapping_add(109_999));
        assert_eq!(tick(&b).status, status::WATCHDOG_TRIPPED);
        b.rx(&host_frame(&HostMessage::Duty { seq: 3, duty: -100 }));
        assert_eq!(tick(&b).status, status::MOTOR_ON, "Duty clears the flag and drives");
        assert_eq!(b.motor(), Some(-100));
    }
}

/// Valid frames of kinds or layouts a v1 board must drop without effect (§9 rule 5).
fn bad_but_well_framed() -> Vec<Vec<u8>> {
    let crc_framed = |p: &[u8]| fw::frame(p).expect("short payload");
    vec![
        crc_framed(&[2, 0x03, 1, 0, 0x10, 0x27]),    // version 2
        crc_framed(&[1, 0x83, 1, 0, 0x10, 0x27]),    // board -> host kind: an echo
        crc_framed(&[1, 0x03, 1, 0, 0x10]),          // Duty one byte short
        crc_framed(&[1, 0x03, 1, 0, 0x10, 0x27, 0]), // Duty one byte long
        crc_framed(&[1, 0x04, 1]),                   // Stop one byte short
        crc_framed(&[1, 0x01, 0]),                   // Hello with a body
        crc_framed(&[1, 0x40, 1, 0, 0x10, 0x27]),    // reserved board-loop kind
        crc_framed(&[1, 0x7f, 1, 0, 0x10, 0x27]),    // local-experiment kind
        crc_framed(&[1, 0x00, 1, 0, 0x10, 0x27]),    // kind 0
    ]
}

#[test]
fn invalid_frames_have_no_effect() {
    let b = streaming_board(50);
    b.rx(&host_frame(&HostMessage::Duty { seq: 7, duty: 2000 }));
    b.take_tx();
    let good = host_frame(&HostMessage::Duty { seq: 0x4242, duty: -9000 });
    let mut bad = bad_but_well_framed();
    // Every single-bit error of a valid Duty frame (a flipped delimiter splits it in two).
    for bit in 0..(good.len() - 1) * 8 {
        let mut f = good.clone();
        f[bit / 8] ^= 1 << (bit % 8);
        bad.push(f);
    }
    // Every truncation, delimited.
    for cut in 1..good.len() - 1 {
        let mut f = good[..cut].to_vec();
        f.push(0);
        bad.push(f);
    }
    // A run longer than the receive buffer.
    let mut long = vec![0x55u8; 300];
    long.push(0);
    bad.push(long);
    for f in &bad {
        let before = b.bad_frames();
        b.set_time_us(40_000);
        b.rx(f);
        assert!(b.bad_frames() > before, "{f:02x?} counted as bad");
        assert_eq!(b.motor(), Some(2000), "{f:02x?} changed the motor");
        let t = tick(&b);
        assert_eq!(t.ack_seq, 7, "{f:02x?} changed ack_seq");
        b.set_time_us(50_000);
        assert_eq!(tick(&b).status, status::WATCHDOG_TRIPPED, "{f:02x?} fed the watchdog");
        // Back to a driving, fed board for the next case.
        b.set_time_us(0);
        b.rx(&host_frame(&HostMessage::Duty { seq: 7, duty: 2000 }));
        b.take_tx();
    }
}

#[test]
fn flushes_and_garbage_do_not_hide_the_next_frame() {
    let b = streaming_board(50);
    let mut bytes = vec![0, 0, 0x13, 0x37, 0xff];
    bytes.extend(host_frame(&HostMessage::Duty { seq: 1, duty: 10 }));
    b.rx(&bytes);
    assert_eq!(b.motor(), None, "the garbage glued to the Duty spoils it");
    b.rx(&[0x13, 0x37, 0, 0]);
    b.rx(&host_frame(&HostMessage::Duty { seq: 1, duty: 10 }));
    assert_eq!(b.motor(), Some(10), "a delimiter resynchronises");
}

/// COBS corner cases, checked against the `cobs` crate servotty frames with.
#[test]
fn cobs_corner_cases_match_the_host() {
    let mut cases: Vec<Vec<u8>> = vec![vec![], vec![0], vec![0; 2], vec![0; 300], vec![1]];
    for n in [253usize, 254, 255, 256, 507, 508, 509, 1000] {
        cases.push((0..n).map(|i| (i % 255) as u8 + 1).collect());
        let mut with_zero = vec![0x11u8; n];
        with_zero.push(0);
        cases.push(with_zero.clone());
        with_zero.insert(0, 0);
        cases.push(with_zero);
    }
    for data in cases {
        let ours = fw::cobs_encode(&data);
        assert_eq!(ours, cobs::encode_vec(&data), "encoding {} bytes", data.len());
        assert!(!ours.contains(&0));
        assert_eq!(fw::cobs_decode(&ours).as_deref(), Some(&data[..]), "{} bytes", data.len());
    }
}

#[test]
fn cobs_rejects_what_is_not_cobs() {
    assert_eq!(fw::cobs_decode(&[0x03, 0x11]), None, "code past the end");
    assert_eq!(fw::cobs_decode(&[0x02, 0x00]), None, "a zero inside");
    assert_eq!(fw::cobs_decode(&[0x00]), None, "code zero");
    assert_eq!(fw::unframe(&[0x03, 0x01, 0x01]), None, "two bytes: too short");
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

proptest! {
    #[test]
    fn crc_agrees_with_the_host(data in proptest::collection::vec(any::<u8>(), 0..300)) {
        prop_assert_eq!(fw::crc16(&data), servotty::protocol::checksum(&data));
    }

    #[test]
    fn cobs_agrees_with_the_host(data in proptest::collection::vec(
        prop_oneof![3 => 1u8..=255, 1 => Just(0u8)], 0..700)) {
        let ours = fw::cobs_encode(&data);
        prop_assert_eq!(&ours, &cobs::encode_vec(&data));
        prop_assert_eq!(fw::cobs_decode(&ours), Some(data.clone()));
    }

    #[test]
    fn cobs_decoding_agrees_on_any_zero_free_input(data in proptest::collection::vec(1u8..=255, 1..600)) {
        let host = cobs::decode_vec(&data).ok();
        prop_assert_eq!(fw::cobs_decode(&data), host);
    }

    #[test]
    fn host_frames_reach_the_board_intact(m in any_host_message()) {
        let wire = host_frame(&m);
        prop_assert_eq!(fw::unframe(&wire[..wire.len() - 1]), Some(payload(&m)));
    }

    #[test]
    fn telemetry_reaches_the_host_intact(t in any_telemetry()) {
        let bytes = fw::frame(&fw::telemetry_payload(fields(&t))).expect("frames");
        prop_assert_eq!(board_messages(&bytes), vec![BoardMessage::Telemetry(t)]);
    }

    #[test]
    fn board_hello_reaches_the_host_intact(
        max_tick_hz in any::<u16>(), feats in any::<u16>(), name in "[a-z0-9-]{0,20}") {
        let b = Board::power_up(max_tick_hz, feats, &name);
        b.take_tx();
        b.rx(&host_frame(&HostMessage::Hello));
        let cut: String = name.chars().take(16).collect();
        prop_assert_eq!(board_messages(&b.take_tx()), vec![BoardMessage::Hello(Capabilities {
            protocol_version: 1, max_tick_hz, features: feats, board_name: cut })]);
    }

    /// Any sequence of host messages and ticks: the board's telemetry always decodes, its
    /// motor matches the contract's model, and ack_seq echoes the last command.
    #[test]
    fn random_sessions_follow_the_model(
        steps in proptest::collection::vec((any_host_message(), 0u32..30_000, any::<bool>()), 1..60)) {
        let b = Board::power_up(2000, ALL_FEATURES, "m");
        b.take_tx();
        let (mut now, mut streaming, mut motor, mut ack, mut last, mut wd) =
            (0u32, false, None::<i16>, 0u16, 0u32, 0u16);
        for (m, dt, do_tick) in steps {
            now = now.wrapping_add(dt);
            b.set_time_us(now);
            b.rx(&host_frame(&m));
            match m {
                HostMessage::Hello => { streaming = false; motor = None; }
                HostMessage::Configure { tick_hz, watchdog_ms }
                    if (1..=2000).contains(&tick_hz) && watchdog_ms > 0 => {
                    streaming = true; motor = None; ack = 0; last = now; wd = watchdog_ms;
                }
                HostMessage::Configure { .. } => {}
                HostMessage::Duty { seq, duty } if streaming => {
                    motor = Some(duty.clamp(-10_000, 10_000)); ack = seq; last = now;
                }
                HostMessage::Duty { .. } => {}
                HostMessage::Stop { seq } => { motor = None; ack = seq; last = now; }
            }
            let out = b.take_tx();
            if matches!(m, HostMessage::Hello) {
                prop_assert_eq!(board_messages(&out).len(), 1);
            }
            prop_assert_eq!(b.motor(), motor);
            if do_tick {
                b.tick();
                let t = telemetry(&b.take_tx());
                if !streaming {
                    prop_assert!(t.is_empty());
                    continue;
                }
                if now.wrapping_sub(last) >= u32::from(wd) * 1000 {
                    motor = None;
                }
                prop_assert_eq!(t.len(), 1);
                prop_assert_eq!(t[0].ack_seq, ack);
                prop_assert_eq!(t[0].status & status::MOTOR_ON != 0, motor.is_some());
                prop_assert_eq!(b.motor(), motor);
            }
        }
    }
}
