//! Wafer centring and orientation from edge scans: where a hand-placed wafer really sits on
//! the chuck, and how far it is turned.
//!
//! 1. The signal (mean reflected counts at the probe, dark subtracted) is read at the nominal
//!    chuck centre: the on-wafer level.
//! 2. Along [`CentringSettings::rays`] rays from the nominal centre, the probe steps outward
//!    (or inward, when the first point is already off the wafer: a flat) until the signal
//!    departs from the on-wafer level by more than [`CentringSettings::contrast`]; the crossing
//!    is then bisected with the stage between the last point on and the first point off, the
//!    half-way level between the two deciding each midpoint, to
//!    [`CentringSettings::resolution_mm`]. A ray that meets a soft limit before the edge is
//!    dropped (nothing outside the limits is ever sent).
//! 3. A circle is fitted to the crossings, rejecting those on the flat or notch
//!    ([`circle::robust`], Kåsa's fit).
//! 4. With a flat or notch, the rim is scanned just inside the fitted circle around the
//!    expected mark angle; the ends of the stretch off the wafer are bisected in angle and the
//!    mark lies half-way between them. Its angle less the expected one is the rotation error.
//!
//! The scan is written against [`EdgeProbe`], so the same code runs on a bench (a
//! [`probe::BenchProbe`]: soft limits checked by the stage before any line, Ctrl-C by dropping
//! the future) and on a geometric probe in the tests.

pub mod circle;
pub mod probe;
mod rays;
mod rim;

use crate::bench::chuck::ChuckTransform;
use crate::recipe::geometry::{Orientation, Wafer};
use futures::future::BoxFuture;
use serde::{Deserialize, Serialize};

pub use probe::BenchProbe;

/// Reads the signal at a stage point.
pub trait EdgeProbe: Send {
    /// Mean reflected signal at stage point `p` (mm), or `None` when `p` (or its approach
    /// point) lies outside the soft limits: nothing was sent.
    fn signal(&mut self, p: [f64; 2]) -> BoxFuture<'_, Result<Option<f64>, CentringError>>;
}

/// How the edges are searched; the defaults suit a wafer placed within a few mm and degrees.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct CentringSettings {
    /// Rays from the nominal centre, evenly spread (more rays: more survive a flat).
    pub rays: usize,
    /// How far from the nominal rim the edge may lie, mm (the placement error searched).
    pub search_mm: f64,
    /// Coarse step along a ray, mm.
    pub step_mm: f64,
    /// Bisection ends when the crossing is known within this, mm.
    pub resolution_mm: f64,
    /// Relative change of the signal that means "off the wafer" (0.2 = 20 %).
    pub contrast: f64,
    /// An edge crossing inside the fitted circle by more than this is taken to lie on the flat
    /// or notch and left out of the fit, mm (a few times the edge-location noise).
    pub reject_mm: f64,
    /// How far the flat or notch may be turned from where the chuck rotation puts it, degrees.
    pub rotation_search_deg: f64,
}

impl Default for CentringSettings {
    fn default() -> Self {
        CentringSettings {
            rays: 16,
            search_mm: 6.0,
            step_mm: 1.0,
            resolution_mm: 0.01,
            contrast: 0.2,
            reject_mm: 0.05,
            rotation_search_deg: 10.0,
        }
    }
}

/// What centring measured (stage frame).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Centring {
    /// The wafer centre, stage coordinates, mm: the `[chuck] center_mm` to use.
    pub center_mm: [f64; 2],
    /// The chuck rotation to use, degrees CCW (the nominal one when the wafer has no mark).
    pub rotation_deg: f64,
    /// The fitted rim radius, mm.
    pub radius_mm: f64,
    /// The stage-frame angle of the flat or notch, degrees (`None`: no mark).
    pub mark_angle_deg: Option<f64>,
    /// Edge crossings the circle kept, and those it rejected as the flat or notch.
    pub edges_used: usize,
    pub edges_rejected: usize,
    /// Rays that found no edge (a soft limit, or the wafer not where expected).
    pub rays_lost: usize,
    /// Root-mean-square radial residual of the kept crossings, mm.
    pub residual_mm: f64,
    /// Signal readings taken.
    pub probes: usize,
}

impl Centring {
    /// The chuck transform with this centre and rotation (mirroring kept from `nominal`).
    pub fn transform(&self, nominal: &ChuckTransform) -> ChuckTransform {
        ChuckTransform {
            center_mm: self.center_mm,
            rotation_deg: self.rotation_deg,
            ..*nominal
        }
    }
}

impl Centring {
    /// One line for the operator: the centre and turn found, against `nominal`.
    pub fn describe(&self, nominal: &ChuckTransform) -> String {
        let c = self.center_mm;
        let off = (c[0] - nominal.center_mm[0]).hypot(c[1] - nominal.center_mm[1]);
        let turn = wrap_deg(self.rotation_deg - nominal.rotation_deg);
        let mark = match self.mark_angle_deg {
            Some(a) => format!(
                "rotation {:.3}° (turned {turn:+.3}°; mark at {a:.3}°)",
                self.rotation_deg
            ),
            None => format!(
                "rotation {:.3}° kept (the wafer has no flat or notch)",
                self.rotation_deg
            ),
        };
        format!(
            "wafer centre ({:.3}, {:.3}) mm, {off:.3} mm from the nominal; {mark}; radius {:.3} mm \
             from {} edges ({} rejected as the flat or notch, {} rays lost), residual {:.4} mm, \
             {} readings",
            c[0], c[1], self.radius_mm, self.edges_used, self.edges_rejected, self.rays_lost,
            self.residual_mm, self.probes
        )
    }
}

/// Why centring could not finish.
#[derive(Debug, thiserror::Error)]
pub enum CentringError {
    #[error("moving the probe for centring: {0}")]
    Stage(#[from] crate::bench::StageError),
    #[error("reading the signal for centring: {0}")]
    Spectrometer(#[from] crate::bench::SpectrometerError),
    #[error("the nominal chuck centre ({:.3}, {:.3}) mm {why}: set [chuck] center_mm near the wafer centre", at[0], at[1])]
    Start { at: [f64; 2], why: String },
    #[error("only {found} of {rays} rays found the wafer edge (the rest met a soft limit or no edge within ±{search_mm} mm of the nominal rim); at least {} are needed: check [chuck] center_mm and the recipe's diameter_mm, or widen the travel", circle::MIN_POINTS)]
    TooFewEdges {
        found: usize,
        rays: usize,
        search_mm: f64,
    },
    #[error("no {mark} found within ±{window_deg:.1}° of the expected {expected_deg:.1}° (stage frame): check the recipe's orientation_angle_deg and [chuck] rotation_deg{hint}")]
    NoMark {
        mark: &'static str,
        expected_deg: f64,
        window_deg: f64,
        hint: &'static str,
    },
}

/// Finds the wafer's centre and rotation with `probe`; `nominal` is where the machine file
/// says the wafer sits, `wafer` its geometry (see the module doc).
pub async fn locate(
    probe: &mut dyn EdgeProbe,
    wafer: &Wafer,
    nominal: &ChuckTransform,
    settings: &CentringSettings,
) -> Result<Centring, CentringError> {
    let mut counter = Counting { probe, count: 0 };
    let c0 = nominal.center_mm;
    let inside = match counter.signal(c0).await? {
        Some(s) if s.is_finite() && s > 0.0 => s,
        Some(s) => {
            return Err(CentringError::Start {
                at: c0,
                why: format!(
                    "gives no signal ({s:.1} counts): is the lamp on and a wafer on the chuck?"
                ),
            })
        }
        None => {
            return Err(CentringError::Start {
                at: c0,
                why: "lies outside the soft limits".into(),
            })
        }
    };
    let levels = rays::Levels {
        inside,
        contrast: settings.contrast,
    };
    let edges = rays::edges(&mut counter, c0, wafer.radius(), &levels, settings).await?;
    let points: Vec<[f64; 2]> = edges.iter().flatten().copied().collect();
    let lost = edges.iter().filter(|e| e.is_none()).count();
    let too_few = || CentringError::TooFewEdges {
        found: points.len(),
        rays: settings.rays,
        search_mm: settings.search_mm,
    };
    let fit = circle::robust(&points, settings.reject_mm).ok_or_else(too_few)?;
    let rejected = fit.kept.iter().filter(|k| !**k).count();
    let expected = mark_angle_stage(wafer, nominal);
    let (mark, rotation_deg) = match expected {
        None => (None, nominal.rotation_deg),
        Some(expected_deg) => {
            let found =
                rim::mark_angle(&mut counter, &fit, wafer, expected_deg, &levels, settings).await?;
            let turned = wrap_deg(found - expected_deg);
            (
                Some(wrap_deg(found)),
                wrap_deg(nominal.rotation_deg + turned),
            )
        }
    };
    Ok(Centring {
        center_mm: fit.center,
        rotation_deg,
        radius_mm: fit.radius,
        mark_angle_deg: mark,
        edges_used: points.len() - rejected,
        edges_rejected: rejected,
        rays_lost: lost,
        residual_mm: fit.rms,
        probes: counter.count,
    })
}

/// The stage-frame angle where `nominal` puts the wafer's flat or notch, degrees.
pub fn mark_angle_stage(wafer: &Wafer, nominal: &ChuckTransform) -> Option<f64> {
    let a = match wafer.orientation {
        Orientation::Flat { angle_deg, .. } | Orientation::Notch { angle_deg } => angle_deg,
        Orientation::None => return None,
    };
    let t = a.to_radians();
    let o = nominal.to_stage(0.0, 0.0);
    let p = nominal.to_stage(t.cos(), t.sin());
    Some((p[1] - o[1]).atan2(p[0] - o[0]).to_degrees())
}

/// An angle in (−180°, 180°].
pub fn wrap_deg(a: f64) -> f64 {
    let w = a.rem_euclid(360.0);
    if w > 180.0 {
        w - 360.0
    } else {
        w
    }
}

/// A probe that counts its readings.
struct Counting<'a> {
    probe: &'a mut dyn EdgeProbe,
    count: usize,
}

impl Counting<'_> {
    async fn signal(&mut self, p: [f64; 2]) -> Result<Option<f64>, CentringError> {
        self.count += 1;
        self.probe.signal(p).await
    }
}

#[cfg(test)]
mod tests;
