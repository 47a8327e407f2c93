//! `isopach compare RUN RUN... [--delta] [--per-min T] [--json] [--out FILE] [--sheet FILE]
//! [--csv] [--history URL]`; a RUN that is not a folder is looked up as a run id in the history.

use super::csv_table::{Cell, CsvTable};
use super::figures::num;
use super::output::outln;
use anyhow::bail;
use isopach::compare::{self, WaferRun};
use isopach::error::InputError;
use isopach::history::db::History;
use isopach::history::location::HistoryLocation;
use isopach::map::render::{MapInput, RenderOptions, ValueRange};
use serde_json::{json, Value};
use std::path::{Path, PathBuf};

/// Arguments of `isopach compare`.
#[derive(clap::Args, Debug)]
#[command(after_help = "Examples:
  isopach compare runs/20261202-0905-W01 runs/20261202-0931-W02 runs/20261202-0958-W03
  isopach compare runs/*-W07-pre runs/*-W07-post --delta --out delta.svg
  isopach compare before/ after/ --delta --per-min 12.5 --json      # etch rate in nm/min
  isopach compare runs/*-L2612-* --sheet lot.svg                   # maps on one colour scale
  isopach compare runs/*-L2612-* --csv > lot.csv                   # for a spreadsheet
  isopach compare 20261202-0905-W01 20261202-0931-W02 --history postgres://isopach@db.lab/isopach")]
pub struct Args {
    /// Run folders to compare (at least two, or one with --sheet); a run id that is not a
    /// folder is found through the history.
    #[arg(required = true, num_args = 1..)]
    runs: Vec<PathBuf>,
    /// Difference of two runs, second minus first (site by site, or through interpolation).
    #[arg(long)]
    delta: bool,
    /// With --delta: divide by this process time in minutes to get a rate in nm/min.
    #[arg(long, value_name = "T", requires = "delta")]
    per_min: Option<f64>,
    /// Which fitted layer (1 = top fitted layer).
    #[arg(long, default_value_t = 1)]
    layer: usize,
    /// Print JSON instead of a table.
    #[arg(long, conflicts_with = "csv")]
    json: bool,
    /// Print the per-wafer table as CSV (for a spreadsheet) instead of a table.
    #[arg(long)]
    csv: bool,
    /// With --delta: draw the delta (or rate) map to this .svg or .png file.
    #[arg(long, requires = "delta")]
    out: Option<PathBuf>,
    /// Draw every run's map on one common colour scale into this SVG file.
    #[arg(long)]
    sheet: Option<PathBuf>,
    #[command(flatten)]
    history: super::history_arg::HistoryArg,
}

/// Runs the command.
pub fn run(args: Args) -> anyhow::Result<u8> {
    check_args(&args)?;
    let layer = args.layer - 1;
    let runs: Vec<WaferRun> = run_folders(&args)?
        .iter()
        .map(|p| WaferRun::load(p))
        .collect::<Result<_, _>>()?;
    // Wafers that are not like for like are still compared, with the reason said.
    let warnings = compare::differences(&runs);
    for w in &warnings {
        eprintln!("warning: {w}");
    }
    let figures = |w: &WaferRun| w.summary.all_layers().get(layer).cloned();
    let mut wafers = Vec::new();
    for w in &runs {
        let f = figures(w).ok_or_else(|| {
            InputError::argument(format!(
                "--layer {}: run {} has {} fitted layer(s)",
                args.layer,
                w.folder.display(),
                w.summary.all_layers().len()
            ))
        })?;
        let mut v = serde_json::to_value(&f)?;
        if let Value::Object(m) = &mut v {
            m.remove("excluded");
            m.remove("radial");
            m.insert("run".into(), json!(w.meta.run.id));
            m.insert("wafer".into(), json!(w.meta.run.wafer));
            m.insert("folder".into(), json!(w.folder.display().to_string()));
        }
        wafers.push((w, f, v));
    }
    let means: Vec<f64> = wafers.iter().map(|(_, f, _)| f.mean_nm).collect();
    let w2w = compare::wafer_to_wafer(&means);
    let mut out = json!({
        "wafers": wafers.iter().map(|(_, _, v)| v.clone()).collect::<Vec<_>>(),
        "wafer_to_wafer": { "mean_nm": w2w.mean_nm, "std_nm": w2w.std_nm, "nu_pct": w2w.nu_pct, "wafers": w2w.wafers },
        "warnings": warnings,
    });
    let mut delta_text = None;
    if args.delta {
        let (a, b) = (&runs[0], &runs[1]);
        let (rows, basis) = compare::delta(a, b, layer, args.per_min);
        let (quantity, unit) = if args.per_min.is_some() {
            ("rate", "nm/min")
        } else {
            ("Δ thickness", "nm")
        };
        let summary = compare::delta_summary(&rows, &b.wafer(), quantity);
        let mut d = serde_json::to_value(&summary.first)?;
        if let Value::Object(m) = &mut d {
            m.remove("excluded");
            m.remove("radial");
            m.insert("basis".into(), serde_json::to_value(basis)?);
            m.insert("unit".into(), json!(unit));
            if let Some(t) = args.per_min {
                m.insert("per_min".into(), json!(t));
            }
        }
        out["delta"] = d;
        delta_text = Some(format!(
            "{quantity} {} − {} ({}): mean {} {unit}, 1σ {} {unit}, range {} {unit}, {} of {} sites paired",
            b.meta.run.wafer,
            a.meta.run.wafer,
            match basis {
                compare::DeltaBasis::SiteBySite => "site by site",
                compare::DeltaBasis::Interpolated => "B's sites on A's interpolated map",
            },
            num(summary.first.mean_nm),
            num(summary.first.std_nm),
            num(summary.first.range_nm),
            summary.first.sites_valid,
            summary.first.sites_total
        ));
        if let Some(path) = &args.out {
            let mut input = MapInput::thickness(b.wafer(), rows, 0, "");
            input.quantity = quantity.to_string();
            input.unit = unit.to_string();
            input.recipe = b.meta.recipe.name.clone();
            input.wafer_id = format!("{} − {}", b.meta.run.wafer, a.meta.run.wafer);
            input.time = b.meta.run.started.clone();
            write_map(path, &input, &RenderOptions::default())?;
            eprintln!("{quantity} map written to {}", path.display());
        }
    }
    if let Some(path) = &args.sheet {
        write_sheet(path, &runs, layer)?;
        eprintln!("sheet of {} maps written to {}", runs.len(), path.display());
    }
    if args.json {
        outln!("{}", serde_json::to_string_pretty(&out)?);
        return Ok(super::exit::OK);
    }
    if args.csv {
        let mut t = CsvTable::new(&[
            "wafer",
            "lot",
            "run",
            "recipe",
            "started",
            "mean_nm",
            "std_nm",
            "nu_1sigma_pct",
            "range_nm",
            "nu_range_pct",
            "min_nm",
            "max_nm",
            "sites_valid",
            "sites_total",
            "sites_in_spec",
            "folder",
        ]);
        for (w, f, _) in &wafers {
            let in_spec = f.spec.as_ref().map(|c| c.sites_in);
            let folder = w.folder.display().to_string();
            t.row([
                Cell::Text(&w.meta.run.wafer),
                Cell::Text(&w.meta.run.lot),
                Cell::Text(&w.meta.run.id),
                Cell::Text(&w.meta.recipe.name),
                Cell::Text(&w.meta.run.started),
                Cell::Number(f.mean_nm),
                Cell::Number(f.std_nm),
                Cell::Number(f.nu_1sigma_pct),
                Cell::Number(f.range_nm),
                Cell::Number(f.nu_range_pct),
                Cell::Number(f.min_nm),
                Cell::Number(f.max_nm),
                Cell::Count(f.sites_valid),
                Cell::Count(f.sites_total),
                in_spec.map_or(Cell::Text(""), Cell::Count),
                Cell::Text(&folder),
            ]);
        }
        outln!("{}", t.text().trim_end());
        return Ok(super::exit::OK);
    }
    let with_spec = wafers.iter().any(|(_, f, _)| f.spec.is_some());
    let mut head = format!(
        "{:<24} {:>10} {:>9} {:>8} {:>9} {:>7}",
        "wafer", "mean_nm", "1σ_nm", "NU_%", "range_nm", "valid"
    );
    if with_spec {
        head.push_str(&format!(" {:>8}", "in_spec"));
    }
    outln!("{head}");
    for (w, f, _) in &wafers {
        let mut line = format!(
            "{:<24} {:>10} {:>9} {:>8} {:>9} {:>3}/{:<3}",
            w.meta.run.wafer,
            num(f.mean_nm),
            num(f.std_nm),
            num(f.nu_1sigma_pct),
            num(f.range_nm),
            f.sites_valid,
            f.sites_total
        );
        if with_spec {
            let cell = f.spec.as_ref().map_or("-".to_string(), |c| {
                format!("{}/{}", c.sites_in, c.checked())
            });
            line.push_str(&format!(" {cell:>8}"));
        }
        if f.sites_valid == 0 {
            line.push_str("  no valid site");
        }
        outln!("{}", line.trim_end());
    }
    outln!(
        "wafer to wafer: mean of means {} nm, σ of means {} nm, NU {} % over {} wafers",
        num(w2w.mean_nm),
        num(w2w.std_nm),
        num(w2w.nu_pct),
        w2w.wafers
    );
    if let Some(t) = delta_text {
        outln!("{t}");
    }
    Ok(super::exit::OK)
}

/// The run folders asked for: each argument that is a folder, else the folder the history
/// (of `runs/`, or `--history`) keeps for that run id.
fn run_folders(args: &Args) -> anyhow::Result<Vec<PathBuf>> {
    let is_id = |p: &PathBuf| !p.is_dir() && p.components().count() == 1;
    if !args.runs.iter().any(is_id) {
        return Ok(args.runs.clone());
    }
    let location = args.history.location(Path::new("runs"))?;
    if !location.is_server() && !matches!(&location, HistoryLocation::Sqlite(p) if p.is_file()) {
        // No history to look in: the folder error below names the argument.
        return Ok(args.runs.clone());
    }
    super::history_arg::block_on(async {
        let mut history = History::open(&location).await?;
        let mut out = Vec::new();
        for p in &args.runs {
            if !is_id(p) {
                out.push(p.clone());
                continue;
            }
            let id = p.to_string_lossy();
            let found = history.folders_of(&id).await?;
            match found.as_slice() {
                [] => out.push(p.clone()),
                [(_, folder)] => out.push(PathBuf::from(folder)),
                many => {
                    let list: Vec<String> = many.iter().map(|(b, f)| format!("{b}: {f}")).collect();
                    return Err(InputError::argument(format!(
                        "run id {id} is in the history {location} for several benches ({}): give the run folder instead",
                        list.join("; ")
                    ))
                    .into());
                }
            }
        }
        anyhow::Ok(out)
    })?
}

/// Refuses argument combinations that cannot be compared, before any run is read.
fn check_args(args: &Args) -> Result<(), InputError> {
    let bad = |m: String| Err(InputError::argument(m));
    if args.runs.len() < 2 && args.sheet.is_none() {
        return bad(format!(
            "compare needs at least two run folders (or --sheet with one), got {}",
            args.runs.len()
        ));
    }
    if args.delta && args.runs.len() != 2 {
        return bad(format!(
            "--delta takes exactly two run folders (A then B; the delta is B − A), got {}",
            args.runs.len()
        ));
    }
    if let Some(t) = args.per_min.filter(|t| !(*t > 0.0 && t.is_finite())) {
        return bad(format!(
            "--per-min {t}: the process time must be a positive number of minutes"
        ));
    }
    if args.layer == 0 {
        return bad("--layer counts from 1".into());
    }
    Ok(())
}

/// Writes a map as SVG or PNG, chosen by the file's extension.
fn write_map(path: &Path, input: &MapInput, opts: &RenderOptions) -> anyhow::Result<()> {
    super::output::write_scene(path, &isopach::map::layout::page(input, opts))
}

/// Every run's map on one common colour scale, tiled two across, as SVG or PNG.
fn write_sheet(path: &Path, runs: &[WaferRun], layer: usize) -> anyhow::Result<()> {
    let values: Vec<f64> = runs
        .iter()
        .flat_map(|r| r.rows.iter().filter_map(|row| row.valid_value(layer)))
        .collect();
    let lo = values.iter().copied().fold(f64::INFINITY, f64::min);
    let hi = values.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    if !lo.is_finite() {
        bail!("no valid site in any run: nothing to draw");
    }
    let opts = RenderOptions {
        range: Some(ValueRange { lo, hi }),
        values: false,
        ..RenderOptions::default()
    };
    let pages = runs
        .iter()
        .map(|r| {
            isopach::map::layout::page(
                &isopach::run::outputs::run_map_input(&r.rows, &r.meta, layer),
                &opts,
            )
        })
        .collect();
    super::output::write_scene(path, &isopach::map::sheet::tile(pages, 2))
}
