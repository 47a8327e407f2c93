//! The grbl-like dialect (the default): `?`, `!` (feed hold), `~` (resume) and Ctrl-X (0x18)
//! are real-time bytes, a banner
//! at start-up and after a reset, an optional locked state cleared by `$X` or `$H`, `error:N`
//! for lines it cannot run, `<State|MPos:x,y,z|FS:f,0>` status reports, `G4 P` in seconds,
//! an `ALARM:N` soft-limit alarm; in an alarm it ignores everything, the reset byte and
//! status queries included, for its post-alarm delay, then answers every line `error:9`
//! (locked) and status queries `<Alarm|…>` until the reset byte.
//!
//! The protocol tokens (`ok`, `error:`, `ALARM:`, `<…>`, `[MSG:…]`) are what hosts match;
//! the message texts and the banner are our own words.

use super::dialect::{FirmwareDialect, OwnCode};
use super::{Mode, State, VirtualController};
use crate::bench::machine::FaultKind;

/// The reset byte (Ctrl-X).
pub const RESET_BYTE: u8 = 0x18;
/// The status query byte.
pub const STATUS_BYTE: u8 = b'?';
/// The feed hold byte: motion stops, the queue is kept.
pub const HOLD_BYTE: u8 = b'!';
/// The resume byte: held motion goes on.
pub const RESUME_BYTE: u8 = b'~';

/// The grbl-like dialect.
#[derive(Debug, Clone, Copy)]
pub struct GrblLike;

impl FirmwareDialect for GrblLike {
    fn starts_locked(&self, asked: bool) -> bool {
        asked
    }

    fn real_time_byte(&self, v: &mut VirtualController, byte: u8) -> bool {
        match byte {
            // Dropped during the post-alarm delay, as real boards do.
            RESET_BYTE if v.deaf() => {}
            RESET_BYTE => v.reset(),
            HOLD_BYTE => v.feed_hold(),
            RESUME_BYTE => v.resume(),
            STATUS_BYTE => {
                // Deaf during the post-alarm delay, and gone after a disconnect.
                if !v.deaf() && !v.is_disconnected() {
                    let report = status_report(v);
                    v.line(&report);
                }
            }
            _ => return false,
        }
        true
    }

    fn deaf_in_alarm(&self) -> bool {
        true
    }

    fn clears_alarm(&self, _line: &str) -> bool {
        false
    }

    fn stopped_line(&self) -> &'static str {
        // After the post-alarm delay: locked until the reset byte.
        "error:9"
    }

    fn is_quick_stop(&self, _line: &str) -> bool {
        false
    }

    fn acknowledges_empty_line(&self) -> bool {
        true
    }

    fn run_line(&self, v: &mut VirtualController, line: &str, fault: Option<FaultKind>) {
        if let Some(cmd) = line.strip_prefix('$') {
            return system_command(v, cmd.trim(), fault);
        }
        if v.mode() == Mode::Locked {
            return v.line("error:9");
        }
        v.execute_gcode(line, fault);
    }

    fn own_code(&self, _letter: char, _tenths: i64, _planned_mm: [f64; 2]) -> Option<OwnCode> {
        None
    }

    fn dwell_s(&self, p: Option<f64>, _s: Option<f64>) -> f64 {
        p.unwrap_or(0.0)
    }

    fn zero_feed_error(&self) -> Option<u32> {
        Some(22)
    }

    fn clamps_to_travel(&self) -> bool {
        false
    }

    fn keep_alive(&self) -> Option<(f64, &'static str)> {
        None
    }

    fn reject(&self, code: u32, _line: &str) -> Vec<String> {
        vec![format!("error:{code}")]
    }

    fn fault_error(&self, code: u32) -> String {
        format!("error:{code}")
    }

    fn banner(&self, text: &str, locked: bool) -> Vec<String> {
        let mut lines = vec![String::new(), text.to_string()];
        if locked {
            lines.push("[MSG:locked: send $X to unlock or $H to home]".into());
        }
        lines
    }

    fn alarm(&self, code: u32) -> Vec<String> {
        vec![
            format!("ALARM:{code}"),
            "[MSG:alarm: send Ctrl-X to reset]".into(),
        ]
    }
}

/// `$X` (unlock), `$H` (home), `$I` (build), `$G` (modal state).
fn system_command(v: &mut VirtualController, cmd: &str, fault: Option<FaultKind>) {
    match cmd {
        "X" => {
            if v.unlock() {
                v.line("[MSG:unlocked: position not verified]");
            }
            v.reply_ok(fault);
        }
        "H" => v.home(fault),
        "I" => {
            v.line("[VER:isopach-virtual.1:]");
            v.reply_ok(fault);
        }
        "G" => {
            let (inches, absolute, feed) = v.modal();
            let modes = format!(
                "[GC:G1 G54 G17 {} {} G94 M5 M9 T0 F{feed:.0} S0]",
                if inches { "G20" } else { "G21" },
                if absolute { "G90" } else { "G91" },
            );
            v.line(&modes);
            v.reply_ok(fault);
        }
        _ => v.line("error:3"),
    }
}

/// The `<State|MPos:x,y,z|FS:f,0>` report of the board now.
fn status_report(v: &VirtualController) -> String {
    let s = v.status();
    let word = match s.state {
        State::Idle => "Idle",
        State::Run => "Run",
        State::Home => "Home",
        State::Hold => "Hold:0",
        State::Alarm => "Alarm",
    };
    format!(
        "<{word}|MPos:{:.3},{:.3},0.000|FS:{:.0},0>",
        s.position_mm[0], s.position_mm[1], s.feed_mm_min
    )
}

#[cfg(test)]
mod tests {
    use super::super::test_support::{cfg, text};
    use super::super::VirtualController;
    use super::RESET_BYTE;

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
    fn feed_hold_halts_motion_and_keeps_the_queue_until_resume() {
        let mut v = VirtualController::new(cfg(), 0.0);
        text(&mut v);
        v.feed(b"G1 X100 Y0 F3000\nG4 P0\n", 0.0);
        assert_eq!(text(&mut v), vec!["ok"]);
        v.advance(1.07);
        v.feed(b"!", 1.07);
        let held = v.position(1.07);
        assert!((held[0] - 50.0).abs() < 1e-6, "{held:?}");
        v.advance(10.0);
        assert_eq!(v.position(10.0), held, "held: no motion");
        assert!(text(&mut v).is_empty(), "the dwell waits for the held move");
        v.feed(b"?", 10.0);
        assert_eq!(
            text(&mut v),
            vec!["<Hold:0|MPos:50.000,0.000,0.000|FS:0,0>"]
        );
        // Resume: the remaining 50 mm from rest again, 1.1 s.
        v.feed(b"~", 10.0);
        v.advance(11.2);
        assert_eq!(text(&mut v), vec!["ok"]);
        assert_eq!(v.position(11.2), [100.0, 0.0]);
        // A reset drops a held queue.
        v.feed(b"G1 X0\nG4 P0\n", 11.2);
        // 0.08 s into the move (after the 0.02 s lag): 0.5 × 500 × 0.08² = 1.6 mm.
        v.feed(b"!", 11.3);
        v.feed(&[RESET_BYTE], 11.5);
        v.advance(20.0);
        let p = v.position(20.0)[0];
        assert!((p - 98.4).abs() < 1e-6, "{p}");
    }

    #[test]
    fn alarm_ignores_everything_until_reset() {
        let mut v = VirtualController::new(cfg(), 0.0);
        text(&mut v);
        v.feed(b"G1 X250\n", 0.0);
        assert_eq!(
            text(&mut v),
            vec!["ALARM:2", "[MSG:alarm: send Ctrl-X to reset]"]
        );
        v.feed(b"?G21\n$X\n", 0.1);
        assert!(text(&mut v).is_empty());
        v.feed(&[RESET_BYTE], 0.2);
        assert_eq!(
            text(&mut v),
            vec![
                "",
                "VS 1.0",
                "[MSG:locked: send $X to unlock or $H to home]"
            ]
        );
        v.feed(b"G1 X5\n", 0.3);
        assert_eq!(text(&mut v), vec!["error:9"]);
    }
}
