//! The CLI side of a measuring session (`run`, `resume`, `remeasure`): the confirmation before
//! real motion, the progress bar (a subscriber of the run events), the stop signals, and the
//! printed outcome. The session itself is
//! `isopach::run::measure::session`.

use super::figures::{figures_line, no_valid_site, verdict_code, verdict_line};
use super::output::outln;
use super::safety::{confirm_motion, wait_for_operator};
use indicatif::{ProgressBar, ProgressStyle};
use isopach::history::location::HistoryLocation;
use isopach::run::events::{Attempt, Event, SiteState};
use isopach::run::folder::{RunFolder, RunToml};
use isopach::run::live::{LiveFeed, LiveHub, LiveState};
use isopach::run::measure::{self, Hooks, SessionReport};
use isopach::run::plan::Plan;
use isopach::run::sequencer::Outcome;
use isopach::run::stream::{RunEvent, Subscriber, Watcher};
use isopach::site_list::site_list;
use std::io::IsTerminal;
use std::sync::Arc;

pub use isopach::run::measure::Which;

/// Where a session's results go besides its run folder.
pub struct Outlets<'a> {
    /// The runs history the session writes to.
    pub history: &'a HistoryLocation,
    /// Serve a live page at this (loopback) address; it stays up after the session until a
    /// stop signal.
    pub watch: Option<std::net::SocketAddr>,
}

/// Runs one measuring session of `plan` on the run in `folder`; returns the exit code.
pub fn session(
    plan: &Plan,
    folder: RunFolder,
    meta: RunToml,
    which: Which,
    assume_yes: bool,
    command: &str,
    outlets: Outlets,
) -> anyhow::Result<u8> {
    let Outlets { history, watch } = outlets;
    log_to(&folder);
    let runtime = tokio::runtime::Builder::new_multi_thread()
        .enable_all()
        .build()?;
    let report = runtime.block_on(async {
        let live = match watch {
            Some(addr) => Some(live_feed(&folder, addr).await?),
            None => None,
        };
        let cancel = stop_signals();
        let bar = ProgressBar::new(0);
        bar.set_style(
            ProgressStyle::with_template("{spinner} {pos}/{len} sites [{bar:30}] ETA {eta} {msg}")
                .unwrap_or_else(|_| ProgressStyle::default_bar())
                .progress_chars("=> "),
        );
        // Not a terminal (a log, a pipe, CI): plain lines instead of a bar that cannot draw.
        let display = if std::io::stderr().is_terminal() {
            progress_display(bar.clone())
        } else {
            bar.set_draw_target(indicatif::ProgressDrawTarget::hidden());
            progress_lines(seconds_per_site(plan))
        };
        let mut subscribers = vec![display];
        let url = live.as_ref().map(|(_, url)| url.clone());
        subscribers.extend(live.map(|(feed, _)| Box::new(feed) as Box<dyn Subscriber>));
        let hooks = Hooks {
            confirm: Box::new(move |port| confirm_motion(port, assume_yes)),
            prompt: Some(Arc::new(wait_for_operator)),
            subscribers,
            cancel,
        };
        let report = measure::session(plan, &folder, &meta, &which, command, history, hooks).await;
        bar.finish_and_clear();
        if let Some(url) = url {
            eprintln!("{command} ended; the live page stays at {url} until Ctrl-C");
            wait_for_stop_signal().await;
        }
        report
    });
    // A prompt still waiting on the terminal must not keep the program alive.
    runtime.shutdown_background();
    let report = report.map_err(|e| {
        e.context(format!(
            "{command} stopped before measuring; the run folder {} is kept (after fixing the cause: isopach resume {0})",
            folder.root.display()
        ))
    })?;
    Ok(print(&folder, &meta, command, report))
}

/// Serves the live page of the run in `folder` at `addr` and returns the subscriber that feeds
/// it, with the page's address (printed on stderr).
async fn live_feed(
    folder: &RunFolder,
    addr: std::net::SocketAddr,
) -> anyhow::Result<(LiveFeed, String)> {
    let state = LiveState::read(folder)?;
    let hub = LiveHub::new(&state);
    let bound = super::live_server::serve(hub.clone(), addr).await?;
    let url = format!("http://{bound}/");
    eprintln!("live view: {url}");
    Ok((LiveFeed { state, hub }, url))
}

/// A channel that becomes `true` on Ctrl-C (SIGINT), SIGTERM or SIGHUP (a closed terminal
/// or SSH session): every one of them stops the stage and keeps the run resumable.
pub(super) fn stop_signals() -> tokio::sync::watch::Receiver<bool> {
    let (tx, rx) = tokio::sync::watch::channel(false);
    tokio::spawn(async move {
        let name = wait_for_stop_signal().await;
        eprintln!("\n{name}: stopping the stage and saving what was measured…");
        let _ = tx.send(true);
        // Keep the sender alive so the stop stays asked.
        std::future::pending::<()>().await;
    });
    rx
}

#[cfg(unix)]
pub async fn wait_for_stop_signal() -> &'static str {
    use tokio::signal::unix::{signal, SignalKind};
    let (Ok(mut term), Ok(mut hup)) = (
        signal(SignalKind::terminate()),
        signal(SignalKind::hangup()),
    ) else {
        let _ = tokio::signal::ctrl_c().await;
        return "Ctrl-C";
    };
    tokio::select! {
        _ = tokio::signal::ctrl_c() => "Ctrl-C",
        _ = term.recv() => "SIGTERM",
        _ = hup.recv() => "SIGHUP",
    }
}

#[cfg(not(unix))]
pub async fn wait_for_stop_signal() -> &'static str {
    let _ = tokio::signal::ctrl_c().await;
    "Ctrl-C"
}

/// One acquisition's outcome, once: a site fitted again (with the lamp-drift reference
/// interpolated after the next one is taken) updates its message but is not counted twice.
struct Acquisitions {
    counted: std::collections::HashSet<(usize, u32)>,
}

impl Acquisitions {
    fn new() -> Acquisitions {
        Acquisitions {
            counted: Default::default(),
        }
    }

    /// The site, whether this is its acquisition's first outcome, and what to show of it.
    fn outcome(&mut self, e: &RunEvent, digits: usize) -> Option<(usize, bool, String)> {
        let (site, attempt, text) = match e {
            RunEvent::Journal(Event::SiteFitted {
                site,
                attempt,
                fit,
                valid,
                flag,
                ..
            }) => (
                *site,
                *attempt,
                if *valid {
                    format!("{:.digits$} nm", fit.thickness_nm())
                } else {
                    flag.clone()
                },
            ),
            RunEvent::Journal(Event::SiteFailed {
                site,
                attempt,
                reason,
                ..
            }) => (*site, *attempt, reason.clone()),
            _ => return None,
        };
        Some((site, self.counted.insert((site, attempt)), text))
    }
}

/// The progress bar as a subscriber of the run events.
fn progress_display(bar: ProgressBar) -> Box<dyn Subscriber> {
    let mut seen = Acquisitions::new();
    Box::new(Watcher(move |e: &RunEvent| match e {
        RunEvent::Pass { sites, .. } => bar.set_length(bar.length().unwrap_or(0) + *sites as u64),
        // A hidden bar (stderr not a terminal) drops its println: notes such as
        // "measuring again: site 12" must still reach the log.
        RunEvent::Note(n) if bar.is_hidden() => eprintln!("{n}"),
        RunEvent::Note(n) => bar.println(n),
        _ => {
            if let Some((site, first, text)) = seen.outcome(e, 1) {
                if first {
                    bar.inc(1);
                }
                bar.set_message(format!("site {site}: {text}"));
            }
        }
    }))
}

/// The plan's estimated seconds per site (its duration bound over its sites).
fn seconds_per_site(plan: &Plan) -> f64 {
    plan.duration_s / plan.sites().count().max(1) as f64
}

/// One plain line per acquisition for a log: `[5/49] site 17: 1001.23 nm · about 40 s left`,
/// the time left from the plan's estimate for the measurements still to come; a site fitted
/// again (lamp drift) is not counted twice.
fn progress_lines(per_site_s: f64) -> Box<dyn Subscriber> {
    let (mut done, mut total) = (0usize, 0usize);
    let mut seen = Acquisitions::new();
    Box::new(Watcher(move |e: &RunEvent| match e {
        RunEvent::Pass { sites, .. } => total += sites,
        RunEvent::Note(n) => eprintln!("{n}"),
        _ => {
            if let Some((site, true, text)) = seen.outcome(e, 2) {
                done += 1;
                eprintln!(
                    "[{done}/{}] site {site}: {text} · {}",
                    total.max(done),
                    time_left(total.saturating_sub(done), per_site_s)
                );
            }
        }
    }))
}

/// `about 40 s left`, `about 3 min left` for `remaining` sites, `done` for none.
fn time_left(remaining: usize, per_site_s: f64) -> String {
    let s = (remaining as f64 * per_site_s).max(1.0);
    if remaining == 0 {
        "done".into()
    } else if s < 90.0 {
        format!("about {s:.0} s left")
    } else {
        format!("about {:.0} min left", s / 60.0)
    }
}

/// Gets an existing run ready for a session (`resume`, `remeasure`, `refit`): refuses a
/// folder with links in it, then starts the log and says on stderr and in `log.txt` what was
/// recovered (a torn journal tail, an unfinished refit, leftover temp files).
pub fn prepare(folder: &RunFolder) -> anyhow::Result<()> {
    // A run folder without links, before anything is written into it.
    folder.read_run_toml()?;
    log_to(folder);
    for note in folder.prepare_session()? {
        eprintln!("note: {note}");
        tracing::warn!("{note}");
    }
    Ok(())
}

/// Sends the library's tracing log to `log.txt` in the run folder (appended per session,
/// never through a link).
fn log_to(folder: &RunFolder) {
    let Ok(file) = isopach::run::files::open_no_follow(
        std::fs::OpenOptions::new().create(true).append(true),
        &folder.root.join("log.txt"),
    ) else {
        return;
    };
    let _ = tracing_subscriber::fmt()
        .with_writer(std::sync::Mutex::new(file))
        .with_ansi(false)
        .with_env_filter(
            tracing_subscriber::EnvFilter::try_from_env("ISOPACH_LOG")
                .unwrap_or_else(|_| "info".into()),
        )
        .try_init();
}

/// Prints the outcome and figures; returns the exit code.
fn print(folder: &RunFolder, meta: &RunToml, command: &str, report: SessionReport) -> u8 {
    let f = &report.summary.first;
    if let Some(note) = &report.history_note {
        eprintln!("warning: {note}");
    }
    if report.measured.is_empty() {
        eprintln!("every site asked for already has a valid result: nothing to measure");
    }
    outln!("run {}: {}", meta.run.id, folder.root.display());
    outln!("  {}", figures_line(f));
    if command == "remeasure" {
        for state in report
            .states
            .iter()
            .filter(|s| report.measured.contains(&s.site.number))
        {
            outln!("  {}", attempts_line(state));
        }
    }
    let bad: Vec<usize> = report
        .states
        .iter()
        .filter(|s| !s.is_valid())
        .map(|s| s.site.number)
        .collect();
    if !bad.is_empty() && matches!(report.outcome, Outcome::Finished) {
        outln!(
            "  sites without a valid result: {} (isopach remeasure {} --failed)",
            site_list(bad),
            folder.root.display()
        );
    }
    if let Some(c) = f.spec.as_ref().filter(|c| !c.sites_out.is_empty()) {
        outln!(
            "  out of spec [{}, {}] nm: site {}",
            c.lo_nm,
            c.hi_nm,
            site_list(c.sites_out.iter().copied())
        );
    }
    let finished = matches!(report.outcome, Outcome::Finished);
    if let Some(line) = verdict_line(report.summary.verdict.as_ref()).filter(|_| finished) {
        outln!("  {line}");
    }
    // A gauge study: its own figures, and a gauge not fit for the spec fails acceptance.
    let gauge = report.gauge.as_ref();
    if let Some(g) = gauge {
        super::gauge::print_report(g);
    }
    let gauge_unfit = gauge.is_some_and(|g| g.capability.verdict == "not fit");
    match report.outcome {
        Outcome::Finished => match no_valid_site(f, &folder.root) {
            Some(why) => {
                eprintln!("{command} failed: {why}");
                super::exit::FAILED
            }
            None if gauge_unfit => super::exit::ACCEPT_FAILED,
            None => verdict_code(report.summary.verdict.as_ref()),
        },
        Outcome::Interrupted => {
            eprintln!(
                "stopped; resume with: isopach resume {}",
                folder.root.display()
            );
            super::exit::INTERRUPTED
        }
        Outcome::Failed(e) => {
            eprintln!(
                "run stopped: {}\nthe measurements so far are kept; after fixing the cause: isopach resume {}",
                isopach::error_text::chain_text(&e),
                folder.root.display()
            );
            super::exit::FAILED
        }
    }
}

/// A remeasured site's newest attempt beside the one before it, and which the map uses:
/// `site 7: 1006.023 nm (attempt 3; before 1006.010 nm)`.
fn attempts_line(state: &SiteState) -> String {
    let show = |a: &Attempt| match (&a.fit, a.valid) {
        (Some(fit), true) => fit
            .layers
            .first()
            .map(|l| format!("{:.3} nm", l.thickness_nm))
            .unwrap_or_else(|| "ok".into()),
        _ => a.flag.clone(),
    };
    let n = state.site.number;
    let Some((newest, earlier)) = state.attempts.split_last() else {
        return format!("site {n}: not measured");
    };
    let before = earlier
        .last()
        .map(|a| format!("; before {}", show(a)))
        .unwrap_or_default();
    let mut line = format!(
        "site {n}: {} (attempt {}{before})",
        show(newest),
        newest.attempt
    );
    if let Some(best) = state.best().filter(|b| b.attempt != newest.attempt) {
        line.push_str(&format!("; the map keeps attempt {}", best.attempt));
    }
    line
}
