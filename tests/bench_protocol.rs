//! The G-code state machine driven directly, with injected time: golden transcripts (the exact
//! lines sent for a 3×3 plan and how replies advance them) for each motion-complete strategy,
//! and every fault kind giving its own error without hanging.

use isopach::bench::chuck::ChuckTransform;
use isopach::bench::gcode::{
    Command, Completion, Controller, ControllerError, LogEntry, ProtocolConfig,
};
use isopach::bench::limits::Approach;
use isopach::bench::machine::{self, MachineFile};
use isopach::bench::sim::controller::{VirtualConfig, VirtualController};
use std::path::Path;
use std::time::Duration;

fn fixture(name: &str) -> MachineFile {
    let p = Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("fixtures/machines")
        .join(name);
    machine::load(&p).unwrap_or_else(|e| panic!("{e}")).machine
}

/// Drives a controller by hand: commands, replies and the clock.
struct Harness {
    c: Controller,
    now: Duration,
}

impl Harness {
    fn new(m: &MachineFile) -> Harness {
        Harness {
            c: Controller::new(ProtocolConfig::from_spec(&m.stage)),
            now: Duration::ZERO,
        }
    }
    fn start(&mut self, cmd: Command) {
        self.c.start(cmd, self.now).unwrap();
    }
    /// What went out since the last call: lines without their LF; real-time bytes escaped.
    fn sent(&mut self) -> Vec<String> {
        let mut out = Vec::new();
        while let Some(b) = self.c.poll_transmit() {
            match b.strip_suffix(b"\n") {
                Some(line) => {
                    assert!(
                        !line.contains(&b'\r') && !line.contains(&b'\n'),
                        "LF only: {b:?}"
                    );
                    out.push(String::from_utf8(line.to_vec()).unwrap())
                }
                None => out.push(format!(
                    "<raw {}>",
                    String::from_utf8_lossy(&b).escape_debug()
                )),
            }
        }
        out
    }
    fn reply(&mut self, line: &str) {
        self.c.handle_line(line, self.now);
    }
    fn wait_ms(&mut self, ms: u64) {
        self.now += Duration::from_millis(ms);
        self.c.handle_time(self.now);
    }
    fn result(&mut self) -> Option<Result<Completion, ControllerError>> {
        self.c.poll_result()
    }
    /// Runs `cmd`, answering every line with `ok`; returns the lines sent.
    fn ok_all(&mut self, cmd: Command) -> Vec<String> {
        self.start(cmd);
        let mut all = Vec::new();
        loop {
            let s = self.sent();
            if s.is_empty() {
                break;
            }
            for _ in &s {
                assert!(self.result().is_none(), "nothing may finish before its ok");
                self.reply("ok");
            }
            all.extend(s);
        }
        assert!(
            matches!(self.result(), Some(Ok(_))),
            "{cmd:?} should succeed"
        );
        all
    }
    /// A move to (150, 100) acknowledged, then the wait for it started.
    fn move_then_wait_idle(&mut self) {
        self.start(Command::Move {
            x_mm: 150.0,
            y_mm: 100.0,
        });
        self.sent();
        self.reply("ok");
        self.result();
        self.start(Command::WaitIdle);
    }
    /// Connects through a grbl-style banner and lock message.
    fn connect(&mut self) -> Vec<String> {
        self.start(Command::Connect);
        self.now += Duration::from_millis(300);
        self.reply("");
        self.reply("Grbl 1.1h ['$' for help]");
        self.reply("[MSG:'$H'|'$X' to unlock]");
        assert!(
            self.sent().is_empty(),
            "nothing is sent while the banner burst is arriving"
        );
        self.wait_ms(50);
        assert!(
            self.sent().is_empty(),
            "quiet time after the banner not yet over"
        );
        self.wait_ms(60);
        let mut lines = self.sent();
        assert_eq!(lines, vec!["$X"]);
        self.reply("[MSG:Caution: Unlocked]");
        assert!(self.result().is_none());
        self.reply("ok");
        loop {
            let s = self.sent();
            if s.is_empty() {
                break;
            }
            self.reply("ok");
            lines.extend(s);
        }
        match self.result() {
            Some(Ok(Completion::Connected { banner })) => {
                assert_eq!(banner.as_deref(), Some("Grbl 1.1h ['$' for help]"))
            }
            other => panic!("{other:?}"),
        }
        lines
    }
}

/// The 3×3 plan: wafer sites at −10, 0, 10 mm, top row first, left to right.
fn plan_3x3() -> Vec<[f64; 2]> {
    let mut v = Vec::new();
    for y in [10.0, 0.0, -10.0] {
        for x in [-10.0, 0.0, 10.0] {
            v.push([x, y]);
        }
    }
    v
}

/// The moves for the plan as the G-code stage makes them (approach point first when needed).
fn plan_moves(m: &MachineFile) -> Vec<Vec<[f64; 2]>> {
    let t = ChuckTransform::from_spec(&m.chuck);
    let a = Approach::from_spec(&m.stage);
    let mut at: Option<[f64; 2]> = None;
    plan_3x3()
        .into_iter()
        .map(|w| {
            let p = t.to_stage(w[0], w[1]);
            let moves = a.moves(at, p);
            at = Some(p);
            moves
        })
        .collect()
}

#[test]
fn golden_transcript_dwell_3x3() {
    let m = fixture("dwell.toml");
    let mut h = Harness::new(&m);
    assert_eq!(h.connect(), vec!["$X", "G21", "G90"]);
    let mut sent = Vec::new();
    for moves in plan_moves(&m) {
        for p in moves {
            sent.extend(h.ok_all(Command::Move {
                x_mm: p[0],
                y_mm: p[1],
            }));
        }
        // Completion: G4 P0's ok comes only when the motion has ended (here after 0.8 s).
        h.start(Command::WaitIdle);
        let w = h.sent();
        h.wait_ms(800);
        assert!(h.result().is_none(), "still moving");
        h.reply("ok");
        let Some(Ok(Completion::Idle { position })) = h.result() else {
            panic!()
        };
        assert!(position.is_some());
        sent.extend(w);
    }
    // Golden: chuck centre (100, 100), no rotation; backlash 0.5 mm approached from −x−y.
    let golden = [
        "G1 X89.500 Y109.500 F3000",
        "G1 X90.000 Y110.000 F3000",
        "G4 P0",
        "G1 X99.500 Y109.500 F3000",
        "G1 X100.000 Y110.000 F3000",
        "G4 P0",
        "G1 X109.500 Y109.500 F3000",
        "G1 X110.000 Y110.000 F3000",
        "G4 P0",
        "G1 X89.500 Y99.500 F3000",
        "G1 X90.000 Y100.000 F3000",
        "G4 P0",
        "G1 X99.500 Y99.500 F3000",
        "G1 X100.000 Y100.000 F3000",
        "G4 P0",
        "G1 X109.500 Y99.500 F3000",
        "G1 X110.000 Y100.000 F3000",
        "G4 P0",
        "G1 X89.500 Y89.500 F3000",
        "G1 X90.000 Y90.000 F3000",
        "G4 P0",
        "G1 X99.500 Y89.500 F3000",
        "G1 X100.000 Y90.000 F3000",
        "G4 P0",
        "G1 X109.500 Y89.500 F3000",
        "G1 X110.000 Y90.000 F3000",
        "G4 P0",
    ];
    assert_eq!(sent, golden);
}

/// The m400 fixture's printer board connected: "start" and echo lines, no lock; init goes out
/// after the quiet time.
fn printer_connected() -> (MachineFile, Harness) {
    let m = fixture("m400.toml");
    let mut h = Harness::new(&m);
    h.start(Command::Connect);
    h.now += Duration::from_millis(1500);
    h.reply("start");
    h.reply("echo: External Reset");
    h.wait_ms(120);
    assert_eq!(h.sent(), vec!["G21"]);
    h.reply("ok");
    assert_eq!(h.sent(), vec!["G90"]);
    h.reply("ok");
    assert!(matches!(h.result(), Some(Ok(Completion::Connected { .. }))));
    (m, h)
}

#[test]
fn golden_transcript_m400_3x3_with_rotation() {
    let (m, mut h) = printer_connected();
    let mut sent = Vec::new();
    for moves in plan_moves(&m) {
        for p in moves {
            sent.extend(h.ok_all(Command::Move {
                x_mm: p[0],
                y_mm: p[1],
            }));
        }
        h.start(Command::WaitIdle);
        sent.extend(h.sent());
        // Keep-alives while the moves run are taken in (within the motion allowance:
        // 1.5 × ~0.3 s + 10 s line timeout).
        for _ in 0..4 {
            h.wait_ms(2000);
            h.reply("echo:busy: processing");
        }
        assert!(h.result().is_none());
        h.reply("ok");
        assert!(matches!(h.result(), Some(Ok(Completion::Idle { .. }))));
    }
    // Chuck centre (110, 110) rotated 180°: wafer (−10, 10) sits at stage (120, 100).
    // Backlash 0.3 mm from −x−y: from (120, 100) to (110, 100) x would be reached from the
    // wrong side, so an approach point goes first; at a row change, (100, 100) → (120, 110)
    // already moves +x and +y by more than 0.3 mm, so one move suffices.
    let golden = [
        "G1 X119.700 Y99.700 F2400",
        "G1 X120.000 Y100.000 F2400",
        "M400",
        "G1 X109.700 Y99.700 F2400",
        "G1 X110.000 Y100.000 F2400",
        "M400",
        "G1 X99.700 Y99.700 F2400",
        "G1 X100.000 Y100.000 F2400",
        "M400",
        "G1 X120.000 Y110.000 F2400",
        "M400",
        "G1 X109.700 Y109.700 F2400",
        "G1 X110.000 Y110.000 F2400",
        "M400",
        "G1 X99.700 Y109.700 F2400",
        "G1 X100.000 Y110.000 F2400",
        "M400",
        "G1 X120.000 Y120.000 F2400",
        "M400",
        "G1 X109.700 Y119.700 F2400",
        "G1 X110.000 Y120.000 F2400",
        "M400",
        "G1 X99.700 Y119.700 F2400",
        "G1 X100.000 Y120.000 F2400",
        "M400",
    ];
    assert_eq!(sent, golden);
}

#[test]
fn golden_transcript_poll_3x3_confirms_position_not_only_state() {
    let m = fixture("poll.toml");
    let mut h = Harness::new(&m);
    assert_eq!(h.connect(), vec!["$X", "G21", "G90", "G94"]);
    let mut sent = Vec::new();
    for (site, moves) in plan_moves(&m).into_iter().enumerate() {
        for p in &moves {
            sent.extend(h.ok_all(Command::Move {
                x_mm: p[0],
                y_mm: p[1],
            }));
        }
        let target = *moves.last().unwrap();
        let here = format!("{:.3},{:.3},0.000", target[0], target[1]);
        h.start(Command::WaitIdle);
        assert_eq!(
            h.sent(),
            vec!["<raw ?>"],
            "the query is one real-time byte, no line end"
        );
        // Just after the move was acknowledged the report may still say Idle, at the old place.
        h.reply("<Idle|MPos:0.000,0.000,0.000|FS:0,0>");
        assert!(
            h.result().is_none(),
            "idle at the wrong place is not arrival"
        );
        assert!(
            h.sent().is_empty(),
            "next query only after the poll interval"
        );
        h.wait_ms(100);
        assert_eq!(h.sent(), vec!["<raw ?>"]);
        h.reply(&format!("<Run|MPos:{here}|FS:4000,0>"));
        assert!(
            h.result().is_none(),
            "running at the target is not arrival either"
        );
        h.wait_ms(100);
        assert_eq!(h.sent(), vec!["<raw ?>"]);
        h.reply(&format!("<Idle|MPos:{here}|FS:0,0>"));
        let Some(Ok(Completion::Idle { position: Some(p) })) = h.result() else {
            panic!()
        };
        assert!((p[0] - target[0]).abs() < 1e-9 && (p[1] - target[1]).abs() < 1e-9);
        sent.push(format!("site {}", site + 1));
    }
    // Centre (150, 150), rotated 90° CCW after flipping y: wafer (x, y) → stage (150 + y, 150 + x).
    let golden = [
        "G1 X159.500 Y139.500 F4000",
        "G1 X160.000 Y140.000 F4000",
        "site 1",
        "G1 X159.500 Y149.500 F4000",
        "G1 X160.000 Y150.000 F4000",
        "site 2",
        "G1 X159.500 Y159.500 F4000",
        "G1 X160.000 Y160.000 F4000",
        "site 3",
        "G1 X149.500 Y139.500 F4000",
        "G1 X150.000 Y140.000 F4000",
        "site 4",
        "G1 X149.500 Y149.500 F4000",
        "G1 X150.000 Y150.000 F4000",
        "site 5",
        "G1 X149.500 Y159.500 F4000",
        "G1 X150.000 Y160.000 F4000",
        "site 6",
        "G1 X139.500 Y139.500 F4000",
        "G1 X140.000 Y140.000 F4000",
        "site 7",
        "G1 X139.500 Y149.500 F4000",
        "G1 X140.000 Y150.000 F4000",
        "site 8",
        "G1 X139.500 Y159.500 F4000",
        "G1 X140.000 Y160.000 F4000",
        "site 9",
    ];
    assert_eq!(sent, golden);
}

#[test]
fn work_offset_is_taken_off_machine_positions() {
    let m = fixture("poll.toml");
    let mut h = Harness::new(&m);
    h.c.start(
        Command::Move {
            x_mm: 10.0,
            y_mm: 10.0,
        },
        h.now,
    )
    .unwrap();
    h.sent();
    h.reply("ok");
    h.result();
    h.start(Command::WaitIdle);
    h.sent();
    h.reply("<Idle|MPos:15.000,12.000,0.000|FS:0,0|WCO:5.000,2.000,0.000>");
    assert!(matches!(
        h.result(),
        Some(Ok(Completion::Idle {
            position: Some([10.0, 10.0])
        }))
    ));
}

// ----- faults: each its own error, none hangs -----

fn connected(name: &str) -> Harness {
    let m = fixture(name);
    let mut h = Harness::new(&m);
    h.connect();
    h
}

#[test]
fn dropped_ok_times_out_with_no_reply() {
    let mut h = connected("dwell.toml");
    h.start(Command::Move {
        x_mm: 50.0,
        y_mm: 50.0,
    });
    assert_eq!(h.sent(), vec!["G1 X50.000 Y50.000 F3000"]);
    h.wait_ms(4900);
    assert!(h.result().is_none());
    h.wait_ms(200);
    match h.result() {
        Some(Err(ControllerError::NoReply { line, waited_s })) => {
            assert_eq!(line, "G1 X50.000 Y50.000 F3000");
            assert!((waited_s - 5.1).abs() < 1e-6);
        }
        other => panic!("{other:?}"),
    }
    // A late ok is logged as stray, not taken for the next line.
    h.reply("ok");
    let notes: Vec<_> = std::iter::from_fn(|| h.c.poll_log()).collect();
    assert!(notes
        .iter()
        .any(|e| matches!(e, LogEntry::Note(n) if n.contains("stray"))));
}

#[test]
fn garbage_is_its_own_error() {
    let mut h = connected("dwell.toml");
    h.start(Command::Move {
        x_mm: 50.0,
        y_mm: 50.0,
    });
    h.sent();
    h.reply("\u{fffd}\u{fffd}x\u{7}");
    let e = h.result().unwrap().unwrap_err();
    assert!(matches!(e, ControllerError::Garbled { .. }), "{e}");
    assert!(e.to_string().contains("baud"));
}

#[test]
fn error_reply_names_line_and_code() {
    let mut h = connected("dwell.toml");
    h.start(Command::Move {
        x_mm: 50.0,
        y_mm: 50.0,
    });
    h.sent();
    h.reply("error:22");
    match h.result() {
        Some(Err(ControllerError::Rejected { line, code, .. })) => {
            assert_eq!(line, "G1 X50.000 Y50.000 F3000");
            assert_eq!(code, Some(22));
        }
        other => panic!("{other:?}"),
    }
}

#[test]
fn alarm_mid_move_latches_until_reset() {
    let mut h = connected("poll.toml");
    h.start(Command::Move {
        x_mm: 50.0,
        y_mm: 50.0,
    });
    h.sent();
    h.reply("ok");
    h.result();
    h.start(Command::WaitIdle);
    h.sent();
    h.reply("<Run|MPos:20.000,20.000,0.000|FS:4000,0>");
    h.wait_ms(100);
    h.sent();
    h.reply("ALARM:1");
    h.reply("[MSG:Reset to continue]");
    let e = h.result().unwrap().unwrap_err();
    assert!(
        matches!(&e, ControllerError::Alarm { reply, .. } if reply == "ALARM:1"),
        "{e}"
    );
    assert_eq!(h.c.alarm(), Some("ALARM:1"));
    // Nothing more goes out — no motion, no status query — until the user's reset.
    for cmd in [
        Command::Move {
            x_mm: 1.0,
            y_mm: 1.0,
        },
        Command::Query,
        Command::Home,
        Command::Connect,
    ] {
        assert!(matches!(
            h.c.start(cmd, h.now),
            Err(ControllerError::Alarmed { .. })
        ));
    }
    assert!(h.sent().is_empty());
    h.start(Command::Reset);
    assert_eq!(h.sent(), vec!["<raw \\u{18}>"]);
    assert_eq!(h.c.alarm(), None);
}

#[test]
fn alarm_state_in_a_status_report_is_an_alarm() {
    let mut h = connected("poll.toml");
    h.start(Command::Query);
    h.sent();
    h.reply("<Alarm|MPos:0.000,0.000,0.000>");
    assert!(matches!(
        h.result(),
        Some(Err(ControllerError::Alarm { .. }))
    ));
}

#[test]
fn stall_under_dwell_is_a_motion_timeout() {
    let mut h = connected("dwell.toml");
    h.move_then_wait_idle();
    assert_eq!(h.sent(), vec!["G4 P0"]);
    // Unknown start: the estimate covers the travel diagonal (282.8 mm at 50 mm/s ≈ 5.76 s),
    // so the allowance is 1.5 × 5.76 + 5 ≈ 13.6 s.
    h.wait_ms(13_000);
    assert!(h.result().is_none());
    h.wait_ms(1000);
    let e = h.result().unwrap().unwrap_err();
    assert!(matches!(e, ControllerError::MotionTimeout { .. }), "{e}");
    assert!(e.to_string().contains("G4 P0"));
}

#[test]
fn stall_under_poll_reports_the_last_status() {
    let mut h = connected("poll.toml");
    h.start(Command::Move {
        x_mm: 100.0,
        y_mm: 100.0,
    });
    h.sent();
    h.reply("ok");
    h.result();
    h.start(Command::WaitIdle);
    let mut polls = 0;
    let e = loop {
        if !h.sent().is_empty() {
            h.reply("<Run|MPos:40.000,40.000,0.000|FS:0,0>");
            polls += 1;
        }
        if let Some(r) = h.result() {
            break r.unwrap_err();
        }
        h.wait_ms(100);
        assert!(polls < 1000, "must not poll forever");
    };
    assert!(matches!(e, ControllerError::MotionTimeout { .. }), "{e}");
    assert!(
        e.to_string()
            .contains("last report: Run at (40.000, 40.000)"),
        "{e}"
    );
}

#[test]
fn silent_status_is_no_status() {
    let mut h = connected("poll.toml");
    h.start(Command::Query);
    assert_eq!(h.sent(), vec!["<raw ?>"]);
    h.wait_ms(3100);
    assert!(matches!(
        h.result(),
        Some(Err(ControllerError::NoStatus { .. }))
    ));
}

#[test]
fn disconnect_fails_the_command_and_stays_closed() {
    let mut h = connected("dwell.toml");
    h.start(Command::Move {
        x_mm: 50.0,
        y_mm: 50.0,
    });
    h.c.handle_closed();
    assert!(matches!(
        h.result(),
        Some(Err(ControllerError::Disconnected { .. }))
    ));
    assert!(matches!(
        h.c.start(Command::Connect, h.now),
        Err(ControllerError::Disconnected { .. })
    ));
}

#[test]
fn silent_controller_at_connect_is_no_reply() {
    let m = fixture("dwell.toml");
    let mut h = Harness::new(&m);
    h.start(Command::Connect);
    h.wait_ms(2000);
    assert_eq!(
        h.sent(),
        vec!["$X"],
        "no banner: go on after startup_wait_s"
    );
    let notes: Vec<_> = std::iter::from_fn(|| h.c.poll_log()).collect();
    assert!(notes
        .iter()
        .any(|e| matches!(e, LogEntry::Note(n) if n.contains("no start-up banner"))));
    h.wait_ms(5000);
    assert!(matches!(h.result(), Some(Err(ControllerError::NoReply { line, .. })) if line == "$X"));
}

#[test]
fn locked_controller_without_unlock_hints_at_unlock() {
    let mut m = fixture("dwell.toml");
    m.stage.unlock.clear();
    let mut h = Harness::new(&m);
    h.start(Command::Connect);
    h.reply("Grbl 1.1h ['$' for help]");
    h.wait_ms(150);
    assert_eq!(h.sent(), vec!["G21"]);
    h.reply("error:9");
    let e = h.result().unwrap().unwrap_err();
    assert!(e.to_string().contains("stage.unlock"), "{e}");
}

#[test]
fn stop_sends_the_reset_byte_and_abandons_the_command() {
    let mut h = connected("dwell.toml");
    h.start(Command::Move {
        x_mm: 50.0,
        y_mm: 50.0,
    });
    h.sent();
    h.c.stop(h.now);
    assert_eq!(h.sent(), vec!["<raw \\u{18}>"]);
    assert!(matches!(
        h.result(),
        Some(Err(ControllerError::Stopped { .. }))
    ));
    assert_eq!(h.c.position(), None);
}

#[test]
fn stop_without_reset_byte_sends_stop_lines() {
    let m = fixture("m400.toml");
    let mut h = Harness::new(&m);
    h.c.stop(h.now);
    assert_eq!(h.sent(), vec!["M410"]);
}

#[test]
fn too_long_a_line_is_refused_before_sending() {
    let mut m = fixture("dwell.toml");
    m.stage.max_line_len = 20;
    let mut h = Harness::new(&m);
    let e =
        h.c.start(
            Command::Move {
                x_mm: 150.0,
                y_mm: 100.0,
            },
            h.now,
        )
        .unwrap_err();
    assert!(matches!(e, ControllerError::LineTooLong { .. }), "{e}");
    assert!(h.sent().is_empty());
}

/// Sends a keep-alive every 2 s until the command ends (or `limit_ms`); returns the time waited.
fn busy_until_a_result(h: &mut Harness, limit_ms: u64) -> u64 {
    let mut waited = 0;
    while h.result().is_none() && waited < limit_ms {
        h.wait_ms(2000);
        waited += 2000;
        h.reply("echo:busy: processing");
    }
    waited
}

#[test]
fn keep_alives_do_not_stretch_a_stalled_wait_for_motion() {
    let (_, mut h) = printer_connected();
    h.move_then_wait_idle();
    assert_eq!(h.sent(), vec!["M400"]);
    // A stalled board that goes on saying busy every 2 s, as printer firmware does. Unknown
    // start: the estimate covers the travel diagonal (311 mm at 40 mm/s ≈ 7.8 s), so the
    // allowance is about 1.5 × 7.8 + 10 ≈ 21.7 s.
    let waited = busy_until_a_result(&mut h, 60_000);
    assert!(
        (20_000..=24_000).contains(&waited),
        "failed after {waited} ms"
    );
}

#[test]
fn keep_alives_stretch_a_reply_wait_to_four_timeouts() {
    let (_, mut h) = printer_connected();
    h.start(Command::Home);
    assert_eq!(h.sent(), vec!["G28 X Y"]);
    // home_timeout_s = 90: keep-alives carry the wait past it, up to 4 × 90 s.
    let waited = busy_until_a_result(&mut h, 600_000);
    assert!(
        (358_000..=362_000).contains(&waited),
        "failed after {waited} ms"
    );
}

// ----- the state machine against the virtual controller, in virtual time -----

/// A [`Controller`] wired to a [`VirtualController`], bytes passed by hand and virtual time
/// advanced to the next deadline of either: deterministic, no tokio.
struct Bench {
    c: Controller,
    v: VirtualController,
    now: f64,
    rx: Vec<u8>,
    /// Every entry of the host's log, kept for assertions.
    log: Vec<LogEntry>,
}

impl Bench {
    /// A powered-up virtual controller of `m`, and a host not yet connected.
    fn new(m: &MachineFile) -> Bench {
        let v = VirtualController::new(VirtualConfig::from_machine(m), 0.0);
        Bench::reconnect(v, m, 0.0)
    }
    /// A new host session on a board that keeps running (no reset on open).
    fn reconnect(v: VirtualController, m: &MachineFile, now: f64) -> Bench {
        Bench {
            c: Controller::new(ProtocolConfig::from_spec(&m.stage)),
            v,
            now,
            rx: Vec::new(),
            log: Vec::new(),
        }
    }
    fn at(&self) -> Duration {
        Duration::from_secs_f64(self.now)
    }
    /// Moves bytes both ways until nothing is pending; the host's outbox goes first.
    fn exchange(&mut self) {
        loop {
            let mut moved = false;
            while let Some(b) = self.c.poll_transmit() {
                self.v.feed(&b, self.now);
                moved = true;
            }
            for b in self.v.take_output() {
                self.rx.extend(b);
                moved = true;
            }
            while let Some(i) = self.rx.iter().position(|&b| b == b'\n' || b == b'\r') {
                let line: Vec<u8> = self.rx.drain(..=i).collect();
                let line = String::from_utf8_lossy(&line[..i]).into_owned();
                self.c.handle_line(&line, self.at());
                moved = true;
            }
            while let Some(e) = self.c.poll_log() {
                self.log.push(e);
            }
            if !moved {
                return;
            }
        }
    }
    /// Lets virtual time run to `until` (or the command's result, whichever is first).
    fn run_until(&mut self, until: f64) -> Option<Result<Completion, ControllerError>> {
        loop {
            self.exchange();
            if let Some(r) = self.c.poll_result() {
                return Some(r);
            }
            let next = [
                self.c.next_deadline().map(|d| d.as_secs_f64()),
                self.v.next_wakeup(),
            ]
            .into_iter()
            .flatten()
            .fold(until, f64::min);
            if next >= until && self.now >= until {
                return None;
            }
            self.now = next.max(self.now);
            self.v.advance(self.now);
            self.exchange();
            self.c.handle_time(self.at());
        }
    }
    /// Runs `cmd` to its end (at most 120 virtual seconds).
    fn run(&mut self, cmd: Command) -> Result<Completion, ControllerError> {
        self.c.start(cmd, self.at()).unwrap();
        let limit = self.now + 120.0;
        self.run_until(limit)
            .unwrap_or_else(|| panic!("{cmd:?} hung for 120 s"))
    }
    fn stage_at(&mut self) -> [f64; 2] {
        self.v.position(self.now)
    }
    fn noted(&self, what: &str) -> bool {
        self.log
            .iter()
            .any(|e| matches!(e, LogEntry::Note(n) if n.contains(what)))
    }
}

/// dwell.toml against the grbl-like virtual controller, banner matching.
fn grbl_machine() -> MachineFile {
    let mut m = fixture("dwell.toml");
    m.simulation.controller.banner = "Grbl (virtual)".into();
    m
}

/// Starts a long diagonal move and lets it run for `s` seconds with its wait in progress.
fn long_move_running(b: &mut Bench, s: f64) {
    assert!(matches!(
        b.run(Command::Move {
            x_mm: 190.0,
            y_mm: 190.0
        }),
        Ok(Completion::Queued)
    ));
    b.c.start(Command::WaitIdle, b.at()).unwrap();
    let until = b.now + s;
    assert!(b.run_until(until).is_none(), "the move is still running");
}

#[test]
fn ctrl_c_feed_hold_stops_a_grbl_like_stage_without_a_reset() {
    let mut m = grbl_machine();
    m.stage.reset.clear();
    m.stage.feed_hold = "!".into();
    let mut b = Bench::new(&m);
    assert!(matches!(
        b.run(Command::Connect),
        Ok(Completion::Connected { .. })
    ));
    ctrl_c_during_a_long_move_halts_the_stage(&mut b, b"!");
}

/// Ctrl-C one second into a long move: `hold` is the first thing sent, the wait fails as
/// stopped, and the stage is still where it was 30 s later, well short of its target.
fn ctrl_c_during_a_long_move_halts_the_stage(b: &mut Bench, hold: &[u8]) {
    long_move_running(b, 1.0);
    let at_stop = b.stage_at();
    b.c.stop(b.at());
    let first = b.c.poll_transmit().unwrap();
    assert_eq!(first, hold, "the feed hold goes first");
    b.v.feed(&first, b.now);
    assert!(matches!(
        b.c.poll_result(),
        Some(Err(ControllerError::Stopped { .. }))
    ));
    b.exchange();
    b.now += 30.0;
    let after = b.stage_at();
    assert!(
        after == at_stop && after[0] < 100.0,
        "stopped at {at_stop:?}, now at {after:?}"
    );
}

#[test]
fn ctrl_c_quick_stop_line_stops_a_marlin_like_stage() {
    let mut m = fixture("m400.toml");
    m.stage.stop.clear();
    m.stage.feed_hold = "M410".into();
    m.simulation.controller.banner = "virtual printer".into();
    let mut b = Bench::new(&m);
    assert!(matches!(
        b.run(Command::Connect),
        Ok(Completion::Connected { .. })
    ));
    ctrl_c_during_a_long_move_halts_the_stage(&mut b, b"M410\n");
}

#[test]
fn feed_hold_goes_out_first_then_the_reset_and_unsent_lines_never() {
    let mut m = fixture("dwell.toml");
    m.stage.feed_hold = "!".into();
    let mut h = Harness::new(&m);
    h.c.start(
        Command::Move {
            x_mm: 50.0,
            y_mm: 50.0,
        },
        h.now,
    )
    .unwrap();
    // The move line has not gone out yet when Ctrl-C comes: it never does.
    h.c.stop(h.now);
    assert_eq!(h.sent(), vec!["<raw !>", "<raw \\u{18}>"]);
}

#[test]
fn stale_replies_of_an_interrupted_session_are_not_taken_for_new_ones() {
    // Session 1 is interrupted during a long move with no reset and no feed hold configured
    // (nothing is sent on Ctrl-C); its `G4 P0` is still queued on the board.
    let mut m = grbl_machine();
    m.stage.reset.clear();
    let mut b = Bench::new(&m);
    assert!(matches!(
        b.run(Command::Connect),
        Ok(Completion::Connected { .. })
    ));
    long_move_running(&mut b, 1.0);
    // Session 2 opens the port: the board does not restart and keeps replying to what the
    // first session queued.
    let now = b.now;
    let mut b = Bench::reconnect(b.v, &m, now);
    match b.run(Command::Connect) {
        Ok(Completion::Connected { banner: None }) => {}
        other => panic!("{other:?}"),
    }
    assert!(b.noted("left over from an earlier session"), "{:?}", b.log);
    assert_eq!(
        b.stage_at(),
        [190.0, 190.0],
        "connected only once the old queue had run out"
    );
    // The reference move: its wait ends when the stage is there, not at a stale `ok`.
    assert!(matches!(
        b.run(Command::Move {
            x_mm: 20.0,
            y_mm: 30.0
        }),
        Ok(Completion::Queued)
    ));
    assert!(matches!(
        b.run(Command::WaitIdle),
        Ok(Completion::Idle {
            position: Some([20.0, 30.0])
        })
    ));
    assert_eq!(b.stage_at(), [20.0, 30.0]);
    // Nothing stray afterwards: every reply was matched to its line.
    b.log.clear();
    b.run_until(b.now + 5.0);
    assert!(!b.noted("stray"), "{:?}", b.log);
}

#[test]
fn a_line_status_query_syncs_on_its_report() {
    // Marlin-like, `M114` configured: replies before the report are stale.
    let mut m = fixture("m400.toml");
    m.stage.status_query = Some("M114".into());
    m.simulation.controller.banner = "virtual printer".into();
    let mut b = Bench::new(&m);
    assert!(matches!(
        b.run(Command::Connect),
        Ok(Completion::Connected { .. })
    ));
    long_move_running(&mut b, 1.0);
    let now = b.now;
    let mut b = Bench::reconnect(b.v, &m, now);
    assert!(matches!(
        b.run(Command::Connect),
        Ok(Completion::Connected { banner: None })
    ));
    assert!(b.noted("left over from an earlier session"), "{:?}", b.log);
    assert!(matches!(
        b.run(Command::Move {
            x_mm: 20.0,
            y_mm: 30.0
        }),
        Ok(Completion::Queued)
    ));
    assert!(matches!(
        b.run(Command::WaitIdle),
        Ok(Completion::Idle { .. })
    ));
    assert_eq!(b.stage_at(), [20.0, 30.0]);
}

// ----- `stage where`: the status query whenever one is configured -----

async fn duplex_stage(
    m: &MachineFile,
) -> isopach::bench::stage::GcodeStage<tokio::io::DuplexStream> {
    let host = isopach::bench::sim::server::spawn_duplex(
        VirtualConfig::from_machine(m),
        isopach::bench::sim::clock::SimClock::new(1.0),
    );
    isopach::bench::stage::GcodeStage::connect(host, &m.stage, "virtual")
        .await
        .unwrap()
}

#[tokio::test(start_paused = true)]
async fn where_asks_the_controller_under_dwell_when_a_status_query_is_configured() {
    use isopach::bench::stage::Stage;
    let mut m = grbl_machine();
    // Without a status query (dwell, none named) nothing is asked: unknown before a move.
    let mut s = duplex_stage(&m).await;
    assert_eq!(s.position().await.unwrap(), None);
    m.stage.status_query = Some("?".into());
    let mut s = duplex_stage(&m).await;
    assert_eq!(s.position().await.unwrap(), Some([0.0, 0.0]));
    assert!(s.transcript().iter().any(|l| l.contains("< <Idle|")));
}

#[tokio::test(start_paused = true)]
async fn where_falls_back_cleanly_when_the_status_query_is_not_answered() {
    use isopach::bench::stage::Stage;
    // A printer board that does not know `M115` as a report: an echo and `ok`, no position.
    let mut m = fixture("m400.toml");
    m.simulation.controller.banner = "virtual printer".into();
    m.stage.status_query = Some("M115".into());
    let mut s = duplex_stage(&m).await;
    assert_eq!(s.position().await.unwrap(), None, "unknown, not an error");
    s.move_to(50.0, 60.0).await.unwrap();
    assert_eq!(s.wait_idle().await.unwrap(), Some([50.0, 60.0]));
    let before = s.transcript().len();
    assert_eq!(s.position().await.unwrap(), Some([50.0, 60.0]));
    assert_eq!(
        s.transcript().len(),
        before,
        "not asked again once it went unanswered"
    );
    // And a board that answers `M114` gives its report.
    m.stage.status_query = Some("M114".into());
    let mut s = duplex_stage(&m).await;
    assert_eq!(s.position().await.unwrap(), Some([0.0, 0.0]));
}

// ----- alarm recovery -----

/// A grbl-like board that raises a limit alarm half way through the first move line and
/// then takes nothing, its reset included, for half a second.
fn alarming_machine() -> MachineFile {
    let mut m = grbl_machine();
    m.simulation.controller.post_alarm_delay_ms = 500.0;
    m.simulation.faults.push(machine::FaultSpec {
        kind: machine::FaultKind::Alarm,
        at_line: 4, // $X, G21, G90, then the move
        code: 1,
    });
    m
}

/// Connects and runs into the alarm; returns the bench right after the alarm was reported.
fn alarmed(m: &MachineFile) -> Bench {
    let mut b = Bench::new(m);
    assert!(matches!(
        b.run(Command::Connect),
        Ok(Completion::Connected { .. })
    ));
    b.run(Command::Move {
        x_mm: 150.0,
        y_mm: 150.0,
    })
    .unwrap();
    match b.run(Command::WaitIdle) {
        Err(ControllerError::Alarm { reply, .. }) => assert_eq!(reply, "ALARM:1"),
        other => panic!("{other:?}"),
    }
    b
}

/// A reset on the user's say, then a move that arrives.
fn reset_then_move_on(b: &mut Bench) {
    assert!(matches!(
        b.run(Command::Reset),
        Ok(Completion::Connected { .. })
    ));
    b.run(Command::Move {
        x_mm: 20.0,
        y_mm: 30.0,
    })
    .unwrap();
    assert!(b.run(Command::WaitIdle).is_ok());
    assert_eq!(b.stage_at(), [20.0, 30.0]);
}

#[test]
fn a_reset_dropped_in_the_post_alarm_delay_is_sent_again() {
    let m = alarming_machine();
    let mut b = alarmed(&m);
    // Ctrl-C right after the alarm: the reset goes out within milliseconds and is dropped.
    b.c.stop(b.at());
    match b.run_until(b.now + 30.0) {
        Some(Ok(Completion::Connected { banner: Some(_) })) => {}
        other => panic!("{other:?} {:?}", b.log),
    }
    assert!(b.noted("sending it again"), "{:?}", b.log);
    // On the user's say: reset, unlock and go on.
    reset_then_move_on(&mut b);
}

#[test]
fn a_locked_controller_is_said_to_be_in_alarm_not_silent() {
    let m = alarming_machine();
    let b = alarmed(&m);
    // The next session (no reset sent on Ctrl-C, the board still in alarm after its delay).
    let now = b.now + 5.0;
    let mut b = Bench::reconnect(b.v, &m, now);
    let e = b.run(Command::Connect).unwrap_err();
    let msg = e.to_string();
    assert!(
        matches!(e, ControllerError::Locked { .. }),
        "{e:?} {:?}",
        b.log
    );
    assert!(
        msg.starts_with("the controller is in alarm: it answered `$X` with `error:9`")
            && msg.contains("(fix: ")
            && msg.contains("isopach stage home"),
        "{msg}"
    );
    // Latched: nothing is sent until the reset, which the board now takes (its delay is
    // over); then it unlocks and goes on.
    assert!(b.c.alarm().is_some());
    assert!(matches!(
        b.c.start(
            Command::Move {
                x_mm: 1.0,
                y_mm: 1.0
            },
            b.at()
        ),
        Err(ControllerError::Alarmed { .. })
    ));
    reset_then_move_on(&mut b);
}

// ----- the per-dialect example files of docs/bench.md -----

#[test]
fn each_dialect_example_file_connects_moves_and_stops_on_ctrl_c() {
    for (name, hold) in [("grbl.toml", &b"!"[..]), ("marlin.toml", &b"M410\n"[..])] {
        let m = fixture(name);
        let mut b = Bench::new(&m);
        assert!(
            matches!(
                b.run(Command::Connect),
                Ok(Completion::Connected { banner: Some(_) })
            ),
            "{name}: {:?}",
            b.log
        );
        b.run(Command::Move {
            x_mm: 50.0,
            y_mm: 60.0,
        })
        .unwrap();
        assert!(b.run(Command::WaitIdle).is_ok(), "{name}");
        assert_eq!(b.stage_at(), [50.0, 60.0], "{name}");
        b.c.start(Command::Query, b.at()).unwrap();
        match b.run_until(b.now + 20.0) {
            Some(Ok(Completion::Status(s))) => {
                assert_eq!(b.c.work_position(&s), Some([50.0, 60.0]), "{name}")
            }
            other => panic!("{name}: {other:?}"),
        }
        ctrl_c_during_a_long_move_halts_the_stage(&mut b, hold);
    }
}
