//! Assembling a bench from a machine file (or the built-in simulated one) for a recipe: the
//! stage, the spectrometer, the wafer→stage transform and the soft limits, as the sequencer
//! and the CLI use them.

use super::chuck::ChuckTransform;
use super::helper_spectrometer::HelperSpectrometer;
use super::limits::{check_site, Approach, SiteOutside, SoftLimits};
use super::machine::{builtin_simulated, MachineFile, SpectrometerKind};
use super::sim::clock::SimClock;
use super::sim::controller::VirtualConfig;
use super::sim::placement::Placement;
use super::sim::server::spawn_duplex;
use super::sim::spectrometer::VirtualSpectrometer;
use super::sim::wafer::{BareSample, VirtualWafer};
use super::spectrometer::{CommandSpectrometer, Spectrometer};
use super::stage::{GcodeStage, Stage, StageError};
use super::transport::open_serial;
use crate::optics::{MaterialLibrary, OpticsError};
use crate::recipe::{LoadedRecipe, Site};
use std::sync::{Arc, Mutex};

/// Why a bench could not be opened or used.
#[derive(Debug, thiserror::Error)]
pub enum BenchError {
    #[error(transparent)]
    Stage(#[from] StageError),
    #[error("cannot build the simulated wafer or reference: {0}")]
    Optics(#[from] OpticsError),
    #[error("{} site(s) lie outside the soft limits; nothing was sent:\n{}", .0.len(), list(.0))]
    OutsideTravel(Vec<SiteOutside>),
    #[error("site {site}: {source}")]
    Site { site: usize, source: StageError },
}

fn list(v: &[SiteOutside]) -> String {
    v.iter()
        .map(|s| format!("  {s}"))
        .collect::<Vec<_>>()
        .join("\n")
}

/// Connects to the stage of a machine file: the virtual controller (in-process, in the
/// clock's virtual time) when its port is `"simulated"`, else the serial port.
pub async fn open_stage(m: &MachineFile, clock: SimClock) -> Result<Box<dyn Stage>, StageError> {
    open_stage_with(m, clock, VirtualConfig::from_machine(m)).await
}

/// [`open_stage`], the virtual controller (when the port is `"simulated"`) built as `cfg` says.
pub async fn open_stage_with(
    m: &MachineFile,
    clock: SimClock,
    cfg: VirtualConfig,
) -> Result<Box<dyn Stage>, StageError> {
    Ok(if m.stage_is_simulated() {
        let stream = spawn_duplex(cfg, clock);
        Box::new(GcodeStage::connect(stream, &m.stage, "simulated").await?)
    } else {
        let port = open_serial(&m.stage.port, m.stage.baud)?;
        Box::new(GcodeStage::connect(port, &m.stage, &m.stage.port).await?)
    })
}

/// A stage and a spectrometer, with the geometry that ties the wafer to the stage.
pub struct Bench {
    pub stage: Box<dyn Stage>,
    pub spectrometer: Box<dyn Spectrometer>,
    pub transform: ChuckTransform,
    pub limits: SoftLimits,
    pub approach: Approach,
    /// The machine file in use (the built-in one when none was given).
    pub machine: MachineFile,
    simulated_stage: bool,
    clock: SimClock,
    wafer: Option<Arc<VirtualWafer>>,
    /// Where the virtual wafer really sits (its seeded placement error applied).
    true_transform: Option<ChuckTransform>,
    /// The virtual spectrometer's view of where the wafer lies (a reload moves it).
    placement: Option<Arc<Mutex<ChuckTransform>>>,
    /// The simulation seeds (the run's plus the machine file's).
    seeds: SimSeeds,
}

/// The seeds of the simulated bench. The virtual wafer (its thickness field and wafer-to-wafer
/// offset) comes from `wafer`, so every run of one wafer measures the same film; everything a
/// run draws for itself (spectrometer noise, carriage scatter, where the hand placed the
/// wafer) comes from `run`, so two runs of one wafer read different noise, as on a real bench.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct SimSeeds {
    pub wafer: u64,
    pub run: u64,
}

impl SimSeeds {
    /// One seed for both the wafer and the run's draws.
    pub fn same(seed: u64) -> SimSeeds {
        SimSeeds {
            wafer: seed,
            run: seed,
        }
    }

    /// Both seeds moved by the machine file's `[simulation] seed`.
    fn plus(self, offset: u64) -> SimSeeds {
        SimSeeds {
            wafer: self.wafer.wrapping_add(offset),
            run: self.run.wrapping_add(offset),
        }
    }
}

impl Bench {
    /// Opens the bench of `machine` for `recipe`; `None` means the built-in simulated bench
    /// (virtual controller over an in-process duplex stream, driven by the real G-code stage
    /// code; virtual wafer with the recipe's stack; virtual spectrometer). `seed` (wafer and
    /// draws alike) is added to the machine file's simulation seed.
    pub async fn open(
        machine: Option<&MachineFile>,
        recipe: &LoadedRecipe,
        seed: u64,
    ) -> Result<Bench, BenchError> {
        Bench::open_session(machine, recipe, SimSeeds::same(seed), 0).await
    }

    /// [`Bench::open`] for the `session`-th session of a run (0 = the first): the virtual
    /// wafer and its placement depend on the seeds alone, so every session of a run sees the
    /// same wafer lying in the same place, while the virtual spectrometer's noise is drawn
    /// afresh per session, as a remeasurement on a real bench would be.
    pub async fn open_session(
        machine: Option<&MachineFile>,
        recipe: &LoadedRecipe,
        seeds: SimSeeds,
        session: u64,
    ) -> Result<Bench, BenchError> {
        let m = machine.cloned().unwrap_or_else(builtin_simulated);
        let clock = SimClock::new(m.simulation.time_scale);
        let simulated_stage = m.stage_is_simulated();
        let seeds = seeds.plus(m.simulation.seed);
        // The carriage's own scatter is drawn afresh per session, like the spectrometer's noise.
        let session_seed = seeds
            .run
            .wrapping_add(1)
            .wrapping_add(session.wrapping_mul(0x9e37_79b9_7f4a_7c15));
        let (cfg, mechanics) = VirtualConfig::with_mechanics(&m, session_seed);
        let stage = open_stage_with(&m, clock, cfg).await?;
        let transform = ChuckTransform::from_spec(&m.chuck);
        // The virtual wafer lies where a hand put it: off the file's centre and rotation by its
        // seeded placement error; the spectrometer sees it there, the plan does not know.
        let true_transform = Placement::draw(&m.simulation.wafer, seeds.run).apply(&transform);
        let (spectrometer, wafer, placement): (Box<dyn Spectrometer>, _, _) =
            match m.spectrometer.kind {
                SpectrometerKind::Command => (
                    Box::new(CommandSpectrometer::from_spec(&m.spectrometer)),
                    None,
                    None,
                ),
                SpectrometerKind::Helper => (
                    Box::new(HelperSpectrometer::from_spec(&m.spectrometer)),
                    None,
                    None,
                ),
                SpectrometerKind::Simulated => {
                    let wafer = Arc::new(VirtualWafer::for_recipe(
                        recipe,
                        &m.simulation.wafer,
                        seeds.wafer,
                    )?);
                    let lib =
                        MaterialLibrary::with_materials(&recipe.recipe.materials, recipe.dir())?;
                    let reference = BareSample::new(
                        lib.require(&recipe.recipe.film.ambient)?.clone(),
                        lib.require(&m.reference.material)?.clone(),
                    );
                    let spec = VirtualSpectrometer::new(
                        &m.simulation.spectrometer,
                        wafer.clone(),
                        &reference,
                        stage.position_handle(),
                        true_transform,
                        // Sessions step the seed by an odd 64-bit constant (2⁶⁴/φ), so no two
                        // sessions of nearby runs share a noise stream.
                        session_seed,
                        clock,
                    );
                    // A real stage with a virtual spectrometer: the reported position is the truth
                    // the spectrometer has.
                    let spec = if simulated_stage {
                        spec.with_mechanics(mechanics)
                    } else {
                        spec
                    };
                    let placement = spec.placement_handle();
                    (
                        Box::new(spec) as Box<dyn Spectrometer>,
                        Some(wafer),
                        Some(placement),
                    )
                }
            };
        Ok(Bench {
            stage,
            spectrometer,
            transform,
            limits: SoftLimits::from_spec(&m.stage),
            approach: Approach::from_spec(&m.stage),
            machine: m,
            simulated_stage,
            clock,
            true_transform: wafer.is_some().then_some(true_transform),
            wafer,
            placement,
            seeds,
        })
    }

    /// The simulated wafer is unloaded and loaded again for the `reload`-th time (1, 2, …):
    /// it now lies off by a fresh seeded placement error (`[simulation.wafer]`
    /// `reload_offset_mm`, `reload_rotation_deg`). `None` when the spectrometer is real: a
    /// person does it.
    pub fn reload_simulated(&mut self, reload: u64) -> Option<Placement> {
        let handle = self.placement.as_ref()?;
        let placed = Placement::reloaded(&self.machine.simulation.wafer, self.seeds.run, reload);
        let truth = placed.apply(&self.transform);
        *handle.lock().unwrap_or_else(|e| e.into_inner()) = truth;
        self.true_transform = Some(truth);
        Some(placed)
    }

    /// Whether the stage is the virtual controller (no real motion: no confirmation needed).
    pub fn is_simulated(&self) -> bool {
        self.simulated_stage
    }

    /// Waits `ms` of bench time for the stage to settle (shorter in real time when the
    /// simulated parts run faster than real time).
    pub async fn settle(&self, ms: f64) {
        tokio::time::sleep(self.settle_time(ms)).await;
    }

    /// How long [`Bench::settle`] waits for `ms` of bench time.
    pub fn settle_time(&self, ms: f64) -> std::time::Duration {
        let scale = if self.simulated_stage {
            self.clock.scale()
        } else {
            1.0
        };
        super::duration_s(ms / 1000.0 / scale)
    }

    /// The virtual wafer, when the spectrometer is simulated (its true thickness field).
    pub fn virtual_wafer(&self) -> Option<&VirtualWafer> {
        self.wafer.as_deref()
    }

    /// Where the virtual wafer really sits (its placement error applied), when the
    /// spectrometer is simulated: the truth centring is tested against.
    pub fn virtual_placement(&self) -> Option<ChuckTransform> {
        self.true_transform
    }

    /// The stage position of a site, checked against the soft limits (approach point too).
    pub fn stage_position(&self, site: &Site) -> Result<[f64; 2], SiteOutside> {
        check_site(site, &self.transform, &self.limits, &self.approach)
    }

    /// Moves to a site (wafer frame) and waits for motion to end; the confirmed position.
    pub async fn move_to_site(&mut self, site: &Site) -> Result<Option<[f64; 2]>, BenchError> {
        let p = self
            .stage_position(site)
            .map_err(|o| BenchError::OutsideTravel(vec![o]))?;
        let at = |source| BenchError::Site {
            site: site.number,
            source,
        };
        self.stage.move_to(p[0], p[1]).await.map_err(at)?;
        self.stage.wait_idle().await.map_err(at)
    }
}
