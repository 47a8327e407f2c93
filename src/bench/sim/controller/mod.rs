//! The virtual G-code controller: the simulated twin of a stage controller. Pure core (bytes
//! in, bytes out, virtual time as an argument); [`super::server`] runs it over a stream.
//!
//! This file is the core every dialect shares, the way the G-code state machine must expect
//! of real firmware: `ok` per line once the line is *queued* (held back while the planner is
//! full), `G4` and `M400` answered only after motion has ended, both CR and LF ending a line
//! (so CR LF draws two replies), an 80-character line limit, trapezoidal kinematics, a
//! soft-limit alarm for targets outside its travel, and injectable faults (dropped `ok`,
//! garbage, `error`, alarm mid-move, stall, disconnect). What the board says and which extra
//! commands it knows is its dialect's ([`dialect::FirmwareDialect`]): [`grbl_like`] (real-time
//! `?` and Ctrl-X, `$X`/`$H`, `error:N`) and [`marlin_like`] (a printer board: keep-alives,
//! `G28`, `M114`, `M410`, `M999`).

mod config;
pub mod dialect;
pub mod grbl_like;
pub mod marlin_like;
pub mod words;

use crate::bench::kinematics::Trapezoid;
use crate::bench::machine::FaultKind;
pub use config::VirtualConfig;
use dialect::{FirmwareDialect, OwnCode};
use std::collections::VecDeque;
use words::{parse_words, strip_comments};

/// Longest line accepted, characters (without the line end).
pub const LINE_LIMIT: usize = 80;

/// One planned straight move.
#[derive(Debug, Clone, PartialEq)]
struct Segment {
    from: [f64; 2],
    to: [f64; 2],
    profile: Trapezoid,
    feed_mm_min: f64,
}

impl Segment {
    fn at(&self, t: f64) -> [f64; 2] {
        let d = self.profile.distance_mm;
        if d <= 0.0 {
            return self.to;
        }
        let f = self.profile.distance_at(t) / d;
        [
            self.from[0] + f * (self.to[0] - self.from[0]),
            self.from[1] + f * (self.to[1] - self.from[1]),
        ]
    }
}

/// Controller mode.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(super) enum Mode {
    Normal,
    /// Locked after power-up or a reset during an alarm: only `$X` and `$H` are accepted.
    Locked,
    /// Critical alarm: everything is ignored until the reset byte.
    Alarm,
}

/// What holds up the processing of further lines.
#[derive(Debug, Clone, PartialEq)]
enum Blocker {
    /// A move waiting for planner space.
    PlannerFull {
        line: String,
        fault: Option<FaultKind>,
    },
    /// A dwell, wait-for-moves or homing line: replies once motion has ended (+ dwell).
    Sync {
        dwell_s: f64,
        since: Option<f64>,
        fault: Option<FaultKind>,
        homing: bool,
        /// Next keep-alive (dialects that send them).
        keepalive: Option<f64>,
    },
}

/// A fault armed for the next move: strikes half way through it.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Armed {
    Alarm(u32),
    Stall,
}

/// The virtual controller.
#[derive(Debug)]
pub struct VirtualController {
    cfg: VirtualConfig,
    /// What the board says and which extra commands it knows.
    dialect: &'static dyn FirmwareDialect,
    mode: Mode,
    pos: [f64; 2],
    feed_mm_min: f64,
    absolute: bool,
    inches: bool,
    /// Planned moves; the first is running from `active_start`.
    planner: VecDeque<Segment>,
    active_start: f64,
    rx: Vec<u8>,
    lines: VecDeque<String>,
    blocker: Option<Blocker>,
    armed: Option<Armed>,
    /// Virtual time and kind of a fault striking the running move.
    strike: Option<(f64, Armed)>,
    stalled: bool,
    /// Feed hold (grbl-like `!`): motion stopped where it was, the queue kept until a
    /// resume (`~`) or a reset.
    held: bool,
    /// Virtual time of the last alarm (the post-alarm delay runs from it).
    alarm_at: f64,
    homing: bool,
    out: VecDeque<Vec<u8>>,
    lines_seen: usize,
    disconnected: bool,
    now: f64,
}

impl VirtualController {
    /// A controller just powered up at virtual time `now`: banner out, stage at home (or where
    /// the bench session left it).
    pub fn new(cfg: VirtualConfig, now: f64) -> VirtualController {
        let dialect = dialect::of(cfg.dialect);
        let mut v = VirtualController {
            dialect,
            mode: if dialect.starts_locked(cfg.start_locked) {
                Mode::Locked
            } else {
                Mode::Normal
            },
            pos: cfg.start_mm.unwrap_or(cfg.home_mm),
            feed_mm_min: cfg.max_feed_mm_min / 2.0,
            absolute: true,
            inches: false,
            planner: VecDeque::new(),
            active_start: now,
            rx: Vec::new(),
            lines: VecDeque::new(),
            blocker: None,
            armed: None,
            strike: None,
            stalled: false,
            held: false,
            alarm_at: f64::NEG_INFINITY,
            homing: false,
            out: VecDeque::new(),
            lines_seen: 0,
            disconnected: false,
            now,
            cfg,
        };
        v.banner();
        v
    }

    /// Bytes to send to the host, one line (with CR LF) per item.
    pub fn take_output(&mut self) -> Vec<Vec<u8>> {
        self.out.drain(..).collect()
    }

    /// Whether a disconnect fault has struck: the server closes the connection.
    pub fn is_disconnected(&self) -> bool {
        self.disconnected
    }

    /// The stage position at virtual time `now`.
    pub fn position(&mut self, now: f64) -> [f64; 2] {
        self.advance(now);
        self.current_pos()
    }

    /// The next virtual time at which something happens by itself (motion ends, a fault
    /// strikes, a dwell ends).
    pub fn next_wakeup(&self) -> Option<f64> {
        if self.mode == Mode::Alarm {
            return None;
        }
        let keepalive = match &self.blocker {
            Some(Blocker::Sync {
                keepalive: Some(k), ..
            }) => Some(*k),
            _ => None,
        };
        if self.stalled || self.held {
            // A stalled or held board still says it is busy.
            return keepalive;
        }
        let end = self
            .planner
            .front()
            .map(|s| self.active_start + s.profile.duration_s());
        let strike = self.strike.map(|(t, _)| t);
        let dwell = match &self.blocker {
            Some(Blocker::Sync {
                dwell_s,
                since: Some(t),
                ..
            }) => Some(t + dwell_s),
            _ => None,
        };
        [end, strike, dwell, keepalive]
            .into_iter()
            .flatten()
            .reduce(f64::min)
    }

    /// Bytes arrived from the host at virtual time `now`.
    pub fn feed(&mut self, bytes: &[u8], now: f64) {
        self.advance(now);
        let d = self.dialect;
        for &b in bytes {
            if d.real_time_byte(self, b) {
                continue;
            }
            if self.deaf() || self.disconnected {
                continue;
            }
            match b {
                b'\n' | b'\r' => {
                    let line = String::from_utf8_lossy(&self.rx).into_owned();
                    self.rx.clear();
                    // An emergency parser acts on a quick stop as it arrives, ahead of
                    // whatever is waiting; the line itself is then answered in turn.
                    if d.is_quick_stop(&line) {
                        self.quick_stop();
                        self.step_events();
                    }
                    self.lines.push_back(line);
                }
                _ => self.rx.push(b),
            }
        }
        self.process();
    }

    /// Lets virtual time run to `now`: motion progresses, waits end, faults strike.
    pub fn advance(&mut self, now: f64) {
        while self.now < now {
            let next = self.next_wakeup().filter(|t| *t <= now);
            let Some(t) = next else {
                self.now = now;
                break;
            };
            self.now = t.max(self.now);
            self.step_events();
            if next_is_same(self.next_wakeup(), t) {
                // Guard against an event that does not consume itself.
                self.now = now;
                break;
            }
        }
        self.step_events();
        self.process();
    }

    // ----- motion -----

    fn current_pos(&self) -> [f64; 2] {
        if self.stalled || self.held {
            return self.pos;
        }
        match self.planner.front() {
            Some(s) if self.now >= self.active_start => s.at(self.now - self.active_start),
            Some(s) => s.from,
            None => self.pos,
        }
    }

    fn step_events(&mut self) {
        if self.mode == Mode::Alarm {
            return;
        }
        self.keep_alive();
        if self.stalled || self.held {
            return;
        }
        if let Some((t, kind)) = self.strike {
            if self.now >= t {
                self.strike = None;
                let p = self.current_pos();
                match kind {
                    Armed::Alarm(code) => {
                        self.pos = p;
                        self.planner.clear();
                        self.blocker = None;
                        self.lines.clear();
                        self.enter_alarm(code);
                    }
                    Armed::Stall => {
                        // Freeze here: the running segment becomes a zero-length one that
                        // never finishes.
                        self.pos = p;
                        self.stalled = true;
                    }
                }
                return;
            }
        }
        while let Some(s) = self.planner.front() {
            let end = self.active_start + s.profile.duration_s();
            if self.now < end {
                break;
            }
            self.pos = s.to;
            if let Some(m) = &self.cfg.mechanics {
                m.arrive(s.from, s.to);
            }
            self.planner.pop_front();
            self.active_start = end;
            self.start_segment();
        }
        if self.planner.is_empty() {
            if let Some(Blocker::Sync { since, .. }) = &mut self.blocker {
                if since.is_none() {
                    *since = Some(self.now);
                }
            }
        }
        if let Some(Blocker::Sync {
            dwell_s,
            since: Some(t),
            fault,
            homing,
            ..
        }) = self.blocker.clone()
        {
            if self.now >= t + dwell_s {
                self.blocker = None;
                if homing {
                    self.homing = false;
                    self.mode = Mode::Normal;
                }
                self.reply_ok(fault);
            }
        }
        if let Some(Blocker::PlannerFull { .. }) = &self.blocker {
            if self.planner.len() < self.cfg.planner_moves {
                if let Some(Blocker::PlannerFull { line, fault }) = self.blocker.take() {
                    self.execute_gcode(&line, fault);
                }
            }
        }
    }

    /// The front segment has just become the running one: arm any pending fault on it.
    fn start_segment(&mut self) {
        if let (Some(s), Some(a)) = (self.planner.front(), self.armed) {
            self.strike = Some((self.active_start + s.profile.duration_s() / 2.0, a));
            self.armed = None;
        }
    }

    /// A quick stop (Marlin's `M410`): motion stops where it is and the planner empties.
    fn quick_stop(&mut self) {
        self.pos = self.current_pos();
        self.planner.clear();
        self.armed = None;
        self.strike = None;
        self.stalled = false;
    }

    /// A feed hold (grbl-like `!`): motion stops where it is (at once; a real board
    /// decelerates over a few mm) and the rest of the running move stays queued behind the
    /// moves after it, to go on after a resume or be dropped by a reset.
    pub(super) fn feed_hold(&mut self) {
        if self.held || self.stalled || self.planner.is_empty() {
            self.held = self.held || !self.planner.is_empty();
            return;
        }
        self.pos = self.current_pos();
        self.held = true;
        self.strike = None;
        if let Some(s) = self.planner.front_mut() {
            s.from = self.pos;
        }
    }

    /// A resume after a feed hold (grbl-like `~`): the held move goes on from where it
    /// stopped, accelerating again.
    pub(super) fn resume(&mut self) {
        if !self.held {
            return;
        }
        self.held = false;
        self.active_start = self.now;
        if let Some(s) = self.planner.front_mut() {
            let dist = (s.to[0] - s.from[0]).hypot(s.to[1] - s.from[1]);
            s.profile = Trapezoid::new(dist, s.feed_mm_min, self.cfg.accel_mm_s2);
        }
    }

    /// Sends the keep-alives due while a wait blocks (dialects that send them).
    fn keep_alive(&mut self) {
        let Some((every_s, text)) = self.dialect.keep_alive() else {
            return;
        };
        let now = self.now;
        let mut due = 0;
        if let Some(Blocker::Sync {
            keepalive: Some(k), ..
        }) = &mut self.blocker
        {
            while *k <= now {
                *k += every_s;
                due += 1;
            }
        }
        for _ in 0..due {
            self.line(text);
        }
    }

    /// A wait that replies once motion has ended (plus `dwell_s`).
    fn sync(&self, dwell_s: f64, fault: Option<FaultKind>, homing: bool) -> Blocker {
        Blocker::Sync {
            dwell_s,
            since: None,
            fault,
            homing,
            keepalive: self
                .dialect
                .keep_alive()
                .map(|(every_s, _)| self.now + every_s),
        }
    }

    fn queue_move(&mut self, to: [f64; 2]) {
        let from = self.planner.back().map_or(self.current_pos(), |s| s.to);
        let dist = (to[0] - from[0]).hypot(to[1] - from[1]);
        let feed = self.feed_mm_min.min(self.cfg.max_feed_mm_min);
        let seg = Segment {
            from,
            to,
            profile: Trapezoid::new(dist, feed, self.cfg.accel_mm_s2),
            feed_mm_min: feed,
        };
        let was_empty = self.planner.is_empty();
        self.planner.push_back(seg);
        if was_empty {
            self.active_start = self.now + self.cfg.idle_lag_s;
            self.start_segment();
        }
    }

    // ----- lines -----

    fn process(&mut self) {
        while self.blocker.is_none() && !self.disconnected {
            if self.deaf() {
                break;
            }
            let Some(line) = self.lines.pop_front() else {
                break;
            };
            if self.mode == Mode::Alarm {
                if self.dialect.clears_alarm(&line) {
                    self.mode = Mode::Normal;
                    self.line("ok");
                } else {
                    let why = self.dialect.stopped_line();
                    self.line(why);
                }
                continue;
            }
            self.execute_line(line);
        }
    }

    fn execute_line(&mut self, raw: String) {
        let line = strip_comments(&raw).trim().to_uppercase();
        if line.is_empty() {
            // Some firmware acknowledges an empty line (hosts use it to sync), some skips it.
            if self.dialect.acknowledges_empty_line() {
                self.line("ok");
            }
            return;
        }
        self.lines_seen += 1;
        let fault = self
            .cfg
            .faults
            .iter()
            .find(|f| f.at_line == self.lines_seen)
            .cloned();
        if let Some(f) = &fault {
            match f.kind {
                FaultKind::Error => return self.line(&self.dialect.fault_error(f.code)),
                FaultKind::Disconnect => {
                    self.disconnected = true;
                    return;
                }
                FaultKind::Alarm => self.armed = Some(Armed::Alarm(f.code)),
                FaultKind::Stall => self.armed = Some(Armed::Stall),
                FaultKind::DropOk | FaultKind::Garbage => {}
            }
        }
        let kind = fault.map(|f| f.kind);
        if raw.len() > LINE_LIMIT {
            return self.reject(11, &line);
        }
        let d = self.dialect;
        d.run_line(self, &line, kind);
    }

    /// Homing (`$H`, or `G28` in the Marlin-like dialect): a move home at half the feed cap,
    /// answered when it has ended.
    pub(super) fn home(&mut self, fault: Option<FaultKind>) {
        self.homing = true;
        let home = self.cfg.home_mm;
        let feed = self.feed_mm_min;
        self.feed_mm_min = self.cfg.max_feed_mm_min / 2.0;
        self.queue_move(home);
        self.feed_mm_min = feed;
        self.blocker = Some(self.sync(0.0, fault, true));
        self.step_events();
    }

    /// A line the controller cannot run, answered in its dialect's words.
    fn reject(&mut self, code: u32, line: &str) {
        for l in self.dialect.reject(code, line) {
            self.line(&l);
        }
    }

    /// Where the last queued move ends (where the stage is when nothing is queued).
    fn planned_position(&self) -> [f64; 2] {
        self.planner.back().map_or(self.current_pos(), |s| s.to)
    }

    /// Runs a G-code line: motion, dwell and modal words every dialect knows, plus the
    /// dialect's own codes.
    pub(super) fn execute_gcode(&mut self, line: &str, fault: Option<FaultKind>) {
        let d = self.dialect;
        let words = match parse_words(line) {
            Ok(w) => w,
            Err(code) => return self.reject(code, line),
        };
        let get = |letter: char| {
            words
                .iter()
                .rev()
                .find(|(l, _)| *l == letter)
                .map(|(_, v)| *v)
        };
        let scale = if self.inches { 25.4 } else { 1.0 };
        let mut motion = false;
        let mut sync: Option<f64> = None;
        for &(l, v) in &words {
            // Codes in tenths, so that G38.2-style decimals stay distinct from whole codes.
            let code = (v * 10.0).round() as i64;
            match d.own_code(l, code, self.planned_position()) {
                Some(OwnCode::Home) => return self.home(fault),
                Some(OwnCode::Reply(report)) => {
                    self.line(&report);
                    return self.reply_ok(fault);
                }
                Some(OwnCode::Accept) => continue,
                None => {}
            }
            match (l, code) {
                ('G', 0 | 10) => motion = true,
                ('G', 40) => sync = Some(d.dwell_s(get('P'), get('S')).max(0.0)),
                ('G', 200) => self.inches = true,
                ('G', 210) => self.inches = false,
                ('G', 900) => self.absolute = true,
                ('G', 910) => self.absolute = false,
                ('G', 170 | 540 | 940) => {}
                ('M', 4000) => sync = Some(0.0),
                ('M', 20 | 300 | 50 | 90) => {}
                ('X' | 'Y' | 'Z' | 'F' | 'P', _) => {}
                _ => return self.reject(20, line),
            }
        }
        if let Some(f) = get('F') {
            if f <= 0.0 {
                if let Some(code) = d.zero_feed_error() {
                    return self.reject(code, line);
                }
            }
            if f > 0.0 {
                self.feed_mm_min = f * scale;
            }
        }
        let has_axis = get('X').is_some() || get('Y').is_some();
        if motion || (has_axis && sync.is_none()) {
            if self.planner.len() >= self.cfg.planner_moves {
                self.blocker = Some(Blocker::PlannerFull {
                    line: line.to_string(),
                    fault,
                });
                return;
            }
            let base = self.planned_position();
            let axis = |i: usize, w: Option<f64>| match w {
                Some(v) if self.absolute => v * scale,
                Some(v) => base[i] + v * scale,
                None => base[i],
            };
            let mut to = [axis(0, get('X')), axis(1, get('Y'))];
            let inside = |v: f64, t: [f64; 2]| v >= t[0] - 1e-9 && v <= t[1] + 1e-9;
            if d.clamps_to_travel() {
                // Software endstops: the target is clamped to the travel, silently.
                to = [
                    to[0].clamp(self.cfg.travel_x_mm[0], self.cfg.travel_x_mm[1]),
                    to[1].clamp(self.cfg.travel_y_mm[0], self.cfg.travel_y_mm[1]),
                ];
            }
            if !(inside(to[0], self.cfg.travel_x_mm) && inside(to[1], self.cfg.travel_y_mm)) {
                // Soft-limit alarm: motion is held, then the controller locks up until reset.
                self.pos = self.current_pos();
                self.planner.clear();
                self.enter_alarm(2);
                return;
            }
            self.queue_move(to);
        }
        if let Some(dwell_s) = sync {
            self.blocker = Some(self.sync(dwell_s, fault, false));
            self.step_events();
            return;
        }
        self.reply_ok(fault);
    }

    // ----- replies -----

    /// `ok`, or what an injected fault makes of it.
    pub(super) fn reply_ok(&mut self, fault: Option<FaultKind>) {
        match fault {
            Some(FaultKind::DropOk) => {}
            Some(FaultKind::Garbage) => self
                .out
                .push_back(vec![0xF8, 0x1B, b'#', 0xC3, 0x07, b'k', b'\r', b'\n']),
            _ => self.line("ok"),
        }
    }

    /// What the board is doing now, as a status report tells it.
    pub(super) fn status(&self) -> Status {
        let running = !self.planner.is_empty() && (self.now >= self.active_start || self.stalled);
        let (state, feed_mm_min) = match (self.mode, self.homing, running) {
            (Mode::Alarm | Mode::Locked, _, _) => (State::Alarm, 0.0),
            (_, true, _) => (State::Home, 0.0),
            _ if self.held => (State::Hold, 0.0),
            (_, _, true) if self.stalled => (State::Run, 0.0),
            (_, _, true) => (
                State::Run,
                self.planner.front().map_or(0.0, |s| s.feed_mm_min),
            ),
            _ => (State::Idle, 0.0),
        };
        Status {
            state,
            position_mm: self.current_pos(),
            feed_mm_min,
        }
    }

    /// The modal state a `$G`-style report shows: inches, absolute, feed mm/min.
    pub(super) fn modal(&self) -> (bool, bool, f64) {
        (self.inches, self.absolute, self.feed_mm_min)
    }

    pub(super) fn mode(&self) -> Mode {
        self.mode
    }

    /// Clears a locked state (or a finished alarm); returns whether it was locked.
    pub(super) fn unlock(&mut self) -> bool {
        let was = self.mode == Mode::Locked;
        self.mode = Mode::Normal;
        was
    }

    /// A reset (grbl-like Ctrl-X): everything queued is dropped, the banner printed again.
    pub(super) fn reset(&mut self) {
        let moving = !self.planner.is_empty();
        self.pos = self.current_pos();
        self.planner.clear();
        self.blocker = None;
        self.lines.clear();
        self.rx.clear();
        self.armed = None;
        self.strike = None;
        self.stalled = false;
        self.held = false;
        self.homing = false;
        self.absolute = true;
        self.inches = false;
        // A reset during motion or an alarm loses the position: lock until unlocked or homed.
        self.mode = if moving || self.mode != Mode::Normal {
            Mode::Locked
        } else {
            Mode::Normal
        };
        self.banner();
    }

    fn banner(&mut self) {
        for l in self
            .dialect
            .banner(&self.cfg.banner, self.mode == Mode::Locked)
        {
            self.line(&l);
        }
    }

    /// Whether the board is still busy with an alarm: in its post-alarm delay it takes
    /// nothing, not even a reset (dialects that are deaf in an alarm).
    pub(super) fn deaf(&self) -> bool {
        self.mode == Mode::Alarm
            && self.dialect.deaf_in_alarm()
            && self.now < self.alarm_at + self.cfg.post_alarm_delay_s
    }

    /// An alarm: motion is already stopped; the board prints it and locks.
    fn enter_alarm(&mut self, code: u32) {
        self.mode = Mode::Alarm;
        self.alarm_at = self.now;
        self.alarm_lines(code);
    }

    /// What an alarm mid-move prints.
    fn alarm_lines(&mut self, code: u32) {
        for l in self.dialect.alarm(code) {
            self.line(&l);
        }
    }

    /// Queues one line (CR LF added) for the host.
    pub(super) fn line(&mut self, s: &str) {
        let mut b = s.as_bytes().to_vec();
        b.extend_from_slice(b"\r\n");
        self.out.push_back(b);
    }
}

fn next_is_same(next: Option<f64>, t: f64) -> bool {
    next.is_some_and(|n| n <= t)
}

/// The state word of a status report.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(super) enum State {
    Idle,
    Run,
    Home,
    Hold,
    Alarm,
}

/// What a status report tells: state, position and the running move's feed.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(super) struct Status {
    pub state: State,
    pub position_mm: [f64; 2],
    pub feed_mm_min: f64,
}

#[cfg(test)]
pub(super) mod test_support {
    //! Helpers shared by the dialects' tests.
    use super::*;
    use crate::bench::machine::Dialect;

    /// A small grbl-like controller: 200 mm square travel, two planner slots.
    pub fn cfg() -> VirtualConfig {
        VirtualConfig {
            banner: "VS 1.0".into(),
            start_locked: false,
            idle_lag_s: 0.02,
            planner_moves: 2,
            travel_x_mm: [0.0, 200.0],
            travel_y_mm: [0.0, 200.0],
            max_feed_mm_min: 6000.0,
            accel_mm_s2: 500.0,
            home_mm: [0.0, 0.0],
            start_mm: None,
            faults: vec![],
            dialect: Dialect::Grbl,
            post_alarm_delay_s: 0.15,
            mechanics: None,
        }
    }

    /// The lines sent since the last call, line ends removed.
    pub fn text(v: &mut VirtualController) -> Vec<String> {
        v.take_output()
            .into_iter()
            .map(|b| String::from_utf8_lossy(&b).trim_end().to_string())
            .collect()
    }
}
