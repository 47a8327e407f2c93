//! The machine file (DESIGN.md §3, a contract): the bench a recipe runs on — serial port and
//! G-code dialect of the stage controller, soft limits, how the wafer sits on the chuck, the
//! spectrometer backend — plus a `[simulation]` section for the simulated parts.
//!
//! Plain serde types with unknown keys rejected, a pure validator returning every problem with
//! its key path, and a loader that turns key paths into `FILE:LINE:COL` (reusing
//! [`crate::recipe::locate`]). Every firmware-specific line lives here, never in code.

use crate::recipe::locate;
use crate::recipe::validate::{Problem, Report};
use crate::recipe::Located;
use serde::{Deserialize, Serialize};
use std::path::{Path, PathBuf};

/// The port name that selects the virtual controller instead of a serial device.
pub const SIMULATED_PORT: &str = "simulated";

/// A whole machine file.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct MachineFile {
    /// Short name of the bench, written into run folders.
    pub name: String,
    pub stage: StageSpec,
    #[serde(default)]
    pub chuck: ChuckSpec,
    #[serde(default)]
    pub spectrometer: SpectrometerSpec,
    #[serde(default)]
    pub reference: ReferenceSpec,
    #[serde(default)]
    pub simulation: SimulationSpec,
}

/// How motion completion is confirmed.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum MotionComplete {
    /// A dwell line (`G4 P0`) whose `ok` arrives only after queued motion has ended.
    #[default]
    Dwell,
    /// A wait-for-moves line (`M400`) whose `ok` arrives after motion has ended.
    M400,
    /// Status queries until the report says idle *and* shows the target position.
    Poll,
}

impl MotionComplete {
    /// The name as written in machine files.
    pub fn as_str(self) -> &'static str {
        match self {
            MotionComplete::Dwell => "dwell",
            MotionComplete::M400 => "m400",
            MotionComplete::Poll => "poll",
        }
    }
}

/// The `[stage]` section: the controller and its G-code dialect.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct StageSpec {
    /// Serial device path, or `"simulated"` for the virtual controller.
    pub port: String,
    #[serde(default = "d_baud")]
    pub baud: u32,
    /// Longest wait for the reply to one line, s.
    #[serde(default = "d_line_timeout")]
    pub line_timeout_s: f64,
    /// Lines sent after the port opens (after `unlock`).
    #[serde(default = "d_init")]
    pub init: Vec<String>,
    /// Lines that clear a locked state after power-up, sent before `init`.
    #[serde(default)]
    pub unlock: Vec<String>,
    /// Homing lines; empty means the user homes by hand.
    #[serde(default)]
    pub home: Vec<String>,
    /// Longest wait for the reply to a homing line, s (homing replies when it has finished).
    #[serde(default = "d_home_timeout")]
    pub home_timeout_s: f64,
    #[serde(default)]
    pub motion_complete: MotionComplete,
    /// The line that waits for motion to end; default `G4 P0` (dwell) or `M400` (m400).
    #[serde(default)]
    pub wait_line: Option<String>,
    /// Status query for `poll`. One character is sent as a real-time byte without a line end
    /// (so it draws no `ok`); anything longer is sent as a line and answered by `ok`.
    #[serde(default = "d_status_query")]
    pub status_query: String,
    /// Pause between status queries while polling, ms.
    #[serde(default = "d_poll_interval")]
    pub poll_interval_ms: f64,
    /// How close a reported position must be to the target to count as arrived, mm.
    #[serde(default = "d_position_tolerance")]
    pub position_tolerance_mm: f64,
    /// Bytes sent raw (no line end) to stop motion at once and to reset the controller after
    /// an alarm, e.g. `"\u0018"` (Ctrl-X) on grbl-style firmware; empty = none.
    #[serde(default)]
    pub reset: String,
    /// Lines sent to stop motion when `reset` is empty (e.g. a quick-stop code).
    #[serde(default)]
    pub stop: Vec<String>,
    /// Text that marks the start-up banner; empty = take whatever arrives first.
    #[serde(default)]
    pub banner: String,
    /// How long to wait after the port opens for a banner or other start-up lines, s.
    #[serde(default = "d_startup_wait")]
    pub startup_wait_s: f64,
    /// Longest line the controller accepts, characters (line end included).
    #[serde(default = "d_max_line")]
    pub max_line_len: usize,
    #[serde(default = "d_feed")]
    pub feed_mm_min: f64,
    #[serde(default = "d_accel")]
    pub accel_mm_s2: f64,
    /// Soft limits `[min, max]`, mm: nothing outside is ever sent.
    pub travel_x_mm: [f64; 2],
    pub travel_y_mm: [f64; 2],
    /// Distance kept from each travel limit, mm.
    #[serde(default = "d_margin")]
    pub margin_mm: f64,
    /// Every site is approached from the same side by this much; 0 = off.
    #[serde(default)]
    pub backlash_mm: f64,
    /// Which side sites are approached from: `"-x-y"` (default), `"+x-y"`, `"-x+y"`, `"+x+y"`.
    #[serde(default = "d_approach")]
    pub approach_from: String,
    /// How replies read; the defaults suit grbl-, Smoothie- and Marlin-style firmware.
    #[serde(default)]
    pub replies: RepliesSpec,
}

/// The words replies start with (matched case-insensitively at the start of the line).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RepliesSpec {
    #[serde(default = "d_ok")]
    pub ok: Vec<String>,
    #[serde(default = "d_error")]
    pub error: Vec<String>,
    #[serde(default = "d_alarm")]
    pub alarm: Vec<String>,
    /// Keep-alive lines a busy controller sends; each one restarts the reply timeout.
    #[serde(default = "d_busy")]
    pub busy: Vec<String>,
    /// State words of a status report that mean "not moving".
    #[serde(default = "d_idle_states")]
    pub idle_states: Vec<String>,
    /// State words of a status report that mean an alarm.
    #[serde(default = "d_alarm_states")]
    pub alarm_states: Vec<String>,
}

impl Default for RepliesSpec {
    fn default() -> Self {
        RepliesSpec {
            ok: d_ok(),
            error: d_error(),
            alarm: d_alarm(),
            busy: d_busy(),
            idle_states: d_idle_states(),
            alarm_states: d_alarm_states(),
        }
    }
}

/// The `[chuck]` section: where the wafer sits in stage coordinates.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ChuckSpec {
    /// Wafer centre in stage coordinates, mm.
    #[serde(default = "d_center")]
    pub center_mm: [f64; 2],
    /// Rotation of the wafer frame in the stage frame, degrees counter-clockwise.
    #[serde(default)]
    pub rotation_deg: f64,
    #[serde(default)]
    pub flip_x: bool,
    #[serde(default)]
    pub flip_y: bool,
}

impl Default for ChuckSpec {
    fn default() -> Self {
        ChuckSpec {
            center_mm: d_center(),
            rotation_deg: 0.0,
            flip_x: false,
            flip_y: false,
        }
    }
}

/// Spectrometer backend.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum SpectrometerKind {
    #[default]
    Simulated,
    Command,
}

/// The `[spectrometer]` section.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SpectrometerSpec {
    #[serde(default)]
    pub kind: SpectrometerKind,
    /// argv run without a shell; placeholders `{integration_ms}`, `{averages}`, `{kind}`
    /// (`sample`, `dark` or `reference`).
    #[serde(default)]
    pub command: Vec<String>,
    #[serde(default = "d_spec_timeout")]
    pub timeout_s: f64,
}

impl Default for SpectrometerSpec {
    fn default() -> Self {
        SpectrometerSpec {
            kind: SpectrometerKind::Simulated,
            command: Vec::new(),
            timeout_s: d_spec_timeout(),
        }
    }
}

/// The `[reference]` section: what the reference spectrum is taken on.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ReferenceSpec {
    #[serde(default = "d_ref_material")]
    pub material: String,
    /// Stage position of an on-chuck reference piece, mm.
    #[serde(default)]
    pub position_mm: Option<[f64; 2]>,
}

impl Default for ReferenceSpec {
    fn default() -> Self {
        ReferenceSpec {
            material: d_ref_material(),
            position_mm: None,
        }
    }
}

/// The `[simulation]` section: the virtual controller, wafer and spectrometer.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SimulationSpec {
    /// Virtual time runs this many times faster than the wall clock (1 = real time).
    #[serde(default = "d_time_scale")]
    pub time_scale: f64,
    /// Seed of every random draw (noise, roughness); the run's seed is added to it.
    #[serde(default)]
    pub seed: u64,
    #[serde(default)]
    pub controller: SimControllerSpec,
    #[serde(default)]
    pub wafer: SimWaferSpec,
    #[serde(default)]
    pub spectrometer: SimSpectrometerSpec,
    /// Faults to inject into the virtual controller.
    #[serde(default)]
    pub faults: Vec<FaultSpec>,
}

impl Default for SimulationSpec {
    fn default() -> Self {
        SimulationSpec {
            time_scale: d_time_scale(),
            seed: 0,
            controller: SimControllerSpec::default(),
            wafer: SimWaferSpec::default(),
            spectrometer: SimSpectrometerSpec::default(),
            faults: Vec::new(),
        }
    }
}

/// The virtual controller's behaviour.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SimControllerSpec {
    /// Printed at start-up and after every reset.
    #[serde(default = "d_sim_banner")]
    pub banner: String,
    /// Start in the locked (alarm) state, as controllers with homing enabled do at power-up.
    #[serde(default)]
    pub start_locked: bool,
    /// How long a status report keeps saying idle after a move is acknowledged, ms.
    #[serde(default = "d_idle_lag")]
    pub idle_lag_ms: f64,
    /// Moves the planner queues before `ok` is held back.
    #[serde(default = "d_planner")]
    pub planner_moves: usize,
    /// The reply conventions it follows.
    #[serde(default)]
    pub dialect: Dialect,
}

/// Reply conventions of the virtual controller.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Dialect {
    /// grbl-like: `?` and Ctrl-X are real-time bytes, `error:N`, `ALARM:N`, `$X`/`$H`,
    /// `G4 P` in seconds, a soft-limit alarm.
    #[default]
    Grbl,
    /// Marlin-like 3D-printer firmware: `start` at power-up, `echo:busy: processing` every
    /// 2 s while a wait blocks, `M114` position reports (of the planned position), `G28`
    /// homing, `M410` quick stop acted on at once, `G4 P` in ms, moves clamped to the travel,
    /// unknown codes answered `echo:Unknown command` then `ok`.
    Marlin,
}

impl Default for SimControllerSpec {
    fn default() -> Self {
        SimControllerSpec {
            banner: d_sim_banner(),
            start_locked: false,
            idle_lag_ms: d_idle_lag(),
            planner_moves: d_planner(),
            dialect: Dialect::Grbl,
        }
    }
}

/// One injected fault of the virtual controller.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FaultSpec {
    pub kind: FaultKind,
    /// The fault strikes at the n-th line received (1-based; status bytes not counted).
    pub at_line: usize,
    /// Error code for `error` and alarm code for `alarm`.
    #[serde(default = "d_fault_code")]
    pub code: u32,
}

/// Kinds of injected fault.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum FaultKind {
    /// The reply to the line is never sent.
    DropOk,
    /// An unreadable line is sent instead of the reply.
    Garbage,
    /// The line is rejected with `error:CODE`.
    Error,
    /// The move starts, then the controller raises `ALARM:CODE` half way and locks up.
    Alarm,
    /// Motion freezes half way: the axis never arrives and nothing completes.
    Stall,
    /// The controller goes away (the connection closes).
    Disconnect,
}

/// The virtual wafer's thickness field (on the recipe's stack, the first fitted layer varied).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SimWaferSpec {
    /// Thickness at the centre relative to nominal, nm.
    #[serde(default)]
    pub center_offset_nm: f64,
    /// Centre-to-edge change as a parabola: positive = dome (thick centre), negative = bowl.
    #[serde(default = "d_dome")]
    pub dome_nm: f64,
    /// Amplitude of a radial ripple, nm.
    #[serde(default = "d_ripple")]
    pub ripple_nm: f64,
    #[serde(default = "d_ripple_period")]
    pub ripple_period_mm: f64,
    /// Extra thickness at the rim, falling off inwards over `edge_bead_width_mm`.
    #[serde(default = "d_edge_bead")]
    pub edge_bead_nm: f64,
    #[serde(default = "d_edge_bead_width")]
    pub edge_bead_width_mm: f64,
    /// Linear tilt, nm per mm along x and y (wafer frame).
    #[serde(default = "d_tilt")]
    pub tilt_nm_per_mm: [f64; 2],
    /// Random short-range roughness, 1σ nm (a seeded smooth noise field).
    #[serde(default = "d_roughness")]
    pub roughness_nm: f64,
    /// Wafer-to-wafer spread of the mean thickness, 1σ in % of nominal (drawn from the seed,
    /// so each simulated wafer of a lot comes out a little thicker or thinner).
    #[serde(default = "d_wafer_to_wafer")]
    pub wafer_to_wafer_pct: f64,
    /// Complex index `[n, k]` of the chuck seen beyond the wafer edge (default: a steel-like
    /// metal, n ≈ 2.8, k ≈ 3.4 near 600 nm, from memory).
    #[serde(default = "d_chuck_nk")]
    pub chuck_nk: [f64; 2],
}

impl Default for SimWaferSpec {
    fn default() -> Self {
        SimWaferSpec {
            center_offset_nm: 0.0,
            dome_nm: d_dome(),
            ripple_nm: d_ripple(),
            ripple_period_mm: d_ripple_period(),
            edge_bead_nm: d_edge_bead(),
            edge_bead_width_mm: d_edge_bead_width(),
            tilt_nm_per_mm: d_tilt(),
            roughness_nm: d_roughness(),
            wafer_to_wafer_pct: d_wafer_to_wafer(),
            chuck_nk: d_chuck_nk(),
        }
    }
}

/// The virtual spectrometer's detector and lamp.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SimSpectrometerSpec {
    /// Detector range, nm.
    #[serde(default = "d_range")]
    pub wavelength_nm: [f64; 2],
    #[serde(default = "d_pixels")]
    pub pixels: usize,
    /// Lamp colour temperature, K.
    #[serde(default = "d_lamp")]
    pub lamp_k: f64,
    /// Counts per ms at the response peak for a perfect mirror.
    #[serde(default = "d_peak_rate")]
    pub peak_counts_per_ms: f64,
    /// Electrons per count (sets the shot noise).
    #[serde(default = "d_gain")]
    pub electrons_per_count: f64,
    /// Read noise, 1σ counts per frame.
    #[serde(default = "d_read_noise")]
    pub read_noise_counts: f64,
    /// Dark offset (bias), counts.
    #[serde(default = "d_dark_offset")]
    pub dark_offset_counts: f64,
    /// Dark current, counts per ms.
    #[serde(default = "d_dark_rate")]
    pub dark_counts_per_ms: f64,
    /// Highest count the digitiser gives.
    #[serde(default = "d_full_scale")]
    pub full_scale_counts: f64,
}

impl Default for SimSpectrometerSpec {
    fn default() -> Self {
        SimSpectrometerSpec {
            wavelength_nm: d_range(),
            pixels: d_pixels(),
            lamp_k: d_lamp(),
            peak_counts_per_ms: d_peak_rate(),
            electrons_per_count: d_gain(),
            read_noise_counts: d_read_noise(),
            dark_offset_counts: d_dark_offset(),
            dark_counts_per_ms: d_dark_rate(),
            full_scale_counts: d_full_scale(),
        }
    }
}

fn d_baud() -> u32 {
    115_200
}
fn d_line_timeout() -> f64 {
    5.0
}
fn d_init() -> Vec<String> {
    vec!["G21".into(), "G90".into()]
}
fn d_home_timeout() -> f64 {
    120.0
}
fn d_status_query() -> String {
    "?".into()
}
fn d_poll_interval() -> f64 {
    100.0
}
fn d_position_tolerance() -> f64 {
    0.01
}
fn d_startup_wait() -> f64 {
    2.0
}
fn d_max_line() -> usize {
    80
}
fn d_feed() -> f64 {
    3000.0
}
fn d_accel() -> f64 {
    500.0
}
fn d_margin() -> f64 {
    1.0
}
fn d_approach() -> String {
    "-x-y".into()
}
fn d_ok() -> Vec<String> {
    vec!["ok".into()]
}
fn d_error() -> Vec<String> {
    vec!["error".into(), "!!".into()]
}
fn d_alarm() -> Vec<String> {
    vec!["alarm".into()]
}
fn d_busy() -> Vec<String> {
    vec!["busy:".into(), "echo:busy".into()]
}
fn d_idle_states() -> Vec<String> {
    vec!["Idle".into()]
}
fn d_alarm_states() -> Vec<String> {
    vec!["Alarm".into()]
}
fn d_center() -> [f64; 2] {
    [100.0, 100.0]
}
fn d_spec_timeout() -> f64 {
    10.0
}
fn d_ref_material() -> String {
    "si".into()
}
fn d_time_scale() -> f64 {
    1.0
}
fn d_sim_banner() -> String {
    "isopach virtual stage 1.0 (simulated)".into()
}
fn d_idle_lag() -> f64 {
    20.0
}
fn d_planner() -> usize {
    8
}
fn d_fault_code() -> u32 {
    1
}
fn d_dome() -> f64 {
    12.0
}
fn d_ripple() -> f64 {
    1.5
}
fn d_ripple_period() -> f64 {
    22.0
}
fn d_edge_bead() -> f64 {
    25.0
}
fn d_edge_bead_width() -> f64 {
    4.0
}
fn d_tilt() -> [f64; 2] {
    [0.03, -0.02]
}
fn d_roughness() -> f64 {
    0.3
}
fn d_wafer_to_wafer() -> f64 {
    0.3
}
fn d_chuck_nk() -> [f64; 2] {
    [2.8, 3.4]
}
fn d_range() -> [f64; 2] {
    [380.0, 1000.0]
}
fn d_pixels() -> usize {
    1024
}
fn d_lamp() -> f64 {
    3000.0
}
fn d_peak_rate() -> f64 {
    2500.0
}
fn d_gain() -> f64 {
    2.0
}
fn d_read_noise() -> f64 {
    6.0
}
fn d_dark_offset() -> f64 {
    800.0
}
fn d_dark_rate() -> f64 {
    0.5
}
fn d_full_scale() -> f64 {
    65535.0
}

/// Why a machine file could not be loaded.
#[derive(Debug, thiserror::Error)]
pub enum MachineError {
    #[error("cannot read machine file {}: {source}", path.display())]
    Io {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error("{}", locate::join(.0))]
    Invalid(Vec<Located>),
}

/// A machine file read from disk, with its text (frozen into run folders).
#[derive(Debug, Clone)]
pub struct LoadedMachine {
    pub machine: MachineFile,
    pub path: PathBuf,
    pub text: String,
}

/// Reads, parses and validates a machine file; every problem is reported with its position.
pub fn load(path: &Path) -> Result<LoadedMachine, MachineError> {
    let text = std::fs::read_to_string(path).map_err(|source| MachineError::Io {
        path: path.into(),
        source,
    })?;
    parse(&text, path).map(|machine| LoadedMachine {
        machine,
        path: path.into(),
        text,
    })
}

/// Parses and validates machine-file text; `path` is used in messages.
pub fn parse(text: &str, path: &Path) -> Result<MachineFile, MachineError> {
    locate::parse_validated(text, path, validate).map_err(MachineError::Invalid)
}

/// Validates a machine file; an empty list means it is good.
pub fn validate(m: &MachineFile) -> Vec<Problem> {
    let mut r = Report::default();
    if m.name.trim().is_empty() {
        r.at("name", "the machine name is empty");
    }
    check_stage(&m.stage, &mut r);
    let c = &m.chuck;
    if !c.center_mm.iter().all(|v| v.is_finite()) {
        r.at("chuck.center_mm", "the chuck centre is not a number");
    }
    if !c.rotation_deg.is_finite() {
        r.at("chuck.rotation_deg", "the rotation is not a number");
    }
    let s = &m.spectrometer;
    match s.kind {
        SpectrometerKind::Command if s.command.is_empty() => r.at(
            "spectrometer.command",
            "kind = \"command\" needs a command, e.g. [\"/opt/lab/grab\", \"--ms\", \"{integration_ms}\"]",
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
    if m.reference.material.trim().is_empty() {
        r.at("reference.material", "the reference material is empty");
    }
    if let Some(p) = m.reference.position_mm {
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
    check_simulation(&m.simulation, &mut r);
    r.0
}

fn check_stage(s: &StageSpec, r: &mut Report) {
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
    for (key, lines) in [
        ("init", &s.init),
        ("unlock", &s.unlock),
        ("home", &s.home),
        ("stop", &s.stop),
    ] {
        for (i, l) in lines.iter().enumerate() {
            if let Some(why) = bad_line(l, s.max_line_len) {
                r.at(&format!("stage.{key}[{i}]"), why);
            }
        }
    }
    if let Some(w) = &s.wait_line {
        if let Some(why) = bad_line(w, s.max_line_len) {
            r.at("stage.wait_line", why);
        }
    }
    if s.motion_complete == MotionComplete::Poll && s.status_query.trim().is_empty() {
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

fn check_simulation(s: &SimulationSpec, r: &mut Report) {
    r.range("simulation.time_scale", s.time_scale, 0.01, 10_000.0, "×");
    r.range(
        "simulation.controller.idle_lag_ms",
        s.controller.idle_lag_ms,
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
    for (i, f) in s.faults.iter().enumerate() {
        if f.at_line == 0 {
            r.at(
                &format!("simulation.faults[{i}].at_line"),
                "lines are counted from 1",
            );
        }
    }
}

/// Why a G-code line from the machine file cannot be sent, if it cannot.
fn bad_line(line: &str, max: usize) -> Option<String> {
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
        None
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

impl MachineFile {
    /// Whether the stage is the virtual controller.
    pub fn stage_is_simulated(&self) -> bool {
        self.stage.port.trim() == SIMULATED_PORT
    }
}

/// The machine file of the built-in simulated bench: a 480 mm square stage (any wafer up to
/// 450 mm fits) with the chuck in the middle, confirmed by polling, virtual time 25× faster.
pub const BUILTIN_SIMULATED: &str = r#"
name = "built-in simulated bench"
[stage]
port = "simulated"
init = ["G21", "G90"]
unlock = ["$X"]
home = ["$H"]
motion_complete = "poll"
status_query = "?"
poll_interval_ms = 20
reset = "\u0018"
banner = "isopach virtual stage"
startup_wait_s = 0.5
feed_mm_min = 6000
accel_mm_s2 = 1000
travel_x_mm = [0, 480]
travel_y_mm = [0, 480]
margin_mm = 1
backlash_mm = 0.5
[chuck]
center_mm = [240, 240]
[spectrometer]
kind = "simulated"
[simulation]
time_scale = 25
[simulation.controller]
start_locked = true
"#;

/// The built-in simulated bench's machine file, parsed.
pub fn builtin_simulated() -> MachineFile {
    parse(BUILTIN_SIMULATED, Path::new("<built-in>")).expect("the built-in machine file is valid")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn builtin_machine_is_valid() {
        let m = builtin_simulated();
        assert!(m.stage_is_simulated());
        assert_eq!(m.stage.motion_complete, MotionComplete::Poll);
    }

    #[test]
    fn problems_carry_their_line() {
        let text = "name = \"b\"\n[stage]\nport = \"/dev/ttyACM0\"\ntravel_x_mm = [200, 0]\ntravel_y_mm = [0, 200]\nbacklash_mm = -1\n";
        let Err(MachineError::Invalid(p)) = parse(text, Path::new("m.toml")) else {
            panic!("should fail")
        };
        let lines: Vec<usize> = p.iter().map(|p| p.line).collect();
        assert_eq!(lines, vec![4, 6], "{p:?}");
        assert!(p[0].message.contains("min < max"));
    }

    #[test]
    fn unknown_keys_and_placeholders_are_named() {
        let text = "name = \"b\"\n[stage]\nport = \"x\"\ntravel_x_mm = [0, 1]\ntravel_y_mm = [0, 9]\nspeed = 3\n";
        let Err(MachineError::Invalid(p)) = parse(text, Path::new("m.toml")) else {
            panic!()
        };
        assert_eq!(p[0].line, 6);
        assert!(p[0].message.contains("speed"), "{}", p[0].message);
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
        assert!(bad_line(&"G".repeat(80), 80).is_some());
        assert!(bad_line("G21", 80).is_none());
        assert!(bad_line("", 80).is_some());
    }
}
