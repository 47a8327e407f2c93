//! `isopach trend [--recipe NAME] [--lot L] [--bench NAME] [--site N] [--runs DIR] [--history URL]
//! [--rebuild] [--out FILE] [--json]`.

use super::figures::num;
use super::output::outln;
use isopach::error::InputError;
use isopach::history::db::{History, TrendQuery};
use isopach::history::{chart, control};
use isopach::run::history_entry;
use serde_json::json;
use std::path::PathBuf;

/// Arguments of `isopach trend`.
#[derive(clap::Args, Debug)]
#[command(after_help = "Examples:
  isopach trend --recipe oxide-150-49
  isopach trend --recipe oxide-150-49 --lot L2612 --out trend.svg
  isopach trend --rebuild                 # re-index every run folder under runs/
  isopach trend --history postgres://isopach@db.lab/isopach --bench bench-b
  isopach trend --recipe oxide-150-49 --site 1      # the centre site's value, run to run")]
pub struct Args {
    /// Only runs of this recipe (its `name`).
    #[arg(long)]
    recipe: Option<String>,
    /// Only runs of this lot.
    #[arg(long)]
    lot: Option<String>,
    /// Only runs measured on this bench (its machine file's `name`).
    #[arg(long)]
    bench: Option<String>,
    /// Follow one site's value instead of the layer's mean.
    #[arg(long, value_name = "N")]
    site: Option<usize>,
    /// The folder holding the run folders (and, by default, the history database).
    #[arg(long, default_value = "runs")]
    runs: PathBuf,
    #[command(flatten)]
    history: super::history_arg::HistoryArg,
    /// Rebuild this runs folder's runs in the history from its run folders first.
    #[arg(long)]
    rebuild: bool,
    /// Which fitted layer (1 = top fitted layer).
    #[arg(long, default_value_t = 1)]
    layer: usize,
    /// Draw the run chart to this .svg or .png file.
    #[arg(long)]
    out: Option<PathBuf>,
    /// Print JSON instead of a table.
    #[arg(long)]
    json: bool,
}

/// Runs the command.
pub fn run(args: Args) -> anyhow::Result<u8> {
    let layer = args
        .layer
        .checked_sub(1)
        .ok_or_else(|| InputError::argument("--layer counts from 1"))?;
    let location = args.history.location(&args.runs)?;
    // A server history needs no runs folder, unless one is to be rebuilt into it.
    if (args.rebuild || !location.is_server()) && !args.runs.is_dir() {
        return Err(InputError::argument(format!(
            "no runs folder {} (give --runs DIR)",
            args.runs.display()
        ))
        .into());
    }
    let query = TrendQuery {
        layer,
        recipe: args.recipe.clone(),
        lot: args.lot.clone(),
        bench: args.bench.clone(),
        site: args.site,
    };
    let points = super::history_arg::block_on(async {
        if args.rebuild {
            let (n, skipped) = history_entry::rebuild_history(&args.runs, &location).await?;
            eprintln!(
                "history {location} rebuilt from {n} run folder(s) in {}",
                args.runs.display()
            );
            for (folder, why) in skipped {
                eprintln!("  skipped {}: {why}", folder.display());
            }
        }
        anyhow::Ok(History::open(&location).await?.trend(&query).await?)
    })??;
    let means: Vec<f64> = points.iter().map(|p| p.mean_nm).collect();
    let nus: Vec<f64> = points.iter().map(|p| p.nu_1sigma_pct).collect();
    let (lm, sm) = control_of(&means);
    let (ln, sn) = control_of(&nus);
    if let Some(out) = &args.out {
        let title = format!(
            "run chart{}{}{}{}",
            args.recipe
                .as_deref()
                .map(|r| format!(" — {r}"))
                .unwrap_or_default(),
            args.lot
                .as_deref()
                .map(|l| format!(", lot {l}"))
                .unwrap_or_default(),
            args.bench
                .as_deref()
                .map(|b| format!(", bench {b}"))
                .unwrap_or_default(),
            args.site.map(|n| format!(", site {n}")).unwrap_or_default()
        );
        super::output::write_scene(out, &chart::chart(&points, &title))?;
        eprintln!("run chart written to {}", out.display());
    }
    if args.json {
        let rows: Vec<_> = points
            .iter()
            .enumerate()
            .map(|(i, p)| {
                json!({"run": p.run_id, "bench": p.bench, "wafer": p.wafer, "lot": p.lot, "started": p.started,
                       "mean_nm": p.mean_nm, "nu_1sigma_pct": p.nu_1sigma_pct, "sites_valid": p.sites_valid,
                       "mean_signals": sm.get(i), "nu_signals": sn.get(i)})
            })
            .collect();
        outln!(
            "{}",
            serde_json::to_string_pretty(
                &json!({"runs": rows, "mean_limits": lm, "nu_limits": ln})
            )?
        );
        return Ok(super::exit::OK);
    }
    if points.is_empty() {
        outln!(
            "no runs in the history{}",
            if args.rebuild { "" } else { " (try --rebuild)" }
        );
        return Ok(super::exit::OK);
    }
    // The bench column appears when the runs come from more than one bench.
    let benches = points.iter().any(|p| p.bench != points[0].bench);
    let bench_cell = |b: &str| {
        if benches {
            format!("{b:<16} ")
        } else {
            String::new()
        }
    };
    outln!(
        "{:<22} {}{:<16} {:<10} {:>10} {:>8}  signals",
        "started",
        bench_cell("bench"),
        "wafer",
        "lot",
        if args.site.is_some() {
            "site_nm"
        } else {
            "mean_nm"
        },
        "NU_%"
    );
    for (i, p) in points.iter().enumerate() {
        let mut s: Vec<String> = Vec::new();
        s.extend(
            sm.get(i)
                .into_iter()
                .flatten()
                .map(|x| format!("mean {}", signal(*x))),
        );
        s.extend(
            sn.get(i)
                .into_iter()
                .flatten()
                .map(|x| format!("NU {}", signal(*x))),
        );
        if p.sites_valid == 0 {
            s.push("no valid site".into());
        }
        outln!(
            "{:<22} {}{:<16} {:<10} {:>10} {:>8}  {}",
            p.started.get(..19).unwrap_or(&p.started),
            bench_cell(&p.bench),
            p.wafer,
            p.lot,
            num(p.mean_nm),
            num(p.nu_1sigma_pct),
            s.join(", ")
        );
    }
    for (name, l) in [("mean", lm), ("NU", ln)] {
        if let Some(l) = l {
            outln!(
                "{name}: centre {:.3}, LCL {:.3}, UCL {:.3} (MR̄ {:.3})",
                l.center,
                l.lcl,
                l.ucl,
                l.mr_bar
            );
        }
    }
    Ok(super::exit::OK)
}

/// I-MR limits and each point's signals, over the runs that have the figure (a run with no
/// valid site has no mean and stays out of the limits); no signals without limits.
fn control_of(values: &[f64]) -> (Option<control::ControlLimits>, Vec<Vec<control::Signal>>) {
    let present: Vec<usize> = (0..values.len())
        .filter(|&i| values[i].is_finite())
        .collect();
    let xs: Vec<f64> = present.iter().map(|&i| values[i]).collect();
    let Some(limits) = control::limits(&xs) else {
        return (None, Vec::new());
    };
    let mut signals = vec![Vec::new(); values.len()];
    for (i, s) in present.into_iter().zip(control::signals(&xs, &limits)) {
        signals[i] = s;
    }
    (Some(limits), signals)
}

fn signal(s: control::Signal) -> &'static str {
    match s {
        control::Signal::AboveUcl => "above UCL",
        control::Signal::BelowLcl => "below LCL",
        control::Signal::Jump => "jump",
    }
}
