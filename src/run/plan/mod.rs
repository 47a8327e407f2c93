//! The plan: a run as data, made from a recipe and a machine file before any port, folder or
//! process is touched.
//!
//! A [`Plan`] holds the ordered steps of a session (home, reference, then every site with its
//! wafer and stage coordinates and its anti-backlash approach; centring first when asked:
//! [`Plan::placed`] then places the sites by the measured centre), the soft-limit verdict of every
//! site, a kinematic bound on the duration and the validated fit set-up. `sites`, `check`,
//! `run --dry-run`, `run`, `resume` and `remeasure` all read the same value; the sequencer only
//! executes it. A run freezes its plan into `plan.json` so derived files read what was planned,
//! not what today's pattern code would make.

pub mod estimate;
pub mod frozen;
pub mod gauge;
pub mod order;
mod soft_limits;

pub use estimate::duration_lower_bound_s;
pub use gauge::{GaugeMode, GaugeMotion, GaugeSettings, GaugeStep};
pub use order::{nearest_neighbour, order, path_length, two_opt};

use crate::bench::centring::{Centring, CentringSettings};
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
    /// Find the wafer's centre and rotation from edge scans; the sites are placed by them.
    Centre(CentringSettings),
    /// Take dark and reference spectra.
    Reference(ReferencePlacement),
    /// Measure a site.
    Site(SiteStep),
    /// One acquisition of a gauge study (see [`gauge`]).
    Gauge(GaugeStep),
    /// The wafer is unloaded and loaded again for the `reload`-th time (a gauge study's next
    /// pass): the operator is asked when `ask` (a resumed pass already begun only places the
    /// simulated wafer again); the simulated bench places its wafer with a fresh error.
    Reload { reload: u64, ask: bool },
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
    /// Centre the wafer before the reference and the sites (`run --centre`).
    pub centring: Option<CentringSettings>,
    /// A gauge study: what it repeats (`None`: a map).
    pub gauge: Option<GaugeSettings>,
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
            centring: None,
            gauge: None,
        };
        plan.steps = plan.prelude();
        plan.steps.extend(plan.measuring_steps(sites));
        plan.duration_s = plan.estimate_s();
        Ok(plan)
    }

    /// The same plan, keeping only the sites `keep` accepts (legs recomputed).
    pub fn only(&self, keep: impl Fn(&Site) -> bool) -> Plan {
        if self.gauge.is_some() {
            let mut plan = self.clone();
            let steps = self
                .steps
                .iter()
                .filter(|s| !matches!(s, Step::Gauge(g) if !keep(&g.site.site)))
                .cloned()
                .collect();
            plan.steps = plan.with_legs(steps);
            plan.duration_s = plan.estimate_s();
            return plan;
        }
        let sites: Vec<Site> = self.sites().map(|s| s.site).filter(|s| keep(s)).collect();
        let mut plan = self.clone();
        plan.steps = self.prelude();
        plan.steps.extend(plan.measuring_steps(&sites));
        plan.duration_s = plan.estimate_s();
        plan
    }

    /// The same plan, centring the wafer first with `settings`.
    pub fn with_centring(&self, settings: CentringSettings) -> Plan {
        let mut plan = self.clone();
        plan.centring = Some(settings);
        plan.only(|_| true)
    }

    /// The same plan with the wafer placed by a measured centre and rotation: site positions,
    /// legs and their soft-limit verdicts recomputed, nothing left to centre.
    pub fn placed(&self, centring: &Centring) -> Plan {
        let mut plan = self.clone();
        plan.machine.chuck.center_mm = centring.center_mm;
        plan.machine.chuck.rotation_deg = centring.rotation_deg;
        plan.centring = None;
        plan.only(|_| true)
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

    /// The site steps in measuring order (a gauge study's acquisitions each count).
    pub fn sites(&self) -> impl Iterator<Item = &SiteStep> {
        self.steps.iter().filter_map(|s| match s {
            Step::Site(s) => Some(s),
            Step::Gauge(g) => Some(&g.site),
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

    /// The wafer → stage transform the sites are placed by.
    pub fn transform(&self) -> ChuckTransform {
        ChuckTransform::from_spec(&self.machine.chuck)
    }

    /// Home (when the machine file says how) and the reference.
    fn prelude(&self) -> Vec<Step> {
        let mut steps = Vec::new();
        if !self.machine.stage.home.is_empty() {
            steps.push(Step::Home);
        }
        steps.extend(self.centring.map(Step::Centre));
        steps.push(Step::Reference(self.placement()));
        steps
    }

    fn placement(&self) -> ReferencePlacement {
        match (
            self.machine.reference.position_mm,
            self.machine.spectrometer.kind,
        ) {
            (Some(p), _) => ReferencePlacement::Position(p),
            (None, SpectrometerKind::Simulated) => ReferencePlacement::Simulated,
            (None, _) => ReferencePlacement::ByHand,
        }
    }

    /// Whether the machine file asks for the reference again during a map and it can be
    /// taken unattended (a reference placed by hand cannot; validation says so).
    pub fn repeats_reference(&self) -> bool {
        let r = &self.machine.reference;
        (r.every_sites > 0 || r.every_min > 0.0) && self.placement() != ReferencePlacement::ByHand
    }

    /// How many references the plan takes (the first one included).
    pub fn references(&self) -> usize {
        self.steps
            .iter()
            .filter(|s| matches!(s, Step::Reference(_)))
            .count()
    }

    /// Seconds a step takes at least when the stage is at `here`, and where it leaves the
    /// stage: the moves along its legs, then settle and acquisition.
    fn step_s(&self, here: [f64; 2], step: &Step) -> (f64, [f64; 2]) {
        let st = &self.machine.stage;
        let a = self.acquire();
        let frames_s = a.integration_ms * a.averages as f64 / 1000.0;
        let (legs, per_step, end) = match step {
            Step::Home | Step::Reload { .. } => return (0.0, here),
            // Every ray takes at least one reading; how many more depends on what it finds.
            Step::Centre(c) => {
                let per_reading = a.settle_ms / 1000.0 + frames_s;
                return (c.rays as f64 * per_reading, here);
            }
            Step::Site(s) => (s.legs.clone(), a.settle_ms / 1000.0 + frames_s, s.stage_mm),
            Step::Gauge(g) => {
                let settle = if g.site.legs.is_empty() {
                    0.0
                } else {
                    a.settle_ms / 1000.0
                };
                (g.site.legs.clone(), settle + frames_s, g.site.stage_mm)
            }
            // Dark and reference: two acquisitions.
            Step::Reference(ReferencePlacement::Position(p)) => (vec![*p], 2.0 * frames_s, *p),
            Step::Reference(_) => (Vec::new(), 2.0 * frames_s, here),
        };
        let t = duration_lower_bound_s(here, &legs, st.feed_mm_min, st.accel_mm_s2, 1, per_step);
        (t, end)
    }

    /// The site steps in the order given, each with its legs from the site before, and the
    /// lamp-drift references the machine file asks for ([`Plan::with_drift_references`]).
    fn measuring_steps(&self, sites: &[Site]) -> Vec<Step> {
        let transform = self.transform();
        let limits = SoftLimits::from_spec(&self.machine.stage);
        let approach = Approach::from_spec(&self.machine.stage);
        let site_from = |step: &Step, from: [f64; 2]| match step {
            Step::Site(s) => Step::Site(SiteStep {
                legs: approach.moves(Some(from), s.stage_mm),
                ..s.clone()
            }),
            other => other.clone(),
        };
        let mut here = self.start_mm();
        let steps = sites
            .iter()
            .map(|s| {
                let stage_mm = transform.to_stage(s.x_mm, s.y_mm);
                let step = Step::Site(SiteStep {
                    site: *s,
                    stage_mm,
                    legs: Vec::new(),
                    outside: check_site(s, &transform, &limits, &approach).err(),
                });
                let step = site_from(&step, here);
                here = stage_mm;
                step
            })
            .collect();
        self.with_drift_references(steps, true, site_from)
    }

    /// `steps` (measuring steps in order, each with its legs from the step before) with the
    /// lamp-drift references the machine file asks for: before a step once `every_sites`
    /// acquisitions were taken since the last reference, or once the step would end more than
    /// `every_min` after it (by this plan's own duration estimate), and with `close` one after
    /// the last, so that every acquisition lies between two references. `from` gives a step
    /// its legs again from where a reference left the stage.
    fn with_drift_references(
        &self,
        steps: Vec<Step>,
        close: bool,
        from: impl Fn(&Step, [f64; 2]) -> Step,
    ) -> Vec<Step> {
        let every_sites = self.machine.reference.every_sites as usize;
        let every_s = self.machine.reference.every_min * 60.0;
        let repeats = self.repeats_reference();
        let reference = Step::Reference(self.placement());
        let mut here = self.start_mm();
        let (mut since_sites, mut since_s) = (0usize, 0.0);
        let mut out = Vec::with_capacity(steps.len() + 2);
        for mut step in steps {
            let (mut t, mut end) = self.step_s(here, &step);
            let due = (every_sites > 0 && since_sites >= every_sites)
                || (every_s > 0.0 && since_s + t > every_s);
            if repeats && since_sites > 0 && due {
                let (t_ref, at) = self.step_s(here, &reference);
                out.push(reference.clone());
                here = at;
                step = from(&step, here);
                (t, end) = self.step_s(here, &step);
                (since_sites, since_s) = (0, t_ref);
            }
            out.push(step);
            here = end;
            since_sites += 1;
            since_s += t;
        }
        if repeats && close && since_sites > 0 {
            out.push(reference);
        }
        out
    }

    /// From the home corner: every step in order (the moves to the reference piece and its
    /// dark and reference acquisitions, each site's legs, settle and acquisition).
    fn estimate_s(&self) -> f64 {
        let st = &self.machine.stage;
        let mut here = [st.travel_x_mm[0], st.travel_y_mm[0]];
        let mut total = 0.0;
        for step in &self.steps {
            let (t, next) = self.step_s(here, step);
            total += t;
            here = next;
        }
        total
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

    /// The kinds of the steps after the prelude: `R` reference, `S` site.
    fn shape(p: &Plan) -> String {
        p.steps
            .iter()
            .skip_while(|s| !matches!(s, Step::Site(_)))
            .map(|s| if matches!(s, Step::Site(_)) { 'S' } else { 'R' })
            .collect()
    }

    #[test]
    fn references_every_n_sites_are_steps_of_the_plan() {
        let mut m = machine::builtin_simulated();
        m.reference.every_sites = 10;
        let p = Plan::new(&recipe(), Some(&m)).unwrap();
        let want: String = (0..49)
            .map(|i| if i > 0 && i % 10 == 0 { "RS" } else { "S" })
            .collect::<String>()
            + "R";
        assert_eq!(shape(&p), want);
        assert_eq!(p.references(), 1 + 5);
        let plain = Plan::new(&recipe(), None).unwrap();
        assert!(p.duration_s > plain.duration_s, "references take time");
        // A subset (remeasure, a retry pass) gets its own references.
        assert_eq!(shape(&p.only(|s| s.number <= 12)), "SSSSSSSSSSRSSR");
    }

    #[test]
    fn references_every_t_minutes_follow_the_duration_estimate() {
        let mut m = machine::builtin_simulated();
        let plain = Plan::new(&recipe(), Some(&m)).unwrap();
        m.reference.every_min = plain.duration_s / 60.0 / 3.5;
        let p = Plan::new(&recipe(), Some(&m)).unwrap();
        // About a quarter of the map between references: three between, one closing.
        assert_eq!(p.references(), 1 + 4, "{}", shape(&p));
        // No stretch between references is estimated longer than every_min.
        let mut here = p.start_mm();
        let mut since = 0.0;
        for step in p.steps.iter().skip_while(|s| !matches!(s, Step::Site(_))) {
            let (t, next) = p.step_s(here, step);
            here = next;
            if matches!(step, Step::Reference(_)) {
                since = t;
            } else {
                since += t;
                assert!(since <= m.reference.every_min * 60.0 + 1e-9);
            }
        }
    }

    #[test]
    fn a_reference_placed_by_hand_is_not_repeated() {
        let mut m = machine::builtin_simulated();
        m.spectrometer.kind = SpectrometerKind::Command;
        m.spectrometer.command = vec!["/opt/lab/grab".into()];
        m.reference.every_sites = 5;
        let p = Plan::new(&recipe(), Some(&m)).unwrap();
        assert!(!p.repeats_reference());
        assert_eq!(p.references(), 1);
        m.reference.position_mm = Some([20.0, 20.0]);
        let p = Plan::new(&recipe(), Some(&m)).unwrap();
        assert_eq!(p.references(), 1 + 10);
        // The site after a reference is approached from the reference piece.
        let i = p
            .steps
            .iter()
            .rposition(|s| matches!(s, Step::Reference(_)))
            .unwrap();
        let after = p.steps[..i]
            .iter()
            .rposition(|s| matches!(s, Step::Reference(_)))
            .unwrap();
        let Step::Site(s) = &p.steps[after + 1] else {
            panic!()
        };
        assert_eq!(
            s.legs,
            Approach::from_spec(&m.stage).moves(Some([20.0, 20.0]), s.stage_mm)
        );
    }

    #[test]
    fn a_measured_centre_moves_every_site_and_is_checked_against_the_soft_limits() {
        let p = Plan::new(&recipe(), None)
            .unwrap()
            .with_centring(Default::default());
        assert!(matches!(p.steps[1], Step::Centre(_)), "{:?}", p.steps[1]);
        let mut c = crate::bench::centring::Centring {
            center_mm: [242.0, 239.0],
            rotation_deg: 2.0,
            radius_mm: 75.0,
            mark_angle_deg: Some(-88.0),
            edges_used: 16,
            edges_rejected: 0,
            rays_lost: 0,
            residual_mm: 0.0,
            probes: 0,
        };
        let q = p.placed(&c);
        assert!(!q.steps.iter().any(|s| matches!(s, Step::Centre(_))));
        for (a, b) in p.sites().zip(q.sites()) {
            let want = q.transform().to_stage(a.site.x_mm, a.site.y_mm);
            assert_eq!(b.stage_mm, want);
            assert_ne!(a.stage_mm, b.stage_mm);
        }
        assert!(q.limit_problem().is_none());
        // A centre that puts edge sites past the 480 mm travel is refused before any motion.
        c.center_mm = [420.0, 240.0];
        let msg = p.placed(&c).limit_problem().expect("outside the travel");
        assert!(msg.contains("outside the soft limits"), "{msg}");
    }

    #[test]
    fn homing_lines_put_a_home_step_first() {
        let mut m = machine::builtin_simulated();
        m.stage.home = vec!["$H".into()];
        let p = Plan::new(&recipe(), Some(&m)).unwrap();
        assert_eq!(p.steps[0], Step::Home);
    }
}
