//! The cockpit's state and everything that changes it: operator actions, sampled snapshots
//! and notices from background work.
//!
//! Nothing here touches the terminal or the engine. [`App::apply`] turns an [`Action`] into
//! a state change plus [`Effect`]s for the runner; [`App::observe`] takes the latest snapshot
//! of every axis once per frame, keeps the histories and derives the event log from what
//! changed between frames. Time is passed in, so tests are exact.

use std::path::PathBuf;
use std::time::Duration;

use crate::cockpit::action::{Action, Effect};
use crate::cockpit::event_log::{EventLog, Kind};
use crate::cockpit::format::{decimals_for, num, plain};
use crate::cockpit::gain_edit;
use crate::cockpit::history::{History, Sample};
use crate::cockpit::jog::{self, JogSettings};
use crate::cockpit::keys::Mode;
use crate::cockpit::theme::Theme;
use crate::config::{ConfigSource, ControllerConfig, MachineConfig};
use crate::config_write::SaveReport;
use crate::control::params::{self, Param};
use crate::engine::events::ChangedBy;
use crate::engine::{AxisCommand, AxisSnapshot, AxisState};

/// Samples kept per axis: 30 s at the default 20 frames/s.
pub const HISTORY_SAMPLES: usize = 600;
/// Sparklines advance every this many frames (4 times a second at 20 frames/s): smooth
/// enough to read a trend, and a fifth of the bytes of scrolling every frame.
pub const SPARK_STRIDE: u64 = 5;
/// Seconds shown in the detail screen's charts.
pub const CHART_SECONDS: f64 = 10.0;
/// Longest text a prompt accepts.
const ENTRY_MAX: usize = 200;
/// Bad or missed frames are logged at most this often per axis.
const LINK_LOG_PERIOD: Duration = Duration::from_secs(2);
/// What the jog and home keys say until the engine has those commands.
/// Suggested file name when the demo's gains are written out.
pub const DEFAULT_COPY_NAME: &str = "servotty.toml";

/// Which screen is showing.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Screen {
    /// All axes.
    Overview,
    /// The selected axis.
    Detail,
    /// The event log.
    Log,
    /// One axis's trip: history and diagnosis.
    Trip,
    /// Move lists: choose, run, pause, resume, abort.
    Lists,
}

/// What a prompt is for.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Purpose {
    /// Move an axis to a typed position.
    GoTo {
        /// Axis index.
        axis: usize,
    },
    /// A new value for a controller parameter.
    Gain {
        /// Axis index.
        axis: usize,
        /// Which parameter.
        param: Param,
    },
    /// A file name for a copy of the configuration (the demo has no file).
    SaveCopy,
    /// Which tuning step to run on an axis (one letter).
    Test {
        /// Axis index.
        axis: usize,
    },
    /// A name for the present position (a spot).
    StoreSpot,
    /// A fault drill for a simulated axis (the drill menu).
    Drill {
        /// Axis index.
        axis: usize,
    },
}

/// A prompt being typed.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Prompt {
    /// What it is for.
    pub purpose: Purpose,
    /// What has been typed.
    pub text: String,
    /// Why the last attempt was refused.
    pub error: Option<String>,
}

/// What is drawn over the screen.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Overlay {
    /// Nothing.
    None,
    /// Key help.
    Help,
    /// "Quit?"
    ConfirmQuit,
    /// A prompt.
    Prompt(Prompt),
    /// The spot picker, with the chosen row (index into the spots in name order).
    Spots(usize),
}

/// News from background work.
#[derive(Debug, Clone, PartialEq)]
pub enum Notice {
    /// An axis answered a command.
    Reply {
        /// Axis index.
        axis: usize,
        /// The command, in words.
        what: String,
        /// `Err(reason)` when refused.
        result: Result<(), String>,
    },
    /// Something the engine reported that snapshots do not show (a trip capture written, a
    /// notice such as a test's end).
    Engine(crate::engine::Event),
    /// A tuning step finished (or failed).
    Tuned {
        /// Axis index.
        axis: usize,
        /// What it found.
        result: Result<crate::commission::Outcome, String>,
    },
    /// Machine-wide homing finished (or stopped).
    HomeAll {
        /// `Err(reason)` when an axis failed.
        result: Result<(), String>,
    },
    /// An axis's history arrived for the trip screen.
    History {
        /// Axis index.
        axis: usize,
        /// The rows, or why there are none.
        result: Result<Vec<crate::engine::history::Sample>, String>,
    },
    /// A coordinated move (a spot) ended.
    Line {
        /// What it was (`@tray2`).
        what: String,
        /// Its outcome, or why it did not start.
        result: Result<crate::engine::line_move::LineOutcome, String>,
    },
    /// The move lists beside the configuration, read.
    Lists(Vec<crate::move_list::catalog::Found>),
    /// A running list reported a step.
    ListProgress(crate::move_list::runner::Progress),
    /// A list run ended, or could not start.
    ListEnded(Result<crate::move_list::runner::ListOutcome, String>),
    /// A fault drill reached its simulated board (or could not).
    Drill {
        /// Axis index.
        axis: usize,
        /// What the board did, in words, or why not.
        result: Result<String, String>,
    },
    /// A save finished.
    Saved {
        /// What happened.
        result: Result<SaveReport, String>,
        /// The controller parameters that were written.
        controllers: Vec<ControllerConfig>,
        /// True when this created a new file (the demo's copy).
        new_file: bool,
    },
}

/// Column widths that depend only on the configuration, worked out once.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Columns {
    /// Widest axis name.
    pub name_width: usize,
    /// Widest position (soft limits at each axis's decimals), so columns line up across
    /// panels.
    pub pos_width: usize,
}

impl Columns {
    fn of(config: &MachineConfig) -> Self {
        let name_width = config.axes.iter().map(|a| a.name.chars().count()).max().unwrap_or(1);
        let pos_width = config
            .axes
            .iter()
            .map(|a| {
                let d = decimals_for(a.scale.counts_per_unit);
                num(a.limits.soft_min, d, 0).len().max(num(a.limits.soft_max, d, 0).len())
            })
            .max()
            .unwrap_or(4);
        Self { name_width, pos_width }
    }
}

/// One axis as the cockpit sees it.
#[derive(Debug, Clone)]
pub struct AxisView {
    /// The latest snapshot.
    pub snap: AxisSnapshot,
    /// Sampled values.
    pub history: History,
    /// Decimals worth showing for positions.
    pub decimals: usize,
    bad_logged: u64,
    missed_logged: u64,
    link_logged_at: Option<Duration>,
}

/// The whole cockpit state.
#[derive(Debug, Clone)]
pub struct App {
    /// The live configuration (gains as edited).
    pub config: MachineConfig,
    /// Controller parameters as last saved (or loaded).
    saved: Vec<ControllerConfig>,
    /// Where the configuration came from.
    pub source: ConfigSource,
    /// Per axis, in configuration order.
    pub axes: Vec<AxisView>,
    /// Selected axis index.
    pub selected: usize,
    /// Screen showing.
    pub screen: Screen,
    log_return: Screen,
    /// Overlay on top.
    pub overlay: Overlay,
    /// The event log.
    pub log: EventLog,
    /// Jog step and speed.
    pub jog: JogSettings,
    /// Stop-all latched, as last seen (or as just requested).
    pub stop_latched: bool,
    /// Stop-all's category.
    pub stop_category: u8,
    /// Detail screen: chosen parameter (index into the axis's parameter list).
    pub param_cursor: usize,
    /// Log screen: entries scrolled back from the newest (0 follows new entries).
    pub log_back: usize,
    /// First key row shown by the help overlay, when the help does not fit the screen.
    pub help_top: u16,
    /// Cockpit time of the latest frame.
    pub now: Duration,
    /// Colours and glyphs.
    pub theme: Theme,
    /// Column widths for drawing.
    pub layout: Columns,
    /// Where the log file is (shown in help), or why there is none.
    pub log_file: Result<PathBuf, String>,
    /// Gains the last tuning step suggested, for one axis, until applied.
    pub suggested: Option<(usize, ControllerConfig)>,
    /// The suggestion's verification step was worse than the current gains': `a` asks for a
    /// second press before it applies them.
    pub suggested_worse: bool,
    /// Where trip captures and the event log are written, shown in the help overlay.
    pub recorder: Option<crate::engine::recorder::RecorderPaths>,
    /// Set when the cockpit should end.
    pub quit: bool,
    /// The trip screen's history and diagnosis, once fetched.
    pub trip_view: Option<crate::cockpit::trip_view::TripView>,
    /// The list screen.
    pub lists: crate::cockpit::lists::ListScreen,
    /// Per axis: whether it takes fault drills (its board is simulated in process). Set by
    /// the runner from the machine; all false until then.
    pub drillable: Vec<bool>,
}

impl App {
    /// A cockpit for `config` with every axis offline.
    pub fn new(config: MachineConfig, source: ConfigSource, theme: Theme) -> Self {
        let axes = config
            .axes
            .iter()
            .map(|a| AxisView {
                snap: AxisSnapshot::offline(&a.name, &a.scale.unit),
                history: History::new(HISTORY_SAMPLES),
                decimals: decimals_for(a.scale.counts_per_unit),
                bad_logged: 0,
                missed_logged: 0,
                link_logged_at: None,
            })
            .collect();
        let mut log = EventLog::default();
        log.push(Duration::ZERO, Kind::Info, format!("cockpit started on {source}"));
        for w in &config.renamed_keys {
            log.push(Duration::ZERO, Kind::Info, format!("warning: {w}"));
        }
        Self {
            saved: config.axes.iter().map(|a| a.controller.clone()).collect(),
            stop_category: config.machine.stop_category,
            layout: Columns::of(&config),
            config,
            source,
            axes,
            selected: 0,
            screen: Screen::Overview,
            log_return: Screen::Overview,
            overlay: Overlay::None,
            log,
            jog: JogSettings::default(),
            stop_latched: false,
            param_cursor: 0,
            log_back: 0,
            help_top: 0,
            now: Duration::ZERO,
            theme,
            log_file: Err("not set up".to_owned()),
            recorder: None,
            suggested: None,
            suggested_worse: false,
            quit: false,
            trip_view: None,
            lists: crate::cockpit::lists::ListScreen::default(),
            drillable: Vec::new(),
        }
    }

    /// The input mode: the overlay if one is open, else the screen.
    pub fn mode(&self) -> Mode {
        match (&self.overlay, self.screen) {
            (Overlay::Help, _) => Mode::Help,
            (Overlay::ConfirmQuit, _) => Mode::ConfirmQuit,
            (Overlay::Prompt(_), _) => Mode::Entry,
            (Overlay::Spots(_), _) => Mode::Spots,
            (Overlay::None, Screen::Overview) => Mode::Overview,
            (Overlay::None, Screen::Detail) => Mode::Detail,
            (Overlay::None, Screen::Log) => Mode::Log,
            (Overlay::None, Screen::Trip) => Mode::Trip,
            (Overlay::None, Screen::Lists) => Mode::Lists,
        }
    }

    /// Axis `i`'s controller parameters as last saved (or loaded).
    pub fn saved_controller(&self, i: usize) -> Option<&ControllerConfig> {
        self.saved.get(i)
    }

    /// True when live gains differ from the file.
    pub fn unsaved(&self) -> bool {
        self.config.axes.iter().zip(&self.saved).any(|(a, s)| a.controller != *s)
    }

    /// Names of axes whose motor is on.
    pub fn motors_on(&self) -> Vec<&str> {
        self.axes.iter().filter(|a| a.snap.state.motor_on()).map(|a| &*a.snap.axis).collect()
    }

    /// Every axis's goal as last seen (where a move list's targets are worked out from, as
    /// the runner does from the engine's own snapshots).
    pub fn goals(&self) -> std::collections::BTreeMap<String, f64> {
        self.axes.iter().map(|v| (v.snap.axis.to_string(), v.snap.goal)).collect()
    }

    /// (homed, total).
    pub fn homed(&self) -> (usize, usize) {
        (self.axes.iter().filter(|a| a.snap.homed).count(), self.axes.len())
    }

    /// The parameters the selected axis's controller offers.
    pub fn params(&self) -> Vec<Param> {
        self.config
            .axes
            .get(self.selected)
            .map_or_else(Vec::new, |a| params::used_by(&a.controller))
    }

    fn name(&self, axis: usize) -> &str {
        self.config.axes.get(axis).map_or("?", |a| a.name.as_str())
    }

    fn unit(&self, axis: usize) -> &str {
        self.config.axes.get(axis).map_or("", |a| a.scale.unit.as_str())
    }

    pub(crate) fn note(&mut self, kind: Kind, text: impl Into<String>) {
        self.log.push(self.now, kind, text);
    }

    fn command(&mut self, axis: usize, command: AxisCommand, words: &str) -> Effect {
        let name = self.name(axis).to_owned();
        self.note(Kind::Operator, format!("{name}: {words}"));
        Effect::Command { axis, command }
    }

    /// Records where the event log and trip captures go, and says so in the log.
    pub fn set_recorder(&mut self, paths: crate::engine::recorder::RecorderPaths) {
        self.note(Kind::Info, format!("event log: {}", paths.event_log.display()));
        self.note(Kind::Info, format!("trip captures: {}", paths.captures_dir.display()));
        self.recorder = Some(paths);
    }

    /// Applies an operator action at cockpit time `now`; returns what the runner must do.
    pub fn apply(&mut self, now: Duration, action: Action) -> Vec<Effect> {
        self.now = self.now.max(now);
        let sel = self.selected;
        let n = self.axes.len();
        match action {
            Action::StopAll => {
                self.stop_latched = true;
                let how = if self.stop_category == 0 {
                    "motor off at once"
                } else {
                    "controlled stop, then motor off"
                };
                self.note(
                    Kind::Operator,
                    format!("STOP-ALL latched (category {}: {how})", self.stop_category),
                );
                return vec![Effect::StopAll];
            }
            Action::ReleaseStopAll => {
                if !self.stop_latched {
                    self.note(Kind::Info, "stop-all is not latched");
                    return vec![];
                }
                self.stop_latched = false;
                self.note(Kind::Operator, "stop-all released (axes stay off until enabled)");
                return vec![Effect::ReleaseStopAll];
            }
            Action::SelectPrev if n > 0 => self.select((sel + n - 1) % n),
            Action::SelectNext if n > 0 => self.select((sel + 1) % n),
            Action::SelectAxis(i) if i < n => self.select(i),
            Action::SelectPrev | Action::SelectNext | Action::SelectAxis(_) => {}
            Action::OpenDetail => {
                self.screen = Screen::Detail;
                self.param_cursor = self.param_cursor.min(self.params().len().saturating_sub(1));
            }
            Action::Back => self.screen = Screen::Overview,
            Action::TripView => {
                self.trip_view = None;
                self.screen = Screen::Trip;
                return vec![Effect::FetchHistory { axis: sel }];
            }
            Action::Drill if self.drillable.get(sel).copied().unwrap_or(false) => {
                self.prompt(Purpose::Drill { axis: sel }, String::new());
            }
            Action::Drill if n > 0 => {
                let name = self.name(sel).to_owned();
                self.note(
                    Kind::Refused,
                    format!("{name}: {}", crate::cockpit::drill::ONLY_SIMULATED),
                );
            }
            Action::Drill => {}
            Action::ToggleLog => {
                if self.screen == Screen::Log {
                    self.screen = self.log_return;
                } else {
                    self.log_return = self.screen;
                    self.screen = Screen::Log;
                    self.log_back = 0;
                }
            }
            Action::Help => {
                self.overlay = Overlay::Help;
                self.help_top = 0;
            }
            // The renderer clamps it to what the screen leaves hidden.
            Action::HelpScroll(by) => {
                self.help_top = self.help_top.saturating_add_signed(i16::from(by)).min(200)
            }
            Action::CloseOverlay | Action::CancelQuit | Action::EntryCancel => {
                self.overlay = Overlay::None;
            }
            Action::Enable => return vec![self.command(sel, AxisCommand::Enable, "enable")],
            Action::Disable => return vec![self.command(sel, AxisCommand::Disable, "disable")],
            Action::ClearTrip => {
                return vec![self.command(sel, AxisCommand::ClearTrip, "clear trip")]
            }
            Action::StopAxis => return vec![self.command(sel, AxisCommand::Stop, "stop")],
            Action::EnableAll => return self.all(AxisCommand::Enable, "enable", |_| true),
            Action::DisableAll => return self.all(AxisCommand::Disable, "disable", |_| true),
            Action::ClearAllTrips => {
                let fx = self.all(AxisCommand::ClearTrip, "clear trip", |s| s.trip.is_some());
                if fx.is_empty() {
                    self.note(Kind::Info, "no axis is tripped");
                }
                return fx;
            }
            Action::GoTo if n > 0 => self.prompt(Purpose::GoTo { axis: sel }, String::new()),
            Action::GoTo => {}
            Action::StoreSpot if n > 0 => self.prompt(Purpose::StoreSpot, String::new()),
            Action::StoreSpot => {}
            Action::Test if n > 0 => self.prompt(Purpose::Test { axis: sel }, String::new()),
            Action::Test => {}
            Action::ApplySuggested => return self.apply_suggested(),
            Action::JogRelease if n > 0 => {
                return vec![Effect::Command { axis: sel, command: AxisCommand::JogRelease }];
            }
            Action::JogRelease => {}
            Action::HomeAll => {
                self.note(Kind::Operator, "home all axes in the configured order");
                return vec![Effect::HomeAll];
            }
            Action::JogStep(_) | Action::JogHold(_) | Action::Home => {
                let Some(cfg) = self.config.axes.get(sel).map(|a| a.jog.clone()) else {
                    return Vec::new();
                };
                self.jog.clamp_to(&cfg);
                if let Some(c) = jog::motion_command(action, self.jog, &cfg) {
                    // A held jog key repeats 25–40 times a second: one log line per repeat
                    // would bury everything else.
                    if matches!(action, Action::JogHold(_)) {
                        return vec![Effect::Command { axis: sel, command: c }];
                    }
                    let words = c.words();
                    return vec![self.command(sel, c, &words)];
                }
            }
            Action::StepSmaller => self.jog.smaller_step(),
            Action::StepLarger => self.jog.larger_step(),
            Action::SpeedLower => self.jog.slower(),
            Action::SpeedHigher => self.jog.faster(),
            Action::ParamPrev => self.param_cursor = self.param_cursor.saturating_sub(1),
            Action::ParamNext => {
                self.param_cursor =
                    (self.param_cursor + 1).min(self.params().len().saturating_sub(1));
            }
            Action::EditParam => {
                if let (Some(&param), Some(a)) =
                    (self.params().get(self.param_cursor), self.config.axes.get(sel))
                {
                    let text = plain(param.get(&a.controller));
                    self.prompt(Purpose::Gain { axis: sel, param }, text);
                }
            }
            Action::SaveGains => return self.save(),
            Action::ScrollUp => {
                self.log_back = (self.log_back + 1).min(self.log.len().saturating_sub(1))
            }
            Action::ScrollDown => self.log_back = self.log_back.saturating_sub(1),
            Action::PageUp => {
                self.log_back = (self.log_back + 10).min(self.log.len().saturating_sub(1))
            }
            Action::PageDown => self.log_back = self.log_back.saturating_sub(10),
            Action::ScrollTop => self.log_back = self.log.len().saturating_sub(1),
            Action::ScrollEnd => self.log_back = 0,
            Action::Quit => {
                if self.motors_on().is_empty() && !self.unsaved() {
                    self.quit = true;
                } else {
                    self.overlay = Overlay::ConfirmQuit;
                }
            }
            Action::ConfirmQuit => self.quit = true,
            Action::EntryChar(c) => {
                if let Overlay::Prompt(p) = &mut self.overlay {
                    if p.text.chars().count() < ENTRY_MAX {
                        p.text.push(c);
                    }
                    p.error = None;
                }
            }
            Action::EntryBackspace => {
                if let Overlay::Prompt(p) = &mut self.overlay {
                    p.text.pop();
                    p.error = None;
                }
            }
            Action::EntrySubmit => return self.submit(),
            Action::OpenLists => {
                self.screen = Screen::Lists;
                // Read afresh each time (a list edited meanwhile), but never swap the list
                // under a run.
                if !self.lists.phase.active() {
                    return vec![Effect::FindLists {
                        config: Box::new(self.config.clone()),
                        source: self.source.clone(),
                    }];
                }
            }
            Action::ListPrev => self.lists.choose(-1),
            Action::ListNext => self.lists.choose(1),
            Action::ListGo => return self.list_go(),
            Action::ListPause => return self.list_pause(),
            Action::ListAbort => return self.list_abort(),
            Action::OpenSpots => {
                if self.config.spots.is_empty() {
                    self.note(
                        Kind::Info,
                        "no spots: add a [spots] table to the configuration, or P stores one",
                    );
                } else {
                    self.overlay = Overlay::Spots(0);
                }
            }
            Action::SpotPrev | Action::SpotNext => {
                let n = self.config.spots.0.len();
                if let Overlay::Spots(i) = &mut self.overlay {
                    if n > 0 {
                        *i = if action == Action::SpotPrev {
                            (*i + n - 1) % n
                        } else {
                            (*i + 1) % n
                        };
                    }
                }
            }
            Action::SpotGo => return self.spot_go(),
        }
        vec![]
    }

    fn select(&mut self, i: usize) {
        if i != self.selected {
            self.selected = i;
            self.param_cursor = self.param_cursor.min(self.params().len().saturating_sub(1));
        }
    }

    fn prompt(&mut self, purpose: Purpose, text: String) {
        self.overlay = Overlay::Prompt(Prompt { purpose, text, error: None });
    }

    fn all(
        &mut self,
        command: AxisCommand,
        words: &str,
        pick: impl Fn(&AxisSnapshot) -> bool,
    ) -> Vec<Effect> {
        let picked: Vec<usize> =
            (0..self.axes.len()).filter(|&i| pick(&self.axes[i].snap)).collect();
        if !picked.is_empty() {
            let names: Vec<&str> = picked.iter().map(|&i| self.name(i)).collect();
            let text = format!("{}: {words}", names.join(", "));
            self.note(Kind::Operator, text);
        }
        picked.into_iter().map(|axis| Effect::Command { axis, command: command.clone() }).collect()
    }

    fn save(&mut self) -> Vec<Effect> {
        if !self.unsaved() {
            self.note(Kind::Info, format!("no unsaved gain changes ({})", self.source));
            return vec![];
        }
        match &self.source {
            ConfigSource::File(path) => {
                let path = path.clone();
                self.note(Kind::Operator, format!("saving gains to {}", path.display()));
                vec![Effect::SaveGains { path, config: self.config.clone() }]
            }
            ConfigSource::BuiltInDemo => {
                // The demo is compiled in: offer to write a copy that later runs can load.
                self.prompt(Purpose::SaveCopy, DEFAULT_COPY_NAME.to_owned());
                vec![]
            }
        }
    }

    fn submit(&mut self) -> Vec<Effect> {
        let Overlay::Prompt(p) = &self.overlay else { return vec![] };
        let (purpose, text) = (p.purpose, p.text.trim().to_owned());
        let outcome: Result<Vec<Effect>, String> = match purpose {
            Purpose::GoTo { axis } => self.submit_goto(axis, &text),
            Purpose::Gain { axis, param } => self.submit_gain(axis, param, &text),
            Purpose::Test { axis } => self.submit_test(axis, &text),
            Purpose::StoreSpot => self.submit_store_spot(&text),
            Purpose::Drill { axis } => crate::cockpit::drill::parse(&text).map(|pick| {
                let name = self.name(axis).to_owned();
                self.note(Kind::Operator, format!("{name}: DRILL {text}"));
                vec![Effect::Drill { axis, pick }]
            }),
            Purpose::SaveCopy => {
                if text.is_empty() {
                    Err("type a file name".to_owned())
                } else {
                    let path = PathBuf::from(&text);
                    self.note(Kind::Operator, format!("writing the configuration to {text}"));
                    Ok(vec![Effect::WriteCopy { path, config: self.config.clone() }])
                }
            }
        };
        match outcome {
            Ok(fx) => {
                self.overlay = Overlay::None;
                fx
            }
            Err(e) => {
                if let Overlay::Prompt(p) = &mut self.overlay {
                    p.error = Some(e);
                }
                vec![]
            }
        }
    }

    /// `@spot` in the go-to prompt: every axis the spot names to its position there, on one
    /// straight line, arriving together.
    fn submit_goto_spot(&mut self, text: &str) -> Result<Vec<Effect>, String> {
        let name = text.strip_prefix('@').unwrap_or(text).to_owned();
        self.line_to_spot(&name)
    }

    /// The spot picker's Enter: like `g @name`; the picker stays open when refused.
    fn spot_go(&mut self) -> Vec<Effect> {
        let Overlay::Spots(i) = self.overlay else { return vec![] };
        let Some(name) = self.config.spots.names().nth(i).map(str::to_owned) else {
            return vec![];
        };
        match self.line_to_spot(&name) {
            Ok(fx) => {
                self.overlay = Overlay::None;
                fx
            }
            Err(e) => {
                self.note(Kind::Refused, format!("@{name}: {e}"));
                vec![]
            }
        }
    }

    /// One coordinated move to spot `name`, refused when an axis it names is not homed.
    fn line_to_spot(&mut self, name: &str) -> Result<Vec<Effect>, String> {
        let targets = crate::spots::targets(&self.config, name)?;
        if let Some(why) = crate::spots::unreachable(&self.config, name, |axis| {
            self.axes.iter().any(|v| &*v.snap.axis == axis && v.snap.homed)
        }) {
            return Err(why);
        }
        let words: Vec<String> = targets
            .iter()
            .map(|t| {
                let i = self.config.axes.iter().position(|a| a.name == t.axis).unwrap_or(0);
                format!("{} {} {}", t.axis, plain(t.position), self.unit(i))
            })
            .collect();
        self.note(
            Kind::Operator,
            format!("go to @{name} ({}) on one line, arriving together", words.join(", ")),
        );
        let goals = targets.into_iter().map(|t| (t.axis, t.position)).collect();
        Ok(vec![Effect::MoveLine { what: format!("@{name}"), goals }])
    }

    /// Enter on the list screen: resume a paused list, or check the chosen list against the
    /// limits from where the axes are bound and start it (at the resume step after an early
    /// end).
    fn list_go(&mut self) -> Vec<Effect> {
        use crate::cockpit::lists::Phase;
        use crate::move_list::runner::ListControl;
        match self.lists.phase {
            Phase::Paused | Phase::Pausing => {
                self.lists.phase = Phase::Running;
                self.note(Kind::Operator, "list: carry on");
                return vec![Effect::ListControl(ListControl::Run)];
            }
            Phase::Starting | Phase::Running => {
                self.note(Kind::Info, "the list is running: p pauses, x aborts");
                return vec![];
            }
            Phase::Idle | Phase::Finished => {}
        }
        let Some((name, list)) = self.lists.chosen_list() else {
            self.note(Kind::Info, "no list to run");
            return vec![];
        };
        let (name, list) = (name.to_owned(), list.clone());
        let from = self.lists.next_from();
        // The dry run, as `servotty run` does it: every target of every pass against the soft
        // limits, before anything moves (the runner checks again against the engine's own
        // goals when it starts).
        let plan = match crate::move_list::check(&list, &self.config, &self.goals(), from) {
            Ok(plan) => plan,
            Err(e) => {
                let why = format!("{name}: {e}");
                self.note(Kind::Refused, format!("list not started: {why}"));
                self.lists.refused = Some(why);
                return vec![];
            }
        };
        let resume = match from {
            crate::move_list::Start { pass: 1, step: 1 } => String::new(),
            crate::move_list::Start { pass: 1, step } => format!(" from step {step}"),
            crate::move_list::Start { pass, step } => format!(" from step {step} of pass {pass}"),
        };
        self.note(
            Kind::Operator,
            format!(
                "list {name}{resume}: {} steps × {} (Space stops everything)",
                list.steps.len(),
                list.times
            ),
        );
        self.lists.starting(from, plan);
        vec![Effect::RunList { list: Box::new(list), from }]
    }

    fn list_pause(&mut self) -> Vec<Effect> {
        use crate::cockpit::lists::Phase;
        if self.lists.phase != Phase::Running && self.lists.phase != Phase::Starting {
            self.note(Kind::Info, "no list is running");
            return vec![];
        }
        self.lists.phase = Phase::Pausing;
        self.note(Kind::Operator, "list: pause at the end of this step");
        vec![Effect::ListControl(crate::move_list::runner::ListControl::Pause)]
    }

    fn list_abort(&mut self) -> Vec<Effect> {
        if !self.lists.phase.active() {
            self.note(Kind::Info, "no list is running");
            return vec![];
        }
        self.note(Kind::Operator, "list: abort, every axis stops");
        vec![Effect::ListControl(crate::move_list::runner::ListControl::Abort)]
    }

    /// Stores the homed axes' present positions as a spot: in the live configuration at once,
    /// and in the configuration file when there is one (off the key path).
    fn submit_store_spot(&mut self, name: &str) -> Result<Vec<Effect>, String> {
        if !crate::spots::valid_name(name) {
            return Err("type a name: letters, digits, _ or -".to_owned());
        }
        let position: Vec<(String, f64)> = self
            .axes
            .iter()
            .filter(|v| v.snap.homed)
            .map(|v| (v.snap.axis.to_string(), v.snap.position))
            .collect();
        if position.is_empty() {
            return Err("no axis is homed: its position is not trusted yet".to_owned());
        }
        let mut next = self.config.clone();
        next.spots.0.insert(name.to_owned(), position.iter().cloned().collect());
        if let Some(bad) = crate::spots::check(&next).into_iter().next() {
            return Err(bad.message);
        }
        self.config = next;
        let axes: Vec<&str> = position.iter().map(|(a, _)| a.as_str()).collect();
        match &self.source {
            ConfigSource::File(path) => {
                let path = path.clone();
                self.note(
                    Kind::Operator,
                    format!("storing @{name} ({}) in {}", axes.join(", "), path.display()),
                );
                Ok(vec![Effect::StoreSpot { path, name: name.to_owned(), position }])
            }
            ConfigSource::BuiltInDemo => {
                self.note(
                    Kind::Info,
                    format!("@{name} kept for this session (the built-in demo has no file)"),
                );
                Ok(vec![])
            }
        }
    }

    fn submit_test(&mut self, axis: usize, text: &str) -> Result<Vec<Effect>, String> {
        use crate::commission::TuneStep;
        let step = match text {
            "d" => TuneStep::Direction,
            "b" => TuneStep::Breakaway,
            "i" => TuneStep::Identify,
            "r" => TuneStep::Relay,
            "s" => TuneStep::Step,
            // `a` also reads as "all".
            "p" | "a" => TuneStep::All,
            _ => return Err("type d, b, i, r, s or p (full tuning)".to_owned()),
        };
        let a = self.config.axes.get(axis).ok_or("no such axis")?.clone();
        // Never enable an axis behind the operator's back: `e` first.
        let state = self.axes.get(axis).map(|v| v.snap.state);
        if let Some(state) = state.filter(|s| !s.motor_on()) {
            return Err(format!("{} is {state}: press e to enable it first", a.name));
        }
        let (_, bounds) = crate::commission::plan(&crate::commission::StepRequest::new(step), &a);
        let verify = if matches!(step, TuneStep::Identify | TuneStep::Relay | TuneStep::All) {
            format!(
                ", then steps {} {} and back to verify the suggestion",
                crate::commission::VERIFY_STEP,
                a.scale.unit
            )
        } else {
            String::new()
        };
        let step_word = clap::ValueEnum::to_possible_value(&step)
            .map(|v| v.get_name().to_owned())
            .unwrap_or_default();
        let words = format!(
            "tune {step_word}: moves up to {} {} for up to {} s{verify} (Space stops)",
            bounds.travel, a.scale.unit, bounds.seconds
        );
        let name = self.name(axis).to_owned();
        self.note(Kind::Operator, format!("{name}: {words}"));
        Ok(vec![Effect::Tune { axis, step, config: Box::new(a) }])
    }

    /// Puts the last suggested gains on their axis, live, and into the configuration the
    /// cockpit would save.
    fn apply_suggested(&mut self) -> Vec<Effect> {
        if self.suggested.is_some() && self.suggested_worse {
            self.suggested_worse = false;
            self.note(
                Kind::Refused,
                "the suggested gains did worse than the current ones in the verification step: \
                 press a again to apply them anyway",
            );
            return Vec::new();
        }
        let Some((axis, c)) = self.suggested.take() else {
            self.note(Kind::Info, "no suggested gains: tune identify (i) or relay (r) first");
            return Vec::new();
        };
        let mut next = self.config.clone();
        if let Some(a) = next.axes.get_mut(axis) {
            a.controller = c.clone();
        }
        if let Some(bad) = next.validate().into_iter().next() {
            self.note(Kind::Refused, format!("suggested gains refused: {}", bad.message));
            return Vec::new();
        }
        self.config = next;
        vec![self.command(
            axis,
            AxisCommand::SetController(c, ChangedBy::CockpitSuggestion),
            "suggested gains applied (live; w writes them)",
        )]
    }

    fn submit_goto(&mut self, axis: usize, text: &str) -> Result<Vec<Effect>, String> {
        if text.starts_with('@') {
            return self.submit_goto_spot(text);
        }
        let v: f64 = text.parse().map_err(|_| format!("{text:?} is not a number"))?;
        let a = self.config.axes.get(axis).ok_or("no such axis")?;
        let (lo, hi) = (a.limits.soft_min, a.limits.soft_max);
        if !v.is_finite() || v < lo || v > hi {
            return Err(format!("outside the soft limits {lo} … {hi} {}", a.scale.unit));
        }
        let words = format!("go to {} {}", plain(v), self.unit(axis));
        Ok(vec![self.command(axis, AxisCommand::MoveTo(v), &words)])
    }

    fn submit_gain(
        &mut self,
        axis: usize,
        param: Param,
        text: &str,
    ) -> Result<Vec<Effect>, String> {
        let new = gain_edit::edit(&self.config, axis, param, text).map_err(|e| e.to_string())?;
        let old = self.config.axes.get(axis).map_or(0.0, |a| param.get(&a.controller));
        let controller = new.axes[axis].controller.clone();
        self.config = new;
        let words = format!(
            "{} {} → {} (live; w writes it to the file)",
            param.key(),
            plain(old),
            plain(param.get(&controller))
        );
        Ok(vec![self.command(
            axis,
            AxisCommand::SetController(controller, ChangedBy::CockpitEdit),
            &words,
        )])
    }

    /// Takes news from background work.
    pub fn on_notice(&mut self, now: Duration, notice: Notice) {
        self.now = self.now.max(now);
        match notice {
            Notice::Reply { result: Ok(()), .. } => {}
            Notice::History { axis, result: Ok(rows) } => {
                if let Some(cfg) = self.config.axes.get(axis) {
                    let trip = self.axes[axis].snap.trip.clone();
                    self.trip_view = Some(crate::cockpit::trip_view::TripView::new(
                        axis,
                        cfg,
                        rows,
                        trip.as_ref(),
                    ));
                }
            }
            Notice::History { axis, result: Err(why) } => {
                let name = self.name(axis).to_owned();
                self.note(Kind::Refused, format!("{name}: no history for the trip screen: {why}"));
                self.screen = Screen::Overview;
            }
            Notice::Drill { axis, result } => {
                let name = self.name(axis).to_owned();
                match result {
                    Ok(did) => self.note(Kind::Operator, format!("{name}: drill: {did}")),
                    Err(why) => self.note(Kind::Refused, format!("{name}: drill refused: {why}")),
                }
            }
            Notice::Reply { axis, what, result: Err(why) } => {
                let name = self.name(axis).to_owned();
                self.note(Kind::Refused, format!("{name}: {what} refused: {why}"));
            }
            Notice::Saved { result: Ok(report), controllers, new_file } => {
                self.saved = controllers;
                if new_file {
                    self.source = ConfigSource::File(report.path.clone());
                }
                let keys = if report.changed.is_empty() {
                    "nothing changed".to_owned()
                } else {
                    report.changed.join(", ")
                };
                let backup = report
                    .backup
                    .map(|b| format!("; previous file kept as {}", b.display()))
                    .unwrap_or_default();
                self.note(Kind::Info, format!("saved {}: {keys}{backup}", report.path.display()));
            }
            Notice::Engine(ev) => {
                let who = ev.axis.as_deref().unwrap_or("machine").to_owned();
                let what = ev.what();
                match ev.kind {
                    crate::engine::EventKind::Capture { path } => {
                        self.note(Kind::Info, format!("{who}: trip capture written: {path}"));
                    }
                    crate::engine::EventKind::Notice { text } => {
                        self.note(Kind::Info, format!("{who}: {text}"));
                    }
                    // What an operator must know, in the engine's own words.
                    crate::engine::EventKind::Gains { .. }
                    | crate::engine::EventKind::Interrupted { .. } => {
                        self.note(Kind::Info, format!("{who}: {what}"));
                    }
                    crate::engine::EventKind::LinkQuality { .. } => {
                        self.note(Kind::Link, format!("{who}: {what}"));
                    }
                    crate::engine::EventKind::RecorderFailed { .. } => {
                        self.note(Kind::Refused, format!("{who}: {what}"));
                    }
                    _ => {}
                }
            }
            Notice::Tuned { axis, result: Ok(out) } => {
                let name = self.name(axis).to_owned();
                for line in out.text.lines().filter(|l| !l.trim().is_empty()) {
                    self.note(Kind::Info, format!("{name}: {}", line.trim_end()));
                }
                if let Some(c) = out.suggested {
                    self.suggested = Some((axis, c));
                    self.suggested_worse = out.verification.as_ref().is_some_and(|v| v.is_worse());
                    self.note(
                        Kind::Info,
                        if self.suggested_worse {
                            format!(
                                "{name}: the suggested gains are WORSE than the current ones; \
                                 a twice applies them anyway"
                            )
                        } else {
                            format!("{name}: a applies the suggested gains (w then writes them)")
                        },
                    );
                }
            }
            Notice::Tuned { axis, result: Err(e) } => {
                let name = self.name(axis).to_owned();
                self.note(Kind::Refused, format!("{name}: tuning failed: {e}"));
            }
            Notice::HomeAll { result: Ok(()) } => self.note(Kind::Info, "all axes homed"),
            Notice::HomeAll { result: Err(e) } => {
                self.note(Kind::Refused, format!("homing stopped: {e}"));
            }
            Notice::Line { what, result } => match result {
                Ok(out) if out.ok => {
                    let axes: Vec<&str> = out.axes.iter().map(|a| a.axis.as_str()).collect();
                    let together = if axes.len() > 1 { " together" } else { "" };
                    self.note(
                        Kind::Info,
                        format!(
                            "{what} reached: {}{together} in {:.2} s",
                            axes.join(", "),
                            out.planned_s
                        ),
                    );
                }
                Ok(out) => {
                    let (axis, why) = out.ended_by.unwrap_or_default();
                    self.note(
                        Kind::Refused,
                        format!("{what}: move ended by {axis}: {why}; the other axes stopped, motors off"),
                    );
                }
                Err(e) => self.note(Kind::Refused, format!("{what} refused: {e}")),
            },
            Notice::Lists(found) => self.lists.set_found(found),
            Notice::ListProgress(p) => {
                if p.phase != "done" {
                    let pass = if p.pass > 1 { format!("pass {} ", p.pass) } else { String::new() };
                    let kind = if p.phase == "failed" { Kind::Refused } else { Kind::Info };
                    self.note(
                        kind,
                        format!("list {pass}step {}/{} {}: {}", p.step, p.steps, p.phase, p.what),
                    );
                }
                self.lists.on_progress(&p);
            }
            Notice::ListEnded(result) => {
                match &result {
                    Ok(out) if out.ok => self.note(Kind::Info, "list finished"),
                    Ok(out) => {
                        if let Some(s) = &out.stopped {
                            self.note(
                                Kind::Refused,
                                format!(
                                    "list stopped at step {} (pass {}): {}; every axis stopped. \
                                     Clear the cause, then Enter resumes from step {} (pass {})",
                                    s.step, s.pass, s.reason, s.resume_from, s.resume_pass
                                ),
                            );
                        }
                    }
                    Err(e) => self.note(Kind::Refused, format!("list not started: {e}")),
                }
                self.lists.on_end(&result);
            }
            Notice::Saved { result: Err(e), .. } => {
                self.note(Kind::Refused, format!("not saved: {e}"))
            }
        }
    }

    /// Takes the latest snapshot of every axis at cockpit time `now`, with stop-all's latch.
    pub fn observe(&mut self, now: Duration, snaps: &[AxisSnapshot], stop_latched: bool) {
        self.now = self.now.max(now);
        self.stop_latched = stop_latched;
        let t = now.as_secs_f64();
        for (i, s) in snaps.iter().enumerate().take(self.axes.len()) {
            let events = diff(&self.axes[i], s);
            for (kind, text) in events {
                self.log.push(now, kind, text);
            }
            let v = &mut self.axes[i];
            if s.link.bad_frames > v.bad_logged || s.link.missed > v.missed_logged {
                let due =
                    v.link_logged_at.is_none_or(|at| now.saturating_sub(at) >= LINK_LOG_PERIOD);
                if due {
                    let text = format!(
                        "{}: {} bad, {} missed frames (total {} bad, {} missed)",
                        s.axis,
                        s.link.bad_frames - v.bad_logged,
                        s.link.missed.saturating_sub(v.missed_logged),
                        s.link.bad_frames,
                        s.link.missed
                    );
                    v.bad_logged = s.link.bad_frames;
                    v.missed_logged = s.link.missed;
                    v.link_logged_at = Some(now);
                    self.log.push(now, Kind::Link, text);
                }
            }
            let v = &mut self.axes[i];
            v.history.push(Sample::of(t, s));
            if v.snap != *s {
                v.snap.clone_from(s);
            }
        }
    }
}

/// Events worth logging between the previous snapshot of an axis and the new one.
fn diff(view: &AxisView, new: &AxisSnapshot) -> Vec<(Kind, String)> {
    let old = &view.snap;
    let mut out = Vec::new();
    let (name, u, d) = (&new.axis, &new.unit, view.decimals);
    if new.link.link_ups > old.link.link_ups {
        let n = new.link.link_ups;
        out.push((Kind::Link, format!("{name}: link up (#{n}), {}", new.state)));
    }
    // Why a link is down, once per reason (not once a second): the reason carries the hint.
    let reason_new = new.link_error.is_some() && new.link_error != old.link_error;
    if new.state == AxisState::Offline && (old.state != AxisState::Offline || reason_new) {
        out.push((
            Kind::Link,
            match &new.link_error {
                Some(why) => format!("{name}: link down: {why}"),
                None => format!("{name}: link down"),
            },
        ));
    }
    match (&old.trip, &new.trip) {
        (None, Some(t)) => out.push((
            Kind::Trip,
            format!(
                "{name}: {}{}; pos {}, set {}, duty {} %, v {} {u}/s",
                // The detail usually starts with the cause's words: say them once.
                if t.detail.starts_with(&t.cause.to_string()) {
                    String::new()
                } else {
                    format!("{}: ", t.cause)
                },
                t.detail,
                num(t.position, d, 0),
                num(t.target, d, 0),
                num(t.duty, 1, 0),
                num(t.velocity, 1, 0),
            ),
        )),
        (Some(_), None) => out.push((Kind::State, format!("{name}: trip cleared"))),
        _ => {}
    }
    // Trips, link changes and link-up have their own entries with more to say.
    let covered = matches!(new.state, AxisState::Tripped | AxisState::Offline)
        || old.state == AxisState::Offline;
    if new.state != old.state && !covered {
        out.push((Kind::State, format!("{name}: {} → {}", old.state, new.state)));
    }
    if new.homed && !old.homed {
        out.push((Kind::State, format!("{name}: homed")));
    }
    out
}
