//! Map benchmarks (figures in docs/performance.md, "Maps"):
//! 49 sites → 512² grid + isolines + SVG page (target ≤ 50 ms);
//! 5 000 sites → 1024² grid (target ≤ 1 s); the PNG page for comparison.

use criterion::{criterion_group, criterion_main, Criterion};
use isopach::map::interpolate::Field;
use isopach::map::{render_png, render_svg, MapInput, RenderOptions, SiteRow};
use isopach::recipe::geometry::Orientation;
use isopach::recipe::Wafer;
use std::hint::black_box;

fn wafer() -> Wafer {
    Wafer {
        diameter_mm: 150.0,
        edge_exclusion_mm: 5.0,
        orientation: Orientation::Flat {
            length_mm: 57.5,
            angle_deg: 270.0,
        },
    }
}

/// Dome plus tilt plus ripple (the field of tests/map_common and the scipy script).
fn analytic(x: f64, y: f64) -> f64 {
    let rho2 = (x * x + y * y) / (70.0 * 70.0);
    1000.0 + 20.0 * (1.0 - rho2) + 0.06 * x - 0.035 * y + 1.2 * (3.0 * y.atan2(x)).cos() * rho2
}

fn standard_49() -> Vec<(f64, f64)> {
    let mut pts = vec![(0.0, 0.0)];
    for (k, n) in [8, 16, 24].into_iter().enumerate() {
        let r = 70.0 * (k + 1) as f64 / 3.0;
        for j in 0..n {
            let a = std::f64::consts::TAU * j as f64 / n as f64;
            pts.push((r * a.cos(), r * a.sin()));
        }
    }
    pts
}

/// 5 000 sites spread evenly over the usable disc (Vogel's sunflower spiral, deterministic).
fn spiral(n: usize) -> Vec<(f64, f64)> {
    let golden = std::f64::consts::PI * (3.0 - 5f64.sqrt());
    (0..n)
        .map(|i| {
            let r = 69.5 * ((i as f64 + 0.5) / n as f64).sqrt();
            let a = i as f64 * golden;
            (r * a.cos(), r * a.sin())
        })
        .collect()
}

fn rows(pts: &[(f64, f64)]) -> Vec<SiteRow> {
    pts.iter()
        .enumerate()
        .map(|(i, &(x, y))| SiteRow {
            site: i + 1,
            x_mm: x,
            y_mm: y,
            thickness_nm: vec![analytic(x, y)],
            sigma_nm: vec![0.2],
            gof: 0.99,
            flag: String::new(),
        })
        .collect()
}

fn bench(c: &mut Criterion) {
    let input49 = MapInput::thickness(wafer(), rows(&standard_49()), 0, "sio2");
    let opts512 = RenderOptions {
        grid: 512,
        ..RenderOptions::default()
    };
    c.bench_function("svg page, 49 sites, 512² grid + isolines", |b| {
        b.iter(|| black_box(render_svg(black_box(&input49), &opts512)))
    });
    let default = RenderOptions::default();
    c.bench_function("svg page, 49 sites, default 400² grid", |b| {
        b.iter(|| black_box(render_svg(black_box(&input49), &default)))
    });
    c.bench_function("png page, 49 sites, default 400² grid", |b| {
        b.iter(|| black_box(render_png(black_box(&input49), &default).unwrap()))
    });
    let sites5000: Vec<(f64, f64, f64)> = spiral(5000)
        .into_iter()
        .map(|(x, y)| (x, y, analytic(x, y)))
        .collect();
    let mut g = c.benchmark_group("grid");
    g.sample_size(10);
    g.bench_function("field + 1024² grid, 5000 sites", |b| {
        b.iter(|| {
            let f = Field::new(black_box(&sites5000), &wafer()).unwrap();
            black_box(f.grid(1024, 0.0))
        })
    });
    let sites49: Vec<(f64, f64, f64)> = standard_49()
        .into_iter()
        .map(|(x, y)| (x, y, analytic(x, y)))
        .collect();
    g.bench_function("field + 512² grid, 49 sites", |b| {
        b.iter(|| {
            let f = Field::new(black_box(&sites49), &wafer()).unwrap();
            black_box(f.grid(512, 0.0))
        })
    });
    let field = Field::new(&sites49, &wafer()).unwrap();
    let grid = field.grid(512, 0.0);
    let (lo, hi) = grid.min_max().unwrap();
    let levels = isopach::map::levels::nice_levels(lo, hi, 10);
    g.bench_function("isolines at 10 levels, 512² grid", |b| {
        b.iter(|| {
            for &l in &levels.values {
                black_box(isopach::map::contour::isolines(&grid, l));
            }
        })
    });
    g.bench_function("page layout only (scene), 49 sites, 512²", |b| {
        b.iter(|| black_box(isopach::map::layout::page(&input49, &opts512)))
    });
    g.finish();
}

criterion_group! {
    name = benches;
    // No HTML plots: criterion's plot backend wants system fonts, which this crate does not use.
    config = Criterion::default().without_plots();
    targets = bench
}
criterion_main!(benches);
