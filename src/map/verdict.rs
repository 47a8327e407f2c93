//! The verdict of a completed run: its figures held against the recipe's `[accept]` limits on
//! the mean, the 1σ, the non-uniformity 100·σ/mean and the share of planned sites with a
//! valid result (first fitted layer).
//!
//! A figure that does not exist (no valid site, or the σ of a single site) cannot show that a
//! limit holds, so its check fails and says why. Without any run limit there is no verdict.

use super::stats::LayerSummary;
use crate::recipe::schema::AcceptSpec;
use serde::{Deserialize, Serialize};

/// One limit and how the run fared against it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LimitCheck {
    /// What is limited: `mean`, `1σ`, `NU` or `valid sites`.
    pub figure: String,
    /// The limit as read: `in [950, 1050] nm`, `≤ 5 nm`, `≤ 1 %`, `≥ 90 %`.
    pub limit: String,
    /// The run's figure (`null` when it does not exist).
    #[serde(with = "super::stats::nan_as_null")]
    pub value: f64,
    /// Its unit (`nm` or `%`).
    pub unit: String,
    pub pass: bool,
}

impl LimitCheck {
    /// `1σ 6.20 nm > 5 nm` for a failed check, `1σ 3.10 nm ≤ 5 nm` for one that holds.
    pub fn text(&self) -> String {
        if !self.value.is_finite() {
            return format!(
                "{} unknown (too few valid sites; limit {})",
                self.figure, self.limit
            );
        }
        let value = format!("{} {:.2} {}", self.figure, self.value, self.unit);
        match (self.pass, self.limit.split_once(' ')) {
            (true, _) => format!("{value} {}", self.limit),
            (false, Some(("in", window))) => format!("{value} outside {window}"),
            (false, Some(("≤", bound))) => format!("{value} > {bound}"),
            (false, Some(("≥", bound))) => format!("{value} < {bound}"),
            (false, _) => format!("{value} fails {}", self.limit),
        }
    }
}

/// PASS or FAIL of a completed run, with every limit checked.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Verdict {
    pub pass: bool,
    pub checks: Vec<LimitCheck>,
}

impl Verdict {
    /// The figures of `first` (the first fitted layer) against the run limits of `accept`;
    /// `None` when the recipe sets none.
    pub fn judge(accept: &AcceptSpec, first: &LayerSummary) -> Option<Verdict> {
        let mut checks = Vec::new();
        let mut at_most = |figure: &str, value: f64, limit: Option<f64>, unit: &str| {
            if let Some(max) = limit {
                checks.push(LimitCheck {
                    figure: figure.into(),
                    limit: format!("≤ {max} {unit}"),
                    value,
                    unit: unit.into(),
                    pass: value <= max,
                });
            }
        };
        at_most("1σ", first.std_nm, accept.max_std_nm, "nm");
        at_most("NU", first.nu_1sigma_pct, accept.max_nu_pct, "%");
        if let Some([lo, hi]) = accept.mean_nm {
            checks.insert(
                0,
                LimitCheck {
                    figure: "mean".into(),
                    limit: format!("in [{lo}, {hi}] nm"),
                    value: first.mean_nm,
                    unit: "nm".into(),
                    pass: (lo..=hi).contains(&first.mean_nm),
                },
            );
        }
        if let Some(min) = accept.min_valid_pct {
            let share = if first.sites_total == 0 {
                f64::NAN
            } else {
                100.0 * first.sites_valid as f64 / first.sites_total as f64
            };
            checks.push(LimitCheck {
                figure: "valid sites".into(),
                limit: format!("≥ {min} %"),
                value: share,
                unit: "%".into(),
                pass: share >= min,
            });
        }
        (!checks.is_empty()).then(|| Verdict {
            pass: checks.iter().all(|c| c.pass),
            checks,
        })
    }

    /// `PASS` or `FAIL`.
    pub fn word(&self) -> &'static str {
        if self.pass {
            "PASS"
        } else {
            "FAIL"
        }
    }

    /// The reason in one line: the failed checks, or every check when all hold.
    pub fn reason(&self) -> String {
        let shown: Vec<String> = self
            .checks
            .iter()
            .filter(|c| self.pass || !c.pass)
            .map(LimitCheck::text)
            .collect();
        shown.join("; ")
    }

    /// `PASS: mean 1001.20 nm in [950, 1050] nm; …` or `FAIL: 1σ 6.20 nm > 5 nm`.
    pub fn line(&self) -> String {
        format!("{}: {}", self.word(), self.reason())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn figures(values: &[f64], total: usize) -> LayerSummary {
        let mut s = LayerSummary::from_values(values);
        s.sites_total = total;
        s
    }

    fn limits() -> AcceptSpec {
        AcceptSpec {
            mean_nm: Some([990.0, 1010.0]),
            max_std_nm: Some(5.0),
            max_nu_pct: Some(0.5),
            min_valid_pct: Some(90.0),
            ..AcceptSpec::default()
        }
    }

    #[test]
    fn no_run_limit_gives_no_verdict() {
        assert_eq!(
            Verdict::judge(&AcceptSpec::default(), &figures(&[1.0, 2.0], 2)),
            None
        );
    }

    #[test]
    fn a_run_inside_every_limit_passes_and_says_each_figure() {
        // mean 1000, σ = 1 (sample σ of 999, 1000, 1001), NU 0.1 %, 3 of 3 valid.
        let v = Verdict::judge(&limits(), &figures(&[999.0, 1000.0, 1001.0], 3)).unwrap();
        assert!(v.pass);
        assert_eq!(
            v.line(),
            "PASS: mean 1000.00 nm in [990, 1010] nm; 1σ 1.00 nm ≤ 5 nm; NU 0.10 % ≤ 0.5 %; valid sites 100.00 % ≥ 90 %"
        );
    }

    #[test]
    fn each_broken_limit_is_named_in_the_reason() {
        // mean 1020 (outside), σ 10 (> 5), NU 0.98 % (> 0.5), 3 of 4 valid = 75 % (< 90).
        let v = Verdict::judge(&limits(), &figures(&[1010.0, 1020.0, 1030.0], 4)).unwrap();
        assert!(!v.pass);
        assert_eq!(
            v.line(),
            "FAIL: mean 1020.00 nm outside [990, 1010] nm; 1σ 10.00 nm > 5 nm; NU 0.98 % > 0.5 %; valid sites 75.00 % < 90 %"
        );
        // Only the broken limit is the reason when the others hold.
        let v = Verdict::judge(&limits(), &figures(&[999.0, 1000.0, 1001.0], 4)).unwrap();
        assert_eq!(v.line(), "FAIL: valid sites 75.00 % < 90 %");
    }

    #[test]
    fn limits_are_inclusive_and_a_missing_figure_fails() {
        let at_bounds = AcceptSpec {
            mean_nm: Some([1000.0, 1000.0]),
            max_std_nm: Some(0.0),
            ..AcceptSpec::default()
        };
        // A single site: the mean exists, its σ does not.
        let v = Verdict::judge(&at_bounds, &figures(&[1000.0], 1)).unwrap();
        assert!(v.checks[0].pass);
        assert!(!v.checks[1].pass);
        assert_eq!(
            v.line(),
            "FAIL: 1σ unknown (too few valid sites; limit ≤ 0 nm)"
        );
        // No valid site: nothing can pass.
        let v = Verdict::judge(&limits(), &figures(&[], 5)).unwrap();
        assert!(v.checks.iter().all(|c| !c.pass));
    }
}
