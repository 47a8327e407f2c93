//! One measuring session on a run (what `run`, `resume` and `remeasure` share): fit spectra left
//! unfitted by a stop, open the bench frozen in `run.toml`, check the plan against the soft
//! limits before any motion, confirm real motion, measure, journal the end and rebuild the
//! derived files. The caller supplies the human side through [`Hooks`].

use super::derive::{self, planned_sites};
use super::events::{now, Event, SiteState};
use super::folder::{RunFolder, RunToml};
use super::plan;
use super::refit::fit_stored;
use super::sequencer::{Outcome, Progress, Prompt, Sequencer};
use super::session::loaded_recipe;
use crate::bench::{machine::builtin_simulated, Bench, MachineFile};
use crate::fit::Fitter;
use crate::map::stats::Summary;
use crate::recipe::Site;
use anyhow::Context;
use std::collections::BTreeMap;
use std::sync::Arc;
use tokio::sync::watch;

/// Which sites a session measures.
#[derive(Debug, Clone)]
pub enum Which {
    /// Every planned site without a valid result (a new run, `resume`, `remeasure --failed`).
    Missing,
    /// These site numbers (`remeasure --site`).
    Sites(Vec<usize>),
}

/// Asks before the first motion of a real stage, given its port; an error aborts the session.
pub type Confirm = Box<dyn FnOnce(&str) -> anyhow::Result<()> + Send>;

/// The human side of a session.
pub struct Hooks {
    /// Called once before the first motion of a real stage.
    pub confirm: Confirm,
    /// Asks the operator for a hand step (placing the reference); `None` makes it an error.
    pub prompt: Option<Prompt>,
    /// Where progress goes; the optical model's warnings (a window beyond a material's
    /// published range, …) come first, as notes, before anything is measured.
    pub progress: Box<dyn FnMut(Progress) + Send>,
    /// Becomes `true` to stop (Ctrl-C).
    pub cancel: watch::Receiver<bool>,
}

/// How a session ended, with the run's figures after it.
pub struct Report {
    pub outcome: Outcome,
    pub summary: Summary,
    pub states: Vec<SiteState>,
    /// Numbers of the sites this session set out to measure, in plan order.
    pub measured: Vec<usize>,
}

/// The machine file frozen in a run (`None`: the built-in simulated bench).
pub fn machine_of(meta: &RunToml) -> anyhow::Result<Option<MachineFile>> {
    meta.machine
        .clone()
        .map(|t| {
            t.try_into()
                .context("the machine file frozen in run.toml does not parse")
        })
        .transpose()
}

/// The material the reference spectrum is taken on.
pub fn reference_material(machine: &Option<MachineFile>) -> String {
    machine
        .as_ref()
        .map(|m| m.reference.material.clone())
        .unwrap_or_else(|| builtin_simulated().reference.material)
}

/// Runs one measuring session on the run in `folder`.
pub async fn session(
    folder: &RunFolder,
    meta: &RunToml,
    which: &Which,
    command: &str,
    hooks: Hooks,
) -> anyhow::Result<Report> {
    let loaded = loaded_recipe(folder, meta);
    let fitter = Arc::new(Fitter::from_recipe(&loaded)?);
    let mut progress = hooks.progress;
    for w in fitter.warnings() {
        progress(Progress::Note(format!("warning: {w}")));
    }
    let machine = machine_of(meta)?;
    let material = reference_material(&machine);
    let plan_sites = plan::order(&meta.recipe.pattern, &planned_sites(meta));
    let (events, states) = derive::read_states(folder, meta)?;
    let earlier_sessions = events
        .iter()
        .filter(|e| matches!(e, Event::RunStarted { .. }))
        .count() as u64;
    let valid: BTreeMap<usize, bool> = states
        .iter()
        .map(|s| (s.site.number, s.is_valid()))
        .collect();
    let mut next: BTreeMap<usize, u32> = states
        .iter()
        .map(|s| (s.site.number, s.next_attempt()))
        .collect();
    let todo: Vec<Site> = plan_sites
        .iter()
        .filter(|s| match which {
            Which::Missing => !valid.get(&s.number).copied().unwrap_or(false),
            Which::Sites(n) => n.contains(&s.number),
        })
        .copied()
        .collect();
    let mut seq = Sequencer::new(
        folder.clone(),
        meta,
        fitter.clone(),
        material.clone(),
        hooks.cancel,
    )?;
    seq.log(&Event::RunStarted {
        time: now(),
        command: command.to_string(),
        sites_planned: plan_sites.len(),
    })?;
    // Spectra stored before a stop but not fitted are fitted first: no motion needed.
    for s in &states {
        for a in s.unfitted() {
            if let Some(rel) = &a.spectrum {
                seq.log(&fit_stored(
                    folder,
                    s.site.number,
                    a.attempt,
                    rel,
                    &fitter,
                    &material,
                    &meta.recipe.accept,
                ))?;
            }
        }
    }
    let outcome = if todo.is_empty() {
        Outcome::Finished
    } else {
        let mut bench =
            Bench::open_session(machine.as_ref(), &loaded, meta.run.seed, earlier_sessions).await?;
        tracing::info!(stage = %bench.stage.describe(), spectrometer = %bench.spectrometer.describe(), sites = todo.len(), "{command}: bench open");
        bench.check_plan(&todo)?;
        if !bench.is_simulated() {
            (hooks.confirm)(&bench.stage.describe())?;
        }
        seq = seq.on_progress(progress);
        if let Some(p) = hooks.prompt {
            seq = seq.with_prompt(p);
        }
        let outcome = match seq.prepare(&mut bench).await {
            Ok(()) => {
                seq.measure(&mut bench, &todo, |site| {
                    let n = next.entry(site).or_insert(1);
                    *n += 1;
                    *n - 1
                })
                .await
            }
            Err(e) => Outcome::Failed(e),
        };
        if let Outcome::Failed(e) = &outcome {
            // The last lines exchanged with the controller say most about a fault.
            tracing::error!(
                "{command} stopped: {}\nrecent G-code conversation:\n{}",
                crate::error_text::chain_text(e),
                bench.stage.transcript().join("\n")
            );
        }
        outcome
    };
    let (_, states) = derive::read_states(folder, meta)?;
    if matches!(outcome, Outcome::Finished) && states.iter().all(|s| !s.attempts.is_empty()) {
        seq.log(&Event::RunFinished { time: now() })?;
    }
    let summary = derive::rebuild(folder)?;
    Ok(Report {
        outcome,
        summary,
        states,
        measured: todo.iter().map(|s| s.number).collect(),
    })
}
