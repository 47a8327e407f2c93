//! A run's uniformity figures as printed by `run`, `resume`, `remeasure`, `refit` and
//! `render`: figures that do not exist (no valid site, σ of one site) are left out, never
//! printed as NaN; and the verdict on a run with no valid site at all.

use isopach::map::stats::LayerSummary;
use isopach::map::Verdict;
use std::path::Path;

/// `49 of 49 sites valid; mean …, 1σ … (… %), range … (… %)`, leaving out figures that do
/// not exist (`0 of 49 sites valid: no valid site, no figures`).
pub fn figures_line(f: &LayerSummary) -> String {
    let mut line = format!("{} of {} sites valid", f.sites_valid, f.sites_total);
    if !f.mean_nm.is_finite() {
        line.push_str(": no valid site, no figures");
        return line;
    }
    line.push_str(&format!("; mean {:.2} nm", f.mean_nm));
    if f.std_nm.is_finite() {
        line.push_str(&format!(
            ", 1σ {:.2} nm ({:.2} %), range {:.2} nm ({:.2} %)",
            f.std_nm, f.nu_1sigma_pct, f.range_nm, f.nu_range_pct
        ));
    }
    line
}

/// `verdict PASS: mean … in [990, 1010] nm; …` when the recipe sets run limits.
pub fn verdict_line(v: Option<&Verdict>) -> Option<String> {
    v.map(|v| format!("verdict {}", v.line()))
}

/// The exit code of a completed run with valid sites: `ACCEPT_FAILED` when it fails its
/// recipe's run limits, else `OK`.
pub fn verdict_code(v: Option<&Verdict>) -> u8 {
    match v {
        Some(v) if !v.pass => super::exit::ACCEPT_FAILED,
        _ => super::exit::OK,
    }
}

/// A figure for a table with three decimals, `-` when it does not exist.
pub fn num(v: f64) -> String {
    if v.is_finite() {
        format!("{v:.3}")
    } else {
        "-".to_string()
    }
}

/// When a completed run has no valid site, why that fails the work and how to go on; `None`
/// when at least one site is valid (or nothing was planned).
pub fn no_valid_site(f: &LayerSummary, run: &Path) -> Option<String> {
    (f.sites_valid == 0 && f.sites_total > 0).then(|| {
        format!(
            "none of the {} sites has a valid result, so the map has no figures. Check the reference (the machine file's \
             [reference] material and what lies under the probe for the reference) and the recipe's \
             [film] window and thickness range against the spectra, then `isopach refit {run} --recipe R` \
             or `isopach remeasure {run} --failed`",
            f.sites_total,
            run = run.display()
        )
    })
}

/// The shared dispersion among journal events, as one line: each fitted coefficient with σ
/// and its correlation with the mean thickness.
pub fn dispersion_line(events: &[isopach::run::events::Event]) -> Option<String> {
    events.iter().find_map(|e| match e {
        isopach::run::events::Event::DispersionFitted { dispersion, .. } => Some(format!(
            "shared dispersion of {} over {} sites: {}",
            dispersion.material,
            dispersion.spectra,
            dispersion
                .coefficients
                .iter()
                .map(|t| format!(
                    "{} = {:.6} ± {:.1e} (correlation with thickness {})",
                    t.name,
                    t.value,
                    t.sigma,
                    num(t.correlation_with_thickness)
                ))
                .collect::<Vec<_>>()
                .join(", ")
        )),
        _ => None,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn no_valid_site_prints_no_nan_and_fails() {
        let none = LayerSummary::from_values(&[f64::NAN, f64::NAN]);
        let line = figures_line(&none);
        assert_eq!(line, "0 of 2 sites valid: no valid site, no figures");
        let why = no_valid_site(&none, Path::new("runs/R")).unwrap();
        assert!(why.contains("isopach remeasure runs/R --failed"), "{why}");
        assert!(!why.to_lowercase().contains("nan"));
    }

    #[test]
    fn one_valid_site_has_a_mean_but_no_spread() {
        let one = LayerSummary::from_values(&[1000.0, f64::NAN]);
        assert_eq!(figures_line(&one), "1 of 2 sites valid; mean 1000.00 nm");
        assert!(no_valid_site(&one, Path::new("R")).is_none());
    }
}
