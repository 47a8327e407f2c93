//! The built-in materials, from published data compiled into the binary (`data/optical/`,
//! CC0, citations in its README).

use super::material::{Dispersion, Material};
use super::table::{builtin_path, parse_rii_tabulated, NkTable};
use std::sync::Arc;

const GREEN_SI: &str = include_str!("../../data/optical/Si_nk_Green-2008.yml");
const MALITSON_SIO2: &str = include_str!("../../data/optical/SiO2_nk_Malitson.yml");
const LUKE_SI3N4: &str = include_str!("../../data/optical/Si3N4_nk_Luke.yml");
const ASPNES_SI: &str = include_str!("../../data/optical/Si_nk_Aspnes.yml");
const PHILIPP_SI3N4: &str = include_str!("../../data/optical/Si3N4_nk_Philipp.yml");

/// Generic resist: n = 1.62 + 0.010/λ² (λ in µm), k = 0. Approximate: a typical novolac-type
/// positive resist is about this (from memory); a real resist needs its own coefficients.
pub const RESIST_CAUCHY: [f64; 3] = [1.62, 0.010, 0.0];

/// Every built-in material, in [`super::BUILTIN_NAMES`] order.
pub fn all() -> Vec<Material> {
    vec![
        // Air taken as n = 1 (n − 1 ≈ 2.8e-4 at 589 nm, common practice to neglect).
        Material::constant("air", 1.0, 0.0)
            .with_source("n = 1 (vacuum; air's n − 1 ≈ 3e-4 neglected)"),
        tabulated(
            "si",
            GREEN_SI,
            "Si_nk_Green-2008.yml",
            "M. A. Green, Sol. Energ. Mat. Sol. Cells 92, 1305 (2008), c-Si at 300 K",
        ),
        rii_formula1("sio2", MALITSON_SIO2).with_source(
            "I. H. Malitson, J. Opt. Soc. Am. 55, 1205 (1965), fused silica Sellmeier",
        ),
        rii_formula1("si3n4", LUKE_SI3N4)
            .with_source("K. Luke et al., Opt. Lett. 40, 4823 (2015), LPCVD Si3N4 Sellmeier"),
        Material::new(
            "resist",
            Dispersion::Cauchy {
                a: RESIST_CAUCHY[0],
                b: RESIST_CAUCHY[1],
                c: RESIST_CAUCHY[2],
                k: 0.0,
            },
        )
        .with_range_nm(450.0, 1000.0)
        .with_source(
            "generic Cauchy resist, approximate: fit real films with their own coefficients",
        ),
        tabulated(
            "si-aspnes",
            ASPNES_SI,
            "Si_nk_Aspnes.yml",
            "D. E. Aspnes, A. A. Studna, Phys. Rev. B 27, 985 (1983), c-Si, 207–827 nm",
        ),
        rii_formula1("si3n4-philipp", PHILIPP_SI3N4).with_source(
            "H. R. Philipp, J. Electrochem. Soc. 120, 295 (1973), CVD Si3N4 Sellmeier",
        ),
    ]
}

/// A material from an embedded refractiveindex.info "tabulated nk" file.
fn tabulated(name: &str, text: &str, file: &str, source: &str) -> Material {
    let (rows, lines) = parse_rii_tabulated(text);
    let table = NkTable::from_rows(&rows, &lines, &builtin_path(file))
        .expect("the embedded tables are valid (checked by a unit test)");
    Material::new(name, Dispersion::Table(Arc::new(table))).with_source(source)
}

/// A Sellmeier material from a refractiveindex.info "formula 1" file:
/// n² − 1 = C1 + Σ C(2i) λ²/(λ² − C(2i+1)²); C1 becomes a term with a zero pole.
fn rii_formula1(name: &str, text: &str) -> Material {
    let field = |key: &str| -> Vec<f64> {
        text.lines()
            .find_map(|l| l.trim().strip_prefix(key))
            .map(|v| {
                v.split_whitespace()
                    .filter_map(|c| c.parse().ok())
                    .collect()
            })
            .unwrap_or_default()
    };
    let coeff = field("coefficients:");
    let range = field("wavelength_range:");
    let mut b = Vec::new();
    let mut c = Vec::new();
    if coeff.first().is_some_and(|c1| *c1 != 0.0) {
        b.push(coeff[0]);
        c.push(0.0);
    }
    for pair in coeff[1..].chunks_exact(2) {
        b.push(pair[0]);
        c.push(pair[1] * pair[1]);
    }
    let m = Material::new(name, Dispersion::Sellmeier { b, c });
    match range.as_slice() {
        [lo, hi] => m.with_range_nm(lo * 1000.0, hi * 1000.0),
        _ => m,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn get(name: &str) -> Material {
        all().into_iter().find(|m| m.name() == name).unwrap()
    }

    #[test]
    fn names_match_the_recipe_list() {
        let names: Vec<String> = all().iter().map(|m| m.name().to_string()).collect();
        assert_eq!(names, super::super::BUILTIN_NAMES);
    }

    #[test]
    fn green_2008_rows() {
        // Rows of M. A. Green (2008), Table 1 as in data/optical/Si_nk_Green-2008.yml.
        let si = get("si");
        for (w, n, k) in [
            (400.0, 5.613, 0.296),
            (500.0, 4.294, 4.4165e-2),
            (800.0, 3.675, 5.4113e-3),
            (1000.0, 3.572, 5.093e-4),
        ] {
            let v = si.index(w);
            assert!(
                (v.re - n).abs() < 1e-12 && (v.im - k).abs() < 1e-12,
                "{w}: {v}"
            );
        }
        assert_eq!(si.range_nm(), Some((250.0, 1450.0)));
    }

    #[test]
    fn aspnes_rows_and_philipp_formula() {
        // Rows of Aspnes & Studna (1983) as in data/optical/Si_nk_Aspnes.yml (λ in µm there).
        let si = get("si-aspnes");
        for (w, n, k) in [
            (495.9, 4.320, 0.073),
            (590.4, 3.969, 0.030),
            (619.9, 3.906, 0.022),
        ] {
            let v = si.index(w);
            assert!(
                (v.re - n).abs() < 1e-9 && (v.im - k).abs() < 1e-9,
                "{w}: {v}"
            );
        }
        assert_eq!(si.range_nm(), Some((206.6, 826.6)));
        // Philipp (1973) via Bååk's formula, by hand at 632.8 nm:
        // n² = 1 + 2.8939·0.400436/(0.400436 − 0.13967²) = 4.04210 → n = 2.01050.
        let n = get("si3n4-philipp").index(632.8).re;
        assert!((n - 2.01050).abs() < 2e-5, "{n}");
        assert_eq!(get("si3n4-philipp").range_nm(), Some((207.0, 1240.0)));
    }

    #[test]
    fn malitson_and_luke_formulas() {
        // Malitson (1965): n_d(587.56 nm) = 1.4585 (from memory, the catalogue value).
        let n = get("sio2").index(587.56).re;
        assert!((n - 1.4585).abs() < 1e-4, "{n}");
        assert_eq!(get("sio2").range_nm(), Some((210.0, 6700.0)));
        // Luke (2015) formula evaluated by hand at 1550 nm:
        // n² = 1 + 3.0249·2.4025/(2.4025 − 0.018317) + 40314·2.4025/(2.4025 − 1537208) → n ≈ 1.9963.
        let l2: f64 = 1.55 * 1.55;
        let n2 = 1.0
            + 3.0249 * l2 / (l2 - 0.1353406f64.powi(2))
            + 40314.0 * l2 / (l2 - 1239.842f64.powi(2));
        let n = get("si3n4").index(1550.0).re;
        assert!(
            (n - n2.sqrt()).abs() < 1e-12 && (n - 1.9963).abs() < 5e-4,
            "{n}"
        );
    }
}
