//! The plan frozen into a run folder (`plan.json`): the sites in measuring order with their
//! wafer and stage coordinates, and the duration bound. Derived files and later sessions read
//! it, so a run keeps the sites it was planned with even if the pattern code changes.

use super::{GaugeSettings, Plan};
use crate::bench::centring::CentringSettings;
use crate::recipe::Site;
use serde::{Deserialize, Serialize};

/// One planned site as frozen.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FrozenSite {
    pub site: usize,
    pub x_mm: f64,
    pub y_mm: f64,
    pub stage_x_mm: f64,
    pub stage_y_mm: f64,
}

/// The content of `plan.json`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FrozenPlan {
    /// Sites in measuring order.
    pub sites: Vec<FrozenSite>,
    /// Kinematic lower bound of the whole map, s.
    pub duration_s: f64,
    /// The wafer is centred before the sites (`run --centre`), with these settings.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub centring: Option<CentringSettings>,
    /// The run is a gauge study repeating its sites so (`isopach gauge`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub gauge: Option<GaugeSettings>,
}

impl FrozenPlan {
    /// What a plan freezes.
    pub fn of(plan: &Plan) -> FrozenPlan {
        let mut seen = std::collections::BTreeSet::new();
        FrozenPlan {
            sites: plan
                .sites()
                // A gauge study measures a site many times; it is planned once.
                .filter(|s| seen.insert(s.site.number))
                .map(|s| FrozenSite {
                    site: s.site.number,
                    x_mm: s.site.x_mm,
                    y_mm: s.site.y_mm,
                    stage_x_mm: s.stage_mm[0],
                    stage_y_mm: s.stage_mm[1],
                })
                .collect(),
            duration_s: plan.duration_s,
            centring: plan.centring,
            gauge: plan.gauge,
        }
    }

    /// The planned sites in measuring order.
    pub fn ordered_sites(&self) -> Vec<Site> {
        self.sites
            .iter()
            .map(|s| Site {
                number: s.site,
                x_mm: s.x_mm,
                y_mm: s.y_mm,
            })
            .collect()
    }
}
