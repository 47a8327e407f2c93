//! The machine-file schema (DESIGN.md §3, a contract): plain serde types with unknown keys
//! rejected, and their defaults. Whether the values make sense is [`super::validate`]'s job.

use serde::{Deserialize, Serialize};

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
    /// Status query. One character is sent as a real-time byte without a line end (so it
    /// draws no `ok`); anything longer is sent as a line and answered by `ok`. Absent: `"?"`
    /// for `poll`, and no status queries otherwise (some firmware takes a stray `?` as the
    /// start of the next line); present, it is also used by `stage where` and after homing.
    #[serde(default)]
    pub status_query: Option<String>,
    /// Pause between status queries while polling, ms.
    #[serde(default = "d_poll_interval")]
    pub poll_interval_ms: f64,
    /// How close a reported position must be to the target to count as arrived, mm.
    #[serde(default = "d_position_tolerance")]
    pub position_tolerance_mm: f64,
    /// Immediate feed hold / quick stop, sent first on a stop (Ctrl-C): one character is a
    /// real-time byte (grbl-style `"!"`), anything longer a line (Marlin-style `"M410"`);
    /// empty = none.
    #[serde(default)]
    pub feed_hold: String,
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

impl StageSpec {
    /// The status query in use: the one named (if not blank), else `"?"` for `poll`; `None`
    /// when the controller is not to be asked for status.
    pub fn status_query_in_use(&self) -> Option<&str> {
        match self.status_query.as_deref() {
            Some(q) if !q.trim().is_empty() => Some(q),
            Some(_) => None,
            None => (self.motion_complete == MotionComplete::Poll).then_some(DEFAULT_STATUS_QUERY),
        }
    }

    /// Whether Ctrl-C can stop motion: a feed hold, stop lines or a reset is configured.
    pub fn can_stop(&self) -> bool {
        !(self.feed_hold.trim().is_empty() && self.stop.is_empty() && self.reset.is_empty())
    }
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
    /// Error replies that mean the controller is locked in an alarm (it refuses every line
    /// until it is reset or unlocked), matched at the start of the line.
    #[serde(default = "d_locked")]
    pub locked: Vec<String>,
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
            locked: d_locked(),
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
    /// One program run per acquisition (`bench::spectrometer`).
    Command,
    /// One long-running program spoken to over stdin/stdout (`bench::helper_protocol`).
    Helper,
}

/// The `[spectrometer]` section.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SpectrometerSpec {
    #[serde(default)]
    pub kind: SpectrometerKind,
    /// argv run without a shell; placeholders `{integration_ms}`, `{averages}`, `{kind}`
    /// (`sample`, `dark` or `reference`). For `helper`, the helper program (no placeholders).
    #[serde(default)]
    pub command: Vec<String>,
    #[serde(default = "d_spec_timeout")]
    pub timeout_s: f64,
    /// FWHM of the spectrometer's slit function, nm (0: finer than anything the fit sees).
    /// The fit convolves its model with it; frozen into each run with the machine file.
    #[serde(default, skip_serializing_if = "is_zero")]
    pub resolution_nm: f64,
}

fn is_zero(v: &f64) -> bool {
    *v == 0.0
}

impl Default for SpectrometerSpec {
    fn default() -> Self {
        SpectrometerSpec {
            kind: SpectrometerKind::Simulated,
            command: Vec::new(),
            timeout_s: d_spec_timeout(),
            resolution_nm: 0.0,
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
    // Lamp drift: the reference taken again during a map (0 = only at the start).
    /// Take the reference again after every this many sites.
    #[serde(default)]
    pub every_sites: u32,
    /// Take the reference again at least every this many minutes (placed by the plan's
    /// duration estimate).
    #[serde(default)]
    pub every_min: f64,
}

impl Default for ReferenceSpec {
    fn default() -> Self {
        ReferenceSpec {
            material: d_ref_material(),
            position_mm: None,
            every_sites: 0,
            every_min: 0.0,
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
    /// After an alarm a grbl-like board takes nothing, its reset included, for this long;
    /// afterwards it answers every line as locked until reset, ms.
    #[serde(default = "d_post_alarm_delay")]
    pub post_alarm_delay_ms: f64,
    /// 1σ per axis of where the carriage stops around the commanded point, mm.
    #[serde(default = "d_repeatability")]
    pub repeatability_mm: f64,
    /// Lost motion of the mechanism on reversal, mm (the carriage lags the nut by half of it).
    #[serde(default = "d_sim_backlash")]
    pub backlash_mm: f64,
}

/// 3 µm: a lead-screw bench stage (from memory: catalogue repeatabilities of a few µm).
fn d_repeatability() -> f64 {
    0.003
}

/// 20 µm: lost motion of a lead screw without preloaded nut (from memory).
fn d_sim_backlash() -> f64 {
    0.02
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
            post_alarm_delay_ms: d_post_alarm_delay(),
            repeatability_mm: d_repeatability(),
            backlash_mm: d_sim_backlash(),
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
    /// Largest distance of the wafer's true centre from `[chuck] center_mm`, mm: a hand
    /// placement error drawn from the seed (uniform over the disc), which centring finds.
    #[serde(default)]
    pub placement_offset_mm: f64,
    /// Largest turn of the wafer from `[chuck] rotation_deg`, degrees (drawn from the seed,
    /// uniform in ±this).
    #[serde(default)]
    pub placement_rotation_deg: f64,
    /// Largest distance the wafer lands from where it lay before when it is unloaded and
    /// loaded again (a gauge study's reload), mm (uniform over the disc).
    #[serde(default = "d_reload_offset")]
    pub reload_offset_mm: f64,
    /// Largest turn of the wafer on a reload, degrees (uniform in ±this).
    #[serde(default = "d_reload_rotation")]
    pub reload_rotation_deg: f64,
}

/// 0.2 mm: a wafer set back against the chuck's pins (from memory).
fn d_reload_offset() -> f64 {
    0.2
}

/// 0.1°: the flat or notch set back against its pin (from memory).
fn d_reload_rotation() -> f64 {
    0.1
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
            placement_offset_mm: 0.0,
            placement_rotation_deg: 0.0,
            reload_offset_mm: d_reload_offset(),
            reload_rotation_deg: d_reload_rotation(),
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
    // Lamp drift, driven by the virtual clock.
    /// Lamp output change, % of its start value per hour of virtual time (negative: dimming).
    #[serde(default = "d_lamp_drift")]
    pub lamp_drift_pct_per_hour: f64,
    /// Slow spectral tilt, % per hour: the red end gains and the blue end loses this much
    /// relative to the middle of the range (a lamp's colour temperature wandering).
    #[serde(default)]
    pub lamp_tilt_pct_per_hour: f64,
    /// FWHM of the virtual slit function, nm (0: ideal). Give the same value as
    /// `spectrometer.resolution_nm` for the fit to model it.
    #[serde(default, skip_serializing_if = "is_zero")]
    pub resolution_nm: f64,
    /// Level of the sample light against the reference's (a reference taken at another
    /// focus): 1 = none. Fitted by a recipe's `fit_scale`.
    #[serde(default = "d_one", skip_serializing_if = "is_one")]
    pub sample_scale: f64,
    /// A tilt of that level across the detector range, ± this fraction at its ends.
    /// Fitted by a recipe's `fit_tilt`.
    #[serde(default, skip_serializing_if = "is_zero")]
    pub sample_tilt: f64,
}

fn d_one() -> f64 {
    1.0
}

fn is_one(v: &f64) -> bool {
    *v == 1.0
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
            lamp_drift_pct_per_hour: d_lamp_drift(),
            lamp_tilt_pct_per_hour: 0.0,
            resolution_nm: 0.0,
            sample_scale: 1.0,
            sample_tilt: 0.0,
        }
    }
}

fn d_lamp_drift() -> f64 {
    // A halogen lamp's output wanders by a few % per hour after warm-up (common practice).
    -2.0
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
/// grbl's "locked out during alarm" error number and Marlin-style halt messages (from memory).
fn d_locked() -> Vec<String> {
    [
        "error:9",
        "Error:Printer halted",
        "Error:stopped",
        "Error:halted",
    ]
    .map(String::from)
    .to_vec()
}
/// Half a second: of the order real boards take to finish an alarm (from memory).
fn d_post_alarm_delay() -> f64 {
    500.0
}
/// The status query `poll` uses when the machine file names none.
pub const DEFAULT_STATUS_QUERY: &str = "?";
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
    2.0
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

impl MachineFile {
    /// Whether the stage is the virtual controller.
    pub fn stage_is_simulated(&self) -> bool {
        self.stage.port.trim() == SIMULATED_PORT
    }
}
