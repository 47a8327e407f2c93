//! The measuring session shared by `run`, `resume` and `remeasure`: open the bench, check the
//! plan against the soft limits, confirm real motion, measure with a progress bar, stop cleanly
//! on Ctrl-C, rebuild the derived files.

use super::safety::{confirm_motion, wait_for_operator};
use anyhow::Context;
use indicatif::{ProgressBar, ProgressStyle};
use isopach::bench::{Bench, MachineFile};
use isopach::fit::Fitter;
use isopach::recipe::Site;
use isopach::run::derive::{self, planned_sites};
use isopach::run::events::{now, Event};
use isopach::run::folder::{RunFolder, RunToml};
use isopach::run::plan;
use isopach::run::refit::fit_stored;
use isopach::run::sequencer::{Outcome, Progress, Sequencer};
use isopach::run::session::loaded_recipe;
use std::collections::BTreeMap;
use std::sync::Arc;

/// Which sites a session measures.
#[derive(Debug, Clone)]
pub enum Which {
    /// Every planned site without a valid result (a new run, or `resume`).
    Missing,
    /// These site numbers (`remeasure --site`).
    Sites(Vec<usize>),
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

/// Runs one measuring session on the run in `folder`; returns the exit code.
pub fn session(
    folder: RunFolder,
    meta: RunToml,
    which: Which,
    assume_yes: bool,
    command: &str,
) -> anyhow::Result<u8> {
    let runtime = tokio::runtime::Builder::new_multi_thread()
        .enable_all()
        .build()?;
    runtime.block_on(session_async(folder, meta, which, assume_yes, command))
}

async fn session_async(
    folder: RunFolder,
    meta: RunToml,
    which: Which,
    assume_yes: bool,
    command: &str,
) -> anyhow::Result<u8> {
    let loaded = loaded_recipe(&folder, &meta);
    let fitter = Arc::new(Fitter::from_recipe(&loaded)?);
    for w in fitter.warnings() {
        eprintln!("warning: {w}");
    }
    let machine = machine_of(&meta)?;
    let plan_sites = plan::order(&meta.recipe.pattern, &planned_sites(&meta));
    let (_, states) = derive::read_states(&folder, &meta)?;
    let valid: BTreeMap<usize, bool> = states
        .iter()
        .map(|s| (s.site.number, s.is_valid()))
        .collect();
    let mut next: BTreeMap<usize, u32> = states
        .iter()
        .map(|s| (s.site.number, s.next_attempt()))
        .collect();
    let todo: Vec<Site> = match &which {
        Which::Missing => plan_sites
            .iter()
            .filter(|s| !valid.get(&s.number).copied().unwrap_or(false))
            .copied()
            .collect(),
        Which::Sites(n) => plan_sites
            .iter()
            .filter(|s| n.contains(&s.number))
            .copied()
            .collect(),
    };
    let (cancel_tx, cancel_rx) = tokio::sync::watch::channel(false);
    let mut seq = Sequencer::new(
        folder.clone(),
        &meta,
        fitter.clone(),
        reference_material(&machine),
        cancel_rx,
    )?;
    seq.log(&Event::RunStarted {
        time: now(),
        command: command.to_string(),
        sites_planned: plan_sites.len(),
    })?;
    refit_unfitted(&mut seq, &folder, &states, &fitter, &meta, &machine)?;
    if todo.is_empty() {
        eprintln!("every planned site already has a valid result: nothing to measure");
        return finish(&folder, &meta, &mut seq, Outcome::Finished);
    }
    let mut bench = Bench::open(machine.as_ref(), &loaded, meta.run.seed).await?;
    bench.check_plan(&todo)?;
    if !bench.is_simulated() {
        confirm_motion(&bench.stage.describe(), assume_yes)?;
    }
    tokio::spawn(async move {
        if tokio::signal::ctrl_c().await.is_ok() {
            eprintln!("\nCtrl-C: stopping the stage and saving what was measured…");
            let _ = cancel_tx.send(true);
        }
    });
    let bar = ProgressBar::new(todo.len() as u64);
    bar.set_style(
        ProgressStyle::with_template("{spinner} site {pos}/{len} [{bar:30}] ETA {eta} {msg}")
            .unwrap_or_else(|_| ProgressStyle::default_bar())
            .progress_chars("=> "),
    );
    let pb = bar.clone();
    let mut seq = seq.on_progress(move |p| match p {
        Progress::Pass { pass, sites } if pass > 0 => {
            pb.set_length(pb.length().unwrap_or(0) + sites as u64);
        }
        Progress::Pass { .. } => {}
        Progress::Site {
            site,
            thickness_nm,
            valid,
            flag,
            ..
        } => {
            pb.inc(1);
            pb.set_message(if valid {
                format!("site {site}: {thickness_nm:.1} nm")
            } else {
                format!("site {site}: {flag}")
            });
        }
        Progress::Note(n) => pb.println(n),
    });
    if !bench.is_simulated() {
        seq = seq.with_prompt(Box::new(wait_for_operator));
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
    bar.finish_and_clear();
    finish(&folder, &meta, &mut seq, outcome)
}

/// The material the reference spectrum is taken on.
pub fn reference_material(machine: &Option<MachineFile>) -> String {
    machine
        .as_ref()
        .map(|m| m.reference.material.clone())
        .unwrap_or_else(|| {
            isopach::bench::machine::builtin_simulated()
                .reference
                .material
        })
}

/// Fits spectra that were stored but not fitted before a stop (no motion needed).
fn refit_unfitted(
    seq: &mut Sequencer,
    folder: &RunFolder,
    states: &[isopach::run::events::SiteState],
    fitter: &Fitter,
    meta: &RunToml,
    machine: &Option<MachineFile>,
) -> anyhow::Result<()> {
    let material = reference_material(machine);
    for s in states {
        for a in s.unfitted() {
            let Some(rel) = &a.spectrum else { continue };
            let event = fit_stored(
                folder,
                s.site.number,
                a.attempt,
                rel,
                fitter,
                &material,
                &meta.recipe.accept,
            );
            seq.log(&event)?;
        }
    }
    Ok(())
}

/// Journals the end, rebuilds the derived files and prints the outcome.
fn finish(
    folder: &RunFolder,
    meta: &RunToml,
    seq: &mut Sequencer,
    outcome: Outcome,
) -> anyhow::Result<u8> {
    let (_, states) = derive::read_states(folder, meta)?;
    let all_valid = states.iter().all(|s| s.is_valid());
    let all_tried = states.iter().all(|s| !s.attempts.is_empty());
    if matches!(outcome, Outcome::Finished) && all_tried {
        seq.log(&Event::RunFinished { time: now() })?;
    }
    let summary = derive::rebuild(folder)?;
    let f = &summary.first;
    println!("run {}: {}", meta.run.id, folder.root.display());
    println!(
        "  {} of {} sites valid; mean {:.2} nm, 1σ {:.2} nm ({:.2} %), range {:.2} nm ({:.2} %)",
        f.sites_valid,
        f.sites_total,
        f.mean_nm,
        f.std_nm,
        f.nu_1sigma_pct,
        f.range_nm,
        f.nu_range_pct
    );
    if !all_valid {
        let bad: Vec<String> = states
            .iter()
            .filter(|s| !s.is_valid())
            .map(|s| s.site.number.to_string())
            .collect();
        println!(
            "  sites without a valid result: {} (isopach remeasure {} --failed)",
            bad.join(", "),
            folder.root.display()
        );
    }
    if let Some([lo, hi]) = meta.recipe.accept.spec_nm {
        let out: Vec<String> = states
            .iter()
            .filter_map(|s| {
                let fit = s.best()?.fit.as_ref()?;
                (s.is_valid()
                    && isopach::run::events::in_spec(fit, &meta.recipe.accept) == Some(false))
                .then(|| s.site.number.to_string())
            })
            .collect();
        if !out.is_empty() {
            println!("  out of spec [{lo}, {hi}] nm: site {}", out.join(", "));
        }
    }
    match outcome {
        Outcome::Finished => Ok(super::exit::OK),
        Outcome::Interrupted => {
            eprintln!(
                "stopped; resume with: isopach resume {}",
                folder.root.display()
            );
            Ok(super::exit::INTERRUPTED)
        }
        Outcome::Failed(e) => {
            eprintln!("run stopped: {e:#}\nthe measurements so far are kept; after fixing the cause: isopach resume {}", folder.root.display());
            Ok(super::exit::FAILED)
        }
    }
}
