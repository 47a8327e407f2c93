//! What the run report shows, gathered from a run folder: the map rows, figures and verdict
//! (through [`super::outputs::read_outputs`]), the facts of `run.toml` and the journal
//! (machine, lot, operator, times, tool version), attempts per site and the cautions. The
//! page itself is `map::layout::report_page`.

use super::derive::read_states;
use super::events::{Event, SiteState};
use super::folder::{RunFolder, RunToml};
use super::outputs::{fitted_layer_names, read_outputs, run_map_input};
use crate::map::layout::{readable_time, ReportInput};
use crate::map::stats::LayerSummary;

/// The report of the run folder at `folder`.
pub fn report_input(folder: &RunFolder) -> anyhow::Result<ReportInput> {
    let out = read_outputs(&folder.root)?;
    let (events, states) = read_states(folder, &out.meta)?;
    let finished = finished_time(&events);
    Ok(ReportInput {
        map: run_map_input(&out.rows, &out.meta, 0),
        figures: out.summary.first.clone(),
        verdict: out.summary.verdict.clone(),
        facts: facts(&out.meta, finished.as_deref()),
        attempts: states
            .iter()
            .map(|s| (s.site.number, s.attempts.len() as u32))
            .collect(),
        cautions: cautions(
            folder,
            &out.meta,
            &out.summary.first,
            &states,
            &events,
            finished.is_some(),
        ),
    })
}

/// When the run last finished: the `run-finished` of the newest session, if it got there.
fn finished_time(events: &[Event]) -> Option<String> {
    let last_start = events
        .iter()
        .rposition(|e| matches!(e, Event::RunStarted { .. }))?;
    events[last_start..].iter().rev().find_map(|e| match e {
        Event::RunFinished { time } => Some(time.clone()),
        _ => None,
    })
}

/// The machine's name, or that it was the built-in simulated bench.
fn machine_name(meta: &RunToml) -> String {
    match &meta.machine {
        None => "built-in simulated bench".into(),
        Some(t) => t
            .get("name")
            .and_then(|v| v.as_str())
            .unwrap_or("(unnamed machine file)")
            .to_string(),
    }
}

fn or_dash(s: &str) -> String {
    if s.is_empty() {
        "—".into()
    } else {
        s.to_string()
    }
}

/// The facts shown beside the verdict, in order.
fn facts(meta: &RunToml, finished: Option<&str>) -> Vec<(String, String)> {
    let r = &meta.recipe;
    let film: Vec<String> = r
        .film
        .layers
        .iter()
        .map(|l| format!("{} {} nm", l.material, l.nominal_nm))
        .collect();
    let mut recipe = r.name.clone();
    if !r.description.is_empty() {
        recipe.push_str(&format!(" — {}", r.description));
    }
    [
        ("run", meta.run.id.clone()),
        ("recipe", recipe),
        (
            "film",
            format!(
                "{} on {} ({})",
                film.join(" / "),
                r.film.substrate,
                r.film.method.as_str()
            ),
        ),
        ("machine", machine_name(meta)),
        ("wafer", or_dash(&meta.run.wafer)),
        ("lot", or_dash(&meta.run.lot)),
        ("operator", or_dash(&meta.run.operator)),
        ("started", readable_time(&meta.run.started)),
        (
            "finished",
            finished
                .map(readable_time)
                .unwrap_or_else(|| "not finished".into()),
        ),
        ("tool", format!("isopach {}", meta.run.tool_version)),
    ]
    .into_iter()
    .map(|(k, v)| (k.to_string(), v))
    .collect()
}

/// Site numbers as `3, 9, 12`.
fn numbers(sites: impl Iterator<Item = usize>) -> String {
    sites.map(|n| n.to_string()).collect::<Vec<_>>().join(", ")
}

/// What the reader should know before trusting the page.
fn cautions(
    folder: &RunFolder,
    meta: &RunToml,
    first: &LayerSummary,
    states: &[SiteState],
    events: &[Event],
    finished: bool,
) -> Vec<String> {
    let mut out = Vec::new();
    if !finished {
        out.push(format!(
            "The run is not finished: {} of {} planned sites have a valid result (isopach resume {}).",
            first.sites_valid,
            first.sites_total,
            folder.root.display()
        ));
    }
    if meta.machine.is_none() {
        out.push(
            "Measured on the built-in simulated bench: the values come from a virtual wafer."
                .into(),
        );
    }
    if !first.excluded.is_empty() {
        let list: Vec<String> = first
            .excluded
            .iter()
            .map(|e| format!("{} ({})", e.site, e.flag))
            .collect();
        out.push(format!(
            "Left out of the figures and the map: site {}.",
            list.join(", ")
        ));
    }
    let again: Vec<String> = states
        .iter()
        .filter(|s| s.attempts.len() > 1)
        .map(|s| format!("{} ({}×)", s.site.number, s.attempts.len()))
        .collect();
    if !again.is_empty() {
        out.push(format!(
            "Measured more than once (the table shows the newest valid attempt): site {}.",
            again.join(", ")
        ));
    }
    if let Some(s) = first.spec.as_ref().filter(|s| !s.sites_out.is_empty()) {
        out.push(format!(
            "Outside the spec window [{}, {}] nm (still counted in the figures): site {}.",
            s.lo_nm,
            s.hi_nm,
            numbers(s.sites_out.iter().copied())
        ));
    }
    if let Some(recipe) = events.iter().rev().find_map(|e| match e {
        Event::RefitStarted { recipe, .. } => Some(recipe.clone()),
        _ => None,
    }) {
        out.push(format!(
            "The stored spectra were fitted again after measuring (recipe {recipe})."
        ));
    }
    let layers = fitted_layer_names(&meta.recipe);
    if layers.len() > 1 {
        out.push(format!(
            "This page shows the first fitted layer ({}); every layer's figures are in summary.json and map-layerK.*.",
            layers[0]
        ));
    }
    out
}
