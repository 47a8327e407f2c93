//! The plan: a run as data, made from a recipe and a machine file before any port, folder or
//! process is touched.
//!
//! A [`Plan`] holds the ordered steps of a session (home, reference, then every site with its
//! wafer and stage coordinates and its anti-backlash approach), the soft-limit verdict of every
//! site, a kinematic bound on the duration and the validated fit set-up. `sites`, `check`,
//! `run --dry-run`, `run`, `resume` and `remeasure` all read the same value; the sequencer only
//! executes it. A run freezes its plan into `plan.json` so derived files read what was planned,
//! not what today's pattern code would make.

pub mod estimate;
pub mod frozen;
pub mod order;
mod soft_limits;

pub use estimate::duration_lower_bound_s;
pub use order::{nearest_neighbour, order, path_length, two_opt};

use crate::bench::chuck::ChuckTransform;
use crate::bench::limits::{check_site, Approach, SiteOutside, SoftLimits};
use crate::bench::machine::{builtin_simulated, MachineFile, SpectrometerKind};
use crate::fit::Fitter;
use crate::recipe::schema::{AcceptSpec, AcquireSpec};
use crate::recipe::{LoadedRecipe, Site};
use std::sync::Arc;

/// Why a plan cannot be executed: the input is invalid (exit code 2), nothing was touched.
#[derive(Debug, thiserror::Error)]
pub enum PlanError {
    /// The recipe's optical set-up or the reference material cannot be resolved.
    #[error("{0}")]
    FitSetup(String),
    /// Sites (or their approach points) lie outside the soft limits.
    #[error("{0}")]
    OutsideTravel(String),
}

/// How the reference spectrum is taken.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum ReferencePlacement {
    /// The stage moves to an on-chuck reference piece at this stage position.
    Position([f64; 2]),
    /// The operator places the reference under the probe and confirms.
    ByHand,
    /// The simulated spectrometer renders its reference: nothing to place.
    Simulated,
}

/// One site of the plan.
#[derive(Debug, Clone, PartialEq)]
pub struct SiteStep {
    pub site: Site,
    /// Stage coordinates of the site, mm.
    pub stage_mm: [f64; 2],
    /// The commanded points that reach it from the previous step (approach point first when
    /// one is needed), stage frame.
    pub legs: Vec<[f64; 2]>,
    /// The soft limit this site (or its approach point) breaks, if any.
    pub outside: Option<SiteOutside>,
}

/// One step of a session, in execution order.
#[derive(Debug, Clone, PartialEq)]
pub enum Step {
    /// Run the machine file's homing lines.
    Home,
    /// Take dark and reference spectra.
    Reference(ReferencePlacement),
    /// Measure a site.
    Site(SiteStep),
}

/// A session's plan; see the module doc.
#[derive(Debug, Clone)]
pub struct Plan {
    pub recipe: LoadedRecipe,
    /// The machine file in use (the built-in simulated bench when none was given).
    pub machine: MachineFile,
    pub steps: Vec<Step>,
    /// The optical model and fit method, resolved and checked.
    pub fitter: Arc<Fitter>,
    /// Material the reference spectrum is taken on.
    pub reference_material: String,
    /// Kinematic lower bound of the duration, s (moves, settle, integration × averages).
    pub duration_s: f64,
}

impl Plan {
    /// Makes the plan of a whole map: every site of the recipe in measuring order.
    ///
    /// Fails only when the fit set-up cannot be resolved; sites outside the soft limits are
    /// recorded per step (see [`Plan::checked`]), so a dry run can still show them.
    pub fn new(recipe: &LoadedRecipe, machine: Option<&MachineFile>) -> Result<Plan, PlanError> {
        let sites = order(&recipe.recipe.pattern, &recipe.sites());
        Plan::for_sites(recipe, machine, &sites)
    }

    /// A plan over `sites` in the order given (a run's frozen order, a subset to remeasure).
    pub fn for_sites(
        recipe: &LoadedRecipe,
        machine: Option<&MachineFile>,
        sites: &[Site],
    ) -> Result<Plan, PlanError> {
        let machine = machine.cloned().unwrap_or_else(builtin_simulated);
        let fitter = Fitter::from_recipe(recipe)
            .map_err(|e| {
                PlanError::FitSetup(crate::error_text::chain_text(&anyhow::Error::new(e)))
            })?
            .with_resolution_nm(machine.spectrometer.resolution_nm);
        let reference_material = machine.reference.material.clone();
        fitter
            .reference_reflectance(&reference_material, &[fitter.window_nm()[0]])
            .map_err(|e| {
                PlanError::FitSetup(format!(
                    "reference.material = \"{reference_material}\" of machine file {}: {}",
                    machine.name,
                    crate::error_text::chain_text(&anyhow::Error::new(e))
                ))
            })?;
        let mut plan = Plan {
            recipe: recipe.clone(),
            machine,
            steps: Vec::new(),
            fitter: Arc::new(fitter),
            reference_material,
            duration_s: 0.0,
        };
        plan.steps = plan.prelude();
        plan.steps
            .extend(plan.site_steps(sites).into_iter().map(Step::Site));
        plan.duration_s = plan.estimate_s();
        Ok(plan)
    }

    /// The same plan, keeping only the sites `keep` accepts (legs recomputed).
    pub fn only(&self, keep: impl Fn(&Site) -> bool) -> Plan {
        let sites: Vec<Site> = self.sites().map(|s| s.site).filter(|s| keep(s)).collect();
        let mut plan = self.clone();
        plan.steps = self.prelude();
        plan.steps
            .extend(plan.site_steps(&sites).into_iter().map(Step::Site));
        plan.duration_s = plan.estimate_s();
        plan
    }

    /// The plan if every step lies inside the soft limits; else one message that says which
    /// bound is broken, by how much, and how to fix it.
    pub fn checked(self) -> Result<Plan, PlanError> {
        match soft_limits::verdict(&self) {
            Some(message) => Err(PlanError::OutsideTravel(message)),
            None => Ok(self),
        }
    }

    /// The soft-limit verdict in one message, if any step breaks a limit.
    pub fn limit_problem(&self) -> Option<String> {
        soft_limits::verdict(self)
    }

    /// The site steps in measuring order.
    pub fn sites(&self) -> impl Iterator<Item = &SiteStep> {
        self.steps.iter().filter_map(|s| match s {
            Step::Site(s) => Some(s),
            _ => None,
        })
    }

    /// How the reference is taken.
    pub fn reference(&self) -> ReferencePlacement {
        self.steps
            .iter()
            .find_map(|s| match s {
                Step::Reference(r) => Some(*r),
                _ => None,
            })
            .unwrap_or(ReferencePlacement::Simulated)
    }

    /// The acquisition settings (integration, averages, settle, retries).
    pub fn acquire(&self) -> &AcquireSpec {
        &self.recipe.recipe.acquire
    }

    /// The acceptance rules.
    pub fn accept(&self) -> &AcceptSpec {
        &self.recipe.recipe.accept
    }

    /// Where the stage is before the first site: the reference piece when there is one, else
    /// the home corner (travel minima), stage frame.
    pub fn start_mm(&self) -> [f64; 2] {
        let st = &self.machine.stage;
        match self.reference() {
            ReferencePlacement::Position(p) => p,
            _ => [st.travel_x_mm[0], st.travel_y_mm[0]],
        }
    }

    fn transform(&self) -> ChuckTransform {
        ChuckTransform::from_spec(&self.machine.chuck)
    }

    /// Home (when the machine file says how) and the reference.
    fn prelude(&self) -> Vec<Step> {
        let mut steps = Vec::new();
        if !self.machine.stage.home.is_empty() {
            steps.push(Step::Home);
        }
        let placement = match (
            self.machine.reference.position_mm,
            self.machine.spectrometer.kind,
        ) {
            (Some(p), _) => ReferencePlacement::Position(p),
            (None, SpectrometerKind::Simulated) => ReferencePlacement::Simulated,
            (None, _) => ReferencePlacement::ByHand,
        };
        steps.push(Step::Reference(placement));
        steps
    }

    fn site_steps(&self, sites: &[Site]) -> Vec<SiteStep> {
        let transform = self.transform();
        let limits = SoftLimits::from_spec(&self.machine.stage);
        let approach = Approach::from_spec(&self.machine.stage);
        let mut here = Some(self.start_mm());
        sites
            .iter()
            .map(|s| {
                let stage_mm = transform.to_stage(s.x_mm, s.y_mm);
                let legs = approach.moves(here, stage_mm);
                here = Some(stage_mm);
                SiteStep {
                    site: *s,
                    stage_mm,
                    legs,
                    outside: check_site(s, &transform, &limits, &approach).err(),
                }
            })
            .collect()
    }

    /// From the home corner: the move to the reference piece (when there is one), then every
    /// site's legs.
    fn estimate_s(&self) -> f64 {
        let st = &self.machine.stage;
        let a = self.acquire();
        let per_site = (a.settle_ms + a.integration_ms * a.averages as f64) / 1000.0;
        let to_reference = match self.reference() {
            ReferencePlacement::Position(p) => Some(p),
            _ => None,
        };
        let legs: Vec<[f64; 2]> = to_reference
            .into_iter()
            .chain(self.sites().flat_map(|s| s.legs.clone()))
            .collect();
        let n = self.sites().count();
        duration_lower_bound_s(
            [st.travel_x_mm[0], st.travel_y_mm[0]],
            &legs,
            st.feed_mm_min,
            st.accel_mm_s2,
            n,
            per_site,
        )
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::bench::machine;

    fn recipe() -> LoadedRecipe {
        crate::recipe::load(std::path::Path::new(concat!(
            env!("CARGO_MANIFEST_DIR"),
            "/recipes/oxide-150-49.toml"
        )))
        .unwrap()
    }

    #[test]
    fn whole_map_plan_has_reference_then_every_site_once() {
        let p = Plan::new(&recipe(), None).unwrap();
        let first_site = p
            .steps
            .iter()
            .position(|s| matches!(s, Step::Site(_)))
            .unwrap();
        assert_eq!(
            p.steps[first_site - 1],
            Step::Reference(ReferencePlacement::Simulated)
        );
        let mut numbers: Vec<usize> = p.sites().map(|s| s.site.number).collect();
        numbers.sort();
        assert_eq!(numbers, (1..=49).collect::<Vec<_>>());
        assert!(p.limit_problem().is_none());
        assert!(p.duration_s > 0.0);
    }

    #[test]
    fn subset_keeps_order_and_prelude() {
        let p = Plan::new(&recipe(), None).unwrap();
        let q = p.only(|s| s.number % 2 == 0);
        let all: Vec<usize> = p
            .sites()
            .map(|s| s.site.number)
            .filter(|n| n % 2 == 0)
            .collect();
        assert_eq!(q.sites().map(|s| s.site.number).collect::<Vec<_>>(), all);
        let prelude = |p: &Plan| p.steps.len() - p.sites().count();
        assert_eq!(prelude(&q), prelude(&p));
        assert!(q.duration_s < p.duration_s);
    }

    #[test]
    fn unknown_reference_material_is_a_plan_error() {
        let mut m = machine::builtin_simulated();
        m.reference.material = "unobtainium".into();
        let e = Plan::new(&recipe(), Some(&m)).unwrap_err();
        assert!(
            matches!(e, PlanError::FitSetup(ref s) if s.contains("unobtainium")),
            "{e}"
        );
    }

    #[test]
    fn a_simulated_spectrometer_needs_no_reference_placed_even_on_a_real_stage() {
        let mut m = machine::builtin_simulated();
        m.stage.port = "/dev/ttyACM0".into();
        assert_eq!(
            Plan::new(&recipe(), Some(&m)).unwrap().reference(),
            ReferencePlacement::Simulated
        );
        m.spectrometer.kind = SpectrometerKind::Command;
        m.spectrometer.command = vec!["/opt/lab/grab".into()];
        assert_eq!(
            Plan::new(&recipe(), Some(&m)).unwrap().reference(),
            ReferencePlacement::ByHand
        );
        m.reference.position_mm = Some([20.0, 20.0]);
        let p = Plan::new(&recipe(), Some(&m)).unwrap();
        assert_eq!(p.reference(), ReferencePlacement::Position([20.0, 20.0]));
        assert_eq!(
            p.start_mm(),
            [20.0, 20.0],
            "sites start from the reference piece"
        );
    }

    #[test]
    fn homing_lines_put_a_home_step_first() {
        let mut m = machine::builtin_simulated();
        m.stage.home = vec!["$H".into()];
        let p = Plan::new(&recipe(), Some(&m)).unwrap();
        assert_eq!(p.steps[0], Step::Home);
    }
}
