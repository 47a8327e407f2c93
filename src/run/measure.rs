//! One measuring session on a run (what `run`, `resume` and `remeasure` share): the run's
//! plan (checked before anything is touched), spectra left unfitted by a stop fitted first,
//! the bench opened inside the session's cancellation scope, real motion confirmed, the plan
//! executed by the sequencer, the end journalled, the derived files rebuilt and the run sent
//! to the history. The caller supplies the human side through [`Hooks`].

use super::derive;
use super::drift::ReferenceTimeline;
use super::events::{journalled_centring, now, Event, SiteState};
use super::fit_workers::FitWorkers;
use super::folder::{RunFolder, RunToml};
use super::journal::Journal;
use super::journal_writer::JournalWriter;
use super::new_run::loaded_recipe;
use super::plan::{Plan, PlanError};
use super::refit::fit_stored;
use super::sequencer::{Outcome, Prompt, Scope, Sequencer};
use super::stream::{EventStream, RunEvent, Subscriber};
use crate::bench::{machine::builtin_simulated, Bench, MachineFile};
use crate::history::location::HistoryLocation;
use crate::map::stats::Summary;
use anyhow::Context;
use std::collections::BTreeMap;
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
    /// Further subscribers of the run events (progress display, live view); the optical
    /// model's warnings (a window beyond a material's published range, …) come first, as
    /// notes, before anything is measured.
    pub subscribers: Vec<Box<dyn Subscriber>>,
    /// Becomes `true` to stop (Ctrl-C, SIGTERM, SIGHUP).
    pub cancel: watch::Receiver<bool>,
}

/// How a session ended, with the run's figures after it.
pub struct SessionReport {
    pub outcome: Outcome,
    pub summary: Summary,
    pub states: Vec<SiteState>,
    /// Numbers of the sites this session set out to measure, in plan order.
    pub measured: Vec<usize>,
    /// Why the run is not (yet) in the history, when its write failed; the run is safe.
    pub history_note: Option<String>,
    /// The figures of a gauge study (`None`: a map).
    pub gauge: Option<super::gauge::GaugeReport>,
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

/// The plan of an existing run: its frozen recipe, machine file and site order, checked.
pub fn plan_of_run(folder: &RunFolder, meta: &RunToml) -> anyhow::Result<Plan> {
    plan_on_machine(folder, meta, machine_of(meta)?.as_ref())
}

/// The plan of an existing run on `machine` (a corrected machine file), checked against its
/// soft limits.
pub fn plan_on_machine(
    folder: &RunFolder,
    meta: &RunToml,
    machine: Option<&MachineFile>,
) -> anyhow::Result<Plan> {
    let loaded = loaded_recipe(folder, meta);
    let order = derive::planned_order(folder, meta)?;
    let plan = match derive::frozen_gauge(folder)? {
        Some(settings) => Plan::gauge(&loaded, machine, &order, settings)?,
        None => Plan::for_sites(&loaded, machine, &order)?,
    };
    // A run centred earlier keeps its measured centre; one stopped before its centring
    // finished centres first.
    let (events, _) = derive::read_states(folder, meta)?;
    let plan = match (
        journalled_centring(&events),
        derive::frozen_centring(folder)?,
    ) {
        (Some(c), _) => plan.placed(c),
        (None, Some(settings)) => plan.with_centring(settings),
        (None, None) => plan,
    };
    Ok(plan.checked()?)
}

/// Runs one measuring session of `plan` on the run in `folder`, then records the run in the
/// history at `history`.
/// At the end of a finished session whose recipe shares one dispersion across the wafer:
/// fits it jointly over every site and refits every site with it, journalled as a refit
/// (all or nothing). A joint fit that cannot be made is a note; the per-site fits stand.
fn shared_dispersion_refit(
    seq: &mut Sequencer,
    folder: &RunFolder,
    meta: &RunToml,
    plan: &Plan,
    states: &[SiteState],
) -> anyhow::Result<()> {
    let (events, _) = derive::read_states(folder, meta)?;
    let timeline = ReferenceTimeline::from_events(&events);
    let attempts = super::refit::stored_attempts(states);
    let loaded = loaded_recipe(folder, meta);
    match super::refit::shared_dispersion_fits(
        folder,
        &attempts,
        &timeline,
        &plan.fitter,
        &loaded,
        &plan.reference_material,
        plan.accept(),
        &|| {},
    ) {
        Ok(fits) => {
            seq.log(Event::RefitStarted {
                time: now(),
                recipe: meta.recipe.name.clone(),
                previous: None,
                spectra: attempts.len(),
            })?;
            for e in fits {
                seq.log(e)?;
            }
            seq.log(Event::RefitFinished { time: now() })?;
        }
        Err(e) => seq.publish(RunEvent::Note(format!(
            "warning: no shared dispersion: {}",
            crate::error_text::chain_text(&e)
        )))?,
    }
    Ok(())
}

pub async fn session(
    plan: &Plan,
    folder: &RunFolder,
    meta: &RunToml,
    which: &Which,
    command: &str,
    history: &HistoryLocation,
    hooks: Hooks,
) -> anyhow::Result<SessionReport> {
    if let Some(problem) = plan.limit_problem() {
        return Err(PlanError::OutsideTravel(problem).into());
    }
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
    let todo = match (which, plan.gauge.is_some()) {
        // A gauge study goes on with the acquisitions not yet journalled.
        (Which::Missing, true) => plan.gauge_remaining(
            &states
                .iter()
                .flat_map(|s| {
                    s.attempts
                        .iter()
                        .filter(|a| a.spectrum.is_some())
                        .map(|a| (s.site.number, a.attempt))
                })
                .collect(),
        ),
        _ => plan.only(|s| match which {
            Which::Missing => !valid.get(&s.number).copied().unwrap_or(false),
            Which::Sites(n) => n.contains(&s.number),
        }),
    };
    let workers = FitWorkers::new(plan.fitter.clone(), plan.reference_material.clone());
    let mut stream = EventStream::new();
    let writer = JournalWriter::start(Journal::open(&folder.journal())?)?;
    stream.subscribe(writer.clone());
    stream.subscribe(workers.clone());
    stream.subscribe_all(hooks.subscribers);
    let scope = Scope::new(hooks.cancel);
    let mut seq = Sequencer::new(
        folder.clone(),
        stream,
        writer,
        workers,
        scope.clone(),
        plan.accept().clone(),
    )
    .with_prompt(hooks.prompt);
    for w in plan.fitter.warnings() {
        seq.publish(RunEvent::Note(format!("warning: {w}")))?;
    }
    seq.log(Event::RunStarted {
        time: now(),
        command: command.to_string(),
        sites_planned: plan.sites().count(),
    })?;
    // Spectra stored before a stop but not fitted are fitted first: no motion needed.
    let timeline = ReferenceTimeline::from_events(&events);
    for s in &states {
        for a in s.unfitted() {
            if let Some(rel) = &a.spectrum {
                seq.log(fit_stored(
                    folder,
                    s.site.number,
                    a.attempt,
                    rel,
                    &timeline,
                    &plan.fitter,
                    &plan.reference_material,
                    plan.accept(),
                ))?;
            }
        }
    }
    let outcome = if todo.sites().next().is_none() {
        Outcome::Finished
    } else {
        let machine = machine_of(meta)?;
        let opened = scope
            .guard(async {
                Ok(Bench::open_session(
                    machine.as_ref(),
                    &plan.recipe,
                    meta.run.sim_seeds(),
                    earlier_sessions,
                )
                .await?)
            })
            .await;
        match opened {
            Err(stop) => seq.stopped(None, stop).await,
            Ok(mut bench) => {
                tracing::info!(stage = %bench.stage.describe(), spectrometer = %bench.spectrometer.describe(), sites = todo.sites().count(), "{command}: bench open");
                let confirmed = if bench.is_simulated() {
                    Ok(())
                } else {
                    (hooks.confirm)(&bench.stage.describe())
                };
                let outcome = match confirmed {
                    Err(e) => return Err(e),
                    Ok(()) => {
                        seq.execute(&mut bench, &todo, |site| {
                            let n = next.entry(site).or_insert(1);
                            *n += 1;
                            *n - 1
                        })
                        .await
                    }
                };
                // The last lines exchanged with the controller say most about a stop: what
                // was in flight, and the stop sent.
                let why = match &outcome {
                    Outcome::Failed(e) => Some(crate::error_text::chain_text(e)),
                    Outcome::Interrupted => Some("interrupted".to_string()),
                    Outcome::Finished => None,
                };
                if let Some(why) = why {
                    tracing::error!(
                        "{command} stopped: {why}\nrecent G-code conversation:\n{}",
                        bench.stage.transcript().join("\n")
                    );
                }
                outcome
            }
        }
    };
    seq.flush()?;
    let (_, states) = derive::read_states(folder, meta)?;
    if matches!(outcome, Outcome::Finished) && states.iter().all(|s| !s.attempts.is_empty()) {
        if plan.fitter.shared_dispersion() {
            shared_dispersion_refit(&mut seq, folder, meta, plan, &states)?;
        }
        seq.log(Event::RunFinished { time: now() })?;
    }
    seq.flush()?;
    let rebuilt = derive::rebuild(folder)?;
    // Written by the rebuild with the other derived files.
    let gauge = match plan.gauge {
        Some(_) => Some(super::gauge::read_gauge(folder)?),
        None => None,
    };
    let history_note = super::history_entry::record(history, folder, &rebuilt.events).await;
    Ok(SessionReport {
        outcome,
        summary: rebuilt.summary,
        states,
        measured: todo.sites().map(|s| s.site.number).collect(),
        history_note,
        gauge,
    })
}
