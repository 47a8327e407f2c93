//! The virtual G-code controller: the simulated twin of a stage controller. Pure core (bytes
//! in, bytes out, virtual time as an argument); [`super::server`] runs it over a stream.
//!
//! It behaves the way the G-code state machine must expect of real firmware, in a grbl-like
//! dialect of its own: a banner at start-up and after a reset (Ctrl-X, 0x18), an optional
//! locked state cleared by `$X` or `$H`, `ok` per line once the line is *queued* (held back
//! while the planner is full), `error:N` for lines it cannot run, `?` answered at once with
//! `<State|MPos:x,y,z|FS:f,0>` (and still `Idle`, at the old place, for a short lag after a
//! move is queued), `G4 P<s>` and `M400` answered only after motion has ended, both CR and LF
//! ending a line (so CR LF draws two replies), an 80-character line limit, trapezoidal
//! kinematics, an `ALARM:2` soft-limit alarm for targets outside its travel, and injectable
//! faults (dropped `ok`, garbage, `error`, alarm mid-move, stall, disconnect). In an alarm it
//! ignores everything, status queries included, until it receives the reset byte.
//!
//! With `dialect = "marlin"` it behaves like 3D-printer firmware instead (see
//! [`Dialect::Marlin`]): no real-time bytes, `echo:busy: processing` keep-alives while a wait
//! blocks, `G28`, `M114`, `M410` acted on as it arrives, `G4 P` in ms, moves clamped to the
//! travel, alarms cleared by `M999`.

use crate::bench::kinematics::Trapezoid;
use crate::bench::machine::{Dialect, FaultKind, FaultSpec, MachineFile};
use std::collections::VecDeque;

/// The reset byte (Ctrl-X).
pub const RESET_BYTE: u8 = 0x18;
/// The status query byte.
pub const STATUS_BYTE: u8 = b'?';
/// Longest line accepted, characters (without the line end).
pub const LINE_LIMIT: usize = 80;
/// Interval of the Marlin dialect's `echo:busy: processing` keep-alives, s (Marlin's default
/// host keep-alive interval, from memory).
pub const KEEPALIVE_S: f64 = 2.0;

/// How the virtual controller is built.
#[derive(Debug, Clone, PartialEq)]
pub struct VirtualConfig {
    pub banner: String,
    pub start_locked: bool,
    /// Delay between queueing a move into an empty planner and the start of motion, s.
    pub idle_lag_s: f64,
    pub planner_moves: usize,
    pub travel_x_mm: [f64; 2],
    pub travel_y_mm: [f64; 2],
    /// Feed cap, mm/min.
    pub max_feed_mm_min: f64,
    pub accel_mm_s2: f64,
    /// Where homing ends and where the stage sits at power-up.
    pub home_mm: [f64; 2],
    pub faults: Vec<FaultSpec>,
    pub dialect: Dialect,
}

impl VirtualConfig {
    /// The virtual controller a machine file's `[stage]` and `[simulation]` describe.
    pub fn from_machine(m: &MachineFile) -> VirtualConfig {
        let s = &m.stage;
        let c = &m.simulation.controller;
        VirtualConfig {
            banner: c.banner.clone(),
            start_locked: c.start_locked,
            idle_lag_s: c.idle_lag_ms / 1000.0,
            planner_moves: c.planner_moves.max(1),
            travel_x_mm: s.travel_x_mm,
            travel_y_mm: s.travel_y_mm,
            max_feed_mm_min: s.feed_mm_min.max(1.0) * 2.0,
            accel_mm_s2: s.accel_mm_s2,
            home_mm: [s.travel_x_mm[0], s.travel_y_mm[0]],
            faults: m.simulation.faults.clone(),
            dialect: c.dialect,
        }
    }
}

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
enum Mode {
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
        /// Next keep-alive (Marlin dialect).
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
    homing: bool,
    out: VecDeque<Vec<u8>>,
    lines_seen: usize,
    disconnected: bool,
    now: f64,
}

impl VirtualController {
    /// A controller just powered up at virtual time `now`: banner out, stage at home.
    pub fn new(cfg: VirtualConfig, now: f64) -> VirtualController {
        let mut v = VirtualController {
            mode: if cfg.start_locked && cfg.dialect == Dialect::Grbl {
                Mode::Locked
            } else {
                Mode::Normal
            },
            pos: cfg.home_mm,
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
        if self.stalled {
            // A stalled board still says it is busy.
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
        let grbl = self.cfg.dialect == Dialect::Grbl;
        for &b in bytes {
            if grbl && b == RESET_BYTE {
                self.reset();
                continue;
            }
            if (grbl && self.mode == Mode::Alarm) || self.disconnected {
                continue;
            }
            match b {
                STATUS_BYTE if grbl => self.report_status(),
                b'\n' | b'\r' => {
                    let line = String::from_utf8_lossy(&self.rx).into_owned();
                    self.rx.clear();
                    // Marlin's emergency parser acts on a quick stop as it arrives, ahead of
                    // whatever is waiting; the line itself is then answered in turn.
                    if !grbl && is_code(&line, "M410") {
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
        if self.stalled {
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
        if self.stalled {
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
                        self.mode = Mode::Alarm;
                        self.alarm_lines(code);
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

    /// Marlin's `M410`: motion stops where it is and the planner empties.
    fn quick_stop(&mut self) {
        self.pos = self.current_pos();
        self.planner.clear();
        self.armed = None;
        self.strike = None;
        self.stalled = false;
    }

    /// Sends the keep-alives due while a wait blocks (Marlin dialect).
    fn keep_alive(&mut self) {
        let now = self.now;
        let mut due = 0;
        if let Some(Blocker::Sync {
            keepalive: Some(k), ..
        }) = &mut self.blocker
        {
            while *k <= now {
                *k += KEEPALIVE_S;
                due += 1;
            }
        }
        for _ in 0..due {
            self.line("echo:busy: processing");
        }
    }

    /// A wait that replies once motion has ended (plus `dwell_s`).
    fn sync(&self, dwell_s: f64, fault: Option<FaultKind>, homing: bool) -> Blocker {
        Blocker::Sync {
            dwell_s,
            since: None,
            fault,
            homing,
            keepalive: (self.cfg.dialect == Dialect::Marlin).then_some(self.now + KEEPALIVE_S),
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
            if self.mode == Mode::Alarm && self.cfg.dialect == Dialect::Grbl {
                break;
            }
            let Some(line) = self.lines.pop_front() else {
                break;
            };
            if self.mode == Mode::Alarm {
                // Marlin dialect: stopped until M999.
                if is_code(&line, "M999") {
                    self.mode = Mode::Normal;
                    self.line("ok");
                } else {
                    self.line("Error:Printer stopped due to errors. Fix the error and use M999 to restart.");
                }
                continue;
            }
            self.execute_line(line);
        }
    }

    fn execute_line(&mut self, raw: String) {
        let line = strip_comments(&raw).trim().to_uppercase();
        let marlin = self.cfg.dialect == Dialect::Marlin;
        if line.is_empty() {
            // An empty line is acknowledged by grbl-style firmware (for syncing), skipped by
            // Marlin.
            if !marlin {
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
                FaultKind::Error if marlin => {
                    return self.line(&format!("Error:injected fault {}", f.code))
                }
                FaultKind::Error => return self.line(&format!("error:{}", f.code)),
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
        if marlin {
            return self.execute_gcode(&line, kind);
        }
        if let Some(cmd) = line.strip_prefix('$') {
            return self.execute_system(cmd.trim(), kind);
        }
        if self.mode == Mode::Locked {
            return self.line("error:9");
        }
        self.execute_gcode(&line, kind);
    }

    fn execute_system(&mut self, cmd: &str, fault: Option<FaultKind>) {
        match cmd {
            "X" => {
                if self.mode == Mode::Locked {
                    self.line("[MSG:Caution: Unlocked]");
                }
                self.mode = Mode::Normal;
                self.reply_ok(fault);
            }
            "H" => self.home(fault),
            "I" => {
                self.line("[VER:isopach-virtual.1:]");
                self.reply_ok(fault);
            }
            "G" => {
                let modes = format!(
                    "[GC:G1 G54 G17 {} {} G94 M5 M9 T0 F{:.0} S0]",
                    if self.inches { "G20" } else { "G21" },
                    if self.absolute { "G90" } else { "G91" },
                    self.feed_mm_min
                );
                self.line(&modes);
                self.reply_ok(fault);
            }
            _ => self.line("error:3"),
        }
    }

    /// Homing (`$H`, or `G28` in the Marlin dialect): a move home at half the feed cap,
    /// answered when it has ended.
    fn home(&mut self, fault: Option<FaultKind>) {
        self.homing = true;
        let home = self.cfg.home_mm;
        let feed = self.feed_mm_min;
        self.feed_mm_min = self.cfg.max_feed_mm_min / 2.0;
        self.queue_move(home);
        self.feed_mm_min = feed;
        self.blocker = Some(self.sync(0.0, fault, true));
        self.step_events();
    }

    /// A line the controller cannot run: `error:N` (grbl), or Marlin's echo and `ok`.
    fn reject(&mut self, code: u32, line: &str) {
        match self.cfg.dialect {
            Dialect::Grbl => self.line(&format!("error:{code}")),
            Dialect::Marlin => {
                self.line(&format!("echo:Unknown command: \"{line}\""));
                self.line("ok");
            }
        }
    }

    /// Marlin's `M114`: the planned position (where the last queued move ends), not where
    /// the stage is now, then `ok`.
    fn report_planned_position(&mut self, fault: Option<FaultKind>) {
        let p = self.planner.back().map_or(self.current_pos(), |s| s.to);
        let steps = |v: f64| (v * 80.0).round() as i64;
        let r = format!(
            "X:{:.2} Y:{:.2} Z:0.00 E:0.00 Count X:{} Y:{} Z:0",
            p[0],
            p[1],
            steps(p[0]),
            steps(p[1])
        );
        self.line(&r);
        self.reply_ok(fault);
    }

    fn execute_gcode(&mut self, line: &str, fault: Option<FaultKind>) {
        let marlin = self.cfg.dialect == Dialect::Marlin;
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
            match (l, code) {
                ('G', 0 | 10) => motion = true,
                // Marlin counts P in ms (S in s), grbl P in s.
                ('G', 40) if marlin => {
                    let s = get('S').map_or(get('P').unwrap_or(0.0) / 1000.0, |s| s);
                    sync = Some(s.max(0.0));
                }
                ('G', 40) => sync = Some(get('P').unwrap_or(0.0).max(0.0)),
                ('G', 280) if marlin => return self.home(fault),
                ('M', 1140) if marlin => return self.report_planned_position(fault),
                ('M', 4100 | 9990) if marlin => {}
                ('G', 200) => self.inches = true,
                ('G', 210) => self.inches = false,
                ('G', 900) => self.absolute = true,
                ('G', 910) => self.absolute = false,
                ('G', 170 | 540 | 940) => {}
                ('M', 4000) => sync = Some(0.0),
                ('M', 20 | 300 | 50 | 90) => {}
                ('X' | 'Y' | 'Z' | 'F' | 'P', _) => {}
                ('S', _) if marlin => {}
                _ => return self.reject(20, line),
            }
        }
        if let Some(f) = get('F') {
            if f <= 0.0 && !marlin {
                return self.line("error:22");
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
            let base = self.planner.back().map_or(self.current_pos(), |s| s.to);
            let axis = |i: usize, w: Option<f64>| match w {
                Some(v) if self.absolute => v * scale,
                Some(v) => base[i] + v * scale,
                None => base[i],
            };
            let mut to = [axis(0, get('X')), axis(1, get('Y'))];
            let inside = |v: f64, t: [f64; 2]| v >= t[0] - 1e-9 && v <= t[1] + 1e-9;
            if marlin {
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
                self.mode = Mode::Alarm;
                self.alarm_lines(2);
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

    fn reply_ok(&mut self, fault: Option<FaultKind>) {
        match fault {
            Some(FaultKind::DropOk) => {}
            Some(FaultKind::Garbage) => self
                .out
                .push_back(vec![0xF8, 0x1B, b'#', 0xC3, 0x07, b'k', b'\r', b'\n']),
            _ => self.line("ok"),
        }
    }

    fn report_status(&mut self) {
        let p = self.current_pos();
        let running = !self.planner.is_empty() && (self.now >= self.active_start || self.stalled);
        let (state, feed) = match (self.mode, self.homing, running) {
            (Mode::Alarm | Mode::Locked, _, _) => ("Alarm", 0.0),
            (_, true, _) => ("Home", 0.0),
            (_, _, true) if self.stalled => ("Run", 0.0),
            (_, _, true) => ("Run", self.planner.front().map_or(0.0, |s| s.feed_mm_min)),
            _ => ("Idle", 0.0),
        };
        let r = format!(
            "<{state}|MPos:{:.3},{:.3},0.000|FS:{feed:.0},0>",
            p[0], p[1]
        );
        self.line(&r);
    }

    fn reset(&mut self) {
        let moving = !self.planner.is_empty();
        self.pos = self.current_pos();
        self.planner.clear();
        self.blocker = None;
        self.lines.clear();
        self.rx.clear();
        self.armed = None;
        self.strike = None;
        self.stalled = false;
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
        if self.cfg.dialect == Dialect::Marlin {
            self.line("start");
            let b = format!("echo:{}", self.cfg.banner);
            return self.line(&b);
        }
        self.line("");
        let b = self.cfg.banner.clone();
        self.line(&b);
        if self.mode == Mode::Locked {
            self.line("[MSG:'$H'|'$X' to unlock]");
        }
    }

    /// What an alarm mid-move prints.
    fn alarm_lines(&mut self, code: u32) {
        match self.cfg.dialect {
            Dialect::Grbl => {
                self.line(&format!("ALARM:{code}"));
                self.line("[MSG:Reset to continue]");
            }
            Dialect::Marlin => {
                self.line(&format!("!! alarm {code}: motion halted"));
                self.line("Error:Printer halted. Send M999 to restart.");
            }
        }
    }

    fn line(&mut self, s: &str) {
        let mut b = s.as_bytes().to_vec();
        b.extend_from_slice(b"\r\n");
        self.out.push_back(b);
    }
}

fn next_is_same(next: Option<f64>, t: f64) -> bool {
    next.is_some_and(|n| n <= t)
}

/// Whether a line, comments and case aside, is exactly `code` (`m410 ; stop` is `M410`).
fn is_code(line: &str, code: &str) -> bool {
    strip_comments(line).trim().eq_ignore_ascii_case(code)
}

/// Removes `( … )` and `; …` comments.
fn strip_comments(line: &str) -> String {
    let mut out = String::new();
    let mut depth = 0;
    for c in line.chars() {
        match c {
            ';' if depth == 0 => break,
            '(' => depth += 1,
            ')' if depth > 0 => depth -= 1,
            _ if depth == 0 => out.push(c),
            _ => {}
        }
    }
    out
}

/// Letter–number words of a line (`G1X10 Y2.5` → G1, X10, Y2.5); `Err(code)` as grbl numbers
/// them: 1 = letter expected, 2 = bad number.
fn parse_words(line: &str) -> Result<Vec<(char, f64)>, u32> {
    let chars: Vec<char> = line.chars().filter(|c| !c.is_whitespace()).collect();
    let mut words = Vec::new();
    let mut i = 0;
    while i < chars.len() {
        let l = chars[i];
        if !l.is_ascii_alphabetic() {
            return Err(1);
        }
        let start = i + 1;
        let mut j = start;
        while j < chars.len() && (chars[j].is_ascii_digit() || matches!(chars[j], '.' | '-' | '+'))
        {
            j += 1;
        }
        let num: String = chars[start..j].iter().collect();
        let v = num.parse::<f64>().map_err(|_| 2u32)?;
        words.push((l, v));
        i = j;
    }
    Ok(words)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn cfg() -> VirtualConfig {
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
            faults: vec![],
            dialect: Dialect::Grbl,
        }
    }

    fn marlin() -> VirtualController {
        let mut v = VirtualController::new(
            VirtualConfig {
                dialect: Dialect::Marlin,
                start_locked: true,
                ..cfg()
            },
            0.0,
        );
        assert_eq!(text(&mut v), vec!["start", "echo:VS 1.0"], "never locked");
        v
    }

    #[test]
    fn marlin_waits_with_keep_alives_and_reports_the_planned_position() {
        let mut v = marlin();
        // 111.8 mm at 50 mm/s, 500 mm/s²: 2.34 s after the 0.02 s lag.
        v.feed(b"G1 X100 Y50 F3000\nM114\nM400\n", 0.0);
        assert_eq!(
            text(&mut v),
            vec![
                "ok",
                "X:100.00 Y:50.00 Z:0.00 E:0.00 Count X:8000 Y:4000 Z:0",
                "ok"
            ],
            "M114 reports where the queued move ends, at once"
        );
        v.advance(2.0);
        assert_eq!(text(&mut v), vec!["echo:busy: processing"]);
        v.advance(2.3);
        assert!(text(&mut v).is_empty());
        v.advance(2.4);
        assert_eq!(text(&mut v), vec!["ok"]);
        // `?` is no real-time byte here, and an unknown code is echoed, then acknowledged.
        v.feed(b"?\n$H\n", 2.4);
        assert_eq!(
            text(&mut v),
            vec![
                "echo:Unknown command: \"?\"",
                "ok",
                "echo:Unknown command: \"$H\"",
                "ok"
            ]
        );
    }

    #[test]
    fn marlin_dwell_is_in_ms_moves_clamp_and_quick_stop_acts_at_once() {
        let mut v = marlin();
        v.feed(b"G4 P500\n", 0.0);
        v.advance(0.49);
        assert!(text(&mut v).is_empty());
        v.advance(0.5);
        assert_eq!(text(&mut v), vec!["ok"]);
        // Beyond the travel: clamped to 200 mm, no alarm.
        v.feed(b"G1 X250 F3000\nM400\n", 0.5);
        assert_eq!(text(&mut v), vec!["ok"]);
        v.advance(1.5);
        let at = v.position(1.5)[0];
        assert!(at > 10.0 && at < 200.0, "{at}");
        // M410 stops the stage where it is, ahead of the waiting M400, which then returns.
        v.feed(b"M410\n", 1.5);
        assert_eq!(text(&mut v), vec!["ok", "ok"]);
        assert!((v.position(3.0)[0] - at).abs() < 1e-9);
        v.feed(b"G1 X250\nM400\n", 3.0);
        v.advance(10.0);
        assert_eq!(v.position(10.0)[0], 200.0);
    }

    #[test]
    fn marlin_alarm_waits_for_m999() {
        let mut v = VirtualController::new(
            VirtualConfig {
                dialect: Dialect::Marlin,
                faults: vec![FaultSpec {
                    kind: FaultKind::Alarm,
                    at_line: 1,
                    code: 4,
                }],
                ..cfg()
            },
            0.0,
        );
        text(&mut v);
        v.feed(b"G1 X100\n", 0.0);
        assert_eq!(text(&mut v), vec!["ok"]);
        v.advance(3.0);
        assert_eq!(
            text(&mut v),
            vec![
                "!! alarm 4: motion halted",
                "Error:Printer halted. Send M999 to restart."
            ]
        );
        v.feed(&[RESET_BYTE], 3.0);
        v.feed(b"G1 X10\nM999\nG1 X10\n", 3.0);
        assert_eq!(
            text(&mut v),
            vec![
                "Error:Printer stopped due to errors. Fix the error and use M999 to restart.",
                "ok",
                "ok"
            ]
        );
    }

    fn text(v: &mut VirtualController) -> Vec<String> {
        v.take_output()
            .into_iter()
            .map(|b| String::from_utf8_lossy(&b).trim_end().to_string())
            .collect()
    }

    #[test]
    fn move_follows_the_trapezoid_and_dwell_waits_for_it() {
        let mut v = VirtualController::new(cfg(), 0.0);
        assert_eq!(text(&mut v), vec!["", "VS 1.0"]);
        v.feed(b"G1 X100 Y0 F3000\nG4 P0\n", 0.0);
        assert_eq!(
            text(&mut v),
            vec!["ok"],
            "the move is queued; the dwell waits"
        );
        // Idle lag 0.02 s, then 100 mm at 50 mm/s with 500 mm/s² → 2.1 s.
        v.feed(b"?", 0.01);
        assert_eq!(text(&mut v), vec!["<Idle|MPos:0.000,0.000,0.000|FS:0,0>"]);
        v.advance(0.02 + 1.05);
        assert!((v.position(1.07)[0] - 50.0).abs() < 1e-9);
        assert!(text(&mut v).is_empty());
        v.advance(2.2);
        assert_eq!(text(&mut v), vec!["ok"]);
        assert_eq!(v.position(2.2), [100.0, 0.0]);
    }

    #[test]
    fn crlf_draws_two_replies_and_full_planner_holds_ok() {
        let mut v = VirtualController::new(cfg(), 0.0);
        text(&mut v);
        v.feed(b"G21\r\n", 0.0);
        assert_eq!(text(&mut v), vec!["ok", "ok"]);
        v.feed(b"G1 X10\nG1 X20\nG1 X30\n", 0.0);
        assert_eq!(
            text(&mut v),
            vec!["ok", "ok"],
            "third move waits for planner space"
        );
        v.advance(5.0);
        assert_eq!(text(&mut v), vec!["ok"]);
    }

    #[test]
    fn alarm_ignores_everything_until_reset() {
        let mut v = VirtualController::new(cfg(), 0.0);
        text(&mut v);
        v.feed(b"G1 X250\n", 0.0);
        assert_eq!(text(&mut v), vec!["ALARM:2", "[MSG:Reset to continue]"]);
        v.feed(b"?G21\n$X\n", 0.1);
        assert!(text(&mut v).is_empty());
        v.feed(&[RESET_BYTE], 0.2);
        assert_eq!(
            text(&mut v),
            vec!["", "VS 1.0", "[MSG:'$H'|'$X' to unlock]"]
        );
        v.feed(b"G1 X5\n", 0.3);
        assert_eq!(text(&mut v), vec!["error:9"]);
    }
}
