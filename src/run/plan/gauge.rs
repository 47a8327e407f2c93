//! The plan of a gauge study (`isopach gauge`): the same sites measured again and again, so
//! the bench's own precision can be read from the scatter.
//!
//! A study has `passes` passes; each pass takes fresh dark and reference spectra, then measures
//! every chosen site `repeats` times in a row, in one of three ways ([`GaugeMode`]): without
//! motion (static), leaving by `away_mm` and coming back before each repeat (dynamic), or — the
//! same as static within a pass — with the wafer unloaded and loaded again between passes
//! (reload). Every acquisition is a step with its own attempt number,
//! `(pass − 1)·repeats + repeat`, so the journal of a study is the journal of a map whose sites
//! have many attempts, and a resumed study measures exactly the acquisitions not yet journalled.

use super::{Plan, PlanError, SiteStep, Step};
use crate::bench::limits::{check_site, Approach, SiteOutside, SoftLimits};
use crate::bench::machine::MachineFile;
use crate::recipe::{LoadedRecipe, Site};
use serde::{Deserialize, Serialize};
use std::collections::BTreeSet;

/// How the repeats of a site are taken.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, clap::ValueEnum)]
#[serde(rename_all = "kebab-case")]
pub enum GaugeMode {
    /// Repeats without motion: the spectrometer's and the fit's own scatter.
    Static,
    /// Move away and back before each repeat: the stage's positioning enters.
    Dynamic,
    /// Unload and reload the wafer between passes (the operator is asked; the simulated
    /// bench places the wafer again with a fresh error).
    Reload,
}

impl GaugeMode {
    /// The mode's name as on the command line.
    pub fn as_str(&self) -> &'static str {
        match self {
            GaugeMode::Static => "static",
            GaugeMode::Dynamic => "dynamic",
            GaugeMode::Reload => "reload",
        }
    }
}

/// What a study repeats; frozen in `plan.json` (it marks the run as a gauge study).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct GaugeSettings {
    pub mode: GaugeMode,
    /// Acquisitions per site per pass.
    pub repeats: u32,
    /// Passes (each with its own reference).
    pub passes: u32,
    /// How far the stage leaves a site between dynamic repeats, mm.
    pub away_mm: f64,
}

impl GaugeSettings {
    /// The attempt number of a repeat (both from 1).
    pub fn attempt(&self, pass: u32, repeat: u32) -> u32 {
        (pass - 1) * self.repeats + repeat
    }

    /// The pass an attempt belongs to (from 1); `None` for an attempt beyond the study.
    pub fn pass_of(&self, attempt: u32) -> Option<u32> {
        let pass = (attempt.checked_sub(1)? / self.repeats.max(1)) + 1;
        (pass <= self.passes).then_some(pass)
    }
}

/// How the stage gets to a repeat.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum GaugeMotion {
    /// Move to the site (the first repeat of a site in a pass, or after a reference).
    ToSite,
    /// Stay where the previous repeat was taken: no line is sent.
    Stay,
    /// Move to this stage point, then back to the site.
    AwayAndBack([f64; 2]),
}

/// One acquisition of a gauge study.
#[derive(Debug, Clone, PartialEq)]
pub struct GaugeStep {
    /// The site, its stage position and the legs that reach it (the away point first for a
    /// dynamic repeat; none when staying).
    pub site: SiteStep,
    pub pass: u32,
    pub repeat: u32,
    /// The journal's attempt number of this acquisition.
    pub attempt: u32,
    pub motion: GaugeMotion,
}

impl Plan {
    /// The plan of a gauge study over `sites` (measured in the order given).
    pub fn gauge(
        recipe: &LoadedRecipe,
        machine: Option<&MachineFile>,
        sites: &[Site],
        settings: GaugeSettings,
    ) -> Result<Plan, PlanError> {
        let mut plan = Plan::for_sites(recipe, machine, &[])?;
        plan.gauge = Some(settings);
        let mut steps: Vec<Step> = plan
            .steps
            .iter()
            .filter(|s| matches!(s, Step::Home))
            .cloned()
            .collect();
        for pass in 1..=settings.passes {
            if pass > 1 && settings.mode == GaugeMode::Reload {
                steps.push(Step::Reload {
                    reload: u64::from(pass - 1),
                    ask: true,
                });
            }
            let mut acquisitions = Vec::new();
            for site in sites {
                for repeat in 1..=settings.repeats {
                    let motion = match (repeat, settings.mode) {
                        (1, _) => GaugeMotion::ToSite,
                        (_, GaugeMode::Dynamic) => GaugeMotion::AwayAndBack([0.0; 2]),
                        _ => GaugeMotion::Stay,
                    };
                    acquisitions.push(plan.gauge_step(site, pass, repeat, motion));
                }
            }
            steps.extend(plan.gauge_pass(acquisitions, pass == settings.passes));
        }
        plan.steps = plan.with_legs(steps);
        plan.duration_s = plan.estimate_s();
        Ok(plan)
    }

    /// One pass: its reference, then its acquisitions with the lamp-drift references the
    /// machine file asks for between them (counted in acquisitions and minutes, as in a map),
    /// and after the `last` pass's last acquisition a closing one.
    fn gauge_pass(&self, acquisitions: Vec<Step>, last: bool) -> Vec<Step> {
        let mut steps = vec![Step::Reference(self.placement())];
        let legged = self.with_legs(acquisitions);
        // Legs are made good once more by the caller; here they only time the steps.
        steps.extend(self.with_drift_references(legged, last, |s, _| s.clone()));
        steps
    }

    /// The study less the acquisitions already journalled (`done`: site and attempt): the
    /// passes left, each with its reference, the reload of a pass not begun (one begun is
    /// placed again without asking), and a move to the site before its first repeat left.
    pub fn gauge_remaining(&self, done: &BTreeSet<(usize, u32)>) -> Plan {
        let Some(settings) = self.gauge else {
            return self.clone();
        };
        let mut steps: Vec<Step> = self
            .steps
            .iter()
            .filter(|s| matches!(s, Step::Home))
            .cloned()
            .collect();
        for pass in 1..=settings.passes {
            let acquisitions: Vec<&GaugeStep> = self
                .steps
                .iter()
                .filter_map(|s| match s {
                    Step::Gauge(g) if g.pass == pass => Some(g),
                    _ => None,
                })
                .collect();
            let left: Vec<&GaugeStep> = acquisitions
                .iter()
                .copied()
                .filter(|g| !done.contains(&(g.site.site.number, g.attempt)))
                .collect();
            if left.is_empty() {
                continue;
            }
            if pass > 1 && settings.mode == GaugeMode::Reload {
                steps.push(Step::Reload {
                    reload: u64::from(pass - 1),
                    ask: left.len() == acquisitions.len(),
                });
            }
            let left = left.into_iter().map(|g| Step::Gauge(g.clone())).collect();
            steps.extend(self.gauge_pass(left, pass == settings.passes));
        }
        let mut plan = self.clone();
        plan.steps = plan.with_legs(steps);
        plan.duration_s = plan.estimate_s();
        plan
    }

    /// The acquisitions of a study in order.
    pub fn gauge_steps(&self) -> impl Iterator<Item = &GaugeStep> {
        self.steps.iter().filter_map(|s| match s {
            Step::Gauge(g) => Some(g),
            _ => None,
        })
    }

    fn gauge_step(&self, site: &Site, pass: u32, repeat: u32, motion: GaugeMotion) -> Step {
        let settings = self.gauge.expect("a gauge plan");
        Step::Gauge(GaugeStep {
            site: SiteStep {
                site: *site,
                stage_mm: self.transform().to_stage(site.x_mm, site.y_mm),
                legs: Vec::new(),
                outside: None,
            },
            pass,
            repeat,
            attempt: settings.attempt(pass, repeat),
            motion,
        })
    }

    /// The steps with the motion of every acquisition made good and its legs and soft-limit
    /// verdict computed from where the previous step left the stage: a repeat can stay only
    /// right after a repeat of the same site; a dynamic repeat leaves along +x by `away_mm`
    /// (along −x when +x would leave the travel).
    pub(super) fn with_legs(&self, steps: Vec<Step>) -> Vec<Step> {
        let settings = self.gauge.expect("a gauge plan");
        let transform = self.transform();
        let limits = SoftLimits::from_spec(&self.machine.stage);
        let approach = Approach::from_spec(&self.machine.stage);
        let mut here = self.start_mm();
        let mut previous: Option<usize> = None;
        let mut out = Vec::with_capacity(steps.len());
        for step in steps {
            let Step::Gauge(mut g) = step else {
                // A reference taken where the stage stands (simulated, or the lamp-drift
                // check of a spectrometer that needs no move) leaves a static repeat in place.
                if let Step::Reference(super::ReferencePlacement::Position(p)) = step {
                    here = p;
                    previous = None;
                } else if !matches!(step, Step::Reference(_)) {
                    previous = None;
                }
                out.push(step);
                continue;
            };
            let site = g.site.site;
            let target = g.site.stage_mm;
            if previous != Some(site.number) {
                g.motion = GaugeMotion::ToSite;
            } else if matches!(g.motion, GaugeMotion::AwayAndBack(_)) {
                g.motion = GaugeMotion::AwayAndBack(away_point(target, settings.away_mm, &limits));
            }
            let mut outside = check_site(&site, &transform, &limits, &approach).err();
            g.site.legs = match g.motion {
                GaugeMotion::ToSite => approach.moves(Some(here), target),
                GaugeMotion::Stay => Vec::new(),
                GaugeMotion::AwayAndBack(away) => {
                    if let Err(v) = limits.check(away) {
                        outside = outside.or(Some(SiteOutside {
                            site: site.number,
                            wafer_mm: [site.x_mm, site.y_mm],
                            stage_mm: away,
                            approach: false,
                            violation: v,
                        }));
                    }
                    let mut legs = vec![away];
                    legs.extend(approach.moves(Some(away), target));
                    legs
                }
            };
            g.site.outside = outside;
            here = target;
            previous = Some(site.number);
            out.push(Step::Gauge(g));
        }
        out
    }
}

/// Where a dynamic repeat goes between acquisitions: `away_mm` along +x, or along −x when +x
/// would leave the travel.
fn away_point(target: [f64; 2], away_mm: f64, limits: &SoftLimits) -> [f64; 2] {
    let plus = [target[0] + away_mm, target[1]];
    if limits.check(plus).is_ok() {
        plus
    } else {
        [target[0] - away_mm, target[1]]
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::run::plan::ReferencePlacement;

    fn recipe() -> LoadedRecipe {
        crate::recipe::load(std::path::Path::new(concat!(
            env!("CARGO_MANIFEST_DIR"),
            "/recipes/oxide-150-49.toml"
        )))
        .unwrap()
    }

    fn settings(mode: GaugeMode) -> GaugeSettings {
        GaugeSettings {
            mode,
            repeats: 3,
            passes: 2,
            away_mm: 10.0,
        }
    }

    fn sites() -> Vec<Site> {
        recipe().sites().into_iter().take(2).collect()
    }

    /// `R` reference, `L` reload, `T` to site, `S` stay, `A` away and back.
    fn shape(p: &Plan) -> String {
        p.steps
            .iter()
            .filter_map(|s| match s {
                Step::Reference(_) => Some('R'),
                Step::Reload { .. } => Some('L'),
                Step::Gauge(g) => Some(match g.motion {
                    GaugeMotion::ToSite => 'T',
                    GaugeMotion::Stay => 'S',
                    GaugeMotion::AwayAndBack(_) => 'A',
                }),
                _ => None,
            })
            .collect()
    }

    #[test]
    fn each_mode_repeats_every_site_in_every_pass() {
        let r = recipe();
        let p = Plan::gauge(&r, None, &sites(), settings(GaugeMode::Static)).unwrap();
        assert_eq!(shape(&p), "RTSSTSSRTSSTSS");
        let attempts: Vec<u32> = p.gauge_steps().map(|g| g.attempt).collect();
        assert_eq!(attempts, [1, 2, 3, 1, 2, 3, 4, 5, 6, 4, 5, 6]);
        assert!(p
            .gauge_steps()
            .all(|g| g.motion != GaugeMotion::Stay || g.site.legs.is_empty()));
        let p = Plan::gauge(&r, None, &sites(), settings(GaugeMode::Reload)).unwrap();
        assert_eq!(shape(&p), "RTSSTSSLRTSSTSS");
        let p = Plan::gauge(&r, None, &sites(), settings(GaugeMode::Dynamic)).unwrap();
        assert_eq!(shape(&p), "RTAATAARTAATAA");
        for g in p.gauge_steps() {
            if let GaugeMotion::AwayAndBack(a) = g.motion {
                let d = (a[0] - g.site.stage_mm[0]).hypot(a[1] - g.site.stage_mm[1]);
                assert!((d - 10.0).abs() < 1e-9);
                assert_eq!(g.site.legs[0], a);
                assert_eq!(*g.site.legs.last().unwrap(), g.site.stage_mm);
            }
        }
        assert!(p.limit_problem().is_none());
        assert_eq!(p.reference(), ReferencePlacement::Simulated);
    }

    #[test]
    fn a_resumed_study_measures_only_what_is_missing() {
        let r = recipe();
        let p = Plan::gauge(&r, None, &sites(), settings(GaugeMode::Reload)).unwrap();
        let first = sites()[0].number;
        let second = sites()[1].number;
        // Killed after the first pass and one repeat of the second pass's first site.
        let mut done: BTreeSet<(usize, u32)> = (1..=3).map(|a| (first, a)).collect();
        done.extend((1..=3).map(|a| (second, a)));
        done.insert((first, 4));
        let q = p.gauge_remaining(&done);
        assert_eq!(
            shape(&q),
            "LRTSTSS",
            "the reload is placed again, not asked"
        );
        let after_home = q.steps.iter().find(|s| !matches!(s, Step::Home));
        assert!(matches!(
            after_home,
            Some(Step::Reload {
                reload: 1,
                ask: false
            })
        ));
        let attempts: Vec<(usize, u32)> = q
            .gauge_steps()
            .map(|g| (g.site.site.number, g.attempt))
            .collect();
        assert_eq!(
            attempts,
            [
                (first, 5),
                (first, 6),
                (second, 4),
                (second, 5),
                (second, 6)
            ]
        );
        let all: BTreeSet<(usize, u32)> = p
            .gauge_steps()
            .map(|g| (g.site.site.number, g.attempt))
            .collect();
        assert_eq!(p.gauge_remaining(&all).gauge_steps().count(), 0);
    }

    #[test]
    fn lamp_drift_references_come_between_repeats_as_in_a_map() {
        let r = recipe();
        let mut m = crate::bench::machine::builtin_simulated();
        m.reference.every_sites = 4;
        let p = Plan::gauge(&r, Some(&m), &sites(), settings(GaugeMode::Static)).unwrap();
        // Each pass: a reference, then one after every fourth acquisition; a simulated one
        // does not move the stage, so the repeat after it stays; one closing reference after
        // the last pass.
        assert_eq!(shape(&p), "RTSSTRSSRTSSTRSSR");
        let resumed = p.gauge_remaining(&BTreeSet::new());
        assert_eq!(
            shape(&resumed),
            shape(&p),
            "a resumed study keeps the cadence"
        );
        // A reference piece at a stage position: the repeat after it returns to the site.
        m.reference.position_mm = Some([20.0, 20.0]);
        let p = Plan::gauge(&r, Some(&m), &sites(), settings(GaugeMode::Static)).unwrap();
        assert_eq!(shape(&p), "RTSSTRTSRTSSTRTSR");
        assert!(
            p.duration_s
                > Plan::gauge(&r, None, &sites(), settings(GaugeMode::Static))
                    .unwrap()
                    .duration_s
        );
    }

    #[test]
    fn attempts_map_back_to_passes() {
        let s = settings(GaugeMode::Static);
        assert_eq!(s.pass_of(s.attempt(2, 3)), Some(2));
        assert_eq!(s.pass_of(1), Some(1));
        assert_eq!(s.pass_of(7), None);
        assert_eq!(s.pass_of(0), None);
    }
}
