//! Soft limits and the anti-backlash approach, checked before any line is sent.
//!
//! The travel box is the machine file's `travel_x_mm` × `travel_y_mm` less `margin_mm` on every
//! side. Every site is reached by a final move in the same direction on both axes: when the
//! stage does not already lie on the approach side, it first goes to an approach point
//! `backlash_mm` short of the site on that side. Both points must lie inside the box.

use super::chuck::ChuckTransform;
use super::machine::{approach_signs, StageSpec};
use crate::recipe::Site;
use std::fmt;

/// The axis a limit concerns.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Axis {
    X,
    Y,
}

impl fmt::Display for Axis {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            Axis::X => "x",
            Axis::Y => "y",
        })
    }
}

/// A point outside the travel box: which axis, by how much, and the limit broken.
#[derive(Debug, Clone, PartialEq)]
pub struct LimitViolation {
    pub axis: Axis,
    /// The coordinate asked for, mm (stage frame).
    pub value_mm: f64,
    /// The usable range on that axis (travel less margin), mm.
    pub allowed_mm: [f64; 2],
    /// The machine file's travel on that axis and the margin, for the message.
    pub travel_mm: [f64; 2],
    pub margin_mm: f64,
}

impl fmt::Display for LimitViolation {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let side = if self.value_mm < self.allowed_mm[0] {
            format!("below the lower limit {:.3} mm", self.allowed_mm[0])
        } else {
            format!("above the upper limit {:.3} mm", self.allowed_mm[1])
        };
        write!(
            f,
            "{} = {:.3} mm is {side} (travel_{}_mm = [{}, {}], margin_mm = {})",
            self.axis,
            self.value_mm,
            self.axis,
            self.travel_mm[0],
            self.travel_mm[1],
            self.margin_mm
        )
    }
}

/// The soft-limit box in stage coordinates.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SoftLimits {
    pub travel_x_mm: [f64; 2],
    pub travel_y_mm: [f64; 2],
    pub margin_mm: f64,
}

impl SoftLimits {
    /// The box of a machine file's `[stage]` section.
    pub fn from_spec(s: &StageSpec) -> SoftLimits {
        SoftLimits {
            travel_x_mm: s.travel_x_mm,
            travel_y_mm: s.travel_y_mm,
            margin_mm: s.margin_mm,
        }
    }

    /// Whether a stage point may be commanded; the first broken limit otherwise.
    pub fn check(&self, p: [f64; 2]) -> Result<(), LimitViolation> {
        for (axis, v, t) in [
            (Axis::X, p[0], self.travel_x_mm),
            (Axis::Y, p[1], self.travel_y_mm),
        ] {
            let allowed = [t[0] + self.margin_mm, t[1] - self.margin_mm];
            // NaN fails both comparisons and so counts as outside.
            if !(v >= allowed[0] - 1e-9 && v <= allowed[1] + 1e-9) {
                return Err(LimitViolation {
                    axis,
                    value_mm: v,
                    allowed_mm: allowed,
                    travel_mm: t,
                    margin_mm: self.margin_mm,
                });
            }
        }
        Ok(())
    }
}

/// The anti-backlash approach: distance and side.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Approach {
    pub backlash_mm: f64,
    /// −1 or +1 per axis: the side the final move starts from.
    pub side: (f64, f64),
}

impl Approach {
    /// The approach a machine file's `[stage]` section describes.
    pub fn from_spec(s: &StageSpec) -> Approach {
        Approach {
            backlash_mm: s.backlash_mm,
            side: approach_signs(&s.approach_from).unwrap_or((-1.0, -1.0)),
        }
    }

    /// The point the final move to `target` starts from.
    pub fn point(&self, target: [f64; 2]) -> [f64; 2] {
        [
            target[0] + self.side.0 * self.backlash_mm,
            target[1] + self.side.1 * self.backlash_mm,
        ]
    }

    /// The moves that reach `target` from `from` (`None` = unknown): the target alone when
    /// backlash is off or the stage already lies at least `backlash_mm` on the approach side
    /// on both axes, else the approach point first.
    pub fn moves(&self, from: Option<[f64; 2]>, target: [f64; 2]) -> Vec<[f64; 2]> {
        if self.backlash_mm <= 0.0 {
            return vec![target];
        }
        let on_side = from.is_some_and(|f| {
            let dx = (f[0] - target[0]) * self.side.0;
            let dy = (f[1] - target[1]) * self.side.1;
            dx >= self.backlash_mm - 1e-9 && dy >= self.backlash_mm - 1e-9
        });
        if on_side {
            vec![target]
        } else {
            vec![self.point(target), target]
        }
    }
}

/// A site whose stage position, or whose approach point, lies outside the soft limits.
#[derive(Debug, Clone, PartialEq)]
pub struct SiteOutside {
    pub site: usize,
    pub wafer_mm: [f64; 2],
    /// The point that broke the limit (the site or its approach point), stage frame.
    pub stage_mm: [f64; 2],
    /// Whether it was the approach point.
    pub approach: bool,
    pub violation: LimitViolation,
}

impl fmt::Display for SiteOutside {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "site {} at wafer ({:.3}, {:.3}) mm → stage ({:.3}, {:.3}) mm{}: {}",
            self.site,
            self.wafer_mm[0],
            self.wafer_mm[1],
            self.stage_mm[0],
            self.stage_mm[1],
            if self.approach {
                " (its anti-backlash approach point)"
            } else {
                ""
            },
            self.violation
        )
    }
}

/// Checks one site: its stage position and its approach point must both lie in the box.
pub fn check_site(
    site: &Site,
    transform: &ChuckTransform,
    limits: &SoftLimits,
    approach: &Approach,
) -> Result<[f64; 2], SiteOutside> {
    let p = transform.to_stage(site.x_mm, site.y_mm);
    let outside = |q: [f64; 2], is_approach: bool, v: LimitViolation| SiteOutside {
        site: site.number,
        wafer_mm: [site.x_mm, site.y_mm],
        stage_mm: q,
        approach: is_approach,
        violation: v,
    };
    limits.check(p).map_err(|v| outside(p, false, v))?;
    if approach.backlash_mm > 0.0 {
        let a = approach.point(p);
        limits.check(a).map_err(|v| outside(a, true, v))?;
    }
    Ok(p)
}

/// Checks every site of a plan; the list of those outside (empty = all inside).
pub fn check_sites(
    sites: &[Site],
    transform: &ChuckTransform,
    limits: &SoftLimits,
    approach: &Approach,
) -> Vec<SiteOutside> {
    sites
        .iter()
        .filter_map(|s| check_site(s, transform, limits, approach).err())
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    const BOX: SoftLimits = SoftLimits {
        travel_x_mm: [0.0, 200.0],
        travel_y_mm: [0.0, 100.0],
        margin_mm: 1.0,
    };

    #[test]
    fn margin_shrinks_the_box() {
        assert!(BOX.check([1.0, 99.0]).is_ok());
        let v = BOX.check([0.5, 50.0]).unwrap_err();
        assert_eq!(v.axis, Axis::X);
        assert!(v.to_string().contains("below the lower limit 1.000"), "{v}");
        assert_eq!(BOX.check([10.0, 99.5]).unwrap_err().axis, Axis::Y);
        assert!(BOX.check([f64::NAN, 5.0]).is_err());
    }

    #[test]
    fn approach_premove_only_when_needed() {
        let a = Approach {
            backlash_mm: 0.5,
            side: (-1.0, -1.0),
        };
        assert_eq!(a.moves(None, [10.0, 10.0]), vec![[9.5, 9.5], [10.0, 10.0]]);
        // From lower-left by more than the backlash: one move suffices.
        assert_eq!(a.moves(Some([0.0, 0.0]), [10.0, 10.0]), vec![[10.0, 10.0]]);
        // From the right: x would be approached from the wrong side.
        assert_eq!(a.moves(Some([20.0, 0.0]), [10.0, 10.0]).len(), 2);
    }

    #[test]
    fn approach_point_outside_is_named() {
        let t = ChuckTransform {
            center_mm: [1.2, 50.0],
            rotation_deg: 0.0,
            flip_x: false,
            flip_y: false,
        };
        let a = Approach {
            backlash_mm: 0.5,
            side: (-1.0, -1.0),
        };
        let s = Site {
            number: 7,
            x_mm: 0.0,
            y_mm: 0.0,
        };
        let e = check_site(&s, &t, &BOX, &a).unwrap_err();
        assert!(e.approach && e.site == 7);
        assert!(e.to_string().starts_with("site 7 "), "{e}");
    }
}
