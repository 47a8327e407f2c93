//! Property: for any recipe pattern and any chuck transform, no move the stage would send
//! leaves the travel box — a site whose position or approach point lies outside is refused
//! and named.

use isopach::bench::chuck::ChuckTransform;
use isopach::bench::limits::{check_site, Approach, SoftLimits};
use isopach::recipe::schema::{OrientationKind, PatternSpec, WaferSpec};
use isopach::recipe::{pattern, Wafer};
use proptest::prelude::*;

fn pattern_strategy() -> impl Strategy<Value = PatternSpec> {
    prop_oneof![
        (1u32..30, 0.0f64..360.0).prop_map(|(n, a)| PatternSpec::Polar {
            center: true,
            rings: vec![n, 2 * n],
            radii_mm: None,
            start_angle_deg: a,
            stagger: true,
        }),
        (5.0f64..40.0, -5.0f64..5.0).prop_map(|(p, o)| PatternSpec::Grid {
            pitch_mm: p,
            offset_mm: [o, -o]
        }),
        prop::sample::select(vec![1u32, 5, 9, 13, 17, 25, 49])
            .prop_map(|s| PatternSpec::Standard { sites: s }),
    ]
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(300))]
    #[test]
    fn no_move_leaves_the_travel_box(
        diameter in 50.0f64..310.0,
        pattern in pattern_strategy(),
        cx in 0.0f64..300.0, cy in 0.0f64..300.0,
        rot in -180.0f64..180.0, fx in any::<bool>(), fy in any::<bool>(),
        tx in 50.0f64..400.0, ty in 50.0f64..400.0, margin in 0.0f64..5.0,
        backlash in 0.0f64..2.0, sx in any::<bool>(), sy in any::<bool>(),
        from in prop::option::of((-50.0f64..450.0, -50.0f64..450.0)),
    ) {
        let wafer = Wafer::from_spec(&WaferSpec { diameter_mm: diameter, edge_exclusion_mm: 3.0, orientation: OrientationKind::Notch, orientation_angle_deg: 270.0 });
        let sites = pattern::sites(&pattern, &wafer);
        let t = ChuckTransform { center_mm: [cx, cy], rotation_deg: rot, flip_x: fx, flip_y: fy };
        let limits = SoftLimits { travel_x_mm: [0.0, tx], travel_y_mm: [0.0, ty], margin_mm: margin };
        let approach = Approach { backlash_mm: backlash, side: (if sx { 1.0 } else { -1.0 }, if sy { 1.0 } else { -1.0 }) };
        let mut at = from.map(|(x, y)| [x, y]);
        for s in &sites {
            let p = t.to_stage(s.x_mm, s.y_mm);
            match check_site(s, &t, &limits, &approach) {
                Ok(q) => {
                    prop_assert_eq!(q, p);
                    for m in approach.moves(at, p) {
                        prop_assert!(limits.check(m).is_ok(), "site {} sends {:?} outside the box", s.number, m);
                    }
                    at = Some(p);
                }
                Err(e) => {
                    prop_assert_eq!(e.site, s.number);
                    let prefix = format!("site {} ", s.number);
                    prop_assert!(e.to_string().starts_with(&prefix));
                    prop_assert!(limits.check(e.stage_mm).is_err(), "the named point really is outside");
                    let name = format!("travel_{}_mm", e.violation.axis);
                    prop_assert!(e.to_string().contains(&name), "{}", e);
                }
            }
        }
    }
}
