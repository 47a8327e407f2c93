//! The virtual wafer: a thickness field over (x, y) of our own invention on the recipe's film
//! stack, rendered through the transfer-matrix model; off the wafer the probe sees the chuck.
//!
//! Field, wafer frame, ρ = r / R (R the wafer radius):
//! `t(x, y) = nominal + wafer offset + centre offset + dome·(½ − ρ²) + ripple·cos(2π r / period)
//!            + bead·exp(−(R − r) / width) + tilt·(x, y) + roughness(x, y)`,
//! where the dome term averages to zero over the disc (positive = dome, negative = bowl) and
//! the roughness is a seeded sum of plane waves with 3–15 mm wavelengths and the set 1σ; the
//! wafer offset is drawn once per seed (1σ = `wafer_to_wafer_pct` of nominal).

use crate::bench::machine::SimWaferSpec;
use crate::optics::{self, Material, OpticsError, Stack};
use crate::recipe::{LoadedRecipe, Wafer};
use rand::{Rng, SeedableRng};
use std::f64::consts::PI;

/// What a virtual probe looks at: reflectance at a wafer position (mm, wafer frame).
pub trait SampleModel: Send + Sync {
    /// Reflectance (0..1) at each wavelength, at wafer position (x, y).
    fn reflectance(&self, x_mm: f64, y_mm: f64, wavelengths_nm: &[f64]) -> Vec<f64>;
}

/// Plane waves of the roughness field.
const ROUGHNESS_WAVES: usize = 24;

/// The thickness field of the varied layer.
#[derive(Debug, Clone)]
pub struct ThicknessField {
    nominal_nm: f64,
    radius_mm: f64,
    spec: SimWaferSpec,
    /// (kx, ky, phase, amplitude) of each roughness wave.
    waves: Vec<(f64, f64, f64, f64)>,
    /// This wafer's offset of the mean from nominal (wafer-to-wafer spread), nm.
    wafer_offset_nm: f64,
}

impl ThicknessField {
    /// A field around `nominal_nm` on a wafer of `radius_mm`, roughness drawn from `seed`.
    pub fn new(nominal_nm: f64, radius_mm: f64, spec: &SimWaferSpec, seed: u64) -> ThicknessField {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
        let amp = spec.roughness_nm * (2.0 / ROUGHNESS_WAVES as f64).sqrt();
        let waves = (0..ROUGHNESS_WAVES)
            .map(|_| {
                let wavelength = rng.random_range(3.0..15.0);
                let dir = rng.random_range(0.0..2.0 * PI);
                let k = 2.0 * PI / wavelength;
                (
                    k * dir.cos(),
                    k * dir.sin(),
                    rng.random_range(0.0..2.0 * PI),
                    amp,
                )
            })
            .collect();
        let z: f64 = rng.sample(rand_distr::StandardNormal);
        ThicknessField {
            nominal_nm,
            radius_mm,
            spec: spec.clone(),
            waves,
            wafer_offset_nm: z * spec.wafer_to_wafer_pct / 100.0 * nominal_nm,
        }
    }

    /// Thickness at wafer position (x, y), nm (never below zero).
    pub fn thickness_nm(&self, x_mm: f64, y_mm: f64) -> f64 {
        let s = &self.spec;
        let r = x_mm.hypot(y_mm);
        let rho = r / self.radius_mm;
        let bead = s.edge_bead_nm * (-(self.radius_mm - r).max(0.0) / s.edge_bead_width_mm).exp();
        let rough: f64 = self
            .waves
            .iter()
            .map(|(kx, ky, ph, a)| a * (kx * x_mm + ky * y_mm + ph).cos())
            .sum();
        let t = self.nominal_nm
            + self.wafer_offset_nm
            + s.center_offset_nm
            + s.dome_nm * (0.5 - rho * rho)
            + s.ripple_nm * (2.0 * PI * r / s.ripple_period_mm).cos()
            + bead
            + s.tilt_nm_per_mm[0] * x_mm
            + s.tilt_nm_per_mm[1] * y_mm
            + rough;
        t.max(0.0)
    }
}

/// A wafer carrying the recipe's stack, its first fitted layer following a [`ThicknessField`].
#[derive(Debug, Clone)]
pub struct VirtualWafer {
    wafer: Wafer,
    stack: Stack,
    varied: usize,
    field: ThicknessField,
    chuck: Stack,
    incidence_deg: f64,
    na: f64,
}

impl VirtualWafer {
    /// The virtual wafer of a recipe (its geometry, stack, incidence and NA).
    pub fn for_recipe(
        recipe: &LoadedRecipe,
        spec: &SimWaferSpec,
        seed: u64,
    ) -> Result<VirtualWafer, OpticsError> {
        let r = &recipe.recipe;
        let lib = recipe.material_library()?;
        let mut stack = Stack::bare(
            lib.require(&r.film.ambient)?.clone(),
            lib.require(&r.film.substrate)?.clone(),
        );
        for l in &r.film.layers {
            stack = stack.with_layer(lib.require(&l.material)?.clone(), l.nominal_nm);
        }
        let varied = r.film.layers.iter().position(|l| l.fit).unwrap_or(0);
        let nominal = r.film.layers.get(varied).map_or(0.0, |l| l.nominal_nm);
        let wafer = recipe.wafer();
        let chuck = Stack::bare(
            stack.ambient.clone(),
            Material::constant("chuck", spec.chuck_nk[0], spec.chuck_nk[1]),
        );
        Ok(VirtualWafer {
            field: ThicknessField::new(nominal, wafer.radius(), spec, seed),
            wafer,
            stack,
            varied,
            chuck,
            incidence_deg: r.film.incidence_deg,
            na: r.film.na,
        })
    }

    /// The thickness of the varied layer at (x, y), or `None` off the wafer.
    pub fn thickness_nm(&self, x_mm: f64, y_mm: f64) -> Option<f64> {
        self.wafer
            .contains(x_mm, y_mm)
            .then(|| self.field.thickness_nm(x_mm, y_mm))
    }

    /// The stack at (x, y), or `None` off the wafer.
    pub fn stack_at(&self, x_mm: f64, y_mm: f64) -> Option<Stack> {
        let t = self.thickness_nm(x_mm, y_mm)?;
        let mut s = self.stack.clone();
        if let Some(l) = s.layers.get_mut(self.varied) {
            l.thickness_nm = t;
        }
        Some(s)
    }
}

impl SampleModel for VirtualWafer {
    fn reflectance(&self, x_mm: f64, y_mm: f64, wavelengths_nm: &[f64]) -> Vec<f64> {
        match self.stack_at(x_mm, y_mm) {
            Some(s) => optics::reflectance(&s, wavelengths_nm, self.incidence_deg, self.na),
            None => optics::reflectance(&self.chuck, wavelengths_nm, self.incidence_deg, self.na),
        }
    }
}

/// A bare material under air: what a reference piece reflects.
#[derive(Debug, Clone)]
pub struct BareSample {
    stack: Stack,
}

impl BareSample {
    /// A bare piece of `material` under `ambient`.
    pub fn new(ambient: Material, material: Material) -> BareSample {
        BareSample {
            stack: Stack::bare(ambient, material),
        }
    }
}

impl SampleModel for BareSample {
    fn reflectance(&self, _x_mm: f64, _y_mm: f64, wavelengths_nm: &[f64]) -> Vec<f64> {
        optics::reflectance(&self.stack, wavelengths_nm, 0.0, 0.0)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn wafers_of_a_lot_differ_by_the_set_spread() {
        let spec = SimWaferSpec {
            wafer_to_wafer_pct: 1.0,
            ..SimWaferSpec::default()
        };
        let means: Vec<f64> = (0..400)
            .map(|seed| ThicknessField::new(1000.0, 75.0, &spec, seed).wafer_offset_nm)
            .collect();
        let m = means.iter().sum::<f64>() / means.len() as f64;
        let sd =
            (means.iter().map(|v| (v - m).powi(2)).sum::<f64>() / (means.len() - 1) as f64).sqrt();
        // 1 % of 1000 nm = 10 nm; 400 draws put the sample σ within about ±10 % of it.
        assert!((sd - 10.0).abs() < 1.5, "σ of wafer means {sd}");
        assert!(m.abs() < 2.0, "mean offset {m}");
    }

    #[test]
    fn field_terms_do_what_they_say() {
        let mut spec = SimWaferSpec {
            roughness_nm: 0.0,
            ripple_nm: 0.0,
            edge_bead_nm: 0.0,
            tilt_nm_per_mm: [0.0, 0.0],
            wafer_to_wafer_pct: 0.0,
            ..SimWaferSpec::default()
        };
        spec.dome_nm = 20.0;
        let f = ThicknessField::new(1000.0, 75.0, &spec, 1);
        assert!(
            (f.thickness_nm(0.0, 0.0) - 1010.0).abs() < 1e-9,
            "dome: centre +dome/2"
        );
        assert!(
            (f.thickness_nm(75.0, 0.0) - 990.0).abs() < 1e-9,
            "edge −dome/2"
        );
        spec.dome_nm = 0.0;
        spec.roughness_nm = 0.5;
        let f = ThicknessField::new(1000.0, 75.0, &spec, 7);
        // Sample σ of the roughness over a grid is near the set value.
        let v: Vec<f64> = (0..60)
            .flat_map(|i| (0..60).map(move |j| (i as f64 * 2.1 - 60.0, j as f64 * 2.1 - 60.0)))
            .map(|(x, y)| f.thickness_nm(x, y) - 1000.0)
            .collect();
        let m = v.iter().sum::<f64>() / v.len() as f64;
        let sd = (v.iter().map(|d| (d - m).powi(2)).sum::<f64>() / v.len() as f64).sqrt();
        assert!((sd - 0.5).abs() < 0.15, "σ = {sd}");
    }
}
