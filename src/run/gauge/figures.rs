//! The figures of a gauge study from its readings: pure arithmetic over plain values.
//!
//! Per site, with `x_pk` the k-th reading of pass p (one-way random-effects analysis of
//! variance with passes as groups; e.g. Montgomery, *Design and Analysis of Experiments*,
//! ch. 3, "the random effects model" — from memory):
//!
//! - repeatability σ_r: the pooled within-pass standard deviation,
//!   σ_r² = Σ_p Σ_k (x_pk − x̄_p)² / Σ_p (n_p − 1);
//! - reproducibility σ_R: the pass-to-pass part, σ_R² = max(0, s²(x̄_p) − σ_r²/n̄), with
//!   s²(x̄_p) the sample variance of the pass means and n̄ the mean readings per pass;
//! - combined (the gauge's σ): √(σ_r² + σ_R²).
//!
//! Pooled over sites: σ_r from the summed squares and degrees of freedom, σ_R and the others
//! as the root mean square over the sites that have them.
//!
//! Against the spec window (common practice): P/T = 6σ/(USL − LSL); the verdict "good" at
//! P/T ≤ 0.1, "acceptable" at ≤ 0.3, above "not fit". With the site-to-site spread of the
//! site means standing for the part variation, the number of distinct categories
//! ndc = ⌊1.41·σ_part/σ_gauge⌋ (AIAG, *Measurement Systems Analysis*, 4th ed., 2010 — from
//! memory), where σ_part² = s²(site means) − σ_gauge²/n̄ (the gauge's share taken out, floor 0).

use serde::{Deserialize, Serialize};

/// One reading of a site: the pass it belongs to, the thickness and the fit's own σ.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Reading {
    pub pass: u32,
    pub thickness_nm: f64,
    pub fit_sigma_nm: f64,
}

/// Scatter of one site (or of all sites pooled). `None`: too few readings for it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Scatter {
    /// Readings used.
    pub count: usize,
    pub mean_nm: Option<f64>,
    pub repeatability_nm: Option<f64>,
    pub reproducibility_nm: Option<f64>,
    /// √(repeatability² + reproducibility²); the repeatability alone with one pass.
    pub combined_nm: Option<f64>,
    /// Mean of the readings' own fit σ.
    pub fit_sigma_nm: Option<f64>,
    /// Cramér–Rao bound of the thickness from the measured noise level (see `crb`).
    pub crb_nm: Option<f64>,
    /// Within-pass sum of squares and its degrees of freedom (for pooling).
    #[serde(skip)]
    within: (f64, usize),
}

fn mean(v: &[f64]) -> Option<f64> {
    (!v.is_empty()).then(|| v.iter().sum::<f64>() / v.len() as f64)
}

/// Sample variance (n − 1); `None` below two values.
pub fn sample_variance(v: &[f64]) -> Option<f64> {
    let m = mean(v)?;
    (v.len() >= 2).then(|| v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (v.len() - 1) as f64)
}

/// Root mean square of the values present; `None` when none is.
fn rms(values: impl Iterator<Item = Option<f64>>) -> Option<f64> {
    let v: Vec<f64> = values.flatten().map(|x| x * x).collect();
    mean(&v).map(f64::sqrt)
}

impl Scatter {
    /// The scatter of one site's readings, with its Cramér–Rao bound (computed elsewhere).
    pub fn of_site(readings: &[Reading], crb_nm: Option<f64>) -> Scatter {
        let mut passes: Vec<u32> = readings.iter().map(|r| r.pass).collect();
        passes.sort();
        passes.dedup();
        let groups: Vec<Vec<f64>> = passes
            .iter()
            .map(|p| {
                readings
                    .iter()
                    .filter(|r| r.pass == *p)
                    .map(|r| r.thickness_nm)
                    .collect()
            })
            .collect();
        let within = groups.iter().fold((0.0, 0usize), |(ss, dof), g| {
            let m = mean(g).unwrap_or_default();
            let s: f64 = g.iter().map(|x| (x - m).powi(2)).sum();
            (ss + s, dof + g.len().saturating_sub(1))
        });
        let repeatability = (within.1 > 0).then(|| (within.0 / within.1 as f64).sqrt());
        let pass_means: Vec<f64> = groups.iter().filter_map(|g| mean(g)).collect();
        let per_pass = readings.len() as f64 / groups.len().max(1) as f64;
        let reproducibility = match (sample_variance(&pass_means), repeatability) {
            (Some(between), Some(r)) => Some((between - r * r / per_pass).max(0.0).sqrt()),
            _ => None,
        };
        let all: Vec<f64> = readings.iter().map(|r| r.thickness_nm).collect();
        let fit: Vec<f64> = readings.iter().map(|r| r.fit_sigma_nm).collect();
        Scatter {
            count: readings.len(),
            mean_nm: mean(&all),
            repeatability_nm: repeatability,
            reproducibility_nm: reproducibility,
            combined_nm: combined(repeatability, reproducibility),
            fit_sigma_nm: mean(&fit).filter(|v| v.is_finite()),
            crb_nm,
            within,
        }
    }

    /// The sites pooled: see the module doc.
    pub fn pooled(sites: &[Scatter]) -> Scatter {
        let within = sites
            .iter()
            .fold((0.0, 0), |(ss, dof), s| (ss + s.within.0, dof + s.within.1));
        let repeatability = (within.1 > 0).then(|| (within.0 / within.1 as f64).sqrt());
        let reproducibility = rms(sites.iter().map(|s| s.reproducibility_nm));
        let means: Vec<f64> = sites.iter().filter_map(|s| s.mean_nm).collect();
        Scatter {
            count: sites.iter().map(|s| s.count).sum(),
            mean_nm: mean(&means),
            repeatability_nm: repeatability,
            reproducibility_nm: reproducibility,
            combined_nm: combined(repeatability, reproducibility),
            fit_sigma_nm: mean(
                &sites
                    .iter()
                    .filter_map(|s| s.fit_sigma_nm)
                    .collect::<Vec<_>>(),
            ),
            crb_nm: rms(sites.iter().map(|s| s.crb_nm)),
            within,
        }
    }
}

fn combined(repeatability: Option<f64>, reproducibility: Option<f64>) -> Option<f64> {
    repeatability.map(|r| r.hypot(reproducibility.unwrap_or(0.0)))
}

/// The gauge against the spec window and the part variation.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Capability {
    /// The spec window [LSL, USL], nm (the recipe's `[accept] spec_nm`).
    pub spec_nm: Option<[f64; 2]>,
    /// 6σ_gauge/(USL − LSL).
    pub p_to_t: Option<f64>,
    /// σ of the site means less the gauge's share: the part variation, nm.
    pub part_sigma_nm: Option<f64>,
    /// Number of distinct categories, ⌊1.41·σ_part/σ_gauge⌋.
    pub ndc: Option<u64>,
    /// `good`, `acceptable`, `not fit`, or why there is none.
    pub verdict: String,
}

/// P/T at or below this: a good gauge for the spec (common practice).
pub const PT_GOOD: f64 = 0.1;
/// P/T at or below this: acceptable (common practice).
pub const PT_ACCEPTABLE: f64 = 0.3;

/// The verdict of a P/T ratio (see [`PT_GOOD`], [`PT_ACCEPTABLE`]).
pub fn verdict_of(p_to_t: f64) -> &'static str {
    if p_to_t <= PT_GOOD {
        "good"
    } else if p_to_t <= PT_ACCEPTABLE {
        "acceptable"
    } else {
        "not fit"
    }
}

impl Capability {
    /// The capability of a gauge of σ `gauge_nm` for `spec_nm`, the sites' means and the
    /// readings per site.
    pub fn of(
        gauge_nm: Option<f64>,
        spec_nm: Option<[f64; 2]>,
        site_means: &[f64],
        per_site: f64,
    ) -> Capability {
        let tolerance = spec_nm.map(|[lo, hi]| hi - lo).filter(|t| *t > 0.0);
        let p_to_t = gauge_nm.zip(tolerance).map(|(g, t)| 6.0 * g / t);
        let part_sigma_nm = sample_variance(site_means)
            .zip(gauge_nm)
            .map(|(v, g)| (v - g * g / per_site.max(1.0)).max(0.0).sqrt());
        let ndc = part_sigma_nm
            .zip(gauge_nm.filter(|g| *g > 0.0))
            .map(|(p, g)| (1.41 * p / g).floor() as u64);
        let verdict = match (p_to_t, gauge_nm) {
            (Some(r), _) => verdict_of(r).to_string(),
            (None, None) => "no verdict: too few readings for a σ".to_string(),
            (None, Some(_)) => "no verdict: the recipe sets no [accept] spec_nm".to_string(),
        };
        Capability {
            spec_nm,
            p_to_t,
            part_sigma_nm,
            ndc,
            verdict,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn r(pass: u32, t: f64) -> Reading {
        Reading {
            pass,
            thickness_nm: t,
            fit_sigma_nm: 0.1,
        }
    }

    #[test]
    fn one_way_anova_by_hand() {
        // Pass 1: 10, 12 (mean 11, SS 2); pass 2: 14, 16 (mean 15, SS 2).
        // σ_r² = 4/2 = 2; pass means 11, 15: s² = 8; σ_R² = 8 − 2/2 = 7.
        let s = Scatter::of_site(&[r(1, 10.0), r(1, 12.0), r(2, 14.0), r(2, 16.0)], None);
        assert_eq!(s.mean_nm, Some(13.0));
        assert!((s.repeatability_nm.unwrap() - 2f64.sqrt()).abs() < 1e-12);
        assert!((s.reproducibility_nm.unwrap() - 7f64.sqrt()).abs() < 1e-12);
        assert!((s.combined_nm.unwrap() - 3.0).abs() < 1e-12);
        assert_eq!(s.fit_sigma_nm, Some(0.1));
        // One pass: no reproducibility, combined = repeatability.
        let one = Scatter::of_site(&[r(1, 10.0), r(1, 12.0)], None);
        assert_eq!(one.reproducibility_nm, None);
        assert_eq!(one.combined_nm, one.repeatability_nm);
        // Pooled: SS 2 + 2 + 2 over 1 + 1 + 1 dof.
        let p = Scatter::pooled(&[s, one]);
        assert!((p.repeatability_nm.unwrap() - 2f64.sqrt()).abs() < 1e-12);
        assert_eq!(p.mean_nm, Some(12.0));
    }

    #[test]
    fn p_to_t_ndc_and_verdict() {
        // 6·0.05/(105 − 95) = 0.03: good. Site means 100, 102, 104: s² = 4; σ_part² =
        // 4 − 0.05²/10; ndc = ⌊1.41·1.99994/0.05⌋ = 56.
        let c = Capability::of(
            Some(0.05),
            Some([95.0, 105.0]),
            &[100.0, 102.0, 104.0],
            10.0,
        );
        assert!((c.p_to_t.unwrap() - 0.03).abs() < 1e-12);
        assert_eq!(c.verdict, "good");
        assert_eq!(c.ndc, Some(56));
        assert_eq!(verdict_of(0.1), "good");
        assert_eq!(verdict_of(0.3), "acceptable");
        assert_eq!(verdict_of(0.31), "not fit");
        let none = Capability::of(Some(0.05), None, &[100.0], 10.0);
        assert_eq!(none.p_to_t, None);
        assert_eq!(none.ndc, None);
        assert!(none.verdict.contains("spec_nm"), "{}", none.verdict);
    }
}
