//! The measuring order of a map: sites ordered to shorten stage travel, numbers kept.
//!
//! Polar and standard patterns go ring by ring from the centre out, alternating direction so each
//! ring starts near where the last one ended; grids go serpentine (boustrophedon) row by row;
//! custom lists take a nearest-neighbour tour improved by 2-opt. Ordering works in wafer
//! coordinates: the wafer→stage transform is rigid (shift, rotation, flips), so path lengths are
//! the same on the stage.

use crate::recipe::schema::PatternSpec;
use crate::recipe::Site;

/// Orders sites for measuring; the returned sites keep their recipe numbers.
pub fn order(pattern: &PatternSpec, sites: &[Site]) -> Vec<Site> {
    match pattern {
        PatternSpec::Polar { .. } | PatternSpec::Standard { .. } => ring_order(sites),
        PatternSpec::Grid { .. } => serpentine(sites),
        PatternSpec::Custom { .. } => two_opt(nearest_neighbour(sites, (0.0, 0.0))),
    }
}

/// Groups sites by radius (rings), inner first; every other ring is walked backwards, starting
/// at the site nearest the previous ring's last site.
fn ring_order(sites: &[Site]) -> Vec<Site> {
    let mut rings: Vec<Vec<Site>> = Vec::new();
    let mut sorted = sites.to_vec();
    sorted.sort_by(|a, b| {
        a.radius()
            .total_cmp(&b.radius())
            .then(a.number.cmp(&b.number))
    });
    for s in sorted {
        match rings.last_mut() {
            Some(r) if (r[0].radius() - s.radius()).abs() < 1e-6 => r.push(s),
            _ => rings.push(vec![s]),
        }
    }
    let mut out: Vec<Site> = Vec::with_capacity(sites.len());
    for (i, mut ring) in rings.into_iter().enumerate() {
        ring.sort_by_key(|s| s.number);
        if i % 2 == 1 {
            ring.reverse();
        }
        if let Some(last) = out.last() {
            // Rotate the ring so it starts at the site nearest where we are.
            let start = (0..ring.len())
                .min_by(|&a, &b| dist(last, &ring[a]).total_cmp(&dist(last, &ring[b])))
                .unwrap_or(0);
            ring.rotate_left(start);
        }
        out.extend(ring);
    }
    out
}

/// Rows from the top down, alternating left-to-right and right-to-left.
fn serpentine(sites: &[Site]) -> Vec<Site> {
    let mut rows: Vec<Vec<Site>> = Vec::new();
    let mut sorted = sites.to_vec();
    sorted.sort_by(|a, b| b.y_mm.total_cmp(&a.y_mm).then(a.x_mm.total_cmp(&b.x_mm)));
    for s in sorted {
        match rows.last_mut() {
            Some(r) if (r[0].y_mm - s.y_mm).abs() < 1e-6 => r.push(s),
            _ => rows.push(vec![s]),
        }
    }
    rows.into_iter()
        .enumerate()
        .flat_map(|(i, mut r)| {
            if i % 2 == 1 {
                r.reverse();
            }
            r
        })
        .collect()
}

/// Greedy tour from `start`.
pub fn nearest_neighbour(sites: &[Site], start: (f64, f64)) -> Vec<Site> {
    let mut left = sites.to_vec();
    let mut out = Vec::with_capacity(sites.len());
    let mut here = Site {
        number: 0,
        x_mm: start.0,
        y_mm: start.1,
    };
    while !left.is_empty() {
        let i = (0..left.len())
            .min_by(|&a, &b| dist(&here, &left[a]).total_cmp(&dist(&here, &left[b])))
            .unwrap_or(0);
        here = left.swap_remove(i);
        out.push(here);
    }
    out
}

/// Improves an open path by reversing segments while that shortens it (2-opt, first
/// improvement, until no move helps or a sweep budget is spent).
pub fn two_opt(mut path: Vec<Site>) -> Vec<Site> {
    let n = path.len();
    if n < 4 {
        return path;
    }
    for _sweep in 0..200 {
        let mut improved = false;
        for i in 0..n - 2 {
            for j in i + 2..n {
                // Reversing path[i+1..=j] swaps edges (i,i+1),(j,j+1) for (i,j),(i+1,j+1).
                let before = dist(&path[i], &path[i + 1])
                    + if j + 1 < n {
                        dist(&path[j], &path[j + 1])
                    } else {
                        0.0
                    };
                let after = dist(&path[i], &path[j])
                    + if j + 1 < n {
                        dist(&path[i + 1], &path[j + 1])
                    } else {
                        0.0
                    };
                if after < before - 1e-9 {
                    path[i + 1..=j].reverse();
                    improved = true;
                }
            }
        }
        if !improved {
            break;
        }
    }
    path
}

fn dist(a: &Site, b: &Site) -> f64 {
    (a.x_mm - b.x_mm).hypot(a.y_mm - b.y_mm)
}

/// Length of the path through the sites in order, starting from `start`, mm.
pub fn path_length(start: (f64, f64), sites: &[Site]) -> f64 {
    let mut here = Site {
        number: 0,
        x_mm: start.0,
        y_mm: start.1,
    };
    let mut total = 0.0;
    for s in sites {
        total += dist(&here, s);
        here = *s;
    }
    total
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::recipe::pattern;
    use crate::recipe::schema::{OrientationKind, WaferSpec};
    use crate::recipe::Wafer;

    fn wafer() -> Wafer {
        Wafer::from_spec(&WaferSpec {
            diameter_mm: 150.0,
            edge_exclusion_mm: 3.0,
            orientation: OrientationKind::Flat,
            orientation_angle_deg: 270.0,
        })
    }

    fn same_set(a: &[Site], b: &[Site]) -> bool {
        let mut x: Vec<usize> = a.iter().map(|s| s.number).collect();
        let mut y: Vec<usize> = b.iter().map(|s| s.number).collect();
        x.sort();
        y.sort();
        x == y
    }

    #[test]
    fn every_order_is_a_permutation_keeping_numbers() {
        let w = wafer();
        for p in [
            PatternSpec::Standard { sites: 49 },
            PatternSpec::Grid {
                pitch_mm: 10.0,
                offset_mm: [0.0, 0.0],
            },
            PatternSpec::Custom {
                sites_mm: vec![
                    [0.0, 0.0],
                    [50.0, 0.0],
                    [-50.0, 10.0],
                    [10.0, 40.0],
                    [-20.0, -30.0],
                ],
            },
        ] {
            let s = pattern::sites(&p, &w);
            let o = order(&p, &s);
            assert!(same_set(&s, &o));
            for site in &o {
                assert_eq!(s[site.number - 1], *site);
            }
        }
    }

    #[test]
    fn serpentine_is_shorter_than_raster() {
        let w = wafer();
        let p = PatternSpec::Grid {
            pitch_mm: 10.0,
            offset_mm: [0.0, 0.0],
        };
        let s = pattern::sites(&p, &w);
        assert!(path_length((0.0, 0.0), &order(&p, &s)) < 0.8 * path_length((0.0, 0.0), &s));
    }

    #[test]
    fn two_opt_untangles_a_crossed_square() {
        let pts = [(0.0, 0.0), (1.0, 1.0), (1.0, 0.0), (0.0, 1.0)];
        let s: Vec<Site> = pts
            .iter()
            .enumerate()
            .map(|(i, p)| Site {
                number: i + 1,
                x_mm: p.0,
                y_mm: p.1,
            })
            .collect();
        let t = two_opt(s.clone());
        assert!((path_length((0.0, 0.0), &t) - 3.0).abs() < 1e-9);
    }
}
