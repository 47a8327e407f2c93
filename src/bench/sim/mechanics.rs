//! The virtual stage's mechanics: where the carriage really stops, as opposed to where the
//! controller was told to go. Two effects of a lead-screw or belt stage:
//!
//! - **positioning repeatability**: every arrival lands off the commanded point by a fresh
//!   draw, normal with 1σ `repeatability_mm` per axis;
//! - **backlash** (lost motion `backlash_mm`): the carriage lags the nut by half the lost
//!   motion, behind the direction of the last move on that axis. A final approach from one
//!   side (the stage's anti-backlash approach) turns it into a constant offset; arriving from
//!   either side turns it into a ±`backlash_mm`/2 scatter.
//!
//! The virtual controller reports the commanded position, as a real one does (its step counts);
//! the virtual spectrometer looks at the true one. Draws come from a seeded generator, so a
//! session replays.

use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Normal};
use std::sync::{Arc, Mutex};

/// The stage's mechanical imperfections (from `[simulation.controller]`).
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct MechanicsSpec {
    /// 1σ of the arrival error per axis, mm.
    pub repeatability_mm: f64,
    /// Lost motion on reversal, mm.
    pub backlash_mm: f64,
}

/// Where the carriage stands against the commanded position.
#[derive(Debug)]
pub struct Mechanics {
    spec: MechanicsSpec,
    rng: ChaCha8Rng,
    /// Sign of the last move on each axis (0: none yet).
    direction: [f64; 2],
    /// The true position less the commanded one after the last arrival, mm.
    offset: [f64; 2],
}

impl Mechanics {
    /// Mechanics of `spec`, their draws from `seed`; the carriage starts where commanded.
    pub fn new(spec: MechanicsSpec, seed: u64) -> Mechanics {
        Mechanics {
            spec,
            rng: ChaCha8Rng::seed_from_u64(seed ^ STREAM),
            direction: [0.0; 2],
            offset: [0.0; 2],
        }
    }

    /// A move from `from` to `to` (commanded, mm) has ended: the carriage's new error.
    pub fn arrive(&mut self, from: [f64; 2], to: [f64; 2]) {
        if from == to {
            return;
        }
        let unit = Normal::new(0.0, 1.0).expect("unit normal");
        for axis in 0..2 {
            let step = to[axis] - from[axis];
            if step != 0.0 {
                self.direction[axis] = step.signum();
            }
            let lag = -0.5 * self.spec.backlash_mm * self.direction[axis];
            let scatter = self.spec.repeatability_mm * unit.sample(&mut self.rng);
            self.offset[axis] = lag + scatter;
        }
    }

    /// The true position less the commanded one, mm.
    pub fn offset(&self) -> [f64; 2] {
        self.offset
    }
}

/// Keeps the mechanics' draws apart from the other draws of the same seed.
const STREAM: u64 = 0x6d65_6368_616e; // "mechan"

/// Mechanics shared by the virtual controller (which moves them) and the virtual spectrometer
/// (which looks where the carriage really is).
#[derive(Debug, Clone)]
pub struct MechanicsHandle(Arc<Mutex<Mechanics>>);

impl MechanicsHandle {
    /// A handle on new mechanics.
    pub fn new(spec: MechanicsSpec, seed: u64) -> MechanicsHandle {
        MechanicsHandle(Arc::new(Mutex::new(Mechanics::new(spec, seed))))
    }

    fn lock(&self) -> std::sync::MutexGuard<'_, Mechanics> {
        self.0.lock().unwrap_or_else(|e| e.into_inner())
    }

    /// See [`Mechanics::arrive`].
    pub fn arrive(&self, from: [f64; 2], to: [f64; 2]) {
        self.lock().arrive(from, to)
    }

    /// See [`Mechanics::offset`].
    pub fn offset(&self) -> [f64; 2] {
        self.lock().offset()
    }
}

impl PartialEq for MechanicsHandle {
    fn eq(&self, other: &Self) -> bool {
        Arc::ptr_eq(&self.0, &other.0)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn spread(spec: MechanicsSpec, moves: impl Fn(usize) -> ([f64; 2], [f64; 2])) -> [f64; 2] {
        let mut m = Mechanics::new(spec, 5);
        let xs: Vec<f64> = (0..4000)
            .map(|i| {
                let (a, b) = moves(i);
                m.arrive(a, b);
                m.offset()[0]
            })
            .collect();
        let mean = xs.iter().sum::<f64>() / xs.len() as f64;
        let var = xs.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (xs.len() - 1) as f64;
        [mean, var.sqrt()]
    }

    #[test]
    fn one_sided_approach_leaves_the_repeatability_and_a_constant_lag() {
        let spec = MechanicsSpec {
            repeatability_mm: 0.01,
            backlash_mm: 0.04,
        };
        // Always arriving in +x: the carriage lags by half the lost motion (0.02 mm); the
        // scatter is the repeatability (4000 draws: the 1σ estimate is good to ~1.1 %, 3σ
        // bound 4 % used).
        let [mean, sd] = spread(spec, |_| ([0.0, 0.0], [1.0, 1.0]));
        assert!((mean + 0.02).abs() < 0.001, "{mean}");
        assert!((sd - 0.01).abs() < 0.0004, "{sd}");
        // Alternating sides: ±0.02 mm on top of it, σ = √(0.01² + 0.02²).
        let [mean, sd] = spread(spec, |i| {
            if i % 2 == 0 {
                ([0.0, 0.0], [1.0, 1.0])
            } else {
                ([1.0, 1.0], [0.0, 0.0])
            }
        });
        assert!(mean.abs() < 0.001, "{mean}");
        let expected = (0.01f64.powi(2) + 0.02f64.powi(2)).sqrt();
        assert!(
            (sd - expected).abs() < 0.04 * expected,
            "{sd} vs {expected}"
        );
    }

    #[test]
    fn a_perfect_stage_stops_where_commanded() {
        let mut m = Mechanics::new(MechanicsSpec::default(), 1);
        m.arrive([0.0, 0.0], [3.0, -2.0]);
        assert_eq!(m.offset(), [0.0, 0.0]);
    }
}
