//! The caution shown before the first real-hardware motion, and the question that guards it.

use anyhow::bail;
use std::io::{BufRead, IsTerminal, Write};

/// The caution printed before a real stage moves.
pub const CAUTION: &str = "\
CAUTION: the stage is about to move.
  - Keep hands, tools and cables clear of the stage travel (pinch and crash hazard).
  - Check that the probe or objective clears the wafer, chuck and clamps over the whole travel.
  - Keep the emergency stop within reach. Ctrl-C stops motion and keeps every measurement.
  - The lamp may be hot; keep solvents and resist away from it.
Follow your lab's safety rules; they govern where they differ from these notes.";

/// Shows the caution and asks for `yes` on the terminal; `--yes` (scripted use) skips it.
pub fn confirm_motion(port: &str, assume_yes: bool) -> anyhow::Result<()> {
    if assume_yes {
        eprintln!("{CAUTION}\n(--yes given: not asking)");
        return Ok(());
    }
    let stdin = std::io::stdin();
    if !stdin.is_terminal() {
        bail!("refusing to move the real stage on {port} without confirmation: run on a terminal to answer, or pass --yes once the bench has been checked");
    }
    eprint!("{CAUTION}\nMove the stage on {port}? Type yes to continue: ");
    std::io::stderr().flush()?;
    let mut line = String::new();
    stdin.lock().read_line(&mut line)?;
    if line.trim().eq_ignore_ascii_case("yes") {
        Ok(())
    } else {
        bail!("not confirmed: nothing was moved")
    }
}

/// Asks the operator to do something by hand and waits for Enter.
pub fn wait_for_operator(message: &str) -> anyhow::Result<()> {
    let stdin = std::io::stdin();
    if !stdin.is_terminal() {
        bail!("{message}: nobody to ask (not a terminal)");
    }
    eprint!("{message} ");
    std::io::stderr().flush()?;
    let mut line = String::new();
    stdin.lock().read_line(&mut line)?;
    Ok(())
}
