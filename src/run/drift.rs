//! Lamp drift: every site normalised by the reference interpolated in time between the
//! references taken before and after it in the same session.
//!
//! The choice: a site's fit at measuring time uses the latest reference (the next one does not
//! exist yet); when the next reference is taken, the sequencer fits the sites measured since
//! the previous one again with the interpolated reference, and the newer fit supersedes the
//! first in the journal. `refit` derives the same interpolation from the journal's
//! `reference-taken` and `site-measured` times ([`ReferenceTimeline`]), so stored spectra stay
//! refittable with it. A site after the last reference of its session (no later one) uses the
//! last; references of other sessions are never mixed in (the lamp may have been off between).
//! Dark spectra are interpolated with the same weights.

use super::events::Event;
use super::folder::RunFolder;
use crate::spectrum::{read_csv, Counts, RawSpectrum, SpectrumFile};
use std::collections::BTreeMap;

/// Seconds since the Unix epoch of a journal time (RFC 3339), if it parses.
pub fn seconds(time: &str) -> Option<f64> {
    chrono::DateTime::parse_from_rfc3339(time)
        .ok()
        .map(|t| t.timestamp_millis() as f64 / 1000.0)
}

/// The weight of the later reference for a site measured at `t` between references at `t0`
/// and `t1` (linear in time, clamped to [0, 1]).
pub fn weight(t0: f64, t1: f64, t: f64) -> f64 {
    if t1 > t0 {
        ((t - t0) / (t1 - t0)).clamp(0.0, 1.0)
    } else {
        1.0
    }
}

/// `(1 − w)·a + w·b` pixel by pixel; `None` when the wavelength axes differ.
pub fn interpolate(a: &Counts, b: &Counts, w: f64) -> Option<Counts> {
    if a.wavelength_nm != b.wavelength_nm || a.counts.len() != b.counts.len() {
        return None;
    }
    Some(Counts {
        wavelength_nm: a.wavelength_nm.clone(),
        counts: a
            .counts
            .iter()
            .zip(&b.counts)
            .map(|(x, y)| (1.0 - w) * x + w * y)
            .collect(),
    })
}

/// Dark and reference spectra taken together, at a time (s since the epoch).
#[derive(Debug, Clone)]
pub struct TakenReference {
    pub t: f64,
    pub dark: Counts,
    pub reference: Counts,
}

/// `raw` with its dark and reference replaced by those interpolated at `t` between `before`
/// and `after`; `None` when their wavelength axes differ.
pub fn normalised_between(
    raw: &RawSpectrum,
    before: &TakenReference,
    after: &TakenReference,
    t: f64,
) -> Option<RawSpectrum> {
    let w = weight(before.t, after.t, t);
    Some(RawSpectrum {
        sample: raw.sample.clone(),
        dark: interpolate(&before.dark, &after.dark, w)?,
        reference: interpolate(&before.reference, &after.reference, w)?,
    })
}

/// Where a stored site attempt sits among the references of its session, from the journal.
#[derive(Debug, Default)]
pub struct ReferenceTimeline {
    /// Time, session and reference file of every `reference-taken`, in journal order.
    references: Vec<(f64, usize, String)>,
    /// Time and session of every `site-measured`, by (site, attempt).
    measured: BTreeMap<(usize, u32), (f64, usize)>,
}

impl ReferenceTimeline {
    /// Reads the times out of a run's journal events.
    pub fn from_events(events: &[Event]) -> ReferenceTimeline {
        let mut line = ReferenceTimeline::default();
        let mut session = 0;
        for e in events {
            match e {
                Event::RunStarted { .. } => session += 1,
                Event::ReferenceTaken {
                    time, reference, ..
                } => {
                    if let Some(t) = seconds(time) {
                        line.references.push((t, session, reference.clone()));
                    }
                }
                Event::SiteMeasured {
                    time,
                    site,
                    attempt,
                    ..
                } => {
                    if let Some(t) = seconds(time) {
                        line.measured.insert((*site, *attempt), (t, session));
                    }
                }
                _ => {}
            }
        }
        line
    }

    /// The reference files before and after a site attempt in its session, with its time;
    /// `None` when there is no later reference (the stored reference, the latest, stands).
    pub fn bracket(&self, site: usize, attempt: u32) -> Option<(&str, &str, f64)> {
        let &(t, session) = self.measured.get(&(site, attempt))?;
        let same = || self.references.iter().filter(|r| r.1 == session);
        let before = same().rfind(|r| r.0 <= t)?;
        let after = same().find(|r| r.0 > t)?;
        Some((&before.2, &after.2, t))
    }

    /// The stored spectrum of a site attempt, normalised by the reference interpolated at its
    /// time when a later reference of its session exists; else as stored.
    pub fn corrected(
        &self,
        folder: &RunFolder,
        site: usize,
        attempt: u32,
        raw: RawSpectrum,
    ) -> Result<RawSpectrum, String> {
        let Some((before, after, t)) = self.bracket(site, attempt) else {
            return Ok(raw);
        };
        let taken = |rel: &str| -> Result<TakenReference, String> {
            let path = folder.root.join(rel);
            let time = self
                .references
                .iter()
                .find(|r| r.2 == rel)
                .map(|r| r.0)
                .unwrap_or(t);
            match read_csv(&path) {
                // A reference file holds the reference as its sample column, with its dark.
                Ok(SpectrumFile::Counts(r)) => Ok(TakenReference {
                    t: time,
                    dark: r.dark,
                    reference: r.sample,
                }),
                Ok(SpectrumFile::Reflectance(_)) => Err(format!(
                    "{}: a reference file must hold counts, not reflectance",
                    path.display()
                )),
                Err(e) => Err(e.to_string()),
            }
        };
        let (b, a) = (taken(before)?, taken(after)?);
        normalised_between(&raw, &b, &a, t).ok_or_else(|| {
            format!("references {before} and {after} have different wavelength axes")
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn counts(v: &[f64]) -> Counts {
        Counts {
            wavelength_nm: (0..v.len()).map(|i| 500.0 + i as f64).collect(),
            counts: v.to_vec(),
        }
    }

    #[test]
    fn interpolation_is_linear_in_time_and_clamped() {
        assert_eq!(weight(10.0, 20.0, 12.5), 0.25);
        assert_eq!(weight(10.0, 20.0, 25.0), 1.0);
        assert_eq!(weight(10.0, 20.0, 5.0), 0.0);
        let c = interpolate(&counts(&[100.0, 200.0]), &counts(&[200.0, 100.0]), 0.25).unwrap();
        assert_eq!(c.counts, vec![125.0, 175.0]);
        assert!(interpolate(&counts(&[1.0]), &counts(&[1.0, 2.0]), 0.5).is_none());
    }

    #[test]
    fn a_site_is_bracketed_only_by_references_of_its_own_session() {
        let t = |s: u32| format!("2026-01-01T10:00:{s:02}.000+00:00");
        let reference = |s: u32| Event::ReferenceTaken {
            time: t(s),
            dark: format!("dark-{s}"),
            reference: format!("ref-{s}"),
        };
        let started = |s: u32| Event::RunStarted {
            time: t(s),
            command: "run".into(),
            sites_planned: 3,
        };
        let site = |s: u32, n: usize| Event::SiteMeasured {
            time: t(s),
            site: n,
            attempt: 1,
            x_mm: 0.0,
            y_mm: 0.0,
            stage_x_mm: 0.0,
            stage_y_mm: 0.0,
            spectrum: String::new(),
        };
        let events = vec![
            started(0),
            reference(1),
            site(2, 1),
            reference(5),
            site(6, 2), // after the session's last reference
            started(20),
            reference(21),
            site(22, 3),
        ];
        let line = ReferenceTimeline::from_events(&events);
        let (b, a, at) = line.bracket(1, 1).unwrap();
        assert_eq!((b, a), ("ref-1", "ref-5"));
        assert_eq!(
            weight(seconds(&t(1)).unwrap(), seconds(&t(5)).unwrap(), at),
            0.25
        );
        assert!(
            line.bracket(2, 1).is_none(),
            "no later reference in its session"
        );
        assert!(line.bracket(3, 1).is_none());
    }
}
