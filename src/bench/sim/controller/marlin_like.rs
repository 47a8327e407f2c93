//! The Marlin-like dialect: a repurposed 3D-printer board. No real-time bytes; `start` and an
//! `echo:` banner at power-up (never locked); `echo:busy: processing` keep-alives every 2 s
//! while a wait blocks; `G28` homing, `M114` reports of the *planned* position, `M410` quick
//! stop acted on as it arrives; `G4 P` in ms (`S` in s); moves clamped to the travel
//! (software endstops); unknown codes echoed, then `ok`; alarms `!! …` and every line answered
//! `Error:…` until `M999`.
//!
//! The protocol tokens (`start`, `ok`, `echo:busy`, `Error:`, `!!`) are what hosts match; the
//! message texts are our own words.

use super::dialect::{FirmwareDialect, OwnCode};
use super::words::is_code;
use super::VirtualController;
use crate::bench::machine::FaultKind;

/// Interval of the `echo:busy: processing` keep-alives, s (Marlin's default host keep-alive
/// interval, from memory).
pub const KEEPALIVE_S: f64 = 2.0;

/// Steps per mm the `M114` step counts are reported in (a common printer belt axis, from
/// memory; only the format matters here).
const STEPS_PER_MM: f64 = 80.0;

/// The Marlin-like dialect.
#[derive(Debug, Clone, Copy)]
pub struct MarlinLike;

impl FirmwareDialect for MarlinLike {
    fn starts_locked(&self, _asked: bool) -> bool {
        false
    }

    fn real_time_byte(&self, _v: &mut VirtualController, _byte: u8) -> bool {
        false
    }

    fn deaf_in_alarm(&self) -> bool {
        false
    }

    fn clears_alarm(&self, line: &str) -> bool {
        is_code(line, "M999")
    }

    fn stopped_line(&self) -> &'static str {
        "Error:stopped by an alarm; send M999 to go on"
    }

    fn is_quick_stop(&self, line: &str) -> bool {
        is_code(line, "M410")
    }

    fn acknowledges_empty_line(&self) -> bool {
        false
    }

    fn run_line(&self, v: &mut VirtualController, line: &str, fault: Option<FaultKind>) {
        v.execute_gcode(line, fault);
    }

    fn own_code(&self, letter: char, tenths: i64, planned_mm: [f64; 2]) -> Option<OwnCode> {
        match (letter, tenths) {
            ('G', 280) => Some(OwnCode::Home),
            ('M', 1140) => Some(OwnCode::Reply(position_report(planned_mm))),
            // M410 was acted on as it arrived; M999 outside an alarm has nothing to clear.
            ('M', 4100 | 9990) | ('S', _) => Some(OwnCode::Accept),
            _ => None,
        }
    }

    fn dwell_s(&self, p: Option<f64>, s: Option<f64>) -> f64 {
        s.unwrap_or(p.unwrap_or(0.0) / 1000.0)
    }

    fn zero_feed_error(&self) -> Option<u32> {
        None
    }

    fn clamps_to_travel(&self) -> bool {
        true
    }

    fn keep_alive(&self) -> Option<(f64, &'static str)> {
        Some((KEEPALIVE_S, "echo:busy: processing"))
    }

    fn reject(&self, _code: u32, line: &str) -> Vec<String> {
        vec![format!("echo:unknown code \"{line}\""), "ok".into()]
    }

    fn fault_error(&self, code: u32) -> String {
        format!("Error:injected fault {code}")
    }

    fn banner(&self, text: &str, _locked: bool) -> Vec<String> {
        vec!["start".into(), format!("echo:{text}")]
    }

    fn alarm(&self, code: u32) -> Vec<String> {
        vec![
            format!("!! alarm {code}: motion halted"),
            "Error:halted by an alarm; send M999 to go on".into(),
        ]
    }
}

/// The `M114` line: where the last queued move ends, not where the stage is now.
fn position_report(p: [f64; 2]) -> String {
    let steps = |v: f64| (v * STEPS_PER_MM).round() as i64;
    format!(
        "X:{:.2} Y:{:.2} Z:0.00 E:0.00 Count X:{} Y:{} Z:0",
        p[0],
        p[1],
        steps(p[0]),
        steps(p[1])
    )
}

#[cfg(test)]
mod tests {
    use super::super::test_support::{cfg, text};
    use super::super::{VirtualConfig, VirtualController};
    use crate::bench::machine::{Dialect, FaultKind, FaultSpec};

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
                "echo:unknown code \"?\"",
                "ok",
                "echo:unknown code \"$H\"",
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
                "Error:halted by an alarm; send M999 to go on"
            ]
        );
        v.feed(&[super::super::grbl_like::RESET_BYTE], 3.0);
        v.feed(b"G1 X10\nM999\nG1 X10\n", 3.0);
        assert_eq!(
            text(&mut v),
            vec!["Error:stopped by an alarm; send M999 to go on", "ok", "ok"]
        );
    }
}
