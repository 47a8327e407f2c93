//! Output: standard output through one door, and drawn pages to files.
//!
//! Every command prints to standard output with [`outln!`]. Once stdout is closed (the reader
//! went away: `isopach sites R | head -1`), printing stops quietly and the command finishes its
//! work and returns its own exit code: a run is never aborted halfway because a pipe closed.
//! Another write error (a full disk) also stops printing; [`finish`] reports it at the end.

use anyhow::Context;
use isopach::error::InputError;
use isopach::map::scene::Scene;
use std::io::Write;
use std::path::Path;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Mutex;

/// Set once a write to stdout failed: nothing more is printed.
static STOPPED: AtomicBool = AtomicBool::new(false);
/// The first write error that was not a closed pipe, for [`finish`].
static WRITE_ERROR: Mutex<Option<std::io::Error>> = Mutex::new(None);

/// Prints a formatted line to standard output (see the module doc for a closed stdout).
macro_rules! outln {
    ($($arg:tt)*) => {
        $crate::cli::output::print(format_args!("{}\n", format_args!($($arg)*)))
    };
}
pub(crate) use outln;

/// Writes to standard output unless an earlier write failed; a failure stops all later output.
pub fn print(args: std::fmt::Arguments) {
    if STOPPED.load(Ordering::Relaxed) {
        return;
    }
    if let Err(e) = std::io::stdout().lock().write_fmt(args) {
        stop(e);
    }
}

fn stop(e: std::io::Error) {
    STOPPED.store(true, Ordering::Relaxed);
    if e.kind() != std::io::ErrorKind::BrokenPipe {
        let mut first = WRITE_ERROR.lock().unwrap_or_else(|p| p.into_inner());
        first.get_or_insert(e);
    }
}

/// Flushes standard output; returns the first write error other than a closed pipe.
pub fn finish() -> Option<std::io::Error> {
    if !STOPPED.load(Ordering::Relaxed) {
        if let Err(e) = std::io::stdout().lock().flush() {
            stop(e);
        }
    }
    WRITE_ERROR.lock().unwrap_or_else(|p| p.into_inner()).take()
}

/// PNG pixels per layout pixel for files written by the CLI.
const PNG_SCALE: f64 = 1.0;

/// The formats a drawn page can be written in, chosen by the file's extension.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum PageFormat {
    Svg,
    Png,
}

/// The format of `path`, or an input error naming the extensions that work. Call it before
/// the work, so a wrong name is refused before anything is drawn.
pub fn page_format(path: &Path) -> Result<PageFormat, InputError> {
    let ext = path
        .extension()
        .and_then(|e| e.to_str())
        .map(str::to_ascii_lowercase);
    match ext.as_deref() {
        Some("svg") => Ok(PageFormat::Svg),
        Some("png") => Ok(PageFormat::Png),
        _ => Err(InputError::UnsupportedExtension {
            path: path.into(),
            allowed: ".svg or .png",
        }),
    }
}

/// Writes `scene` to `path` as SVG or PNG (by extension).
pub fn write_scene(path: &Path, scene: &Scene) -> anyhow::Result<()> {
    let bytes = match page_format(path)? {
        PageFormat::Svg => isopach::map::svg::write(scene).into_bytes(),
        PageFormat::Png => isopach::map::png::write(scene, PNG_SCALE)?,
    };
    isopach::run::files::write_atomic(path, &bytes)
        .with_context(|| format!("cannot write {}", path.display()))
}
