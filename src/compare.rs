//! Wafer-to-wafer comparison: per-wafer figures, wafer-to-wafer non-uniformity, and the delta
//! (or rate) map of two runs.
//!
//! Wafer-to-wafer figures are taken over the wafers' means: mean of means, sample standard
//! deviation of the means, and 100·σ/mean (common practice). A delta is B − A: site by site when
//! both runs measured the same plan, otherwise B's sites against A's interpolated map. A rate
//! divides the delta by a process time in minutes (deposition positive, etch negative).

use crate::map::interpolate::Field;
use crate::map::sites_table::SiteRow;
use crate::map::stats::{LayerSummary, Summary};
use crate::recipe::Wafer;
use crate::run::folder::RunToml;
use crate::run::outputs::{read_outputs, RunOutputs};
use serde::Serialize;
use std::path::{Path, PathBuf};

/// A finished (or partial) run read back from its folder.
#[derive(Debug, Clone)]
pub struct WaferRun {
    pub folder: PathBuf,
    pub meta: RunToml,
    pub rows: Vec<SiteRow>,
    pub summary: Summary,
}

impl WaferRun {
    /// Reads `run.toml` and `sites.csv` of a run folder.
    pub fn load(path: &Path) -> anyhow::Result<WaferRun> {
        let RunOutputs {
            meta,
            rows,
            summary,
        } = read_outputs(path)?;
        Ok(WaferRun {
            folder: path.into(),
            meta,
            rows,
            summary,
        })
    }

    /// The wafer geometry of the run's recipe.
    pub fn wafer(&self) -> Wafer {
        Wafer::from_spec(&self.meta.recipe.wafer)
    }
}

/// Wafer-to-wafer figures over the wafers' means.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct WaferToWafer {
    pub wafers: usize,
    pub mean_nm: f64,
    /// Sample standard deviation of the means (NaN for one wafer).
    pub std_nm: f64,
    /// 100·σ/mean.
    pub nu_pct: f64,
}

/// Wafer-to-wafer figures from the wafers' means (non-finite means are skipped).
pub fn wafer_to_wafer(means: &[f64]) -> WaferToWafer {
    let s = LayerSummary::from_values(means);
    WaferToWafer {
        wafers: s.sites_valid,
        mean_nm: s.mean_nm,
        std_nm: s.std_nm,
        nu_pct: s.nu_1sigma_pct,
    }
}

/// How a delta was formed.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum DeltaBasis {
    /// Both runs measured the same sites.
    SiteBySite,
    /// B's sites against A's interpolated map.
    Interpolated,
}

/// Positions closer than this are the same site, mm.
const SAME_SITE_MM: f64 = 1e-3;

/// Whether two runs measured the same plan (same site numbers at the same places).
pub fn same_plan(a: &[SiteRow], b: &[SiteRow]) -> bool {
    a.len() == b.len()
        && a.iter().zip(b).all(|(p, q)| {
            p.site == q.site
                && (p.x_mm - q.x_mm).abs() < SAME_SITE_MM
                && (p.y_mm - q.y_mm).abs() < SAME_SITE_MM
        })
}

/// Site rows of B − A for one layer (0 = first fitted), divided by `per_min` when given.
/// A delta site is valid when both of its values are.
pub fn delta(
    a: &WaferRun,
    b: &WaferRun,
    layer: usize,
    per_min: Option<f64>,
) -> (Vec<SiteRow>, DeltaBasis) {
    let scale = per_min.map(|t| 1.0 / t).unwrap_or(1.0);
    let row = |r: &SiteRow, d: Option<f64>, why: &str| SiteRow {
        site: r.site,
        x_mm: r.x_mm,
        y_mm: r.y_mm,
        thickness_nm: vec![d.map(|d| d * scale).unwrap_or(f64::NAN)],
        sigma_nm: vec![f64::NAN],
        gof: f64::NAN,
        flag: if d.is_some() {
            "ok".to_string()
        } else {
            why.to_string()
        },
    };
    let mut sorted_a = a.rows.clone();
    let mut sorted_b = b.rows.clone();
    sorted_a.sort_by_key(|r| r.site);
    sorted_b.sort_by_key(|r| r.site);
    if same_plan(&sorted_a, &sorted_b) {
        let rows = sorted_a
            .iter()
            .zip(&sorted_b)
            .map(
                |(ra, rb)| match (ra.valid_value(layer), rb.valid_value(layer)) {
                    (Some(va), Some(vb)) => row(rb, Some(vb - va), ""),
                    _ => row(rb, None, "no-pair"),
                },
            )
            .collect();
        return (rows, DeltaBasis::SiteBySite);
    }
    let points: Vec<(f64, f64, f64)> = a
        .rows
        .iter()
        .filter_map(|r| r.valid_value(layer).map(|v| (r.x_mm, r.y_mm, v)))
        .collect();
    let field = Field::new(&points, &a.wafer());
    let rows = sorted_b
        .iter()
        .map(|rb| {
            let va = field
                .as_ref()
                .map(|f| f.at(rb.x_mm, rb.y_mm))
                .filter(|v| v.is_finite());
            match (va, rb.valid_value(layer)) {
                (Some(va), Some(vb)) => row(rb, Some(vb - va), ""),
                _ => row(rb, None, "no-pair"),
            }
        })
        .collect();
    (rows, DeltaBasis::Interpolated)
}

/// What makes two wafers not like for like, each as one plain sentence naming the runs: another
/// recipe, another layer stack, another diameter, another site plan. Every run is set against
/// the first.
pub fn differences(runs: &[WaferRun]) -> Vec<String> {
    let Some(first) = runs.first() else {
        return Vec::new();
    };
    let name = |w: &WaferRun| format!("{} ({})", w.meta.run.wafer, w.meta.run.id);
    let stack = |w: &WaferRun| {
        let f = &w.meta.recipe.film;
        let layers: Vec<&str> = f.layers.iter().map(|l| l.material.as_str()).collect();
        format!("{} / {} / {}", f.ambient, layers.join(" / "), f.substrate)
    };
    let sorted = |w: &WaferRun| {
        let mut rows = w.rows.clone();
        rows.sort_by_key(|r| r.site);
        rows
    };
    let first_rows = sorted(first);
    let mut out = Vec::new();
    for w in &runs[1..] {
        let (a, b) = (&first.meta.recipe, &w.meta.recipe);
        if a.name != b.name {
            out.push(format!(
                "{} was measured with recipe {}, {} with recipe {}",
                name(w),
                b.name,
                name(first),
                a.name
            ));
        }
        if stack(first) != stack(w) {
            out.push(format!(
                "{} has the stack {}, {} the stack {}",
                name(w),
                stack(w),
                name(first),
                stack(first)
            ));
        }
        if a.wafer.diameter_mm != b.wafer.diameter_mm {
            out.push(format!(
                "{} is a {} mm wafer, {} a {} mm wafer",
                name(w),
                b.wafer.diameter_mm,
                name(first),
                a.wafer.diameter_mm
            ));
        }
        if !same_plan(&first_rows, &sorted(w)) {
            out.push(format!(
                "{} was measured on another site plan than {} ({} against {} sites): site-by-site figures do not pair",
                name(w),
                name(first),
                w.rows.len(),
                first.rows.len()
            ));
        }
    }
    out
}

/// Figures of a delta's rows (named after the quantity).
pub fn delta_summary(rows: &[SiteRow], wafer: &Wafer, name: &str) -> Summary {
    Summary::from_rows(rows, &[name.to_string()], wafer.usable_radius())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn wafer_to_wafer_is_sigma_over_mean_of_the_means() {
        // Means 100, 102, 104: σ = 2 (sample), NU = 2 %.
        let w = wafer_to_wafer(&[100.0, 102.0, 104.0]);
        assert_eq!(w.wafers, 3);
        assert!((w.mean_nm - 102.0).abs() < 1e-12);
        assert!((w.std_nm - 2.0).abs() < 1e-12);
        assert!((w.nu_pct - 100.0 * 2.0 / 102.0).abs() < 1e-12);
    }
}
