//! Isolines by marching squares over a [`Grid`], joined into polylines, and polyline
//! simplification (Ramer–Douglas–Peucker).
//!
//! A cell with an empty (NaN) corner is skipped, so lines simply end at the edge of the
//! filled area. Saddle cells are resolved by the mean of the four corners. A crossing point is
//! computed once per grid edge, so the two cells sharing an edge agree exactly and the
//! segments join into continuous lines; a line that closes on itself is marked closed.

use super::interpolate::Grid;
use ndarray::{s, Array2};
use std::collections::HashMap;
use std::hash::{BuildHasherDefault, Hash, Hasher};

/// A connected isoline: points in mm, closed when it returns to its start.
#[derive(Debug, Clone, PartialEq)]
pub struct Polyline {
    pub points: Vec<(f64, f64)>,
    pub closed: bool,
}

/// A grid edge: horizontal from node (i, j) to (i+1, j), or vertical to (i, j+1).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Edge {
    H(usize, usize),
    V(usize, usize),
}

impl Hash for Edge {
    fn hash<S: Hasher>(&self, state: &mut S) {
        // One word per edge: the join's map is hit a few times per segment, so hashing cost
        // matters more than anything else in it.
        let (tag, i, j) = match *self {
            Edge::H(i, j) => (0u64, i, j),
            Edge::V(i, j) => (1u64, i, j),
        };
        state.write_u64(tag | (i as u64) << 1 | (j as u64) << 33);
    }
}

/// A multiplicative hasher for edge keys (they are not attacker-controlled).
#[derive(Default)]
struct EdgeHasher(u64);

impl Hasher for EdgeHasher {
    fn write(&mut self, bytes: &[u8]) {
        for &b in bytes {
            self.write_u64(b as u64);
        }
    }
    fn write_u64(&mut self, n: u64) {
        self.0 = (self.0.rotate_left(5) ^ n).wrapping_mul(0x517c_c1b7_2722_0a95);
    }
    fn finish(&self) -> u64 {
        self.0
    }
}

/// Segments touching an edge: at most the two cells on either side of it.
const NONE: usize = usize::MAX;

/// The isolines of `grid` at `level` (values ≥ level count as inside).
pub fn isolines(grid: &Grid, level: f64) -> Vec<Polyline> {
    isolines_many(grid, &[level]).pop().unwrap_or_default()
}

/// The isolines at each of `levels` (ascending), in one pass over the cells: a cell only
/// produces segments for the levels between its lowest and highest corner.
pub fn isolines_many(grid: &Grid, levels: &[f64]) -> Vec<Vec<Polyline>> {
    let mut segments: Vec<Vec<(Edge, Edge)>> = vec![Vec::new(); levels.len()];
    let nx = grid.nx();
    // Rows as plain slices (the hot loop); a grid in another memory order is copied once.
    let values = grid.values.as_standard_layout();
    let flat = values.as_slice().expect("standard layout is contiguous");
    for j in 0..grid.ny().saturating_sub(1) {
        let lower = &flat[j * nx..(j + 1) * nx];
        let upper = &flat[(j + 1) * nx..(j + 2) * nx];
        for i in 0..nx.saturating_sub(1) {
            let v = [lower[i], lower[i + 1], upper[i + 1], upper[i]];
            let lo = v[0].min(v[1]).min(v[2].min(v[3]));
            let hi = v[0].max(v[1]).max(v[2].max(v[3]));
            if v.iter().any(|x| x.is_nan()) {
                continue;
            }
            // Levels with some corner below and some at or above: lo < level ≤ hi.
            let first = levels.partition_point(|&l| l <= lo);
            let last = levels.partition_point(|&l| l <= hi);
            for (k, &level) in levels.iter().enumerate().take(last).skip(first) {
                cell_segments(v, i, j, level, &mut segments[k]);
            }
        }
    }
    segments
        .iter()
        .zip(levels)
        .map(|(segs, &level)| join(grid, level, segs))
        .collect()
}

/// The segments of one cell; `v` holds the corners counter-clockwise from (i, j).
fn cell_segments(v: [f64; 4], i: usize, j: usize, level: f64, out: &mut Vec<(Edge, Edge)>) {
    let inside = v.map(|x| x >= level);
    let case = inside
        .iter()
        .enumerate()
        .fold(0u8, |c, (k, &b)| c | ((b as u8) << k));
    let (bottom, right, top, left) = (
        Edge::H(i, j),
        Edge::V(i + 1, j),
        Edge::H(i, j + 1),
        Edge::V(i, j),
    );
    let centre_inside = (v[0] + v[1] + v[2] + v[3]) / 4.0 >= level;
    match case {
        0 | 15 => {}
        1 | 14 => out.push((bottom, left)),
        2 | 13 => out.push((bottom, right)),
        3 | 12 => out.push((left, right)),
        4 | 11 => out.push((right, top)),
        6 | 9 => out.push((bottom, top)),
        7 | 8 => out.push((left, top)),
        // Corners 0 and 2 inside: joined through the centre, or cut off one by one.
        5 if centre_inside => out.extend([(bottom, right), (left, top)]),
        5 => out.extend([(bottom, left), (right, top)]),
        // Corners 1 and 3 inside.
        10 if centre_inside => out.extend([(bottom, left), (right, top)]),
        _ => out.extend([(bottom, right), (left, top)]),
    }
}

/// Where the isoline crosses a grid edge, mm.
fn crossing(grid: &Grid, e: Edge, level: f64) -> (f64, f64) {
    let (i, j, i2, j2) = match e {
        Edge::H(i, j) => (i, j, i + 1, j),
        Edge::V(i, j) => (i, j, i, j + 1),
    };
    let (a, b) = (grid.at(i, j), grid.at(i2, j2));
    let t = if b != a {
        ((level - a) / (b - a)).clamp(0.0, 1.0)
    } else {
        0.5
    };
    (
        grid.x(i) + t * (grid.x(i2) - grid.x(i)),
        grid.y(j) + t * (grid.y(j2) - grid.y(j)),
    )
}

/// Chains segments that share an edge into polylines.
fn join(grid: &Grid, level: f64, segments: &[(Edge, Edge)]) -> Vec<Polyline> {
    let mut by_edge: HashMap<Edge, [usize; 2], BuildHasherDefault<EdgeHasher>> =
        HashMap::with_capacity_and_hasher(segments.len() * 2, Default::default());
    for (k, &(a, b)) in segments.iter().enumerate() {
        for e in [a, b] {
            let slot = by_edge.entry(e).or_insert([NONE, NONE]);
            if slot[0] == NONE {
                slot[0] = k;
            } else {
                slot[1] = k;
            }
        }
    }
    let touching = |e: &Edge| by_edge[e].iter().filter(|&&s| s != NONE).count();
    let mut used = vec![false; segments.len()];
    let mut lines = Vec::new();
    // Open lines start at an edge only one segment touches; what is left are loops.
    let mut starts: Vec<(usize, Edge)> = segments
        .iter()
        .enumerate()
        .flat_map(|(k, &(a, b))| [(k, a), (k, b)])
        .filter(|(_, e)| touching(e) == 1)
        .collect();
    starts.extend(segments.iter().enumerate().map(|(k, &(a, _))| (k, a)));
    for (first, start_edge) in starts {
        if used[first] {
            continue;
        }
        let mut edges = vec![start_edge];
        let mut k = first;
        let mut at = start_edge;
        loop {
            used[k] = true;
            let (a, b) = segments[k];
            let next_edge = if a == at { b } else { a };
            edges.push(next_edge);
            at = next_edge;
            match by_edge[&at].iter().find(|&&s| s != NONE && !used[s]) {
                Some(&s) => k = s,
                None => break,
            }
        }
        let closed = edges.len() > 2 && edges.first() == edges.last();
        if closed {
            edges.pop();
        }
        lines.push(Polyline {
            points: edges.iter().map(|&e| crossing(grid, e, level)).collect(),
            closed,
        });
    }
    lines
}

/// Ramer–Douglas–Peucker simplification: drops points closer than `tol` to the line through
/// their neighbours that are kept. Closed lines keep their start point.
pub fn simplify(line: &Polyline, tol: f64) -> Polyline {
    let mut pts = line.points.clone();
    if line.closed {
        if let Some(&p) = pts.first() {
            pts.push(p);
        }
    }
    if pts.len() < 3 || tol <= 0.0 {
        return line.clone();
    }
    let mut keep = vec![false; pts.len()];
    keep[0] = true;
    *keep.last_mut().expect("not empty") = true;
    let mut stack = vec![(0, pts.len() - 1)];
    while let Some((a, b)) = stack.pop() {
        let (mut far, mut dmax) = (a, 0.0);
        for k in a + 1..b {
            let d = point_segment_distance(pts[k], pts[a], pts[b]);
            if d > dmax {
                (far, dmax) = (k, d);
            }
        }
        if dmax > tol {
            keep[far] = true;
            stack.push((a, far));
            stack.push((far, b));
        }
    }
    let mut out: Vec<(f64, f64)> = pts
        .iter()
        .zip(&keep)
        .filter(|(_, &k)| k)
        .map(|(p, _)| *p)
        .collect();
    if line.closed {
        out.pop();
    }
    Polyline {
        points: out,
        closed: line.closed,
    }
}

fn point_segment_distance(p: (f64, f64), a: (f64, f64), b: (f64, f64)) -> f64 {
    let (dx, dy) = (b.0 - a.0, b.1 - a.1);
    let len2 = dx * dx + dy * dy;
    let t = if len2 > 0.0 {
        (((p.0 - a.0) * dx + (p.1 - a.1) * dy) / len2).clamp(0.0, 1.0)
    } else {
        0.0
    };
    (p.0 - a.0 - t * dx).hypot(p.1 - a.1 - t * dy)
}

/// Closed outlines of the region at or above each of `levels` (ascending): the grid gets a
/// one-node border and its empty nodes are set below every level, so every line closes, along
/// the edge of the filled area where the region reaches it. Filled even-odd, the outlines of
/// one level cover exactly that region.
pub fn closed_isolines(grid: &Grid, levels: &[f64]) -> Vec<Vec<Polyline>> {
    isolines_many(&padded_below(grid, levels), levels)
}

/// The grid with a one-node border added and every empty node set below all levels.
fn padded_below(g: &Grid, bounds: &[f64]) -> Grid {
    let (lo, hi) = g.min_max().unwrap_or((0.0, 1.0));
    let b_lo = bounds.first().copied().unwrap_or(lo).min(lo);
    let sentinel = b_lo - 1e6 * (hi - lo).abs().max(1.0);
    let (ny, nx) = (g.ny(), g.nx());
    let mut values = Array2::from_elem((ny + 2, nx + 2), sentinel);
    values
        .slice_mut(s![1..=ny, 1..=nx])
        .zip_mut_with(&g.values, |out, &v| {
            if v.is_finite() {
                *out = v;
            }
        });
    Grid {
        x0: g.x0 - g.step,
        y0: g.y0 - g.step,
        step: g.step,
        values,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn grid_of(n: usize, f: impl Fn(f64, f64) -> f64) -> Grid {
        let step = 2.0 / (n - 1) as f64;
        let values = Array2::from_shape_fn((n, n), |(j, i)| {
            f(-1.0 + i as f64 * step, -1.0 + j as f64 * step)
        });
        Grid {
            x0: -1.0,
            y0: -1.0,
            step,
            values,
        }
    }

    #[test]
    fn a_cone_gives_one_closed_circle_at_the_right_radius() {
        // f = r is linear along every grid edge's radial direction only approximately; the
        // crossing error of linear interpolation is below step²/r (computed bound).
        let g = grid_of(101, |x, y| x.hypot(y));
        let lines = isolines(&g, 0.5);
        assert_eq!(lines.len(), 1);
        assert!(lines[0].closed);
        for &(x, y) in &lines[0].points {
            assert!(
                (x.hypot(y) - 0.5).abs() < g.step * g.step / 0.5,
                "r = {}",
                x.hypot(y)
            );
        }
    }

    #[test]
    fn lines_end_at_empty_nodes() {
        // A plane cut by the level, right half empty: one open line from bottom to top.
        let g = grid_of(21, |x, y| if x > 0.3 { f64::NAN } else { y });
        let lines = isolines(&g, 0.0);
        assert_eq!(lines.len(), 1);
        assert!(!lines[0].closed);
        assert!(lines[0]
            .points
            .iter()
            .all(|p| p.1.abs() < 1e-12 && p.0 <= 0.3));
    }

    #[test]
    fn two_peaks_give_two_loops_and_saddles_join_consistently() {
        let g = grid_of(81, |x, y| {
            (-(((x - 0.4).powi(2) + y * y) * 20.0)).exp()
                + (-(((x + 0.4).powi(2) + y * y) * 20.0)).exp()
        });
        assert_eq!(isolines(&g, 0.5).len(), 2);
        // Below the saddle value (≈ 2e^{-3.2} ≈ 0.082) the two merge into one loop.
        assert_eq!(isolines(&g, 0.05).len(), 1);
    }

    #[test]
    fn one_pass_over_many_levels_equals_one_level_at_a_time() {
        let g = grid_of(61, |x, y| (3.0 * x).sin() + y * y);
        let levels = [-0.5, 0.0, 0.25, 0.9];
        let many = isolines_many(&g, &levels);
        for (k, &l) in levels.iter().enumerate() {
            assert_eq!(many[k], isolines(&g, l));
            assert!(!many[k].is_empty());
        }
    }

    #[test]
    fn simplify_keeps_corners_and_drops_collinear_points() {
        let line = Polyline {
            points: vec![(0.0, 0.0), (1.0, 0.0), (2.0, 0.001), (3.0, 0.0), (3.0, 3.0)],
            closed: false,
        };
        let s = simplify(&line, 0.01);
        assert_eq!(s.points, vec![(0.0, 0.0), (3.0, 0.0), (3.0, 3.0)]);
    }

    #[test]
    fn closed_isolines_close_along_the_edge_of_the_filled_area() {
        // A tilted plane on a disc of filled nodes: open lines across the disc, closed loops
        // once padded.
        let n = 41;
        let mut values = Array2::from_elem((n, n), f64::NAN);
        for j in 0..n {
            for i in 0..n {
                let (x, y) = (i as f64 - 20.0, j as f64 - 20.0);
                if x.hypot(y) <= 18.0 {
                    values[[j, i]] = x + 0.5 * y;
                }
            }
        }
        let g = Grid {
            x0: -20.0,
            y0: -20.0,
            step: 1.0,
            values,
        };
        let levels = [-5.0, 0.0, 5.0];
        assert!(isolines_many(&g, &levels)
            .iter()
            .flatten()
            .all(|l| !l.closed));
        let loops = closed_isolines(&g, &levels);
        assert_eq!(loops.len(), 3);
        for per_level in &loops {
            assert_eq!(per_level.len(), 1);
            assert!(per_level[0].closed);
        }
        // The loop of the lowest level reaches round the high side of the disc: its points
        // span most of the disc's width.
        let xs: Vec<f64> = loops[0][0].points.iter().map(|p| p.0).collect();
        let span = xs.iter().cloned().fold(f64::MIN, f64::max)
            - xs.iter().cloned().fold(f64::MAX, f64::min);
        assert!(span > 25.0, "{span}");
    }
}
