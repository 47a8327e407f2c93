//! The result of fitting one spectrum: exactly the `isopach fit --json` object of
//! DESIGN.md §4 (`{"method", "layers": [{"material", "thickness_nm", "sigma_nm"}], "gof", "flags"}`).
//! A thickness that could not be determined is NaN in memory and `null` in JSON.

use super::quality::INVALIDATING;
use serde::{Deserialize, Deserializer, Serialize, Serializer};

/// One fitted layer.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LayerResult {
    pub material: String,
    #[serde(serialize_with = "nan_as_null", deserialize_with = "null_as_nan")]
    pub thickness_nm: f64,
    #[serde(serialize_with = "nan_as_null", deserialize_with = "null_as_nan")]
    pub sigma_nm: f64,
}

/// The outcome of one fit; `layers` lists the fitted layers only, top first.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FitResult {
    /// The method that produced the thicknesses: `model`, `fourier` or `extrema`.
    pub method: String,
    pub layers: Vec<LayerResult>,
    /// Goodness of fit, 0..1.
    pub gof: f64,
    pub flags: Vec<String>,
    /// Fitted parameters other than thicknesses (scale, tilt, dispersion coefficients
    /// `MATERIAL.NAME`), absent from the JSON when none was fitted.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub terms: Vec<Term>,
}

impl FitResult {
    /// Whether the site counts: a thickness for every layer, gof ≥ `min_gof`, and no flag
    /// that invalidates it (`no-fit`, `saturated`, `low-signal`, `outside-range`, `poor-fit`).
    pub fn is_valid(&self, min_gof: f64) -> bool {
        self.gof >= min_gof
            && self.layers.iter().all(|l| l.thickness_nm.is_finite())
            && !self
                .flags
                .iter()
                .any(|f| INVALIDATING.contains(&f.as_str()))
    }

    /// Whether a flag is set.
    pub fn has_flag(&self, flag: &str) -> bool {
        self.flags.iter().any(|f| f == flag)
    }

    /// The first fitted layer's thickness (what a single-film map shows).
    pub fn thickness_nm(&self) -> f64 {
        self.layers.first().map_or(f64::NAN, |l| l.thickness_nm)
    }
}

/// A fitted parameter other than a thickness (a systematic term), with its statistical σ
/// and its correlation with the first fitted thickness.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Term {
    pub name: String,
    #[serde(serialize_with = "nan_as_null", deserialize_with = "null_as_nan")]
    pub value: f64,
    #[serde(serialize_with = "nan_as_null", deserialize_with = "null_as_nan")]
    pub sigma: f64,
    #[serde(serialize_with = "nan_as_null", deserialize_with = "null_as_nan")]
    pub correlation_with_thickness: f64,
}

fn nan_as_null<S: Serializer>(v: &f64, s: S) -> Result<S::Ok, S::Error> {
    if v.is_finite() {
        s.serialize_f64(*v)
    } else {
        s.serialize_none()
    }
}

fn null_as_nan<'de, D: Deserializer<'de>>(d: D) -> Result<f64, D::Error> {
    Ok(Option::<f64>::deserialize(d)?.unwrap_or(f64::NAN))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn json_is_the_contract_object() {
        let r = FitResult {
            method: "model".into(),
            layers: vec![LayerResult {
                material: "sio2".into(),
                thickness_nm: 1001.2,
                sigma_nm: 0.4,
            }],
            gof: 0.998,
            flags: vec![],
            terms: vec![],
        };
        let j = serde_json::to_string(&r).unwrap();
        assert_eq!(
            j,
            r#"{"method":"model","layers":[{"material":"sio2","thickness_nm":1001.2,"sigma_nm":0.4}],"gof":0.998,"flags":[]}"#
        );
        assert_eq!(serde_json::from_str::<FitResult>(&j).unwrap(), r);
        let mut bad = r.clone();
        bad.layers[0].thickness_nm = f64::NAN;
        let j = serde_json::to_string(&bad).unwrap();
        assert!(j.contains(r#""thickness_nm":null"#));
        let back: FitResult = serde_json::from_str(&j).unwrap();
        assert!(back.layers[0].thickness_nm.is_nan() && !back.is_valid(0.0));
        assert!(r.is_valid(0.95) && !r.is_valid(0.999));
    }
}
