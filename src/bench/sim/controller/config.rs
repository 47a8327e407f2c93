//! How the virtual controller is built, from a machine file's `[stage]` and `[simulation]`.

use crate::bench::machine::{Dialect, FaultSpec, MachineFile};
use crate::bench::sim::mechanics::{MechanicsHandle, MechanicsSpec};

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
    /// Where the stage sits at power-up instead of home: where an earlier command of the
    /// bench session left it ([`crate::bench::sim::stage_memory`]).
    pub start_mm: Option<[f64; 2]>,
    pub faults: Vec<FaultSpec>,
    pub dialect: Dialect,
    /// After an alarm the board takes nothing, not even a reset, for this long, s.
    pub post_alarm_delay_s: f64,
    /// Where the carriage really stops (repeatability, backlash); `None`: where commanded.
    pub mechanics: Option<MechanicsHandle>,
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
            start_mm: None,
            faults: m.simulation.faults.clone(),
            dialect: c.dialect,
            post_alarm_delay_s: c.post_alarm_delay_ms / 1000.0,
            mechanics: None,
        }
    }

    /// [`VirtualConfig::from_machine`] with the machine file's stage mechanics, their draws
    /// from `seed`; the handle lets the virtual spectrometer see where the carriage stops.
    pub fn with_mechanics(m: &MachineFile, seed: u64) -> (VirtualConfig, MechanicsHandle) {
        let c = &m.simulation.controller;
        let spec = MechanicsSpec {
            repeatability_mm: c.repeatability_mm,
            backlash_mm: c.backlash_mm,
        };
        let handle = MechanicsHandle::new(spec, seed);
        let cfg = VirtualConfig {
            mechanics: Some(handle.clone()),
            ..VirtualConfig::from_machine(m)
        };
        (cfg, handle)
    }
}
