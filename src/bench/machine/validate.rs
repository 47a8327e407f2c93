//! Machine-file rules: every problem at once, each tied to its key path. Pure.
//!
//! Besides ranges and shapes, every G-code line the file asks isopach to send as written
//! is checked by [`crate::bench::gcode::words`]: no motion, no unit, distance-mode or origin
//! change, no control characters.

use super::schema::*;
use crate::bench::gcode::words::{self, LineRole};
use crate::tomlcheck::{num, Problem, Problems};

/// Largest stage coordinate accepted, mm. No bench stage is 10 m long; the bound keeps every
/// distance, time estimate and wait computed from the travel finite.
pub const MAX_COORD_MM: f64 = 10_000.0;

/// Validates a machine file; an empty list means it is good.
pub fn validate(m: &MachineFile) -> Vec<Problem> {
    let mut r = Problems::default();
    if m.name.trim().is_empty() {
        r.at("name", "the machine name is empty");
    }
    check_stage(&m.stage, &mut r);
    let c = &m.chuck;
    if !c.center_mm.iter().all(|v| v.abs() <= MAX_COORD_MM) {
        r.at(
            "chuck.center_mm",
            format!(
                "the chuck centre {:?} mm must be within ±{MAX_COORD_MM} mm",
                c.center_mm
            ),
        );
    }
    if !(c.rotation_deg.abs() <= 360.0) {
        r.at(
            "chuck.rotation_deg",
            format!("rotation {}° must be in [-360, 360]", c.rotation_deg),
        );
    }
    let s = &m.spectrometer;
    match s.kind {
        SpectrometerKind::Command if s.command.is_empty() => r.at(
            "spectrometer.command",
            "kind = \"command\" needs a command, e.g. [\"/opt/lab/grab\", \"--ms\", \"{integration_ms}\"]",
        ),
        SpectrometerKind::Helper if s.command.is_empty() => r.at(
            "spectrometer.command",
            "kind = \"helper\" needs the helper program, e.g. [\"/opt/lab/spectrometer-helper\"]",
        ),
        _ => {}
    }
    for (i, a) in s.command.iter().enumerate() {
        if let Some(bad) = unknown_placeholder(a) {
            r.at(
                &format!("spectrometer.command[{i}]"),
                format!("unknown placeholder {{{bad}}}: use {{integration_ms}}, {{averages}} or {{kind}}"),
            );
        }
    }
    r.range("spectrometer.timeout_s", s.timeout_s, 0.1, 3600.0, "s");
    r.range(
        "spectrometer.resolution_nm",
        s.resolution_nm,
        0.0,
        50.0,
        "nm",
    );
    if m.reference.material.trim().is_empty() {
        r.at("reference.material", "the reference material is empty");
    }
    let travel_ok = [m.stage.travel_x_mm, m.stage.travel_y_mm]
        .iter()
        .all(|t| travel_usable(*t));
    // With a bad travel the position cannot be judged; the travel is reported instead.
    if let (Some(p), true) = (m.reference.position_mm, travel_ok) {
        let st = &m.stage;
        let inside = |v: f64, t: [f64; 2]| v >= t[0] + st.margin_mm && v <= t[1] - st.margin_mm;
        if !(inside(p[0], st.travel_x_mm) && inside(p[1], st.travel_y_mm)) {
            r.at(
                "reference.position_mm",
                format!(
                    "reference position ({}, {}) mm lies outside the travel box less the margin",
                    p[0], p[1]
                ),
            );
        }
    }
    check_reference_repeats(m, &mut r);
    check_simulation(&m.simulation, &mut r);
    r.0
}

/// Lamp-drift references: a repeated reference must be reachable without a person.
fn check_reference_repeats(m: &MachineFile, r: &mut Problems) {
    let f = &m.reference;
    r.range("reference.every_min", f.every_min, 0.0, 1440.0, "min");
    let repeats = f.every_sites > 0 || f.every_min > 0.0;
    let by_hand = f.position_mm.is_none() && m.spectrometer.kind != SpectrometerKind::Simulated;
    if repeats && by_hand {
        let key = if f.every_sites > 0 {
            "reference.every_sites"
        } else {
            "reference.every_min"
        };
        r.at(
            key,
            "a reference placed by hand cannot be taken again unattended: give [reference] \
             position_mm (an on-chuck reference piece) or remove every_sites/every_min",
        );
    }
}

fn check_stage(s: &StageSpec, r: &mut Problems) {
    if s.port.trim().is_empty() {
        r.at(
            "stage.port",
            "the port is empty: give a serial device such as /dev/ttyACM0, or \"simulated\"",
        );
    }
    if !(1200..=4_000_000).contains(&s.baud) {
        r.at(
            "stage.baud",
            format!("baud {} is outside 1200–4000000", s.baud),
        );
    }
    r.range("stage.line_timeout_s", s.line_timeout_s, 0.05, 600.0, "s");
    r.range("stage.home_timeout_s", s.home_timeout_s, 0.1, 3600.0, "s");
    r.range("stage.startup_wait_s", s.startup_wait_s, 0.0, 60.0, "s");
    r.range(
        "stage.poll_interval_ms",
        s.poll_interval_ms,
        1.0,
        10_000.0,
        "ms",
    );
    r.range(
        "stage.position_tolerance_mm",
        s.position_tolerance_mm,
        1e-4,
        1.0,
        "mm",
    );
    r.range("stage.feed_mm_min", s.feed_mm_min, 1.0, 1e6, "mm/min");
    r.range("stage.accel_mm_s2", s.accel_mm_s2, 1.0, 1e6, "mm/s²");
    if s.max_line_len < 16 {
        r.at(
            "stage.max_line_len",
            format!("{} characters is too short for a move line", s.max_line_len),
        );
    }
    for (key, lines, role) in [
        ("init", &s.init, LineRole::Setup),
        ("unlock", &s.unlock, LineRole::Setup),
        ("home", &s.home, LineRole::Home),
        ("stop", &s.stop, LineRole::Setup),
    ] {
        for (i, l) in lines.iter().enumerate() {
            if let Some(why) = bad_line(l, s.max_line_len, role) {
                r.at(&format!("stage.{key}[{i}]"), why);
            }
        }
    }
    if let Some(w) = &s.wait_line {
        if let Some(why) = bad_line(w, s.max_line_len, LineRole::Setup) {
            r.at("stage.wait_line", why);
        }
    }
    if let Some(q) = s.status_query_in_use() {
        if let Some(why) = words::refusal(q, LineRole::Setup) {
            r.at("stage.status_query", why);
        }
    }
    if !s.feed_hold.trim().is_empty() {
        if let Some(why) = bad_line(&s.feed_hold, s.max_line_len, LineRole::Setup) {
            r.at(
                "stage.feed_hold",
                format!("{why} (feed_hold is one real-time byte such as \"!\", or one line such as \"M410\")"),
            );
        }
    }
    if s.port != SIMULATED_PORT && !s.can_stop() {
        r.at(
            "stage.feed_hold",
            "Ctrl-C could not stop motion: none of stage.feed_hold, stage.stop or stage.reset is set (set feed_hold = \"!\" on grbl-style firmware, \"M410\" on Marlin-style; see docs/bench.md)",
        );
    }
    // Real-time bytes (Ctrl-X) are what `reset` is for; anything printable is a line.
    let realtime = s
        .reset
        .chars()
        .all(|c| c.is_control() && c != '\n' && c != '\r');
    if !realtime {
        if let Some(why) = words::refusal(&s.reset, LineRole::Setup) {
            r.at(
                "stage.reset",
                format!(
                    "{why} (reset holds real-time bytes such as \"\\u0018\", or one safe line)"
                ),
            );
        }
    }
    if s.motion_complete == MotionComplete::Poll && s.status_query_in_use().is_none() {
        r.at(
            "stage.status_query",
            "motion_complete = \"poll\" needs a status query, e.g. \"?\"",
        );
    }
    for (key, t) in [
        ("travel_x_mm", s.travel_x_mm),
        ("travel_y_mm", s.travel_y_mm),
    ] {
        if !(t[0].is_finite() && t[1].is_finite() && t[0] < t[1]) {
            r.at(
                &format!("stage.{key}"),
                format!(
                    "travel [{}, {}] mm must be [min, max] with min < max",
                    t[0], t[1]
                ),
            );
        } else if !travel_usable(t) {
            r.at(
                &format!("stage.{key}"),
                format!(
                    "travel [{}, {}] mm reaches past ±{MAX_COORD_MM} mm: no bench stage is that large (check the units: millimetres)",
                    num(t[0]), num(t[1])
                ),
            );
        } else if !(s.margin_mm >= 0.0 && 2.0 * s.margin_mm < t[1] - t[0]) {
            r.at(
                "stage.margin_mm",
                format!(
                    "margin {} mm leaves no travel on {key} [{}, {}] mm",
                    s.margin_mm, t[0], t[1]
                ),
            );
        }
    }
    r.range("stage.backlash_mm", s.backlash_mm, 0.0, 10.0, "mm");
    if approach_signs(&s.approach_from).is_none() {
        r.at(
            "stage.approach_from",
            format!(
                "\"{}\" is not a side: write one of \"-x-y\", \"+x-y\", \"-x+y\", \"+x+y\"",
                s.approach_from
            ),
        );
    }
    let rp = &s.replies;
    for (key, v) in [
        ("ok", &rp.ok),
        ("error", &rp.error),
        ("alarm", &rp.alarm),
        ("idle_states", &rp.idle_states),
    ] {
        if v.iter().all(|w| w.trim().is_empty()) {
            r.at(&format!("stage.replies.{key}"), "give at least one word");
        }
    }
}

fn check_simulation(s: &SimulationSpec, r: &mut Problems) {
    r.range("simulation.time_scale", s.time_scale, 0.01, 10_000.0, "×");
    for (key, v) in [
        (
            "lamp_drift_pct_per_hour",
            s.spectrometer.lamp_drift_pct_per_hour,
        ),
        (
            "lamp_tilt_pct_per_hour",
            s.spectrometer.lamp_tilt_pct_per_hour,
        ),
    ] {
        r.range(
            &format!("simulation.spectrometer.{key}"),
            v,
            -1e4,
            1e4,
            "%/h",
        );
    }
    r.range(
        "simulation.controller.idle_lag_ms",
        s.controller.idle_lag_ms,
        0.0,
        10_000.0,
        "ms",
    );
    r.range(
        "simulation.controller.post_alarm_delay_ms",
        s.controller.post_alarm_delay_ms,
        0.0,
        10_000.0,
        "ms",
    );
    if s.controller.planner_moves == 0 {
        r.at(
            "simulation.controller.planner_moves",
            "the planner must hold at least one move",
        );
    }
    let w = &s.wafer;
    for (key, v) in [
        ("center_offset_nm", w.center_offset_nm),
        ("dome_nm", w.dome_nm),
        ("ripple_nm", w.ripple_nm),
        ("edge_bead_nm", w.edge_bead_nm),
    ] {
        r.range(&format!("simulation.wafer.{key}"), v, -1e5, 1e5, "nm");
    }
    r.range(
        "simulation.wafer.ripple_period_mm",
        w.ripple_period_mm,
        0.1,
        1e4,
        "mm",
    );
    r.range(
        "simulation.wafer.edge_bead_width_mm",
        w.edge_bead_width_mm,
        0.01,
        1e3,
        "mm",
    );
    r.range(
        "simulation.wafer.roughness_nm",
        w.roughness_nm,
        0.0,
        1e3,
        "nm",
    );
    r.range(
        "simulation.wafer.wafer_to_wafer_pct",
        w.wafer_to_wafer_pct,
        0.0,
        50.0,
        "%",
    );
    if !(w.chuck_nk[0] >= 0.0 && w.chuck_nk[1] >= 0.0 && w.chuck_nk[0] + w.chuck_nk[1] > 0.0) {
        r.at(
            "simulation.wafer.chuck_nk",
            "n and k of the chuck must be zero or more, not both zero",
        );
    }
    r.range(
        "simulation.wafer.placement_offset_mm",
        w.placement_offset_mm,
        0.0,
        50.0,
        "mm",
    );
    r.range(
        "simulation.wafer.placement_rotation_deg",
        w.placement_rotation_deg,
        0.0,
        180.0,
        "°",
    );
    r.range(
        "simulation.wafer.reload_offset_mm",
        w.reload_offset_mm,
        0.0,
        50.0,
        "mm",
    );
    r.range(
        "simulation.wafer.reload_rotation_deg",
        w.reload_rotation_deg,
        0.0,
        180.0,
        "°",
    );
    r.range(
        "simulation.controller.repeatability_mm",
        s.controller.repeatability_mm,
        0.0,
        1.0,
        "mm",
    );
    r.range(
        "simulation.controller.backlash_mm",
        s.controller.backlash_mm,
        0.0,
        1.0,
        "mm",
    );
    if !w.tilt_nm_per_mm.iter().all(|v| v.is_finite()) {
        r.at("simulation.wafer.tilt_nm_per_mm", "tilt is not a number");
    }
    let d = &s.spectrometer;
    if !(d.wavelength_nm[0] >= 150.0
        && d.wavelength_nm[0] < d.wavelength_nm[1]
        && d.wavelength_nm[1] <= 2500.0)
    {
        r.at(
            "simulation.spectrometer.wavelength_nm",
            format!(
                "range {:?} nm must be [from, to] inside 150–2500 nm",
                d.wavelength_nm
            ),
        );
    }
    if !(16..=65_536).contains(&d.pixels) {
        r.at(
            "simulation.spectrometer.pixels",
            format!("{} pixels is outside 16–65536", d.pixels),
        );
    }
    r.range(
        "simulation.spectrometer.lamp_k",
        d.lamp_k,
        500.0,
        10_000.0,
        "K",
    );
    r.range(
        "simulation.spectrometer.peak_counts_per_ms",
        d.peak_counts_per_ms,
        1e-3,
        1e9,
        "counts/ms",
    );
    r.range(
        "simulation.spectrometer.electrons_per_count",
        d.electrons_per_count,
        1e-3,
        1e4,
        "e⁻/count",
    );
    r.range(
        "simulation.spectrometer.read_noise_counts",
        d.read_noise_counts,
        0.0,
        1e5,
        "counts",
    );
    r.range(
        "simulation.spectrometer.dark_offset_counts",
        d.dark_offset_counts,
        0.0,
        1e9,
        "counts",
    );
    r.range(
        "simulation.spectrometer.dark_counts_per_ms",
        d.dark_counts_per_ms,
        0.0,
        1e9,
        "counts/ms",
    );
    if !(d.full_scale_counts > d.dark_offset_counts) {
        r.at(
            "simulation.spectrometer.full_scale_counts",
            "full scale must exceed the dark offset",
        );
    }
    r.range(
        "simulation.spectrometer.resolution_nm",
        d.resolution_nm,
        0.0,
        50.0,
        "nm",
    );
    r.range(
        "simulation.spectrometer.sample_scale",
        d.sample_scale,
        0.2,
        5.0,
        "",
    );
    r.range(
        "simulation.spectrometer.sample_tilt",
        d.sample_tilt,
        -0.5,
        0.5,
        "",
    );
    for (i, f) in s.faults.iter().enumerate() {
        if f.at_line == 0 {
            r.at(
                &format!("simulation.faults[{i}].at_line"),
                "lines are counted from 1",
            );
        }
    }
}

/// Whether a travel range is ordered and inside ±[`MAX_COORD_MM`].
fn travel_usable(t: [f64; 2]) -> bool {
    t[0] < t[1] && t[0] >= -MAX_COORD_MM && t[1] <= MAX_COORD_MM
}

/// Why a G-code line from the machine file cannot be sent, if it cannot.
fn bad_line(line: &str, max: usize, role: LineRole) -> Option<String> {
    if line.chars().any(|c| c == '\n' || c == '\r') {
        Some("a line must not contain a line break; list each line separately".into())
    } else if line.trim().is_empty() {
        Some("empty line (an empty line draws a stray `ok` on many controllers)".into())
    } else if line.len() + 1 > max {
        Some(format!(
            "line is {} characters with its line end, over the {max}-character limit (stage.max_line_len)",
            line.len() + 1
        ))
    } else {
        words::refusal(line, role)
    }
}

/// The first `{name}` in an argument that is not a known placeholder.
fn unknown_placeholder(arg: &str) -> Option<String> {
    let mut rest = arg;
    while let Some(i) = rest.find('{') {
        let after = &rest[i + 1..];
        let Some(j) = after.find('}') else { break };
        let name = &after[..j];
        if !matches!(name, "integration_ms" | "averages" | "kind") {
            return Some(name.to_string());
        }
        rest = &after[j + 1..];
    }
    None
}

/// Signs of the approach side: `"-x-y"` → `(-1, -1)` (sites are reached moving in +x, +y).
pub fn approach_signs(s: &str) -> Option<(f64, f64)> {
    let s: String = s.chars().filter(|c| !c.is_whitespace()).collect();
    let b = s.as_bytes();
    if b.len() != 4 || !b[1].eq_ignore_ascii_case(&b'x') || !b[3].eq_ignore_ascii_case(&b'y') {
        return None;
    }
    let sign = |c: u8| match c {
        b'+' => Some(1.0),
        b'-' => Some(-1.0),
        _ => None,
    };
    Some((sign(b[0])?, sign(b[2])?))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn placeholders_are_named() {
        assert_eq!(unknown_placeholder("--ms={integration_ms}"), None);
        assert_eq!(unknown_placeholder("{exposure}"), Some("exposure".into()));
    }

    #[test]
    fn approach_sides_parse() {
        assert_eq!(approach_signs("-x-y"), Some((-1.0, -1.0)));
        assert_eq!(approach_signs("+X -Y"), Some((1.0, -1.0)));
        assert_eq!(approach_signs("left"), None);
    }

    #[test]
    fn long_lines_are_refused() {
        assert!(bad_line(&"G".repeat(80), 80, LineRole::Setup).is_some());
        assert!(bad_line("G21", 80, LineRole::Setup).is_none());
        assert!(bad_line("", 80, LineRole::Setup).is_some());
    }

    #[test]
    fn a_real_stage_ctrl_c_cannot_stop_is_a_located_problem() {
        let mut m = crate::bench::machine::builtin_simulated();
        m.stage.reset.clear();
        assert!(
            validate(&m).is_empty(),
            "the simulated stage is stopped by its server"
        );
        m.stage.port = "/dev/ttyACM0".into();
        let problems = validate(&m);
        let p = problems
            .iter()
            .find(|p| format!("{:?}", p.path).contains("feed_hold"))
            .unwrap_or_else(|| panic!("{problems:?}"));
        assert!(p.message.contains("Ctrl-C could not stop motion"), "{p:?}");
        for fix in [("feed_hold", "!"), ("feed_hold", "M410")] {
            let mut ok = m.clone();
            ok.stage.feed_hold = fix.1.into();
            assert!(validate(&ok).is_empty(), "{fix:?}: {:?}", validate(&ok));
        }
        m.stage.feed_hold = "G0 X10".into();
        assert!(validate(&m)
            .iter()
            .any(|p| format!("{:?}", p.path).contains("feed_hold")));
    }
}
