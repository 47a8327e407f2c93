//! The G-code controller state machine: what is in flight, what is acknowledged, when motion
//! is complete. Pure: no I/O, no clock — the current time is an argument of every call.
//!
//! Sans-I/O in the manner of protocol clients that return what to send next: the caller
//! [`Controller::start`]s a [`Command`], writes whatever [`Controller::poll_transmit`] gives,
//! feeds every received line to [`Controller::handle_line`], calls
//! [`Controller::handle_time`] when [`Controller::next_deadline`] passes, and collects the
//! outcome from [`Controller::poll_result`].
//!
//! Rules followed (what real controllers do):
//! - one line in flight: send, wait for its acknowledgement, then the next;
//! - an `ok` for a move means *queued*; completion is confirmed by the machine file's strategy:
//!   a dwell or wait-for-moves line whose `ok` comes after motion ends, or status queries until
//!   the report says idle **and** shows the target position (a report can still say idle just
//!   after a move was acknowledged);
//! - banners and other unsolicited lines after the port opens or the controller resets are
//!   absorbed before the unlock and init lines go out;
//! - an alarm latches: nothing more is sent until a [`Command::Reset`], which is the user's say;
//! - every wait has a deadline, so no fault can hang the caller.

use super::codec::{self, Reply, StatusReport, Vocabulary};
use crate::bench::kinematics::Trapezoid;
use crate::bench::machine::{MotionComplete, StageSpec};
use std::collections::VecDeque;
use std::time::Duration;

/// How long the line must stay quiet after the banner before init lines go out (common
/// practice: controllers print their start-up lines in one burst).
pub const STARTUP_QUIET: Duration = Duration::from_millis(100);

/// Everything the state machine needs from the machine file.
#[derive(Debug, Clone, PartialEq)]
pub struct ProtocolConfig {
    pub line_timeout: Duration,
    pub home_timeout: Duration,
    pub startup_wait: Duration,
    pub banner: String,
    pub unlock: Vec<String>,
    pub init: Vec<String>,
    pub home: Vec<String>,
    pub strategy: MotionComplete,
    pub wait_line: String,
    pub status_query: String,
    pub poll_interval: Duration,
    pub tolerance_mm: f64,
    /// Sent first on a stop: a real-time byte (one character) or a line; empty = none.
    pub feed_hold: String,
    pub reset: Vec<u8>,
    pub stop: Vec<String>,
    pub max_line_len: usize,
    pub feed_mm_min: f64,
    pub accel_mm_s2: f64,
    /// Longest move possible (travel box diagonal), for estimates from an unknown position.
    pub max_move_mm: f64,
    pub vocab: Vocabulary,
}

fn secs(s: f64) -> Duration {
    crate::bench::duration_s(s)
}

impl ProtocolConfig {
    /// The configuration a machine file's `[stage]` section describes (assumed validated).
    pub fn from_spec(s: &StageSpec) -> ProtocolConfig {
        let wait_line = s
            .wait_line
            .clone()
            .unwrap_or_else(|| match s.motion_complete {
                MotionComplete::M400 => "M400".into(),
                _ => "G4 P0".into(),
            });
        let dx = s.travel_x_mm[1] - s.travel_x_mm[0];
        let dy = s.travel_y_mm[1] - s.travel_y_mm[0];
        ProtocolConfig {
            line_timeout: secs(s.line_timeout_s),
            home_timeout: secs(s.home_timeout_s),
            startup_wait: secs(s.startup_wait_s),
            banner: s.banner.clone(),
            unlock: s.unlock.clone(),
            init: s.init.clone(),
            home: s.home.clone(),
            strategy: s.motion_complete,
            wait_line,
            status_query: s
                .status_query_in_use()
                .unwrap_or(crate::bench::machine::DEFAULT_STATUS_QUERY)
                .to_string(),
            poll_interval: secs(s.poll_interval_ms / 1000.0),
            tolerance_mm: s.position_tolerance_mm,
            feed_hold: s.feed_hold.trim().to_string(),
            reset: s.reset.as_bytes().to_vec(),
            stop: s.stop.clone(),
            max_line_len: s.max_line_len,
            feed_mm_min: s.feed_mm_min,
            accel_mm_s2: s.accel_mm_s2,
            max_move_mm: dx.hypot(dy),
            vocab: Vocabulary::from_spec(&s.replies),
        }
    }
}

/// An operation on the controller.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Command {
    /// Absorb start-up lines, send the unlock lines, then (when no banner showed that the
    /// controller restarted) a sync exchange that discards replies left over from an earlier
    /// session, then the init lines.
    Connect,
    /// Send one move line; done when it is acknowledged (queued).
    Move { x_mm: f64, y_mm: f64 },
    /// Wait until all queued motion has ended, by the machine file's strategy.
    WaitIdle,
    /// Send the homing lines.
    Home,
    /// Ask for one status report.
    Query,
    /// Send the reset bytes, absorb the start-up lines again, clear a latched alarm, and send
    /// the unlock and init lines. Only on the user's say.
    Reset,
}

/// What a finished command gives.
#[derive(Debug, Clone, PartialEq)]
pub enum Completion {
    Connected {
        banner: Option<String>,
    },
    Queued,
    /// Motion has ended; the position reported (poll) or commanded (dwell, m400).
    Idle {
        position: Option<[f64; 2]>,
    },
    Homed,
    Status(StatusReport),
}

/// Why a command failed. Each fault has its own variant and message.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ControllerError {
    #[error("no reply to `{line}` within {waited_s:.1} s: the controller dropped the reply or went silent (check stage.port, stage.baud, the cable and the controller's power)")]
    NoReply { line: String, waited_s: f64 },
    #[error("`{line}` was rejected with `{reply}`{hint}")]
    Rejected {
        line: String,
        reply: String,
        code: Option<u32>,
        hint: String,
    },
    #[error("controller alarm `{reply}` while {during}: the run is stopped and no motion will be sent until the alarm is cleared (check the stage, then reset and home it)")]
    Alarm { reply: String, during: String },
    #[error("the controller is in alarm: it answered `{line}` with `{reply}` (fix: {fix})")]
    Locked {
        line: String,
        reply: String,
        fix: String,
    },
    #[error("the controller is in alarm (`{reply}`): nothing is sent until it is reset on the user's say (`isopach stage home` resets and homes)")]
    Alarmed { reply: String },
    #[error("motion to ({x_mm:.3}, {y_mm:.3}) mm did not complete within {waited_s:.1} s (it should take {expected_s:.1} s){last}: the stage stalled, is held, or the controller dropped the reply")]
    MotionTimeout {
        x_mm: f64,
        y_mm: f64,
        expected_s: f64,
        waited_s: f64,
        last: String,
    },
    #[error("no status report for `{query}` within {waited_s:.1} s: the controller ignores status queries (check stage.status_query) or went silent")]
    NoStatus { query: String, waited_s: f64 },
    #[error("unreadable reply {line:?} while {during}: line noise or a wrong baud rate (check stage.baud)")]
    Garbled { line: String, during: String },
    #[error("the connection to the controller closed while {during}: the port was lost (cable, power, or a reset); the run stops and does not reconnect by itself")]
    Disconnected { during: String },
    #[error("line `{line}` is {len} characters with its line end, over the controller's {max}-character limit (stage.max_line_len)")]
    LineTooLong {
        line: String,
        len: usize,
        max: usize,
    },
    #[error("replies left over from an earlier session kept arriving after {rounds} sync exchanges (`{line}`): the controller is still working through a queue (reset it with stage.reset, or wait for it to finish and connect again)")]
    NoSync { line: String, rounds: u32 },
    #[error("stopped on request while {during}")]
    Stopped { during: String },
    #[error("a command is already in progress ({0})")]
    Busy(String),
}

/// One entry of the conversation, for logs and transcripts.
#[derive(Debug, Clone, PartialEq)]
pub enum LogEntry {
    /// A line or real-time bytes sent (without the line end).
    Sent(String),
    Received(String),
    /// Something the state machine noticed (stray reply, missing banner).
    Note(String),
}

/// What the line in flight is waiting for.
#[derive(Debug, Clone, PartialEq)]
enum Await {
    /// An acknowledgement within `timeout`.
    Ack { timeout: Duration },
    /// An acknowledgement that arrives when motion ends.
    Motion { expected_s: f64, timeout: Duration },
    /// The sync exchange after connecting to a controller that did not restart: replies
    /// queued by an earlier session may still arrive, so the exchange counts only once it
    /// is recognised (see [`Sync`]).
    Sync { timeout: Duration, sync: Sync },
}

/// How the sync exchange is recognised.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Sync {
    /// The line is a status query: replies before its report are stale; the `ok` after the
    /// report ends the exchange.
    Report { seen: bool },
    /// The line is the wait line: every `ok` (and error) restarts a quiet period; the
    /// exchange ends when exactly one `ok` came and the line then stayed quiet, and is tried
    /// again (up to [`SYNC_ROUNDS`] times) when more came.
    Quiet { replies: u32, round: u32 },
}

/// How long the line must stay quiet after the sync line's `ok` (common practice: a reply
/// queued behind it would follow within milliseconds).
pub const SYNC_QUIET: Duration = Duration::from_millis(300);
/// How many more times the reset is sent when no banner follows it.
const RESET_RETRIES: u8 = 2;
/// How many times the sync line is sent before connecting fails.
const SYNC_ROUNDS: u32 = 4;

/// How many reply timeouts keep-alives can stretch one reply wait to.
const BUSY_EXTENSIONS: u32 = 4;

#[derive(Debug, Clone, PartialEq)]
struct InFlight {
    line: String,
    sent_at: Duration,
    deadline: Duration,
    wait: Await,
}

/// How a run of lines finishes.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Finish {
    Connected,
    Queued,
    Idle,
    Homed,
}

#[derive(Debug, Clone, PartialEq)]
enum Phase {
    Ready,
    /// Absorbing start-up lines until `deadline`, or until quiet after the banner.
    Startup {
        deadline: Duration,
        banner: Option<String>,
        last_line: Option<Duration>,
        /// Send the unlock and init lines afterwards (not after a stop).
        then_init: bool,
        /// Times the reset is sent again when no banner follows it (a controller drops a
        /// reset that arrives during its post-alarm delay).
        resets_left: u8,
    },
    Lines {
        queue: VecDeque<(String, Await)>,
        in_flight: Option<InFlight>,
        finish: Finish,
    },
    Poll(Poll),
    Closed,
}

#[derive(Debug, Clone, PartialEq)]
struct Poll {
    /// `None` for a single query.
    target: Option<[f64; 2]>,
    single: bool,
    started: Duration,
    expected_s: f64,
    next_query: Option<Duration>,
    report_deadline: Option<Duration>,
    awaiting_ok: bool,
    got: Option<StatusReport>,
    last: Option<StatusReport>,
}

/// The controller state machine.
#[derive(Debug)]
pub struct Controller {
    cfg: ProtocolConfig,
    phase: Phase,
    /// What the current command is, for messages.
    doing: String,
    outbox: VecDeque<Vec<u8>>,
    results: VecDeque<Result<Completion, ControllerError>>,
    log: VecDeque<LogEntry>,
    alarm: Option<String>,
    startup_alarm: Option<String>,
    /// The banner seen while connecting, handed out with the outcome.
    banner_found: Option<String>,
    /// Last confirmed position (stage frame, mm).
    position: Option<[f64; 2]>,
    /// Last commanded target and the expected time of motion queued since the last idle.
    target: Option<[f64; 2]>,
    queued_s: f64,
    wco: Option<[f64; 2]>,
}

impl Controller {
    /// A state machine for a controller described by `cfg`; the port is not yet open.
    pub fn new(cfg: ProtocolConfig) -> Controller {
        Controller {
            cfg,
            phase: Phase::Ready,
            doing: String::new(),
            outbox: VecDeque::new(),
            results: VecDeque::new(),
            log: VecDeque::new(),
            alarm: None,
            startup_alarm: None,
            banner_found: None,
            position: None,
            target: None,
            queued_s: 0.0,
            wco: None,
        }
    }

    /// The configuration in use.
    pub fn config(&self) -> &ProtocolConfig {
        &self.cfg
    }

    /// The latched alarm line, if any.
    pub fn alarm(&self) -> Option<&str> {
        self.alarm.as_deref()
    }

    /// Last confirmed position, stage frame, mm.
    pub fn position(&self) -> Option<[f64; 2]> {
        self.position
    }

    /// Whether a command is in progress.
    pub fn is_busy(&self) -> bool {
        !matches!(self.phase, Phase::Ready | Phase::Closed)
    }

    /// Next bytes to write, if any.
    pub fn poll_transmit(&mut self) -> Option<Vec<u8>> {
        self.outbox.pop_front()
    }

    /// The outcome of the command, once it has finished.
    pub fn poll_result(&mut self) -> Option<Result<Completion, ControllerError>> {
        self.results.pop_front()
    }

    /// Next log entry, if any.
    pub fn poll_log(&mut self) -> Option<LogEntry> {
        self.log.pop_front()
    }

    /// The earliest time at which [`Self::handle_time`] has something to do.
    pub fn next_deadline(&self) -> Option<Duration> {
        match &self.phase {
            Phase::Ready | Phase::Closed => None,
            Phase::Startup {
                deadline,
                last_line,
                banner,
                ..
            } => {
                let quiet = self
                    .banner_seen(banner)
                    .then(|| last_line.map(|t| t + STARTUP_QUIET))
                    .flatten();
                Some(quiet.map_or(*deadline, |q| q.min(*deadline)))
            }
            Phase::Lines { in_flight, .. } => in_flight.as_ref().map(|f| f.deadline),
            Phase::Poll(p) => {
                let overall = (!p.single).then(|| p.started + self.motion_allowance(p.expected_s));
                [p.next_query, p.report_deadline, overall]
                    .into_iter()
                    .flatten()
                    .min()
            }
        }
    }

    /// Starts a command. Fails at once (nothing sent) when one is in progress, the connection
    /// is closed, an alarm is latched (except for `Reset`), or a line would be too long.
    pub fn start(&mut self, cmd: Command, now: Duration) -> Result<(), ControllerError> {
        if self.is_busy() {
            return Err(ControllerError::Busy(self.doing.clone()));
        }
        if self.phase == Phase::Closed {
            return Err(ControllerError::Disconnected {
                during: describe(cmd),
            });
        }
        if let (Some(a), false) = (&self.alarm, cmd == Command::Reset) {
            return Err(ControllerError::Alarmed { reply: a.clone() });
        }
        self.doing = describe(cmd);
        match cmd {
            Command::Connect => self.enter_startup(now, false),
            Command::Reset => {
                if self.cfg.reset.is_empty() {
                    self.note("no stage.reset bytes configured; reconnecting without a reset");
                } else {
                    self.send_raw(self.cfg.reset.clone());
                }
                self.alarm = None;
                self.position = None;
                self.target = None;
                self.queued_s = 0.0;
                self.enter_startup(now, !self.cfg.reset.is_empty());
            }
            Command::Move { x_mm, y_mm } => {
                let line = codec::move_line(x_mm, y_mm, self.cfg.feed_mm_min);
                self.check_len(&line)?;
                let from_dist = match self.target.or(self.position) {
                    Some(p) => (p[0] - x_mm).hypot(p[1] - y_mm),
                    None => self.cfg.max_move_mm,
                };
                self.queued_s +=
                    Trapezoid::new(from_dist, self.cfg.feed_mm_min, self.cfg.accel_mm_s2)
                        .duration_s();
                self.target = Some([x_mm, y_mm]);
                self.position = None;
                let timeout = self.cfg.line_timeout;
                self.enter_lines(vec![(line, Await::Ack { timeout })], Finish::Queued, now);
            }
            Command::Home => {
                let timeout = self.cfg.home_timeout;
                let lines = self
                    .cfg
                    .home
                    .iter()
                    .map(|l| (l.clone(), Await::Ack { timeout }))
                    .collect();
                self.position = None;
                self.target = None;
                self.queued_s = 0.0;
                self.enter_lines(lines, Finish::Homed, now);
            }
            Command::WaitIdle => {
                let expected_s = self.queued_s;
                match self.cfg.strategy {
                    MotionComplete::Dwell | MotionComplete::M400 => {
                        let line = self.cfg.wait_line.clone();
                        self.check_len(&line)?;
                        let timeout = self.motion_allowance(expected_s);
                        self.enter_lines(
                            vec![(
                                line,
                                Await::Motion {
                                    expected_s,
                                    timeout,
                                },
                            )],
                            Finish::Idle,
                            now,
                        );
                    }
                    MotionComplete::Poll => self.enter_poll(self.target, false, expected_s, now),
                }
            }
            Command::Query => self.enter_poll(None, true, 0.0, now),
        }
        Ok(())
    }

    /// Stops at once: drops whatever was still waiting to go out, sends the feed hold, then
    /// the reset bytes (or the stop lines), fails the command in progress with
    /// [`ControllerError::Stopped`] and forgets the position. After reset bytes the
    /// controller restarts: a start-up phase then absorbs its banner (no lines are sent), and
    /// finishes with [`Completion::Connected`].
    pub fn stop(&mut self, now: Duration) {
        if self.phase == Phase::Closed {
            return;
        }
        if self.is_busy() {
            let during = self.doing.clone();
            self.finish(Err(ControllerError::Stopped { during }));
        }
        self.position = None;
        self.target = None;
        self.queued_s = 0.0;
        // Lines of the abandoned command not yet written are never sent: no new motion
        // after a stop.
        for b in std::mem::take(&mut self.outbox) {
            self.note(&format!(
                "not sent after the stop: {}",
                String::from_utf8_lossy(&b).trim_end().escape_debug()
            ));
        }
        self.send_feed_hold();
        if self.cfg.reset.is_empty() {
            for l in self.cfg.stop.clone() {
                self.send_line(&l);
            }
        } else {
            self.send_raw(self.cfg.reset.clone());
            self.doing = "waiting for the controller to restart after a stop".into();
            self.enter_startup(now, true);
            if let Phase::Startup { then_init, .. } = &mut self.phase {
                *then_init = false;
            }
        }
    }

    /// The connection closed (end of stream, or EIO on a pseudo-terminal).
    pub fn handle_closed(&mut self) {
        if self.is_busy() {
            let during = self.doing.clone();
            self.finish(Err(ControllerError::Disconnected { during }));
        }
        self.note("connection closed");
        self.phase = Phase::Closed;
    }

    /// A line was received (without its line end).
    pub fn handle_line(&mut self, line: &str, now: Duration) {
        let Some(reply) = codec::classify(line, &self.cfg.vocab) else {
            return;
        };
        self.log
            .push_back(LogEntry::Received(line.trim_end().to_string()));
        if let Reply::Status(s) = &reply {
            self.remember_status(s);
        }
        let phase = std::mem::replace(&mut self.phase, Phase::Ready);
        self.phase = match phase {
            Phase::Ready | Phase::Closed => {
                self.unsolicited(reply);
                phase
            }
            Phase::Startup {
                deadline,
                mut banner,
                then_init,
                resets_left,
                ..
            } => {
                match reply {
                    Reply::Alarm { text, .. } => self.startup_alarm = Some(text),
                    Reply::Other(t) | Reply::Message(t)
                        if banner.is_none() && self.is_banner(&t) =>
                    {
                        banner = Some(t)
                    }
                    _ => {}
                }
                Phase::Startup {
                    deadline,
                    banner,
                    last_line: Some(now),
                    then_init,
                    resets_left,
                }
            }
            Phase::Lines {
                queue,
                in_flight,
                finish,
            } => self.lines_reply(queue, in_flight, finish, reply, now),
            Phase::Poll(p) => self.poll_reply(p, reply, now),
        };
    }

    /// Time has passed; acts on any deadline reached.
    pub fn handle_time(&mut self, now: Duration) {
        let phase = std::mem::replace(&mut self.phase, Phase::Ready);
        self.phase = match phase {
            Phase::Startup {
                deadline,
                banner,
                last_line,
                then_init,
                resets_left,
            } => {
                let quiet = self.banner_seen(&banner)
                    && last_line.is_some_and(|t| now >= t + STARTUP_QUIET);
                if now < deadline && !quiet {
                    Phase::Startup {
                        deadline,
                        banner,
                        last_line,
                        then_init,
                        resets_left,
                    }
                } else if banner.is_none() && !self.cfg.banner.is_empty() && resets_left > 0 {
                    // No restart after the reset: a controller drops a reset that arrives
                    // during its post-alarm delay, which has passed by now.
                    self.note("no start-up banner after the reset (a controller drops a reset sent during its post-alarm delay); sending it again");
                    self.send_raw(self.cfg.reset.clone());
                    Phase::Startup {
                        deadline: now + self.cfg.startup_wait,
                        banner,
                        last_line,
                        then_init,
                        resets_left: resets_left - 1,
                    }
                } else if then_init {
                    self.after_startup(banner, now)
                } else {
                    // After a stop: the controller has restarted; nothing more is sent.
                    self.finish(Ok(Completion::Connected { banner }));
                    Phase::Ready
                }
            }
            Phase::Lines {
                queue,
                in_flight: Some(f),
                finish,
            } if now >= f.deadline
                && matches!(f.wait, Await::Sync { sync: Sync::Quiet { replies, .. }, .. } if replies > 0) =>
            {
                self.sync_quiet(queue, f, finish, now)
            }
            Phase::Lines {
                queue,
                in_flight: Some(f),
                finish,
            } if now >= f.deadline => {
                let waited_s = (now - f.sent_at).as_secs_f64();
                let err = match f.wait {
                    Await::Ack { .. } | Await::Sync { .. } => ControllerError::NoReply {
                        line: f.line,
                        waited_s,
                    },
                    Await::Motion { expected_s, .. } => {
                        let [x_mm, y_mm] = self.target.unwrap_or([f64::NAN, f64::NAN]);
                        ControllerError::MotionTimeout {
                            x_mm,
                            y_mm,
                            expected_s,
                            waited_s,
                            last: format!(" (no `ok` for `{}`)", f.line),
                        }
                    }
                };
                let _ = (queue, finish);
                self.finish(Err(err));
                return;
            }
            Phase::Poll(p) => self.poll_time(p, now),
            other => other,
        };
    }

    // ----- phases -----

    /// Absorbs start-up lines; `after_reset` when the reset bytes have just been sent (they
    /// are sent again, up to [`RESET_RETRIES`] times, when no banner follows).
    fn enter_startup(&mut self, now: Duration, after_reset: bool) {
        self.startup_alarm = None;
        self.phase = Phase::Startup {
            deadline: now + self.cfg.startup_wait,
            banner: None,
            last_line: None,
            then_init: true,
            resets_left: if after_reset { RESET_RETRIES } else { 0 },
        };
    }

    fn after_startup(&mut self, banner: Option<String>, now: Duration) -> Phase {
        if !self.cfg.banner.is_empty() && banner.is_none() {
            self.note(&format!(
                "no start-up banner containing {:?} within {:.1} s; going on (the controller may not reset when the port opens)",
                self.cfg.banner,
                self.cfg.startup_wait.as_secs_f64()
            ));
        }
        if let Some(a) = self.startup_alarm.take() {
            if self.cfg.unlock.is_empty() {
                self.alarm = Some(a.clone());
                self.finish(Err(ControllerError::Alarm {
                    reply: a,
                    during: "connecting (the controller starts in alarm: list its unlock line in stage.unlock)".into(),
                }));
                return std::mem::replace(&mut self.phase, Phase::Ready);
            }
        }
        let restarted = banner.is_some();
        self.banner_found = banner;
        let timeout = self.cfg.line_timeout;
        let ack = |l: &String| (l.clone(), Await::Ack { timeout });
        // Unlock first: a locked controller refuses the sync and init lines.
        let mut lines: Vec<_> = self.cfg.unlock.iter().map(ack).collect();
        if !restarted {
            lines.push(self.sync_line());
        }
        lines.extend(self.cfg.init.iter().map(ack));
        self.enter_lines(lines, Finish::Connected, now);
        std::mem::replace(&mut self.phase, Phase::Ready)
    }

    fn enter_lines(&mut self, lines: Vec<(String, Await)>, finish: Finish, now: Duration) {
        self.phase = Phase::Lines {
            queue: lines.into(),
            in_flight: None,
            finish,
        };
        self.advance_lines(now);
    }

    /// Sends the next queued line, or finishes when none is left.
    fn advance_lines(&mut self, now: Duration) {
        let Phase::Lines {
            queue,
            in_flight,
            finish,
        } = &mut self.phase
        else {
            return;
        };
        if in_flight.is_some() {
            return;
        }
        match queue.pop_front() {
            Some((line, wait)) => {
                let t = match &wait {
                    Await::Ack { timeout }
                    | Await::Motion { timeout, .. }
                    | Await::Sync { timeout, .. } => *timeout,
                };
                *in_flight = Some(InFlight {
                    line: line.clone(),
                    sent_at: now,
                    deadline: now + t,
                    wait,
                });
                self.send_line(&line);
            }
            None => {
                let outcome = match *finish {
                    Finish::Connected => Completion::Connected {
                        banner: self.banner_found.take(),
                    },
                    Finish::Queued => Completion::Queued,
                    Finish::Homed => Completion::Homed,
                    Finish::Idle => {
                        self.position = self.target;
                        self.queued_s = 0.0;
                        Completion::Idle {
                            position: self.position,
                        }
                    }
                };
                self.finish(Ok(outcome));
            }
        }
    }

    /// The line in flight is done: the next one goes out, or the command finishes.
    fn line_done(
        &mut self,
        queue: VecDeque<(String, Await)>,
        finish: Finish,
        now: Duration,
    ) -> Phase {
        self.phase = Phase::Lines {
            queue,
            in_flight: None,
            finish,
        };
        self.advance_lines(now);
        std::mem::replace(&mut self.phase, Phase::Ready)
    }

    fn lines_reply(
        &mut self,
        queue: VecDeque<(String, Await)>,
        in_flight: Option<InFlight>,
        finish: Finish,
        reply: Reply,
        now: Duration,
    ) -> Phase {
        let Some(mut f) = in_flight else {
            self.unsolicited(reply);
            return Phase::Lines {
                queue,
                in_flight,
                finish,
            };
        };
        if let Await::Sync { timeout, sync } = f.wait {
            match self.sync_reply(sync, &reply, now) {
                Some(next) => {
                    if let Sync::Quiet { replies, .. } = next {
                        // Each reply restarts the quiet period; the first also ends the
                        // wait for motion.
                        if replies > 0 {
                            f.deadline = now + SYNC_QUIET;
                        }
                    }
                    f.wait = Await::Sync {
                        timeout,
                        sync: next,
                    };
                    return Phase::Lines {
                        queue,
                        in_flight: Some(f),
                        finish,
                    };
                }
                None if matches!(reply, Reply::Ok) => return self.line_done(queue, finish, now),
                None => {}
            }
        }
        match reply {
            Reply::Ok => return self.line_done(queue, finish, now),
            Reply::Error { text, .. } if self.cfg.vocab.is_locked(&text) => {
                // Latched like an alarm: nothing more is sent until a reset on the user's say.
                self.alarm = Some(text.clone());
                let fix = self.unlock_fix();
                self.fail(ControllerError::Locked {
                    line: f.line,
                    reply: text,
                    fix,
                });
            }
            Reply::Error { code, text } => {
                let hint = if finish == Finish::Connected {
                    " (if the controller starts locked, list its unlock line in stage.unlock)"
                        .to_string()
                } else {
                    String::new()
                };
                self.fail(ControllerError::Rejected {
                    line: f.line,
                    reply: text,
                    code,
                    hint,
                });
            }
            Reply::Alarm { text, .. } => self.raise_alarm(text),
            Reply::Garbled(line) => {
                let during = format!("waiting for the reply to `{}`", f.line);
                self.fail(ControllerError::Garbled { line, during });
            }
            Reply::Busy => {
                // A keep-alive proves the controller is alive, not that it is getting
                // anywhere: it restarts a reply wait (up to BUSY_EXTENSIONS timeouts in all)
                // but never stretches a wait for motion past its kinematic allowance, so a
                // stalled stage that keeps saying "busy" still times out.
                if let Await::Ack { timeout } = &f.wait {
                    let cap = f.sent_at + *timeout * BUSY_EXTENSIONS;
                    f.deadline = (now + *timeout).min(cap).max(f.deadline);
                }
                return Phase::Lines {
                    queue,
                    in_flight: Some(f),
                    finish,
                };
            }
            Reply::Status(_) | Reply::Message(_) | Reply::Other(_) => {
                return Phase::Lines {
                    queue,
                    in_flight: Some(f),
                    finish,
                };
            }
        }
        std::mem::replace(&mut self.phase, Phase::Ready)
    }

    /// The sync exchange's state after `reply`; `None` when the reply is to be handled as a
    /// plain reply (the exchange's own `ok`, or an alarm, garbage or a rejection of the
    /// status query itself).
    fn sync_reply(&mut self, sync: Sync, reply: &Reply, _now: Duration) -> Option<Sync> {
        match (sync, reply) {
            (Sync::Report { seen: false }, Reply::Status(_)) => Some(Sync::Report { seen: true }),
            (Sync::Report { seen: false }, Reply::Ok | Reply::Error { .. }) => {
                self.note("discarded a reply left over from an earlier session");
                Some(sync)
            }
            (Sync::Report { seen: true }, Reply::Ok) => None,
            (Sync::Quiet { replies, round }, Reply::Ok | Reply::Error { .. }) => {
                Some(Sync::Quiet {
                    replies: replies + 1,
                    round,
                })
            }
            (Sync::Report { .. }, Reply::Alarm { .. } | Reply::Garbled(_))
            | (Sync::Quiet { .. }, Reply::Alarm { .. } | Reply::Garbled(_)) => None,
            _ => Some(sync),
        }
    }

    /// The quiet period after the sync line's replies has passed: one reply means the
    /// controller and isopach agree; more mean some were stale, so the exchange is repeated.
    fn sync_quiet(
        &mut self,
        queue: VecDeque<(String, Await)>,
        f: InFlight,
        finish: Finish,
        now: Duration,
    ) -> Phase {
        let Await::Sync {
            timeout,
            sync: Sync::Quiet { replies, round },
        } = f.wait
        else {
            return Phase::Ready;
        };
        if replies == 1 {
            return self.line_done(queue, finish, now);
        }
        self.note(&format!(
            "discarded {} replies left over from an earlier session; syncing again",
            replies - 1
        ));
        if round >= SYNC_ROUNDS {
            self.fail(ControllerError::NoSync {
                line: f.line,
                rounds: round,
            });
            return std::mem::replace(&mut self.phase, Phase::Ready);
        }
        let mut queue = queue;
        queue.push_front((
            f.line,
            Await::Sync {
                timeout,
                sync: Sync::Quiet {
                    replies: 0,
                    round: round + 1,
                },
            },
        ));
        self.enter_lines(queue.into(), finish, now);
        std::mem::replace(&mut self.phase, Phase::Ready)
    }

    fn enter_poll(
        &mut self,
        target: Option<[f64; 2]>,
        single: bool,
        expected_s: f64,
        now: Duration,
    ) {
        self.phase = Phase::Poll(Poll {
            target,
            single,
            started: now,
            expected_s,
            next_query: Some(now),
            report_deadline: None,
            awaiting_ok: false,
            got: None,
            last: None,
        });
        self.handle_time(now);
    }

    fn poll_time(&mut self, mut p: Poll, now: Duration) -> Phase {
        if let Some(d) = p.report_deadline {
            if now >= d {
                let waited_s = self.cfg.line_timeout.as_secs_f64();
                self.fail(ControllerError::NoStatus {
                    query: self.cfg.status_query.clone(),
                    waited_s,
                });
                return std::mem::replace(&mut self.phase, Phase::Ready);
            }
        }
        if !p.single && now >= p.started + self.motion_allowance(p.expected_s) {
            let [x_mm, y_mm] = p.target.unwrap_or([f64::NAN, f64::NAN]);
            let last = match &p.last {
                Some(s) => format!(
                    " (last report: {} at {})",
                    s.state.as_deref().unwrap_or("no state"),
                    self.work_position(s)
                        .map_or("no position".into(), |q| format!(
                            "({:.3}, {:.3})",
                            q[0], q[1]
                        ))
                ),
                None => String::new(),
            };
            self.fail(ControllerError::MotionTimeout {
                x_mm,
                y_mm,
                expected_s: p.expected_s,
                waited_s: (now - p.started).as_secs_f64(),
                last,
            });
            return std::mem::replace(&mut self.phase, Phase::Ready);
        }
        if p.next_query.is_some_and(|t| now >= t) {
            p.next_query = None;
            p.report_deadline = Some(now + self.cfg.line_timeout);
            let q = self.cfg.status_query.clone();
            if codec::is_realtime(&q) {
                self.send_raw(q.into_bytes());
            } else {
                p.awaiting_ok = true;
                self.send_line(&q);
            }
        }
        Phase::Poll(p)
    }

    fn poll_reply(&mut self, mut p: Poll, reply: Reply, now: Duration) -> Phase {
        match reply {
            Reply::Status(s) => {
                if s.state
                    .as_deref()
                    .is_some_and(|w| self.cfg.vocab.is_alarm(w))
                {
                    self.raise_alarm(format!("status report {}", status_text(&s)));
                    return std::mem::replace(&mut self.phase, Phase::Ready);
                }
                p.report_deadline = None;
                p.last = Some(s.clone());
                p.got = Some(s);
            }
            Reply::Ok if p.awaiting_ok => p.awaiting_ok = false,
            Reply::Busy => {
                if p.report_deadline.is_some() {
                    p.report_deadline = Some(now + self.cfg.line_timeout);
                }
            }
            Reply::Error { code, text } => {
                self.fail(ControllerError::Rejected {
                    line: self.cfg.status_query.clone(),
                    reply: text,
                    code,
                    hint: String::new(),
                });
                return std::mem::replace(&mut self.phase, Phase::Ready);
            }
            Reply::Alarm { text, .. } => {
                self.raise_alarm(text);
                return std::mem::replace(&mut self.phase, Phase::Ready);
            }
            Reply::Garbled(line) => {
                let during = format!("waiting for a status report to `{}`", self.cfg.status_query);
                self.fail(ControllerError::Garbled { line, during });
                return std::mem::replace(&mut self.phase, Phase::Ready);
            }
            other => self.unsolicited(other),
        }
        if p.awaiting_ok || p.report_deadline.is_some() {
            return Phase::Poll(p);
        }
        let Some(report) = p.got.take() else {
            return Phase::Poll(p);
        };
        if p.single {
            self.finish(Ok(Completion::Status(report)));
            return std::mem::replace(&mut self.phase, Phase::Ready);
        }
        let idle = report
            .state
            .as_deref()
            .is_some_and(|w| self.cfg.vocab.is_idle(w));
        let pos = self.work_position(&report);
        let arrived = match (p.target, pos) {
            (None, _) => true,
            (Some(t), Some(q)) => {
                (t[0] - q[0]).abs() <= self.cfg.tolerance_mm
                    && (t[1] - q[1]).abs() <= self.cfg.tolerance_mm
            }
            (Some(_), None) => false,
        };
        if idle && arrived {
            self.position = pos;
            self.queued_s = 0.0;
            self.finish(Ok(Completion::Idle { position: pos }));
            return std::mem::replace(&mut self.phase, Phase::Ready);
        }
        // The next report: one interval on, or just after the move should end by its
        // kinematics when that comes sooner, so arrival is seen without a whole interval's lag.
        let regular = now + self.cfg.poll_interval;
        let due = p.started + secs(p.expected_s) + self.cfg.poll_interval / 8;
        p.next_query = Some(if now < due && due < regular {
            due
        } else {
            regular
        });
        Phase::Poll(p)
    }

    // ----- helpers -----

    /// How to get a locked controller going again, from what the machine file offers.
    fn unlock_fix(&self) -> String {
        let way = if self.cfg.unlock.is_empty() {
            "list its unlock line (`$X` on grbl-style firmware, `M999` on Marlin-style) in stage.unlock"
        } else if self.cfg.reset.is_empty() {
            "reset or power-cycle the controller (no stage.reset is configured), then connect again"
        } else {
            "`isopach stage home` resets, unlocks and homes it"
        };
        format!("check the stage and what tripped the alarm, then {way}")
    }

    /// The sync exchange's line: a line status query (its report is recognisable), else the
    /// wait line (whose `ok` also waits out any motion an earlier session queued).
    fn sync_line(&self) -> (String, Await) {
        let q = &self.cfg.status_query;
        let (line, sync) = if !q.is_empty() && !codec::is_realtime(q) {
            (q.clone(), Sync::Report { seen: false })
        } else {
            (
                self.cfg.wait_line.clone(),
                Sync::Quiet {
                    replies: 0,
                    round: 1,
                },
            )
        };
        let longest_s = Trapezoid::new(
            self.cfg.max_move_mm,
            self.cfg.feed_mm_min,
            self.cfg.accel_mm_s2,
        )
        .duration_s();
        let timeout = self.motion_allowance(longest_s);
        (line, Await::Sync { timeout, sync })
    }

    /// How long motion of `expected_s` may take before it counts as stalled.
    fn motion_allowance(&self, expected_s: f64) -> Duration {
        secs(expected_s * 1.5) + self.cfg.line_timeout
    }

    fn is_banner(&self, line: &str) -> bool {
        self.cfg.banner.is_empty()
            || line
                .to_lowercase()
                .contains(&self.cfg.banner.to_lowercase())
    }

    fn banner_seen(&self, banner: &Option<String>) -> bool {
        banner.is_some() || self.cfg.banner.is_empty()
    }

    fn remember_status(&mut self, s: &StatusReport) {
        if let Some(w) = s.wco {
            self.wco = Some(w);
        }
    }

    /// Work position of a report: WPos, else MPos less the last known work offset.
    pub fn work_position(&self, s: &StatusReport) -> Option<[f64; 2]> {
        s.wpos.or_else(|| {
            let m = s.mpos?;
            let o = s.wco.or(self.wco).unwrap_or([0.0, 0.0]);
            Some([m[0] - o[0], m[1] - o[1]])
        })
    }

    fn unsolicited(&mut self, reply: Reply) {
        match reply {
            Reply::Alarm { text, .. } => {
                self.note(&format!("unsolicited alarm `{text}`"));
                self.alarm = Some(text);
                self.position = None;
            }
            Reply::Ok => self.note("stray `ok` with nothing in flight (ignored)"),
            Reply::Error { text, .. } => {
                self.note(&format!("stray `{text}` with nothing in flight (ignored)"))
            }
            _ => {}
        }
    }

    fn raise_alarm(&mut self, text: String) {
        self.alarm = Some(text.clone());
        self.position = None;
        let during = self.doing.clone();
        self.fail(ControllerError::Alarm {
            reply: text,
            during,
        });
    }

    fn check_len(&self, line: &str) -> Result<(), ControllerError> {
        let len = line.len() + 1;
        if len > self.cfg.max_line_len {
            return Err(ControllerError::LineTooLong {
                line: line.into(),
                len,
                max: self.cfg.max_line_len,
            });
        }
        Ok(())
    }

    fn fail(&mut self, e: ControllerError) {
        self.finish(Err(e));
    }

    fn finish(&mut self, r: Result<Completion, ControllerError>) {
        self.phase = Phase::Ready;
        self.results.push_back(r);
    }

    fn send_line(&mut self, line: &str) {
        self.log.push_back(LogEntry::Sent(line.to_string()));
        let mut b = line.as_bytes().to_vec();
        b.push(b'\n');
        self.outbox.push_back(b);
    }

    /// The feed hold, put first in the outbox: the stage must stop before anything else is
    /// said to it.
    fn send_feed_hold(&mut self) {
        let hold = self.cfg.feed_hold.clone();
        if hold.is_empty() {
            return;
        }
        let mut bytes = hold.clone().into_bytes();
        if !codec::is_realtime(&hold) {
            bytes.push(b'\n');
        }
        self.log
            .push_back(LogEntry::Sent(hold.escape_debug().to_string()));
        self.outbox.push_front(bytes);
    }

    fn send_raw(&mut self, bytes: Vec<u8>) {
        self.log.push_back(LogEntry::Sent(
            String::from_utf8_lossy(&bytes).escape_debug().to_string(),
        ));
        self.outbox.push_back(bytes);
    }

    fn note(&mut self, s: &str) {
        self.log.push_back(LogEntry::Note(s.to_string()));
    }
}

/// A status report as a short text for messages.
fn status_text(s: &StatusReport) -> String {
    format!("<{}>", s.state.as_deref().unwrap_or("?"))
}

fn describe(cmd: Command) -> String {
    match cmd {
        Command::Connect => "connecting".into(),
        Command::Move { x_mm, y_mm } => format!("moving to ({x_mm:.3}, {y_mm:.3}) mm"),
        Command::WaitIdle => "waiting for motion to end".into(),
        Command::Home => "homing".into(),
        Command::Query => "querying status".into(),
        Command::Reset => "resetting".into(),
    }
}
