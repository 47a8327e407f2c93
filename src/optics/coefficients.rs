//! The coefficients of a formula as named numbers, for fitting a material's dispersion:
//! which a formula has ([`names`]), their values ([`get`], [`set`]) and the range each may
//! take ([`limits`]: the recipe's bounds, else physical limits).

use super::spec::{MaterialSpec, MAX_K, MAX_N};

/// Names of the coefficients of a formula that can be fitted: `a`, `b`, `c`, `k` of Cauchy
/// (and `k0`, `beta` of its Urbach tail when it has one); `b1`, `c1`, `b2`, … of Sellmeier.
pub fn names(spec: &MaterialSpec) -> Vec<String> {
    match spec {
        MaterialSpec::Cauchy { urbach, .. } => {
            let mut n: Vec<String> = ["a", "b", "c", "k"].map(String::from).to_vec();
            if urbach.is_some() {
                n.extend(["k0", "beta"].map(String::from));
            }
            n
        }
        MaterialSpec::Sellmeier { b, .. } => (1..=b.len())
            .flat_map(|i| [format!("b{i}"), format!("c{i}")])
            .collect(),
        _ => Vec::new(),
    }
}

/// The 0-based term of a Sellmeier coefficient name (`b2` → ('b', 1)).
fn sellmeier_term(name: &str) -> Option<(char, usize)> {
    let mut chars = name.chars();
    let which = chars.next().filter(|c| *c == 'b' || *c == 'c')?;
    let i: usize = chars.as_str().parse().ok()?;
    (i >= 1).then(|| (which, i - 1))
}

/// The value of a coefficient, if the formula has it.
pub fn get(spec: &MaterialSpec, name: &str) -> Option<f64> {
    match spec {
        MaterialSpec::Cauchy {
            a, b, c, k, urbach, ..
        } => match name {
            "a" => Some(*a),
            "b" => Some(*b),
            "c" => Some(*c),
            "k" => Some(*k),
            "k0" => urbach.map(|u| u.k0),
            "beta" => urbach.map(|u| u.beta_per_ev),
            _ => None,
        },
        MaterialSpec::Sellmeier { b, c, .. } => match sellmeier_term(name)? {
            ('b', i) => b.get(i).copied(),
            (_, i) => c.get(i).copied(),
        },
        _ => None,
    }
}

/// Sets a coefficient; false when the formula has no such coefficient.
pub fn set(spec: &mut MaterialSpec, name: &str, value: f64) -> bool {
    let slot: Option<&mut f64> = match spec {
        MaterialSpec::Cauchy {
            a, b, c, k, urbach, ..
        } => match name {
            "a" => Some(a),
            "b" => Some(b),
            "c" => Some(c),
            "k" => Some(k),
            "k0" => urbach.as_mut().map(|u| &mut u.k0),
            "beta" => urbach.as_mut().map(|u| &mut u.beta_per_ev),
            _ => None,
        },
        MaterialSpec::Sellmeier { b, c, .. } => match sellmeier_term(name) {
            Some(('b', i)) => b.get_mut(i),
            Some((_, i)) => c.get_mut(i),
            None => None,
        },
        _ => None,
    };
    slot.map(|s| *s = value).is_some()
}

/// Physical limits of a coefficient: n ≥ 1 for Cauchy `a`, k ≥ 0, a rising Urbach tail,
/// Sellmeier poles at positive cᵢ (µm²). Generous on purpose: the recipe's bounds narrow them.
pub fn physical_limits(name: &str) -> [f64; 2] {
    match name {
        "a" => [1.0, MAX_N],
        "b" => [-1.0, 1.0],
        "c" => [-0.1, 0.1],
        "k" | "k0" => [0.0, MAX_K],
        "beta" => [0.0, 100.0],
        n if n.starts_with('b') => [0.0, 50.0],
        _ => [0.0, 1e4],
    }
}

/// The range a fitted coefficient may take: the recipe's `bounds.NAME`, else its physical
/// limits.
pub fn limits(spec: &MaterialSpec, name: &str) -> [f64; 2] {
    spec.fit_spec()
        .and_then(|f| f.bounds.get(name).copied())
        .unwrap_or_else(|| physical_limits(name))
}

/// The same formula with nothing marked as fitted (a ready material once coefficients are
/// known).
pub fn fixed(spec: &MaterialSpec) -> MaterialSpec {
    let mut s = spec.clone();
    if let MaterialSpec::Cauchy { fit, bounds, .. } | MaterialSpec::Sellmeier { fit, bounds, .. } =
        &mut s
    {
        fit.clear();
        bounds.clear();
    }
    s
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::optics::dispersion::Urbach;

    #[test]
    fn names_values_and_setting_round_trip() {
        let mut s = MaterialSpec::Cauchy {
            a: 1.6,
            b: 0.01,
            c: 0.0,
            k: 0.0,
            urbach: Some(Urbach {
                k0: 1e-3,
                beta_per_ev: 3.0,
                e0_ev: 3.0,
            }),
            fit: vec!["a".into()],
            bounds: Default::default(),
        };
        assert_eq!(names(&s), ["a", "b", "c", "k", "k0", "beta"]);
        assert!(set(&mut s, "beta", 5.0) && set(&mut s, "a", 1.55));
        assert_eq!((get(&s, "beta"), get(&s, "a")), (Some(5.0), Some(1.55)));
        assert!(!set(&mut s, "b1", 1.0));
        assert!(!fixed(&s).has_fitted_coefficients());
        let mut m = MaterialSpec::Sellmeier {
            b: vec![0.7, 0.4],
            c: vec![0.005, 0.01],
            fit: vec![],
            bounds: Default::default(),
        };
        assert_eq!(names(&m), ["b1", "c1", "b2", "c2"]);
        assert!(set(&mut m, "c2", 0.02) && !set(&mut m, "b3", 1.0) && !set(&mut m, "b0", 1.0));
        assert_eq!(get(&m, "c2"), Some(0.02));
    }
}
