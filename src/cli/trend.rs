//! `isopach trend [--recipe NAME] [--lot L] [--bench NAME] [--site N] [--runs DIR] [--history URL]
//! [--all-recipes] [--rebuild] [--out FILE] [--json|--csv]`.
//!
//! One recipe at a time: control limits over runs of different recipes mean nothing, so
//! without `--recipe` the newest run's recipe is charted (said on stderr) unless
//! `--all-recipes` asks for them mixed.

use super::csv_table::{Cell, CsvTable};
use super::figures::num;
use super::output::outln;
use isopach::error::InputError;
use isopach::history::db::{History, TrendPoint, TrendQuery};
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
  isopach trend --recipe oxide-150-49 --site 1      # the centre site's value, run to run
  isopach trend --recipe oxide-150-49 --csv > oxide-runs.csv        # for a spreadsheet")]
pub struct Args {
    /// Only runs of this recipe (its `name`); default: the newest run's recipe.
    #[arg(long, conflicts_with = "all_recipes")]
    recipe: Option<String>,
    /// Chart runs of every recipe together (their control limits then mix recipes).
    #[arg(long)]
    all_recipes: bool,
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
    #[arg(long, conflicts_with = "csv")]
    json: bool,
    /// Print the runs as CSV (for a spreadsheet) instead of a table.
    #[arg(long)]
    csv: bool,
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
    let (points, recipe) = one_recipe(points, &args);
    let means: Vec<f64> = points.iter().map(|p| p.mean_nm).collect();
    let nus: Vec<f64> = points.iter().map(|p| p.nu_1sigma_pct).collect();
    let (lm, sm) = control_of(&means);
    let (ln, sn) = control_of(&nus);
    if let Some(out) = &args.out {
        let title = format!(
            "run chart{}{}{}{}",
            recipe
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
                json!({"run": p.run_id, "bench": p.bench, "recipe": p.recipe, "wafer": p.wafer, "lot": p.lot, "started": p.started,
                       "spec_nm": spec_of(p),
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
    if args.csv {
        let mut t = CsvTable::new(&[
            "started",
            "bench",
            "recipe",
            "wafer",
            "lot",
            "run",
            if args.site.is_some() {
                "site_nm"
            } else {
                "mean_nm"
            },
            "nu_1sigma_pct",
            "sites_valid",
            "spec_lo_nm",
            "spec_hi_nm",
            "signals",
        ]);
        for (i, p) in points.iter().enumerate() {
            let signals = signals_text(sm.get(i), sn.get(i));
            t.row([
                Cell::Text(&p.started),
                Cell::Text(&p.bench),
                Cell::Text(&p.recipe),
                Cell::Text(&p.wafer),
                Cell::Text(&p.lot),
                Cell::Text(&p.run_id),
                Cell::Number(p.mean_nm),
                Cell::Number(p.nu_1sigma_pct),
                Cell::Count(p.sites_valid),
                Cell::Number(p.spec_lo_nm),
                Cell::Number(p.spec_hi_nm),
                Cell::Text(&signals),
            ]);
        }
        outln!("{}", t.text().trim_end());
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
    // So does the recipe column, when --all-recipes mixes them.
    let recipes = points.iter().any(|p| p.recipe != points[0].recipe);
    let recipe_cell = |r: &str| {
        if recipes {
            format!("{r:<16} ")
        } else {
            String::new()
        }
    };
    let bench_cell = |b: &str| {
        if benches {
            format!("{b:<16} ")
        } else {
            String::new()
        }
    };
    outln!(
        "{:<22} {}{}{:<16} {:<10} {:>10} {:>8}  signals",
        "started",
        bench_cell("bench"),
        recipe_cell("recipe"),
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
        let mut s = signals_text(sm.get(i), sn.get(i));
        if p.sites_valid == 0 {
            s = [s.as_str(), "no valid site"]
                .into_iter()
                .filter(|t| !t.is_empty())
                .collect::<Vec<_>>()
                .join(", ");
        }
        outln!(
            "{:<22} {}{}{:<16} {:<10} {:>10} {:>8}  {}",
            p.started.get(..19).unwrap_or(&p.started),
            bench_cell(&p.bench),
            recipe_cell(&p.recipe),
            p.wafer,
            p.lot,
            num(p.mean_nm),
            num(p.nu_1sigma_pct),
            s
        );
    }
    if let Some((lo, hi)) = chart::spec_window(&points) {
        outln!("spec window: {lo} to {hi} nm (the newest run's recipe)");
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

/// The points of one recipe: the one asked for, or the newest run's when the history holds
/// several and `--all-recipes` is not given (said on stderr); and the recipe charted.
fn one_recipe(points: Vec<TrendPoint>, args: &Args) -> (Vec<TrendPoint>, Option<String>) {
    if args.recipe.is_some() {
        return (points, args.recipe.clone());
    }
    let mut recipes: Vec<&str> = points.iter().map(|p| p.recipe.as_str()).collect();
    recipes.sort_unstable();
    recipes.dedup();
    if recipes.len() < 2 {
        let only = recipes.first().map(|r| r.to_string());
        return (points, only);
    }
    if args.all_recipes {
        eprintln!(
            "warning: charting runs of {} recipes together ({}): their control limits mix recipes",
            recipes.len(),
            recipes.join(", ")
        );
        return (points, None);
    }
    let newest = points.last().map(|p| p.recipe.clone()).unwrap_or_default();
    eprintln!(
        "the history holds runs of {} recipes ({}); charting {newest}, the newest run's \
         (give --recipe NAME for another, or --all-recipes to mix them)",
        recipes.len(),
        recipes.join(", ")
    );
    let kept = points.into_iter().filter(|p| p.recipe == newest).collect();
    (kept, Some(newest))
}

/// A run's spec window as `[lo, hi]` nm, or null.
fn spec_of(p: &TrendPoint) -> Option<[f64; 2]> {
    (p.spec_lo_nm.is_finite() && p.spec_hi_nm.is_finite()).then_some([p.spec_lo_nm, p.spec_hi_nm])
}

/// A run's control-chart signals as one short text (`mean beyond UCL, NU …`), empty if none.
fn signals_text(mean: Option<&Vec<control::Signal>>, nu: Option<&Vec<control::Signal>>) -> String {
    let mut s: Vec<String> = Vec::new();
    s.extend(
        mean.into_iter()
            .flatten()
            .map(|x| format!("mean {}", signal(*x))),
    );
    s.extend(
        nu.into_iter()
            .flatten()
            .map(|x| format!("NU {}", signal(*x))),
    );
    s.join(", ")
}
