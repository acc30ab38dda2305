//! Homing sequences as a pure state machine: fed one frame's facts at a time, it answers with
//! orders (move, stop, latch home, limit duty, done, fail) that the axis task carries out.
//!
//! Keeping it free of I/O and of the axis task's internals lets every method be tested with
//! made-up frames, and keeps the axis task's frame handler short. Every search has a travel
//! bound (the profile's goal is at most `seek_limit` away, so running out of profile means
//! "not found") and the whole sequence a time bound.
//!
//! Written by hand: the sequences are the product's own operating procedure.

use crate::config::{HomingConfig, HomingMethod};

/// What the axis knows at one frame.
#[derive(Debug, Clone, Copy, Default)]
pub struct HomingView {
    /// Board time, s.
    pub t: f64,
    /// Position, units (in the axis's present, possibly unhomed, coordinates).
    pub position: f64,
    /// Unwrapped count.
    pub count: i64,
    /// Estimated velocity, unit/s.
    pub velocity: f64,
    /// target − position, units.
    pub following_error: f64,
    /// Home switch reads active.
    pub switch: bool,
    /// Index pulse reads active.
    pub index: bool,
    /// The last ordered move or stop has finished.
    pub profile_done: bool,
}

/// What the axis task must do.
#[derive(Debug, Clone, PartialEq)]
pub enum Order {
    /// Profiled move to `goal` at no more than `velocity`.
    MoveTo {
        /// Units.
        goal: f64,
        /// Unit/s.
        velocity: f64,
    },
    /// Decelerate to rest at the axis's maximum acceleration.
    Stop,
    /// Hold where it is now: setpoint to the measured position, controller reset.
    HoldHere,
    /// The point where the count was `count` has the position `value`.
    SetHome {
        /// Unwrapped count at the reference point.
        count: i64,
        /// Position value of that point, units.
        value: f64,
    },
    /// Limit |duty| to this, % (None: no extra limit); suspends following-error and stall
    /// trips while set, because pushing into an end stop is the point.
    LimitDuty(Option<f64>),
    /// Homed; hold here.
    Done,
    /// Homing failed: trip with this sentence.
    Fail(String),
}

#[derive(Debug, Clone, Copy, PartialEq)]
enum Phase {
    Start,
    Search { from: f64 },
    SearchStopping,
    BackOff { from: f64 },
    Approach { from: f64, was_active: bool },
    Latching { count: i64 },
    Push { from: f64, still_since: Option<f64> },
    PushBackOff,
    IndexSeek { from: f64, was_active: bool },
    Finished,
}

/// One homing run of one axis.
#[derive(Debug, Clone)]
pub struct HomingRun {
    cfg: HomingConfig,
    unit: String,
    /// Speeds below this count as standing still, unit/s.
    min_speed: f64,
    /// Following error that shows the axis is pushing against something, units.
    push_error: f64,
    phase: Phase,
    started: Option<f64>,
}

/// How long the axis must sit still against an end stop before it counts, s.
const PUSH_SETTLE_S: f64 = 0.05;

impl HomingRun {
    /// A run for an axis with this homing configuration. `min_speed` is the supervisor's
    /// noise floor; `following_error` is the axis's static band.
    pub fn new(cfg: &HomingConfig, unit: &str, min_speed: f64, following_error: f64) -> Self {
        Self {
            cfg: cfg.clone(),
            unit: unit.to_owned(),
            min_speed,
            push_error: 0.5 * following_error,
            phase: Phase::Start,
            started: None,
        }
    }

    /// True while following-error and stall trips must be suspended.
    pub fn pushing(&self) -> bool {
        matches!(self.phase, Phase::Push { .. })
    }

    /// Advances the sequence by one frame.
    pub fn step(&mut self, v: &HomingView) -> Vec<Order> {
        let started = *self.started.get_or_insert(v.t);
        if self.phase == Phase::Finished {
            return Vec::new();
        }
        if v.t - started > self.cfg.timeout_s {
            self.phase = Phase::Finished;
            return vec![
                Order::LimitDuty(None),
                Order::Fail(format!("homing took longer than {} s", self.cfg.timeout_s)),
            ];
        }
        let dir = self.cfg.direction.sign();
        let c = &self.cfg;
        let u = &self.unit;
        let far = |from: f64| from + dir * c.seek_limit;
        match (self.phase, c.method) {
            (Phase::Start, HomingMethod::None) => {
                self.phase = Phase::Finished;
                vec![Order::SetHome { count: v.count, value: c.mark_position }, Order::Done]
            }
            (Phase::Start, HomingMethod::Switch) if v.switch => {
                // Already on the switch: leave it first.
                self.phase = Phase::BackOff { from: v.position };
                vec![Order::MoveTo {
                    goal: v.position - dir * c.seek_limit,
                    velocity: c.touch_speed,
                }]
            }
            (Phase::Start, HomingMethod::Switch) => {
                self.phase = Phase::Search { from: v.position };
                vec![Order::MoveTo { goal: far(v.position), velocity: c.seek_speed }]
            }
            (Phase::Start, HomingMethod::HardStop) => {
                self.phase = Phase::Push { from: v.position, still_since: None };
                vec![
                    Order::LimitDuty(Some(c.hard_stop_duty)),
                    Order::MoveTo { goal: far(v.position), velocity: c.seek_speed },
                ]
            }
            (Phase::Start, HomingMethod::Index) => {
                self.phase = Phase::IndexSeek { from: v.position, was_active: v.index };
                vec![Order::MoveTo { goal: far(v.position), velocity: c.touch_speed }]
            }
            (Phase::Search { .. }, _) if v.switch => {
                self.phase = Phase::SearchStopping;
                vec![Order::Stop]
            }
            (Phase::Search { from }, _) if v.profile_done => self.fail(format!(
                "switch not found within {} {u} (searched from {from:.1} {u})",
                c.seek_limit
            )),
            (Phase::SearchStopping, _) if v.profile_done => {
                self.phase = Phase::BackOff { from: v.position };
                vec![Order::MoveTo {
                    goal: v.position - dir * c.seek_limit,
                    velocity: c.touch_speed,
                }]
            }
            (Phase::BackOff { from }, _) => {
                // Leave the switch, then go on by `backoff` so the slow approach starts from
                // a known distance.
                if !v.switch && (v.position - from).abs() >= c.backoff {
                    self.phase = Phase::Approach { from: v.position, was_active: false };
                    vec![Order::MoveTo { goal: far(v.position), velocity: c.touch_speed }]
                } else if v.profile_done {
                    self.fail(format!("switch still closed after backing off {} {u}", c.seek_limit))
                } else {
                    Vec::new()
                }
            }
            (Phase::Approach { from, was_active }, _) => {
                if v.switch && !was_active {
                    self.phase = Phase::Latching { count: v.count };
                    vec![Order::Stop]
                } else if v.profile_done || (v.position - from).abs() > c.seek_limit {
                    self.fail(format!(
                        "switch edge not found within {} {u} on the slow approach",
                        c.seek_limit
                    ))
                } else {
                    self.phase = Phase::Approach { from, was_active: v.switch };
                    Vec::new()
                }
            }
            (Phase::Latching { count }, _) if v.profile_done => {
                self.phase = Phase::Finished;
                vec![Order::SetHome { count, value: c.mark_position }, Order::Done]
            }
            (Phase::Push { from, still_since }, _) => {
                let still = v.velocity.abs() < self.min_speed;
                let pushing = v.following_error * dir > self.push_error;
                match (still && pushing, still_since) {
                    (true, Some(since)) if v.t - since >= PUSH_SETTLE_S => {
                        self.phase = Phase::PushBackOff;
                        let value = c.mark_position;
                        let back = value - dir * c.backoff;
                        vec![
                            Order::LimitDuty(None),
                            Order::SetHome { count: v.count, value },
                            Order::HoldHere,
                            Order::MoveTo { goal: back, velocity: c.seek_speed },
                        ]
                    }
                    (true, None) => {
                        self.phase = Phase::Push { from, still_since: Some(v.t) };
                        Vec::new()
                    }
                    (true, Some(_)) => Vec::new(),
                    (false, _) if v.profile_done => {
                        let mut o = vec![Order::LimitDuty(None)];
                        o.extend(self.fail(format!("no end stop within {} {u}", c.seek_limit)));
                        o
                    }
                    (false, _) => {
                        self.phase = Phase::Push { from, still_since: None };
                        Vec::new()
                    }
                }
            }
            (Phase::PushBackOff, _) if v.profile_done => {
                self.phase = Phase::Finished;
                vec![Order::Done]
            }
            (Phase::IndexSeek { from, was_active }, _) => {
                if v.index && !was_active {
                    self.phase = Phase::Latching { count: v.count };
                    vec![Order::Stop]
                } else if v.profile_done {
                    self.fail(format!(
                        "no index pulse within {} {u} (from {from:.1} {u})",
                        c.seek_limit
                    ))
                } else {
                    self.phase = Phase::IndexSeek { from, was_active: v.index };
                    Vec::new()
                }
            }
            _ => Vec::new(),
        }
    }

    fn fail(&mut self, why: String) -> Vec<Order> {
        self.phase = Phase::Finished;
        vec![Order::Fail(why)]
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::config::SearchDirection;

    fn cfg(method: HomingMethod) -> HomingConfig {
        HomingConfig {
            method,
            direction: SearchDirection::Negative,
            seek_limit: 100.0,
            backoff: 3.0,
            mark_position: 5.0,
            ..HomingConfig::default()
        }
    }

    fn view(t: f64, position: f64) -> HomingView {
        HomingView { t, position, count: (position * 10.0) as i64, ..HomingView::default() }
    }

    // The switch sequence (search, back off, slow approach, latch on the edge) is common
    // practice, no source.
    #[test]
    fn switch_sequence_orders() {
        let mut h = HomingRun::new(&cfg(HomingMethod::Switch), "mm", 1.0, 2.0);
        let o = h.step(&view(0.0, 50.0));
        assert_eq!(o, vec![Order::MoveTo { goal: -50.0, velocity: 20.0 }]);
        assert!(h.step(&view(0.1, 45.0)).is_empty());
        let mut v = view(0.2, 10.0);
        v.switch = true;
        assert_eq!(h.step(&v), vec![Order::Stop]);
        v.profile_done = true;
        v.position = 9.0;
        assert_eq!(h.step(&v), vec![Order::MoveTo { goal: 109.0, velocity: 2.0 }]);
        let mut v = view(0.3, 10.0);
        v.switch = false;
        assert!(h.step(&v).is_empty(), "not yet backed off 3 mm");
        let v = view(0.4, 12.5);
        assert_eq!(h.step(&v), vec![Order::MoveTo { goal: -87.5, velocity: 2.0 }]);
        assert!(h.step(&view(0.5, 11.0)).is_empty());
        let mut v = view(0.6, 10.3);
        v.switch = true;
        assert_eq!(h.step(&v), vec![Order::Stop]);
        let mut v = view(0.7, 10.2);
        v.switch = true;
        v.profile_done = true;
        assert_eq!(h.step(&v), vec![Order::SetHome { count: 103, value: 5.0 }, Order::Done]);
    }

    #[test]
    fn missing_switch_fails_at_the_travel_bound() {
        let mut h = HomingRun::new(&cfg(HomingMethod::Switch), "mm", 1.0, 2.0);
        h.step(&view(0.0, 50.0));
        let mut v = view(5.0, -50.0);
        v.profile_done = true;
        let o = h.step(&v);
        assert!(
            matches!(&o[..], [Order::Fail(s)] if s.contains("switch not found within 100 mm")),
            "{o:?}"
        );
    }

    #[test]
    fn time_bound_fails() {
        let mut c = cfg(HomingMethod::Switch);
        c.timeout_s = 1.0;
        let mut h = HomingRun::new(&c, "mm", 1.0, 2.0);
        h.step(&view(0.0, 50.0));
        let o = h.step(&view(1.5, 40.0));
        assert!(matches!(o.last(), Some(Order::Fail(s)) if s.contains("longer than 1 s")), "{o:?}");
    }

    #[test]
    fn hard_stop_latches_after_standing_still_against_it() {
        let mut h = HomingRun::new(&cfg(HomingMethod::HardStop), "mm", 1.0, 2.0);
        let o = h.step(&view(0.0, 20.0));
        assert_eq!(o[0], Order::LimitDuty(Some(25.0)));
        assert!(h.pushing());
        let mut v = view(0.5, 0.0);
        v.following_error = -3.0;
        assert!(h.step(&v).is_empty());
        v.t = 0.56;
        let o = h.step(&v);
        assert_eq!(
            o,
            vec![
                Order::LimitDuty(None),
                Order::SetHome { count: 0, value: 5.0 },
                Order::HoldHere,
                Order::MoveTo { goal: 8.0, velocity: 20.0 },
            ]
        );
        assert!(!h.pushing());
    }

    #[test]
    fn none_declares_home_here() {
        let mut h = HomingRun::new(&cfg(HomingMethod::None), "mm", 1.0, 2.0);
        assert_eq!(
            h.step(&view(0.0, 12.0)),
            vec![Order::SetHome { count: 120, value: 5.0 }, Order::Done]
        );
    }
}
