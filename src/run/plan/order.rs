//! The measuring order of a map: sites ordered to shorten stage travel, numbers kept.
//!
//! Polar and standard patterns go ring by ring from the centre out, alternating direction so each
//! ring starts near where the last one ended; grids go serpentine (boustrophedon) row by row;
//! custom lists take a nearest-neighbour tour improved by 2-opt. Ordering works in wafer
//! coordinates: the wafer→stage transform is rigid (shift, rotation, flips), so path lengths are
//! the same on the stage.
//!
//! Large custom lists stay sub-quadratic: nearest sites are found through a grid of buckets
//! (about two sites per cell), and above [`EXHAUSTIVE_TWO_OPT_MAX`] sites 2-opt tries only
//! moves that join a site to one of its [`NEIGHBOURS`] nearest sites (neighbour lists, common
//! practice for 2-opt on large tours); docs/performance.md has the time and path figures.

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

/// Greedy tour from `start`: always on to the nearest site left (ties: the lower number).
pub fn nearest_neighbour(sites: &[Site], start: (f64, f64)) -> Vec<Site> {
    let mut left: Vec<usize> = (0..sites.len()).collect();
    let mut grid = Grid::new(sites, &left);
    let mut out = Vec::with_capacity(sites.len());
    let mut here = start;
    while let Some(i) = grid.nearest(sites, here) {
        grid.remove(sites, i);
        out.push(sites[i]);
        here = (sites[i].x_mm, sites[i].y_mm);
        // A grid gone mostly empty is rebuilt over what is left, so searches stay short.
        if grid.len * 4 < grid.cells.len() && grid.len > 0 {
            left.retain(|&k| grid.holds(sites, k));
            grid = Grid::new(sites, &left);
        }
    }
    out
}

/// Sites (indices into a slice) bucketed in square cells for nearest-site queries.
struct Grid {
    origin: (f64, f64),
    cell: f64,
    nx: usize,
    ny: usize,
    cells: Vec<Vec<usize>>,
    len: usize,
}

impl Grid {
    /// A grid over `which` sites of `sites`, about two per cell.
    fn new(sites: &[Site], which: &[usize]) -> Grid {
        let (mut lo, mut hi) = ((f64::MAX, f64::MAX), (f64::MIN, f64::MIN));
        for &i in which {
            let s = &sites[i];
            lo = (lo.0.min(s.x_mm), lo.1.min(s.y_mm));
            hi = (hi.0.max(s.x_mm), hi.1.max(s.y_mm));
        }
        let side = (hi.0 - lo.0).max(hi.1 - lo.1).max(1e-9);
        let per_side = ((which.len() as f64 / 2.0).sqrt().ceil() as usize).max(1);
        let cell = side / per_side as f64;
        let nx = (((hi.0 - lo.0) / cell) as usize + 1).min(per_side);
        let ny = (((hi.1 - lo.1) / cell) as usize + 1).min(per_side);
        let mut grid = Grid {
            origin: lo,
            cell,
            nx,
            ny,
            cells: vec![Vec::new(); nx * ny],
            len: which.len(),
        };
        for &i in which {
            let c = grid.cell_index(grid.cell_of(&sites[i]));
            grid.cells[c].push(i);
        }
        grid
    }

    /// The cell of a point, clamped into the grid.
    fn cell_at(&self, p: (f64, f64)) -> (usize, usize) {
        let clamp = |v: f64, n: usize| (v.max(0.0) as usize).min(n - 1);
        (
            clamp((p.0 - self.origin.0) / self.cell, self.nx),
            clamp((p.1 - self.origin.1) / self.cell, self.ny),
        )
    }

    fn cell_of(&self, s: &Site) -> (usize, usize) {
        self.cell_at((s.x_mm, s.y_mm))
    }

    fn cell_index(&self, (x, y): (usize, usize)) -> usize {
        y * self.nx + x
    }

    fn holds(&self, sites: &[Site], i: usize) -> bool {
        self.cells[self.cell_index(self.cell_of(&sites[i]))].contains(&i)
    }

    fn remove(&mut self, sites: &[Site], i: usize) {
        let c = self.cell_index(self.cell_of(&sites[i]));
        if let Some(k) = self.cells[c].iter().position(|&j| j == i) {
            self.cells[c].swap_remove(k);
            self.len -= 1;
        }
    }

    /// The sites in the ring of cells at Chebyshev distance `r` around `centre`.
    fn ring(&self, centre: (usize, usize), r: usize) -> impl Iterator<Item = usize> + '_ {
        let (cx, cy) = (centre.0 as i64, centre.1 as i64);
        let r = r as i64;
        (cy - r..=cy + r)
            .flat_map(move |y| (cx - r..=cx + r).map(move |x| (x, y)))
            .filter(move |&(x, y)| (x - cx).abs() == r || (y - cy).abs() == r)
            .filter(|&(x, y)| x >= 0 && y >= 0 && (x as usize) < self.nx && (y as usize) < self.ny)
            .flat_map(|(x, y)| {
                self.cells[self.cell_index((x as usize, y as usize))]
                    .iter()
                    .copied()
            })
    }

    /// The `k` sites nearest `p` (nearest first, ties by number), skipping `except`. Ring `r`
    /// of cells lies at least `(r - 1) × cell` from `p`, so the search stops once the k-th
    /// best is nearer than the next ring can be.
    fn nearest_k(
        &self,
        sites: &[Site],
        p: (f64, f64),
        k: usize,
        except: Option<usize>,
    ) -> Vec<usize> {
        let centre = self.cell_at(p);
        let here = Site {
            number: 0,
            x_mm: p.0,
            y_mm: p.1,
        };
        let key = |i: usize| (dist(&here, &sites[i]), sites[i].number);
        let mut best: Vec<(f64, usize, usize)> = Vec::with_capacity(k + 1);
        for r in 0..=self.nx.max(self.ny) {
            for i in self.ring(centre, r).filter(|&i| Some(i) != except) {
                let (d, number) = key(i);
                if best.len() < k || (d, number) < (best[k - 1].0, best[k - 1].1) {
                    let at = best.partition_point(|b| (b.0, b.1) < (d, number));
                    best.insert(at, (d, number, i));
                    best.truncate(k);
                }
            }
            if best.len() == k && best[k - 1].0 <= r as f64 * self.cell {
                break;
            }
        }
        best.into_iter().map(|b| b.2).collect()
    }

    fn nearest(&self, sites: &[Site], p: (f64, f64)) -> Option<usize> {
        if self.len == 0 {
            return None;
        }
        self.nearest_k(sites, p, 1, None).first().copied()
    }
}

/// Up to this many sites, 2-opt tries every pair of edges; above, only neighbour moves.
pub const EXHAUSTIVE_TWO_OPT_MAX: usize = 500;

/// How many nearest sites each site's 2-opt moves try above [`EXHAUSTIVE_TWO_OPT_MAX`].
pub const NEIGHBOURS: usize = 10;

/// Improves an open path (its first site stays first) by reversing segments while that
/// shortens it: every pair of edges for small paths ([`two_opt_exhaustive`]), neighbour moves
/// for large ones ([`two_opt_neighbours`]).
pub fn two_opt(path: Vec<Site>) -> Vec<Site> {
    if path.len() <= EXHAUSTIVE_TWO_OPT_MAX {
        two_opt_exhaustive(path)
    } else {
        two_opt_neighbours(path)
    }
}

/// 2-opt over every pair of edges (first improvement, until no move helps or a sweep budget
/// is spent): about n² per sweep.
pub fn two_opt_exhaustive(mut path: Vec<Site>) -> Vec<Site> {
    let n = path.len();
    if n < 4 {
        return path;
    }
    for _sweep in 0..200 {
        let mut improved = false;
        for i in 0..n - 2 {
            for j in i + 2..n {
                if reversal_gain(&path, i, j) > 1e-9 {
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

/// How much reversing `path[i+1..=j]` shortens the path: it swaps edges (i,i+1),(j,j+1) for
/// (i,j),(i+1,j+1) (no edge after the last site).
fn reversal_gain(path: &[Site], i: usize, j: usize) -> f64 {
    let after_j = |a: &Site| path.get(j + 1).map_or(0.0, |b| dist(a, b));
    dist(&path[i], &path[i + 1]) + after_j(&path[j])
        - dist(&path[i], &path[j])
        - after_j(&path[i + 1])
}

/// 2-opt that only tries moves making a site adjacent to one of its [`NEIGHBOURS`] nearest
/// sites (from the site after it, or before it): about n × NEIGHBOURS per sweep plus the
/// reversals.
pub fn two_opt_neighbours(mut path: Vec<Site>) -> Vec<Site> {
    let n = path.len();
    if n < 4 {
        return path;
    }
    let all: Vec<usize> = (0..n).collect();
    let grid = Grid::new(&path, &all);
    // Neighbour lists by site number, so they survive reversals.
    let near: std::collections::HashMap<usize, Vec<usize>> = path
        .iter()
        .enumerate()
        .map(|(i, s)| {
            let k = grid.nearest_k(&path, (s.x_mm, s.y_mm), NEIGHBOURS, Some(i));
            (s.number, k.into_iter().map(|j| path[j].number).collect())
        })
        .collect();
    let mut pos: std::collections::HashMap<usize, usize> = path
        .iter()
        .enumerate()
        .map(|(i, s)| (s.number, i))
        .collect();
    for _sweep in 0..100 {
        let mut improved = false;
        for i in 0..n {
            for &c in &near[&path[i].number] {
                let j = pos[&c];
                // Joining path[i] and path[j] by reversing between them: after i (i as the
                // left end of the move) or before i (i - 1 as the left end).
                let mut moves = [None, None];
                if j > i + 1 {
                    moves[0] = Some((i, j));
                } else if j + 1 < i {
                    moves[0] = Some((j, i));
                }
                if i >= 1 && j > i {
                    moves[1] = Some((i - 1, j - 1));
                } else if i >= 1 && j + 1 < i && j >= 1 {
                    moves[1] = Some((j - 1, i - 1));
                }
                for (lo, hi) in moves.into_iter().flatten() {
                    if hi >= lo + 2 && reversal_gain(&path, lo, hi) > 1e-9 {
                        path[lo + 1..=hi].reverse();
                        for (k, s) in path[lo + 1..=hi].iter().enumerate() {
                            pos.insert(s.number, lo + 1 + k);
                        }
                        improved = true;
                        break;
                    }
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

    /// Scattered points in a 150 mm circle (xorshift, fixed seed).
    fn scattered(n: usize, seed: u64) -> Vec<Site> {
        let mut x = seed;
        let mut next = move || {
            x ^= x << 13;
            x ^= x >> 7;
            x ^= x << 17;
            (x % 1_000_000) as f64 / 1_000_000.0
        };
        (1..=n)
            .map(|number| {
                let (r, a) = (70.0 * next().sqrt(), std::f64::consts::TAU * next());
                Site {
                    number,
                    x_mm: r * a.cos(),
                    y_mm: r * a.sin(),
                }
            })
            .collect()
    }

    #[test]
    fn bucketed_nearest_neighbour_is_the_greedy_tour() {
        // The plain greedy tour, by linear search (the reference).
        fn greedy(sites: &[Site], start: (f64, f64)) -> Vec<usize> {
            let mut left = sites.to_vec();
            let mut here = Site {
                number: 0,
                x_mm: start.0,
                y_mm: start.1,
            };
            let mut out = Vec::new();
            while !left.is_empty() {
                let i = (0..left.len())
                    .min_by(|&a, &b| {
                        (dist(&here, &left[a]), left[a].number)
                            .partial_cmp(&(dist(&here, &left[b]), left[b].number))
                            .unwrap()
                    })
                    .unwrap();
                here = left.remove(i);
                out.push(here.number);
            }
            out
        }
        for (n, seed) in [(1, 3), (7, 5), (300, 11), (2000, 13)] {
            let s = scattered(n, seed);
            let fast: Vec<usize> = nearest_neighbour(&s, (0.0, 0.0))
                .iter()
                .map(|s| s.number)
                .collect();
            assert_eq!(fast, greedy(&s, (0.0, 0.0)), "{n} sites");
        }
        // Start outside the sites' box; many sites on one point.
        let mut s = scattered(50, 17);
        s.extend((51..=80).map(|number| Site {
            number,
            x_mm: 5.0,
            y_mm: 5.0,
        }));
        let fast: Vec<usize> = nearest_neighbour(&s, (-500.0, 300.0))
            .iter()
            .map(|s| s.number)
            .collect();
        assert_eq!(fast, greedy(&s, (-500.0, 300.0)));
    }

    #[test]
    fn neighbour_two_opt_is_close_to_exhaustive_and_large_plans_are_fast() {
        let s = scattered(1500, 23);
        let nn = nearest_neighbour(&s, (0.0, 0.0));
        let full = path_length((0.0, 0.0), &two_opt_exhaustive(nn.clone()));
        let near = two_opt_neighbours(nn.clone());
        assert!(same_set(&s, &near));
        assert_eq!(near[0], nn[0], "the first site stays first");
        let ratio = path_length((0.0, 0.0), &near) / full;
        assert!(ratio < 1.03, "neighbour 2-opt / exhaustive 2-opt = {ratio}");
        // 10 000 custom sites (the validation ceiling): seconds, not the hours n² takes.
        let big = scattered(10_000, 29);
        let p = PatternSpec::Custom {
            sites_mm: big.iter().map(|s| [s.x_mm, s.y_mm]).collect(),
        };
        let t0 = std::time::Instant::now();
        let o = order(&p, &big);
        let took = t0.elapsed().as_secs_f64();
        assert!(same_set(&big, &o));
        assert!(took < 20.0, "ordering 10 000 sites took {took:.1} s");
        assert!(
            path_length((0.0, 0.0), &o)
                < 0.95 * path_length((0.0, 0.0), &nearest_neighbour(&big, (0.0, 0.0)))
        );
    }
}
