//! 4× quadrature decoding, as a board's firmware does it, and the encoder side that produces
//! the A/B signals for a given count.
//!
//! The simulated board uses [`ab_state`] to turn the plant's count into the two channel
//! levels and [`QuadratureDecoder`] to count them back, so a sampled encoder behaves like a
//! real one (a jump of two or more counts between samples is lost or miscounted, exactly as
//! on hardware).
//!
//! Conventions (D. G. Alciatore and M. B. Histand, *Introduction to Mechatronics and
//! Measurement Systems*, 4th ed., 2012, §9.3, from memory; common practice): the state is
//! `s = (A << 1) | B`, the forward sequence is 00 → 10 → 11 → 01 → 00, and a transition in
//! which both channels change at once is illegal: it is counted as an error and not as motion.
//!
//! Hand-written: the whole decoder is a 16-entry table; a crate would add nothing.

/// Count change for each transition, indexed by `(prev << 2) | curr`. `ILLEGAL` marks a
/// transition where both channels changed between two samples.
const ILLEGAL: i8 = i8::MIN;
const TRANSITIONS: [i8; 16] = [
    0, -1, 1, ILLEGAL, //
    1, 0, ILLEGAL, -1, //
    -1, ILLEGAL, 0, 1, //
    ILLEGAL, 1, -1, 0,
];

/// Forward Gray sequence of `(A << 1) | B` states.
const FORWARD: [u8; 4] = [0b00, 0b10, 0b11, 0b01];

/// A/B state an encoder shows at `count` (4× counts; count 0 shows A = 0, B = 0).
pub fn ab_state(count: i64) -> u8 {
    // rem_euclid keeps negative counts on the same cycle: −1 is the state before 0.
    FORWARD[count.rem_euclid(4) as usize]
}

/// 4× decoder: counts every edge of either channel, with direction.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct QuadratureDecoder {
    prev: u8,
    count: i64,
    errors: u64,
}

impl QuadratureDecoder {
    /// Decoder whose last seen state is `initial_state` (only the low two bits are used), with
    /// count and error tally at zero.
    pub fn new(initial_state: u8) -> Self {
        Self { prev: initial_state & 0b11, count: 0, errors: 0 }
    }

    /// Takes one sample of `(A << 1) | B` (bits above the low two are ignored) and returns
    /// the count change: −1, 0 or +1. An illegal transition (both channels changed) returns
    /// 0 and adds one to [`errors`](Self::errors); the new state is still taken as current,
    /// so decoding resumes from it.
    pub fn update(&mut self, state: u8) -> i8 {
        let curr = state & 0b11;
        let delta = TRANSITIONS[usize::from((self.prev << 2) | curr)];
        self.prev = curr;
        if delta == ILLEGAL {
            self.errors += 1;
            return 0;
        }
        self.count += i64::from(delta);
        delta
    }

    /// Net count since construction.
    pub fn count(&self) -> i64 {
        self.count
    }

    /// Illegal transitions seen since construction.
    pub fn errors(&self) -> u64 {
        self.errors
    }

    /// The last state taken.
    pub fn state(&self) -> u8 {
        self.prev
    }
}

#[cfg(test)]
mod tests {
    use proptest::prelude::*;

    use super::*;

    // Checks below: Alciatore & Histand, *Introduction to Mechatronics and Measurement
    // Systems*, 4th ed., 2012, §9.3 (from memory); the sequences are common practice.

    #[test]
    fn forward_sequence_counts_five() {
        let mut d = QuadratureDecoder::new(0b00);
        for s in [0b10, 0b11, 0b01, 0b00, 0b10] {
            assert_eq!(d.update(s), 1);
        }
        assert_eq!(d.count(), 5);
        assert_eq!(d.errors(), 0);
    }

    #[test]
    fn both_channels_changing_is_one_error_and_no_count() {
        let mut d = QuadratureDecoder::new(0b00);
        assert_eq!(d.update(0b11), 0);
        assert_eq!(d.count(), 0);
        assert_eq!(d.errors(), 1);
        // Decoding resumes from the new state: 11 → 01 is forward.
        assert_eq!(d.update(0b01), 1);
        assert_eq!(d.errors(), 1);
    }

    #[test]
    fn hundred_forward_cycles_count_four_hundred() {
        let mut d = QuadratureDecoder::new(0b00);
        for _ in 0..100 {
            for s in [0b10, 0b11, 0b01, 0b00] {
                d.update(s);
            }
        }
        assert_eq!(d.count(), 400);
        assert_eq!(d.errors(), 0);
    }

    #[test]
    fn reverse_sequence_counts_down() {
        let mut d = QuadratureDecoder::new(0b00);
        for _ in 0..100 {
            for s in [0b01, 0b11, 0b10, 0b00] {
                assert_eq!(d.update(s), -1);
            }
        }
        assert_eq!(d.count(), -400);
        assert_eq!(d.errors(), 0);
    }

    #[test]
    fn repeated_state_is_no_motion() {
        let mut d = QuadratureDecoder::new(0b10);
        assert_eq!(d.update(0b10), 0);
        assert_eq!(d.count(), 0);
        assert_eq!(d.errors(), 0);
    }

    #[test]
    fn high_bits_are_ignored() {
        let mut d = QuadratureDecoder::new(0xFC);
        assert_eq!(d.state(), 0b00);
        assert_eq!(d.update(0xF2), 1);
    }

    #[test]
    fn encoder_side_follows_the_forward_gray_sequence() {
        assert_eq!([0, 1, 2, 3, 4].map(ab_state), [0b00, 0b10, 0b11, 0b01, 0b00]);
        assert_eq!([-1, -2, -3, -4].map(ab_state), [0b01, 0b11, 0b10, 0b00]);
        assert_eq!(ab_state(i64::MIN), 0b00);
        assert_eq!(ab_state(i64::MAX), 0b01);
    }

    proptest! {
        // Any walk that moves at most one count between samples is decoded exactly.
        #[test]
        fn decoder_recovers_any_single_step_walk(steps in prop::collection::vec(-1i64..=1, 0..500), start in -1000i64..1000) {
            let mut d = QuadratureDecoder::new(ab_state(start));
            let mut c = start;
            for s in steps {
                c += s;
                d.update(ab_state(c));
            }
            prop_assert_eq!(d.count(), c - start);
            prop_assert_eq!(d.errors(), 0);
        }
    }
}
