//! What differs between the virtual controller's dialects, behind one trait: the words it
//! says (banner, errors, alarms, keep-alives), its real-time bytes, and the commands only
//! that firmware family knows. Kinematics, the planner queue, faults and line handling are
//! the core's ([`super::VirtualController`]) and the same for every dialect.
//!
//! To add a dialect: a variant of `bench::machine::Dialect`, a file beside this one with a
//! unit struct implementing [`FirmwareDialect`], and its arm in [`of`].

use super::{grbl_like::GrblLike, marlin_like::MarlinLike, VirtualController};
use crate::bench::machine::{Dialect, FaultKind};
use std::fmt::Debug;

/// A code only some firmware knows, and what the core does with it.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum OwnCode {
    /// Home (a move to the home position, answered when it has ended).
    Home,
    /// Print this line (a report), then `ok`.
    Reply(String),
    /// A known word with nothing to do here (acted on elsewhere, or ignored).
    Accept,
}

/// The habits of one firmware family. Stateless: the state is the core's.
pub trait FirmwareDialect: Debug + Send + Sync {
    /// Whether the board powers up locked when the configuration asks for it.
    fn starts_locked(&self, asked: bool) -> bool;
    /// Acts on a real-time byte (one that is not part of a line); `true` if `byte` was one.
    fn real_time_byte(&self, v: &mut VirtualController, byte: u8) -> bool;
    /// Whether the board ignores everything, its reset included, for the post-alarm delay;
    /// otherwise (and afterwards) it answers every line with [`Self::stopped_line`] until
    /// [`Self::clears_alarm`] or a real-time reset.
    fn deaf_in_alarm(&self) -> bool;
    /// Whether a line clears an alarm.
    fn clears_alarm(&self, line: &str) -> bool;
    /// The answer to a line sent while stopped by an alarm.
    fn stopped_line(&self) -> &'static str;
    /// Whether a completed line is a quick stop acted on as it arrives, ahead of the queue.
    fn is_quick_stop(&self, line: &str) -> bool;
    /// Whether an empty line gets an `ok`.
    fn acknowledges_empty_line(&self) -> bool;
    /// Runs one line (upper case, comments removed): the dialect's own system commands, or
    /// G-code through [`VirtualController::execute_gcode`].
    fn run_line(&self, v: &mut VirtualController, line: &str, fault: Option<FaultKind>);
    /// A code (letter, number in tenths) only this family knows; `planned_mm` is where the
    /// last queued move ends.
    fn own_code(&self, letter: char, tenths: i64, planned_mm: [f64; 2]) -> Option<OwnCode>;
    /// The dwell of `G4` from its `P` and `S` words, s.
    fn dwell_s(&self, p: Option<f64>, s: Option<f64>) -> f64;
    /// The error code for a feed of zero or less, if it is refused.
    fn zero_feed_error(&self) -> Option<u32>;
    /// Whether targets beyond the travel are clamped (software endstops) rather than alarmed.
    fn clamps_to_travel(&self) -> bool;
    /// The keep-alive sent while a wait blocks: interval (s) and text.
    fn keep_alive(&self) -> Option<(f64, &'static str)>;
    /// The lines answering a line it cannot run (`code` numbered as grbl numbers them).
    fn reject(&self, code: u32, line: &str) -> Vec<String>;
    /// The answer to a line hit by an injected `error` fault.
    fn fault_error(&self, code: u32) -> String;
    /// The start-up lines, with the configured banner text.
    fn banner(&self, text: &str, locked: bool) -> Vec<String>;
    /// What an alarm prints.
    fn alarm(&self, code: u32) -> Vec<String>;
}

/// The dialect a machine file names.
pub fn of(kind: Dialect) -> &'static dyn FirmwareDialect {
    match kind {
        Dialect::Grbl => &GrblLike,
        Dialect::Marlin => &MarlinLike,
    }
}
