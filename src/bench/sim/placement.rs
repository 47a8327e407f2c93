//! Where the virtual wafer really sits: a hand placement error drawn from the seed (an offset
//! from `[chuck] center_mm` and a turn from `[chuck] rotation_deg`), so centring has something
//! to find. The bounds come from `[simulation.wafer]` (`placement_offset_mm`,
//! `placement_rotation_deg`); both default to zero, a wafer exactly where the file says.

use crate::bench::chuck::ChuckTransform;
use crate::bench::machine::SimWaferSpec;
use rand::{Rng, SeedableRng};
use std::f64::consts::PI;

/// A placement error, stage frame.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Placement {
    /// The true wafer centre less the nominal one, mm.
    pub offset_mm: [f64; 2],
    /// The true rotation less the nominal one, degrees CCW.
    pub rotation_deg: f64,
}

/// Keeps the placement draw apart from the wafer's own draws of the same seed.
const STREAM: u64 = 0x706c_6163_6564; // "placed"

impl Placement {
    /// The error of the wafer of `seed`: offset uniform over the disc of radius
    /// `placement_offset_mm`, turn uniform in ±`placement_rotation_deg`.
    pub fn draw(spec: &SimWaferSpec, seed: u64) -> Placement {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed ^ STREAM);
        let r = spec.placement_offset_mm * rng.random_range(0.0f64..1.0).sqrt();
        let a = rng.random_range(0.0..2.0 * PI);
        let turn = spec.placement_rotation_deg * rng.random_range(-1.0..1.0);
        Placement {
            offset_mm: [r * a.cos(), r * a.sin()],
            rotation_deg: turn,
        }
    }

    /// Where the wafer of `seed` lies after its `reload`-th unload and reload (1, 2, …; 0 is
    /// the first placement): the first placement error plus a fresh error of its own, offset
    /// uniform over the disc of radius `reload_offset_mm`, turn uniform in
    /// ±`reload_rotation_deg`.
    pub fn reloaded(spec: &SimWaferSpec, seed: u64, reload: u64) -> Placement {
        let first = Placement::draw(spec, seed);
        if reload == 0 {
            return first;
        }
        let bounds = SimWaferSpec {
            placement_offset_mm: spec.reload_offset_mm,
            placement_rotation_deg: spec.reload_rotation_deg,
            ..spec.clone()
        };
        // An odd 64-bit constant (2⁶⁴/φ) steps the seed per reload.
        let again = Placement::draw(
            &bounds,
            seed.wrapping_add(reload.wrapping_mul(0x9e37_79b9_7f4a_7c15)),
        );
        Placement {
            offset_mm: [
                first.offset_mm[0] + again.offset_mm[0],
                first.offset_mm[1] + again.offset_mm[1],
            ],
            rotation_deg: first.rotation_deg + again.rotation_deg,
        }
    }

    /// The true transform of a wafer placed with this error where `nominal` says it is.
    pub fn apply(&self, nominal: &ChuckTransform) -> ChuckTransform {
        ChuckTransform {
            center_mm: [
                nominal.center_mm[0] + self.offset_mm[0],
                nominal.center_mm[1] + self.offset_mm[1],
            ],
            rotation_deg: nominal.rotation_deg + self.rotation_deg,
            ..*nominal
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn draws_stay_within_the_bounds_and_fill_them() {
        let spec = SimWaferSpec {
            placement_offset_mm: 3.0,
            placement_rotation_deg: 2.0,
            ..SimWaferSpec::default()
        };
        let draws: Vec<Placement> = (0..500).map(|s| Placement::draw(&spec, s)).collect();
        let r = |p: &Placement| p.offset_mm[0].hypot(p.offset_mm[1]);
        assert!(draws
            .iter()
            .all(|p| r(p) <= 3.0 && p.rotation_deg.abs() <= 2.0));
        assert!(draws.iter().any(|p| r(p) > 2.9) && draws.iter().any(|p| p.rotation_deg > 1.9));
        assert_eq!(
            Placement::draw(&SimWaferSpec::default(), 7),
            Placement {
                offset_mm: [0.0, 0.0],
                rotation_deg: 0.0
            },
            "no error by default"
        );
    }

    #[test]
    fn a_reload_moves_the_wafer_within_its_own_bounds() {
        let spec = SimWaferSpec {
            placement_offset_mm: 3.0,
            reload_offset_mm: 0.2,
            reload_rotation_deg: 0.1,
            ..SimWaferSpec::default()
        };
        let first = Placement::reloaded(&spec, 9, 0);
        assert_eq!(first, Placement::draw(&spec, 9));
        let moves: Vec<f64> = (1..200)
            .map(|k| {
                let p = Placement::reloaded(&spec, 9, k);
                assert!((p.rotation_deg - first.rotation_deg).abs() <= 0.1);
                (p.offset_mm[0] - first.offset_mm[0]).hypot(p.offset_mm[1] - first.offset_mm[1])
            })
            .collect();
        assert!(moves.iter().all(|d| *d <= 0.2 + 1e-12));
        assert!(moves.iter().any(|d| *d > 0.15), "reloads fill their disc");
    }
}
