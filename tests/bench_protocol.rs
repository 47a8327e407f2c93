//! The G-code state machine driven directly, with injected time: golden transcripts (the exact
//! lines sent for a 3×3 plan and how replies advance them) for each motion-complete strategy,
//! and every fault kind giving its own error without hanging.

use isopach::bench::chuck::ChuckTransform;
use isopach::bench::gcode::{
    Command, Completion, Controller, ControllerError, LogEntry, ProtocolConfig,
};
use isopach::bench::limits::Approach;
use isopach::bench::machine::{self, MachineFile};
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
