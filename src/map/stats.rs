//! Uniformity statistics per fitted layer and the `summary.json` object (DESIGN.md §3).
//!
//! Over the valid sites of a layer: count, mean, sample standard deviation (1σ, n − 1 in the
//! denominator), min, max, range, 3σ, % non-uniformity as 100·σ/mean and as
//! 100·(max − min)/(2·mean), and a radial profile fit. Sites that are flagged, or have no
//! value for the layer, are excluded, counted and listed with their flag.
//!
//! The sums are taken over the values sorted and shifted by their median, so the figures do
//! not depend on site order (bit for bit) and keep full precision for thick films with small
//! spread (the NIST StRD NumAcc sets test exactly that).

use super::radial::RadialFit;
use super::sites_table::SiteRow;
use serde::{Deserialize, Serialize};

/// A site left out of a layer's statistics.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ExcludedSite {
    pub site: usize,
    pub x_mm: f64,
    pub y_mm: f64,
    /// The site's flag, or `no value` when it is valid but has no thickness for this layer.
    pub flag: String,
}

/// Uniformity figures of one layer. Figures that do not exist (no valid site; σ of one site)
/// are NaN here and `null` in JSON.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LayerSummary {
    /// Material name of the layer (empty when unknown).
    #[serde(default)]
    pub layer: String,
    pub sites_total: usize,
    pub sites_valid: usize,
    #[serde(with = "nan_as_null")]
    pub mean_nm: f64,
    /// Sample standard deviation (1σ).
    #[serde(with = "nan_as_null")]
    pub std_nm: f64,
    #[serde(with = "nan_as_null")]
    pub min_nm: f64,
    #[serde(with = "nan_as_null")]
    pub max_nm: f64,
    #[serde(with = "nan_as_null")]
    pub range_nm: f64,
    /// 100·σ/mean.
    #[serde(with = "nan_as_null")]
    pub nu_1sigma_pct: f64,
    /// 100·(max − min)/(2·mean).
    #[serde(with = "nan_as_null")]
    pub nu_range_pct: f64,
    /// 3σ.
    #[serde(with = "nan_as_null")]
    pub three_sigma_nm: f64,
    /// Site numbers of the thinnest and thickest valid sites.
    #[serde(default)]
    pub min_site: Option<usize>,
    #[serde(default)]
    pub max_site: Option<usize>,
    /// Thickness against radius (absent without site positions).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub radial: Option<RadialFit>,
    /// Sites left out, with why.
    #[serde(default)]
    pub excluded: Vec<ExcludedSite>,
    /// The recipe's specification window over the valid sites (first layer only; absent
    /// when the recipe sets no `spec_nm`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub spec: Option<SpecCheck>,
}

/// Valid sites inside and outside a specification window `[lo, hi]` (bounds inclusive).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SpecCheck {
    pub lo_nm: f64,
    pub hi_nm: f64,
    pub sites_in: usize,
    /// Site numbers of valid sites outside the window, ascending.
    pub sites_out: Vec<usize>,
}

impl SpecCheck {
    /// Valid sites checked: in and out of the window.
    pub fn checked(&self) -> usize {
        self.sites_in + self.sites_out.len()
    }

    /// Whether `site` is one of the valid sites outside the window.
    pub fn is_out(&self, site: usize) -> bool {
        self.sites_out.binary_search(&site).is_ok()
    }

    /// The window checked over the valid values of layer column `layer`.
    pub fn of(rows: &[SiteRow], layer: usize, [lo, hi]: [f64; 2]) -> SpecCheck {
        let mut sites_in = 0;
        let mut sites_out = Vec::new();
        for r in rows {
            match r.valid_value(layer) {
                Some(v) if (lo..=hi).contains(&v) => sites_in += 1,
                Some(_) => sites_out.push(r.site),
                None => {}
            }
        }
        sites_out.sort_unstable();
        SpecCheck {
            lo_nm: lo,
            hi_nm: hi,
            sites_in,
            sites_out,
        }
    }
}

/// `summary.json`: the first layer's figures at top level, and every layer in `layers` when
/// more than one layer is fitted.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Summary {
    #[serde(flatten)]
    pub first: LayerSummary,
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub layers: Vec<LayerSummary>,
    /// PASS or FAIL against the recipe's run limits (absent when it sets none).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub verdict: Option<super::verdict::Verdict>,
}

impl Summary {
    /// Figures from site rows, one entry per layer column; `layer_names` names them (missing
    /// names stay empty) and `r_norm_mm` (the usable radius) scales the radial fit.
    pub fn from_rows(rows: &[SiteRow], layer_names: &[String], r_norm_mm: f64) -> Summary {
        let n_layers = super::sites_table::layer_count(rows).max(layer_names.len());
        let mut layers: Vec<LayerSummary> = (0..n_layers)
            .map(|k| {
                let name = layer_names.get(k).cloned().unwrap_or_default();
                layer_from_rows(rows, k, name, r_norm_mm)
            })
            .collect();
        let first = layers[0].clone();
        if layers.len() == 1 {
            layers.clear();
        }
        Summary {
            first,
            layers,
            verdict: None,
        }
    }

    /// The same figures with the first layer checked against a specification window.
    pub fn with_spec(mut self, rows: &[SiteRow], window: Option<[f64; 2]>) -> Summary {
        let check = window.map(|w| SpecCheck::of(rows, 0, w));
        self.first.spec = check.clone();
        if let Some(first) = self.layers.first_mut() {
            first.spec = check;
        }
        self
    }

    /// The same figures judged against the run limits of `accept` (first layer).
    pub fn with_verdict(mut self, accept: &crate::recipe::schema::AcceptSpec) -> Summary {
        self.verdict = super::verdict::Verdict::judge(accept, &self.first);
        self
    }

    /// Figures from plain values (all counted valid; no positions, so no radial fit).
    pub fn from_values(values: &[f64]) -> Summary {
        Summary {
            first: LayerSummary::from_values(values),
            layers: Vec::new(),
            verdict: None,
        }
    }

    /// Every layer's figures, first layer first (one entry for a single layer).
    pub fn all_layers(&self) -> &[LayerSummary] {
        if self.layers.is_empty() {
            std::slice::from_ref(&self.first)
        } else {
            &self.layers
        }
    }

    /// The object as pretty JSON text (what `summary.json` holds).
    pub fn to_json(&self) -> String {
        serde_json::to_string_pretty(self).expect("summary is plain data") + "\n"
    }
}

impl LayerSummary {
    /// Figures from plain values; non-finite values are not counted as valid.
    pub fn from_values(values: &[f64]) -> LayerSummary {
        let finite: Vec<f64> = values.iter().copied().filter(|v| v.is_finite()).collect();
        let m = Moments::of(&finite);
        LayerSummary {
            layer: String::new(),
            sites_total: values.len(),
            sites_valid: finite.len(),
            mean_nm: m.mean,
            std_nm: m.std,
            min_nm: m.min,
            max_nm: m.max,
            range_nm: m.max - m.min,
            nu_1sigma_pct: 100.0 * m.std / m.mean,
            nu_range_pct: 100.0 * (m.max - m.min) / (2.0 * m.mean),
            three_sigma_nm: 3.0 * m.std,
            min_site: None,
            max_site: None,
            radial: None,
            excluded: Vec::new(),
            spec: None,
        }
    }
}

fn layer_from_rows(rows: &[SiteRow], k: usize, layer: String, r_norm_mm: f64) -> LayerSummary {
    let mut valid: Vec<(&SiteRow, f64)> = Vec::new();
    let mut excluded = Vec::new();
    for r in rows {
        match r.valid_value(k) {
            Some(v) => valid.push((r, v)),
            None => excluded.push(ExcludedSite {
                site: r.site,
                x_mm: r.x_mm,
                y_mm: r.y_mm,
                flag: if r.is_valid() {
                    "no value".into()
                } else {
                    r.flag.trim().into()
                },
            }),
        }
    }
    excluded.sort_by_key(|e| e.site);
    let values: Vec<f64> = valid.iter().map(|p| p.1).collect();
    let mut s = LayerSummary::from_values(&values);
    // Ties go to the lowest site number so the answer does not depend on row order.
    let pick = |better: fn(f64, f64) -> bool| {
        valid
            .iter()
            .fold(None::<(usize, f64)>, |best, &(r, v)| match best {
                Some((bs, bv)) if !(better(v, bv) || (v == bv && r.site < bs)) => best,
                _ => Some((r.site, v)),
            })
            .map(|b| b.0)
    };
    s.min_site = pick(|a, b| a < b);
    s.max_site = pick(|a, b| a > b);
    let mut points: Vec<(f64, f64)> = valid.iter().map(|(r, v)| (r.radius_mm(), *v)).collect();
    points.sort_by(|a, b| a.0.total_cmp(&b.0).then(a.1.total_cmp(&b.1)));
    s.radial = RadialFit::fit(&points, r_norm_mm);
    s.layer = layer;
    s.sites_total = rows.len();
    s.excluded = excluded;
    s
}

/// Mean, sample standard deviation and extremes of finite values.
struct Moments {
    mean: f64,
    std: f64,
    min: f64,
    max: f64,
}

impl Moments {
    fn of(values: &[f64]) -> Moments {
        let n = values.len();
        if n == 0 {
            return Moments {
                mean: f64::NAN,
                std: f64::NAN,
                min: f64::NAN,
                max: f64::NAN,
            };
        }
        let mut v = values.to_vec();
        v.sort_by(f64::total_cmp);
        let shift = v[n / 2];
        // Corrected two-pass algorithm (Chan, Golub & LeVeque 1983): the second sum removes
        // the rounding left in the first pass's mean.
        let d_mean = v.iter().map(|x| x - shift).sum::<f64>() / n as f64;
        let mean = shift + d_mean;
        let (ss, s1) = v.iter().fold((0.0, 0.0), |(ss, s1), x| {
            let d = (x - shift) - d_mean;
            (ss + d * d, s1 + d)
        });
        let std = if n > 1 {
            ((ss - s1 * s1 / n as f64) / (n - 1) as f64).max(0.0).sqrt()
        } else {
            f64::NAN
        };
        Moments {
            mean,
            std,
            min: v[0],
            max: v[n - 1],
        }
    }
}

/// Serde for figures that may not exist: NaN is written as `null` and read back as NaN.
pub(super) mod nan_as_null {
    use serde::{Deserialize, Deserializer, Serializer};

    pub fn serialize<S: Serializer>(v: &f64, s: S) -> Result<S::Ok, S::Error> {
        if v.is_finite() {
            s.serialize_f64(*v)
        } else {
            s.serialize_none()
        }
    }

    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<f64, D::Error> {
        Ok(Option::<f64>::deserialize(d)?.unwrap_or(f64::NAN))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn one_site_has_a_mean_but_no_sigma() {
        let s = LayerSummary::from_values(&[1000.0]);
        assert_eq!(s.mean_nm, 1000.0);
        assert!(s.std_nm.is_nan() && s.nu_1sigma_pct.is_nan());
        assert_eq!(s.range_nm, 0.0);
        let none = LayerSummary::from_values(&[]);
        assert_eq!(none.sites_valid, 0);
        assert!(none.mean_nm.is_nan());
    }

    fn row(site: usize, t: f64, flag: &str) -> SiteRow {
        SiteRow {
            site,
            x_mm: site as f64,
            y_mm: 0.0,
            thickness_nm: vec![t],
            sigma_nm: vec![0.1],
            gof: 0.99,
            flag: flag.into(),
        }
    }

    #[test]
    fn spec_counts_valid_sites_with_inclusive_bounds() {
        let rows = [
            row(4, 1051.0, "ok"),
            row(1, 950.0, "ok"),
            row(2, 1050.0, ""),
            row(3, 949.9, "ok"),
            row(5, 2000.0, "poor-fit"),
        ];
        let c = SpecCheck::of(&rows, 0, [950.0, 1050.0]);
        assert_eq!((c.sites_in, c.sites_out), (2, vec![3, 4]));
        let s = Summary::from_rows(&rows, &["sio2".into()], 70.0)
            .with_spec(&rows, Some([950.0, 1050.0]));
        let json: serde_json::Value = serde_json::from_str(&s.to_json()).unwrap();
        assert_eq!(json["spec"]["sites_out"], serde_json::json!([3, 4]));
        let plain = Summary::from_rows(&rows, &["sio2".into()], 70.0).with_spec(&rows, None);
        assert!(!plain.to_json().contains("spec"));
    }
}
