//! Fuzz-style property tests of the journal: random events, then a random torn tail (a cut at
//! any byte, inside multi-byte characters too; NUL runs; garbage) or a garbage line in the
//! middle. Reading never panics and never loses a complete event before the tear; a session
//! opening the journal keeps the torn bytes beside it and appends cleanly; garbage followed by
//! good events is an error naming its line.
//!
//! Fixed seed and 128 cases in CI; a longer run:
//! `PROPTEST_CASES=20000 cargo test --test run_journal_fuzz` (add
//! `PROPTEST_RNG_SEED=N` for another seed).

use isopach::run::events::Event;
use isopach::run::journal::{self, Journal, JournalError};
use proptest::prelude::*;
use proptest::test_runner::RngSeed;
use std::path::Path;

/// The fixed seed and bounded case count of CI, unless the environment asks otherwise.
fn config() -> ProptestConfig {
    let base = ProptestConfig::default(); // reads PROPTEST_CASES and PROPTEST_RNG_SEED
    ProptestConfig {
        cases: if std::env::var_os("PROPTEST_CASES").is_some() {
            base.cases
        } else {
            128
        },
        rng_seed: if std::env::var_os("PROPTEST_RNG_SEED").is_some() {
            base.rng_seed
        } else {
            RngSeed::Fixed(0x1507_ac4e)
        },
        ..base
    }
}

/// Text with multi-byte characters, so cuts land inside them.
fn text() -> impl Strategy<Value = String> {
    prop::collection::vec(
        prop_oneof![
            Just("é".to_string()),
            Just("µm".to_string()),
            Just("日本".to_string()),
            Just("😀".to_string()),
            "[a-z ]{0,6}",
            "\\PC{0,4}",
        ],
        0..6,
    )
    .prop_map(|parts| parts.concat())
}

fn event() -> impl Strategy<Value = Event> {
    prop_oneof![
        (text(), 0usize..100_000).prop_map(|(command, sites_planned)| Event::RunStarted {
            time: "2026-12-02T10:00:00.000+00:00".into(),
            command,
            sites_planned
        }),
        (0usize..10_000, 1u32..9, -1e3f64..1e3, -1e3f64..1e3, text()).prop_map(
            |(site, attempt, x, y, spectrum)| Event::SiteMeasured {
                time: "t".into(),
                site,
                attempt,
                x_mm: x,
                y_mm: y,
                stage_x_mm: x + 1.0,
                stage_y_mm: y - 1.0,
                spectrum,
            }
        ),
        (0usize..10_000, 1u32..9, text()).prop_map(|(site, attempt, reason)| {
            Event::SiteFailed {
                time: "t".into(),
                site,
                attempt,
                reason,
            }
        }),
        text().prop_map(|reason| Event::RunStopped {
            time: "t".into(),
            reason
        }),
        (text(), proptest::option::of(text()), 0usize..500).prop_map(
            |(recipe, previous, spectra)| Event::RefitStarted {
                time: "t".into(),
                recipe,
                previous,
                spectra,
            }
        ),
    ]
}

/// A torn tail: cut `cut` bytes off the end of the last events, then append `extra`.
#[derive(Debug, Clone)]
enum Tail {
    Cut(usize),
    Nul(usize, usize),
    Garbage(usize, Vec<u8>),
}

fn tail() -> impl Strategy<Value = Tail> {
    prop_oneof![
        (1usize..400).prop_map(Tail::Cut),
        // NULs where the data never came, sometimes with newlines among them.
        (0usize..200, 1usize..600).prop_map(|(cut, n)| Tail::Nul(cut, n)),
        // Garbage that starts with a byte no JSON text has (NUL or 0xFF), no newline.
        (
            0usize..200,
            prop::sample::select(vec![0u8, 0xFF]),
            prop::collection::vec(
                any::<u8>().prop_filter("no newline", |b| *b != b'\n'),
                0..64
            )
        )
            .prop_map(|(cut, first, rest)| Tail::Garbage(cut, [vec![first], rest].concat())),
    ]
}

/// An event as it reads back from JSON (serde_json's default float parsing may differ from
/// the written value in the last bit; that is not the journal's doing).
fn read_back(e: &Event) -> Event {
    serde_json::from_str(&serde_json::to_string(e).unwrap()).unwrap()
}

/// Writes `events` through the journal; returns the file's bytes and each line's end offset.
fn write(path: &Path, events: &[Event]) -> (Vec<u8>, Vec<usize>) {
    let mut j = Journal::open(path).unwrap();
    for e in events {
        j.append(e).unwrap();
    }
    let bytes = std::fs::read(path).unwrap();
    let ends = bytes
        .iter()
        .enumerate()
        .filter(|(_, b)| **b == b'\n')
        .map(|(i, _)| i)
        .collect();
    (bytes, ends)
}

proptest! {
    #![proptest_config(config())]

    #[test]
    fn torn_tails_lose_no_complete_event(
        events in prop::collection::vec(event(), 1..12),
        tail in tail(),
        nul_lines in any::<bool>(),
    ) {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("journal.jsonl");
        let (bytes, ends) = write(&path, &events);
        let events: Vec<Event> = events.iter().map(read_back).collect();
        let (cut, extra) = match &tail {
            Tail::Cut(c) => (*c, Vec::new()),
            Tail::Nul(c, n) => {
                let mut v = vec![0u8; *n];
                if nul_lines {
                    v.iter_mut().step_by(37).skip(1).for_each(|b| *b = b'\n');
                }
                (*c, v)
            }
            Tail::Garbage(c, g) => (*c, g.clone()),
        };
        let keep = bytes.len().saturating_sub(cut);
        let torn = [&bytes[..keep], &extra[..]].concat();
        std::fs::write(&path, &torn).unwrap();
        // Complete events: those whose JSON text (newline aside) lies wholly in what is kept,
        // and is not followed on its line by garbage.
        let complete = ends
            .iter()
            .filter(|&&end| end < keep || (end == keep && extra.is_empty()))
            .count();
        let read = journal::read::<Event>(&path).unwrap();
        prop_assert_eq!(&read.events[..], &events[..complete]);
        let good_end = match complete {
            0 => 0,
            k => (ends[k - 1] + 1).min(torn.len()),
        };
        let tear = &torn[good_end..];
        prop_assert_eq!(read.torn.is_some(), !tear.iter().all(u8::is_ascii_whitespace));
        // A session opens it: the tear goes beside the journal, whole; appends go on cleanly.
        let mut j = Journal::open(&path).unwrap();
        let aside = j.torn_aside().cloned();
        j.append(&events[0]).unwrap();
        drop(j);
        let after = journal::read::<Event>(&path).unwrap();
        prop_assert!(after.torn.is_none() && after.skipped_lines.is_empty());
        prop_assert_eq!(&after.events[..complete], &events[..complete]);
        prop_assert_eq!(&after.events[complete], &events[0]);
        match (aside, read.torn) {
            (Some(a), Some(t)) => {
                prop_assert_eq!(&a.tail, &t);
                prop_assert_eq!(std::fs::read(&a.kept).unwrap(), &torn[t.offset as usize..]);
                prop_assert_eq!(journal::kept_tails(dir.path()), vec![a.kept]);
            }
            (None, None) => prop_assert!(journal::kept_tails(dir.path()).is_empty()),
            (a, t) => prop_assert!(false, "aside {:?} vs read {:?}", a, t),
        }
    }

    #[test]
    fn garbage_in_the_middle_is_an_error_naming_its_line(
        events in prop::collection::vec(event(), 2..12),
        at in any::<prop::sample::Index>(),
        first in prop::sample::select(vec![0u8, 0xFF]),
        rest in prop::collection::vec(any::<u8>().prop_filter("no newline", |b| *b != b'\n'), 0..32),
    ) {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("journal.jsonl");
        let (bytes, ends) = write(&path, &events);
        // After line `line - 1`, before at least one good event.
        let line = 1 + at.index(events.len() - 1);
        let split = if line == 1 { 0 } else { ends[line - 2] + 1 };
        let garbage = [vec![first], rest, vec![b'\n']].concat();
        let bad = [&bytes[..split], &garbage[..], &bytes[split..]].concat();
        std::fs::write(&path, &bad).unwrap();
        match journal::read::<Event>(&path) {
            Err(JournalError::Corrupt { line: l, .. }) => prop_assert_eq!(l, line),
            other => prop_assert!(false, "line {}: {:?}", line, other.map(|r| r.events.len())),
        }
        // Opening it cuts nothing.
        drop(Journal::open(&path).unwrap());
        prop_assert_eq!(std::fs::read(&path).unwrap(), bad);
    }
}
