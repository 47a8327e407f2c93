//! `isopach report RUN [--out FILE.html|FILE.pdf]`: the run's page for the process log, with
//! its PASS/FAIL verdict; exits 3 when the run fails its recipe's run limits.

use super::figures::{figures_line, verdict_code, verdict_line};
use super::output::outln;
use anyhow::Context;
use isopach::error::InputError;
use isopach::map::layout::report_page;
use isopach::map::scene::Scene;
use isopach::map::svg::escape;
use isopach::run::folder::RunFolder;
use isopach::run::report::report_input;
use std::path::{Path, PathBuf};

/// Arguments of `isopach report`.
#[derive(clap::Args, Debug)]
#[command(after_help = "Examples:
  isopach report runs/20261202-090507-W07                   # writes report.html in the run folder
  isopach report runs/20261202-090507-W07 --out W07.pdf     # a PDF page for the lot traveller")]
pub struct Args {
    /// The run folder.
    run: PathBuf,
    /// Where to write the page: .html (self-contained) or .pdf; default report.html in the
    /// run folder.
    #[arg(long)]
    out: Option<PathBuf>,
}

/// The two forms of the report.
enum Form {
    Html,
    Pdf,
}

fn form_of(path: &Path) -> Result<Form, InputError> {
    let ext = path
        .extension()
        .and_then(|e| e.to_str())
        .map(str::to_ascii_lowercase);
    match ext.as_deref() {
        Some("html" | "htm") => Ok(Form::Html),
        Some("pdf") => Ok(Form::Pdf),
        _ => Err(InputError::UnsupportedExtension {
            path: path.into(),
            allowed: ".html or .pdf",
        }),
    }
}

/// Runs the command.
pub fn run(args: Args) -> anyhow::Result<u8> {
    let folder = RunFolder::new(&args.run);
    let out = args.out.unwrap_or_else(|| folder.root.join("report.html"));
    let form = form_of(&out)?;
    let input = report_input(&folder)?;
    let scene = report_page(&input);
    let bytes = match form {
        Form::Html => html(&scene, &input.map.wafer_id).into_bytes(),
        Form::Pdf => isopach::map::pdf::write(&scene)?,
    };
    isopach::run::files::write_atomic(&out, &bytes)
        .with_context(|| format!("cannot write {}", out.display()))?;
    eprintln!("report written to {}", out.display());
    outln!(
        "wafer {}: {}",
        input.map.wafer_id,
        figures_line(&input.figures)
    );
    if let Some(line) = verdict_line(input.verdict.as_ref()) {
        outln!("  {line}");
    }
    Ok(verdict_code(input.verdict.as_ref()))
}

/// The page as one self-contained HTML file: the SVG inline, no script, nothing fetched.
fn html(scene: &Scene, wafer: &str) -> String {
    format!(
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n<title>isopach report · wafer {}</title>\n\
         <style>body{{margin:0;background:#e9e8e4}}main{{max-width:1200px;margin:0 auto}}svg{{display:block;width:100%;height:auto}}\
         @media print{{body{{background:none}}@page{{size:A4 portrait;margin:8mm}}}}</style>\n</head>\n<body>\n<main>\n{}</main>\n</body>\n</html>\n",
        escape(wafer),
        isopach::map::svg::write(scene)
    )
}
