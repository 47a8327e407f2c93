//! Site plans: counts computed independently, usable-disc containment, stable numbering, and
//! loaders that never panic.

use isopach::recipe::geometry::Wafer;
use isopach::recipe::pattern::{self, Site};
use isopach::recipe::schema::{OrientationKind, PatternSpec, WaferSpec};
use proptest::prelude::*;
use std::path::Path;

fn wafer(d: f64, e: f64, o: OrientationKind, angle: f64) -> Wafer {
    Wafer::from_spec(&WaferSpec {
        diameter_mm: d,
        edge_exclusion_mm: e,
        orientation: o,
        orientation_angle_deg: angle,
    })
}

#[test]
fn polar_49_sites_lie_on_the_requested_radii() {
    let w = wafer(300.0, 3.0, OrientationKind::Notch, 270.0);
    let spec = PatternSpec::Polar {
        center: true,
        rings: vec![8, 16, 24],
        radii_mm: Some(vec![40.0, 90.0, 140.0]),
        start_angle_deg: 0.0,
        stagger: false,
    };
    let s = pattern::sites(&spec, &w);
    assert_eq!(s.len(), 49);
    let radii: Vec<f64> = s.iter().map(Site::radius).collect();
    assert_eq!(radii[0], 0.0);
    assert!(radii[1..9].iter().all(|r| (r - 40.0).abs() < 1e-9));
    assert!(radii[9..25].iter().all(|r| (r - 90.0).abs() < 1e-9));
    assert!(radii[25..].iter().all(|r| (r - 140.0).abs() < 1e-9));
    assert!(s.iter().all(|p| w.is_usable(p.x_mm, p.y_mm)));
}

#[test]
fn grid_count_150_mm_10_mm_pitch_3_mm_exclusion() {
    // Independent count: nodes (10i, 10j) with i² + j² ≤ 7.2² (r ≤ 72 mm), and — with the
    // SEMI M1 57.5 mm primary flat at 270° (from memory) — y ≥ −(√(75² − 28.75²) − 3).
    let h = (75.0f64 * 75.0 - 28.75 * 28.75).sqrt() - 3.0;
    let mut disc = 0;
    let mut with_flat = 0;
    for i in -8i32..=8 {
        for j in -8i32..=8 {
            let (x, y) = (10.0 * i as f64, 10.0 * j as f64);
            if x * x + y * y <= 72.0 * 72.0 {
                disc += 1;
                if y >= -h {
                    with_flat += 1;
                }
            }
        }
    }
    let grid = PatternSpec::Grid {
        pitch_mm: 10.0,
        offset_mm: [0.0, 0.0],
    };
    let none = pattern::sites(&grid, &wafer(150.0, 3.0, OrientationKind::None, 270.0));
    assert_eq!(none.len(), disc);
    let flat = pattern::sites(&grid, &wafer(150.0, 3.0, OrientationKind::Flat, 270.0));
    assert_eq!(flat.len(), with_flat);
    assert!(with_flat < disc, "the flat must exclude sites behind it");
    assert!(flat.iter().all(|s| s.y_mm >= -h));
}

fn wafer_strategy() -> impl Strategy<Value = Wafer> {
    (25.0f64..450.0, 0.0f64..0.3, 0usize..3, 0.0f64..360.0).prop_map(|(d, ef, o, a)| {
        let o = [
            OrientationKind::Flat,
            OrientationKind::Notch,
            OrientationKind::None,
        ][o];
        wafer(d, ef * d / 2.0, o, a)
    })
}

fn pattern_strategy() -> impl Strategy<Value = PatternSpec> {
    prop_oneof![
        (
            any::<bool>(),
            prop::collection::vec(1u32..40, 1..5),
            0.0f64..360.0,
            any::<bool>()
        )
            .prop_map(
                |(center, rings, start_angle_deg, stagger)| PatternSpec::Polar {
                    center,
                    rings,
                    radii_mm: None,
                    start_angle_deg,
                    stagger
                }
            ),
        (0.05f64..0.5, -1.0f64..1.0, -1.0f64..1.0).prop_map(|(p, ox, oy)| PatternSpec::Grid {
            pitch_mm: p,
            offset_mm: [ox, oy]
        }),
        prop::sample::select(pattern::STANDARD_COUNTS.to_vec())
            .prop_map(|sites| PatternSpec::Standard { sites }),
    ]
}

/// Scales a pitch given as a fraction of the radius into mm.
fn scaled(p: &PatternSpec, w: &Wafer) -> PatternSpec {
    match p {
        PatternSpec::Grid {
            pitch_mm,
            offset_mm,
        } => PatternSpec::Grid {
            pitch_mm: pitch_mm * w.radius(),
            offset_mm: [offset_mm[0] * 5.0, offset_mm[1] * 5.0],
        },
        other => other.clone(),
    }
}

proptest! {
    #[test]
    fn every_site_is_usable_and_numbering_dense_and_stable(w in wafer_strategy(), p in pattern_strategy()) {
        let p = scaled(&p, &w);
        let a = pattern::sites(&p, &w);
        let b = pattern::sites(&p, &w);
        prop_assert_eq!(&a, &b);
        for (i, s) in a.iter().enumerate() {
            prop_assert_eq!(s.number, i + 1);
            // Every pattern keeps its sites in the usable area (ring sites are pulled in
            // from behind a flat or notch, grid nodes outside are dropped).
            prop_assert!(w.is_usable(s.x_mm, s.y_mm), "site {} at ({}, {})", s.number, s.x_mm, s.y_mm);
        }
    }

    #[test]
    fn random_bytes_never_panic_the_loader(bytes in prop::collection::vec(any::<u8>(), 0..400)) {
        let text = String::from_utf8_lossy(&bytes);
        let _ = isopach::recipe::parse(&text, Path::new("fuzz.toml"));
    }

    #[test]
    fn random_toml_never_panics_the_loader(
        d in -10.0f64..600.0, e in -5.0f64..300.0, n in prop::collection::vec(0u32..30, 0..4),
        lo in -100.0f64..3000.0, hi in -100.0f64..3000.0, kind in 0usize..4, mat in "[a-z0-9]{0,6}",
    ) {
        let pattern = match kind {
            0 => format!("kind = \"polar\"\nrings = {n:?}"),
            1 => format!("kind = \"grid\"\npitch_mm = {}", n.first().copied().unwrap_or(0)),
            2 => format!("kind = \"custom\"\nsites_mm = [[{d}, {e}]]"),
            _ => format!("kind = \"standard\"\nsites = {}", n.len()),
        };
        let text = format!(
            "name = \"p\"\n[wafer]\ndiameter_mm = {d}\nedge_exclusion_mm = {e}\n[pattern]\n{pattern}\n[film]\nambient = \"air\"\nsubstrate = \"si\"\nlayers = [ {{ material = \"{mat}\", nominal_nm = {lo}, min_nm = {lo}, max_nm = {hi} }} ]\nwavelength_nm = [{lo}, {hi}]\n"
        );
        if let Ok(r) = isopach::recipe::parse(&text, Path::new("p.toml")) {
            // Anything accepted must give a plan whose sites are all usable.
            let w = Wafer::from_spec(&r.wafer);
            for s in pattern::sites(&r.pattern, &w) {
                prop_assert!(w.is_usable(s.x_mm, s.y_mm));
            }
        }
    }
}
