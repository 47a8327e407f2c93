//! Interpolation of scattered site values onto a grid over the usable disc.
//!
//! Method: Sibson's C¹ natural-neighbour interpolation (spade, flatness ½) with gradients
//! estimated at each node by a weighted least-squares quadratic through its Delaunay
//! neighbours. It passes exactly through every site value, is smooth between sites and
//! reproduces a linear field exactly.
//!
//! The rim: natural neighbours only reach the convex hull of the sites, but the map must
//! cover the usable disc out to the edge exclusion. A ring of 72 "ghost" nodes is placed just
//! outside the usable disc (and outside every site). Each ghost takes a first-order
//! extrapolation from the sites near it: the inverse-distance weighted mean (power 4, so the
//! nearest outer sites dominate) of `value + gradient · offset` over the sites, the gradients
//! estimated from the sites alone. The value is kept within the measured range widened by a
//! quarter of the range, so a pattern that stops short of the edge cannot throw the rim far
//! off. Trends (dome, tilt) thus carry on smoothly to the edge, a plane is reproduced
//! everywhere, and there is no step at the hull. Grid nodes outside the usable area stay
//! empty (NaN).

use crate::recipe::Wafer;
use ndarray::Array2;
use spade::{DelaunayTriangulation, HasPosition, Point2, Triangulation};

/// Ghost nodes on the rim ring.
pub const GHOSTS: usize = 72;

/// A node of the triangulation: a site or a ghost.
#[derive(Debug, Clone, Copy)]
struct Node {
    pos: Point2<f64>,
    value: f64,
}

impl HasPosition for Node {
    type Scalar = f64;
    fn position(&self) -> Point2<f64> {
        self.pos
    }
}

/// A continuous thickness field over the wafer, built from site values.
#[derive(Clone)]
pub struct Field {
    tri: DelaunayTriangulation<Node>,
    /// Gradient per vertex index.
    grads: Vec<[f64; 2]>,
    wafer: Wafer,
}

/// A value grid over the wafer: node (i, j) sits at (x0 + i·step, y0 + j·step). NaN marks
/// an empty node.
#[derive(Debug, Clone, PartialEq)]
pub struct Grid {
    pub x0: f64,
    pub y0: f64,
    pub step: f64,
    /// Node values indexed `[[j, i]]`: one row per y, one column per x.
    pub values: Array2<f64>,
}

impl Grid {
    /// Nodes along x (columns).
    pub fn nx(&self) -> usize {
        self.values.ncols()
    }
    /// Nodes along y (rows).
    pub fn ny(&self) -> usize {
        self.values.nrows()
    }
    /// Value at node (i, j).
    pub fn at(&self, i: usize, j: usize) -> f64 {
        self.values[[j, i]]
    }
    /// x of column i, mm.
    pub fn x(&self, i: usize) -> f64 {
        self.x0 + i as f64 * self.step
    }
    /// y of row j, mm.
    pub fn y(&self, j: usize) -> f64 {
        self.y0 + j as f64 * self.step
    }
    /// Bilinear value at (x, y); NaN outside the grid or next to an empty node.
    pub fn bilinear(&self, x: f64, y: f64) -> f64 {
        let fx = (x - self.x0) / self.step;
        let fy = (y - self.y0) / self.step;
        if !(fx >= 0.0 && fy >= 0.0) {
            return f64::NAN;
        }
        let (i, j) = (fx.floor() as usize, fy.floor() as usize);
        if i + 1 >= self.nx() || j + 1 >= self.ny() {
            return f64::NAN;
        }
        let (tx, ty) = (fx - i as f64, fy - j as f64);
        let v00 = self.at(i, j);
        let v10 = self.at(i + 1, j);
        let v01 = self.at(i, j + 1);
        let v11 = self.at(i + 1, j + 1);
        (v00 * (1.0 - tx) + v10 * tx) * (1.0 - ty) + (v01 * (1.0 - tx) + v11 * tx) * ty
    }
    /// Smallest and largest filled value (None when all are empty).
    pub fn min_max(&self) -> Option<(f64, f64)> {
        self.values
            .iter()
            .filter(|v| v.is_finite())
            .fold(None, |acc, &v| match acc {
                None => Some((v, v)),
                Some((a, b)) => Some((a.min(v), b.max(v))),
            })
    }
}

impl Field {
    /// A field through `(x_mm, y_mm, value)` sites on `wafer`; `None` without a finite site.
    /// Sites at the same position are averaged.
    pub fn new(sites: &[(f64, f64, f64)], wafer: &Wafer) -> Option<Field> {
        let sites = merge_duplicates(sites);
        if sites.is_empty() {
            return None;
        }
        let r_usable = wafer.usable_radius().max(1e-3);
        let mut tri = DelaunayTriangulation::<Node>::new();
        for &(x, y, v) in &sites {
            tri.insert(Node {
                pos: Point2::new(x, y),
                value: v,
            })
            .ok()?;
        }
        let site_grads = estimate_gradients(&tri);
        let with_grads: Vec<([f64; 3], [f64; 2])> = tri
            .vertices()
            .map(|v| {
                let p = v.position();
                ([p.x, p.y, v.data().value], site_grads[v.fix().index()])
            })
            .collect();
        for (x, y, v) in ghost_ring(&with_grads, r_usable) {
            tri.insert(Node {
                pos: Point2::new(x, y),
                value: v,
            })
            .ok()?;
        }
        let grads = estimate_gradients(&tri);
        Some(Field {
            tri,
            grads,
            wafer: *wafer,
        })
    }

    /// A sampler for many look-ups (reuses spade's buffers; one per thread).
    pub fn sampler(&self) -> Sampler<'_> {
        Sampler {
            field: self,
            nn: self.tri.natural_neighbor(),
            weights: Default::default(),
        }
    }

    /// The interpolated value at (x, y), anywhere inside the ghost ring (NaN beyond it).
    pub fn at(&self, x: f64, y: f64) -> f64 {
        self.sampler().at(x, y)
    }

    /// Grid of `n` × `n` nodes spanning the usable disc, filled where
    /// `edge_distance ≥ edge exclusion − pad_mm` (pad 0 = the usable area exactly), empty
    /// elsewhere. Bands of rows are shared among the available cores.
    ///
    /// Evaluation is checked-adaptive: the field is evaluated exactly on every
    /// [`COARSE_STRIDE`]-th node and, for each coarse cell, at its centre and the midpoints of
    /// its four sides. Where all five agree with the bilinear value of the cell's corners to
    /// within [`GRID_TOLERANCE`] of the value range, the cell's other nodes are filled
    /// bilinearly (for a locally quadratic field the bilinear error peaks at those points);
    /// cells that fail the check, hold a node of the triangulation, or touch the edge of the
    /// defined area are evaluated node by node.
    pub fn grid(&self, n: usize, pad_mm: f64) -> Grid {
        let n = n.max(2);
        let half = self.wafer.usable_radius() + pad_mm.max(0.0);
        let step = 2.0 * half / (n - 1) as f64;
        let spec = GridSpec {
            n,
            x0: -half,
            y0: -half,
            step,
            limit: self.wafer.edge_exclusion_mm - pad_mm - 1e-9,
            tol: GRID_TOLERANCE * self.value_span().max(1e-9),
        };
        let lattice: Vec<usize> = (0..n.div_ceil(COARSE_STRIDE))
            .map(|k| k * COARSE_STRIDE)
            .chain(std::iter::once(n - 1))
            .collect::<std::collections::BTreeSet<_>>()
            .into_iter()
            .collect();
        let cells = lattice.len() - 1;
        let site_cells = self.site_cells(&spec, &lattice);
        let threads = std::thread::available_parallelism()
            .map(|t| t.get())
            .unwrap_or(1)
            .clamp(1, 8)
            .min(cells);
        let per = cells.div_ceil(threads);
        let mut values = Array2::from_elem((n, n), f64::NAN);
        std::thread::scope(|scope| {
            // Bands of whole rows: a fresh array is in standard (row-major) layout.
            let mut rest: &mut [f64] = values.as_slice_mut().expect("row-major grid");
            let mut row0 = 0;
            for band in (0..cells).step_by(per) {
                let band_end = (band + per).min(cells);
                // Fine rows owned: from this band's first lattice row up to the next band's
                // (the last band also owns the final row).
                let row_end = if band_end == cells {
                    n
                } else {
                    lattice[band_end]
                };
                let (mine, tail) = std::mem::take(&mut rest).split_at_mut((row_end - row0) * n);
                rest = tail;
                let (lattice, site_cells, spec) = (&lattice, &site_cells, &spec);
                // A clone per thread: spade's look-up hint is shared state inside the
                // triangulation, and threads walking from each other's hints are slow.
                let local = (threads > 1).then(|| self.clone());
                let field_ref: &Field = self;
                let first_row = row0;
                scope.spawn(move || {
                    let field = local.as_ref().unwrap_or(field_ref);
                    field.fill_band(spec, lattice, site_cells, band..band_end, first_row, mine);
                });
                row0 = row_end;
            }
        });
        Grid {
            x0: spec.x0,
            y0: spec.y0,
            step,
            values,
        }
    }

    /// Range of the node values (sites and ghosts).
    fn value_span(&self) -> f64 {
        let (lo, hi) = self.tri.vertices().fold((f64::MAX, f64::MIN), |(a, b), v| {
            (a.min(v.data().value), b.max(v.data().value))
        });
        hi - lo
    }

    /// Coarse cells (column, row) that hold a site or ghost node.
    fn site_cells(
        &self,
        spec: &GridSpec,
        lattice: &[usize],
    ) -> std::collections::HashSet<(usize, usize)> {
        let mut set = std::collections::HashSet::new();
        let cell_of = |c: f64| {
            let node = ((c / spec.step).floor().max(0.0) as usize).min(spec.n - 1);
            lattice.partition_point(|&l| l <= node).saturating_sub(1)
        };
        for v in self.tri.vertices() {
            let p = v.position();
            set.insert((cell_of(p.x - spec.x0), cell_of(p.y - spec.y0)));
        }
        set
    }

    /// Fills the fine rows of coarse rows `band` into `out` (which starts at fine row
    /// `first_row`).
    fn fill_band(
        &self,
        spec: &GridSpec,
        lattice: &[usize],
        site_cells: &std::collections::HashSet<(usize, usize)>,
        band: std::ops::Range<usize>,
        first_row: usize,
        out: &mut [f64],
    ) {
        let s = self.sampler();
        let n = spec.n;
        let cells = lattice.len() - 1;
        let mid = |k: usize, coord: &dyn Fn(usize) -> f64| {
            0.5 * (coord(lattice[k]) + coord(lattice[k + 1]))
        };
        let xs = |i: usize| spec.x(i);
        let ys = |j: usize| spec.y(j);
        // Lattice nodes and midpoints of the horizontal cell sides along lattice row j.
        let along = |j: usize| -> (Vec<f64>, Vec<f64>) {
            let y = spec.y(j);
            (
                lattice.iter().map(|&i| s.at(spec.x(i), y)).collect(),
                (0..cells).map(|k| s.at(mid(k, &xs), y)).collect(),
            )
        };
        let (mut below, mut below_mid) = along(lattice[band.start]);
        for cj in band.clone() {
            let (j0, j1) = (lattice[cj], lattice[cj + 1]);
            let (above, above_mid) = along(j1);
            // Midpoints of the vertical sides and the centres, at the middle height.
            let ym = mid(cj, &ys);
            let side_mid: Vec<f64> = lattice.iter().map(|&i| s.at(spec.x(i), ym)).collect();
            let centre: Vec<f64> = (0..cells).map(|k| s.at(mid(k, &xs), ym)).collect();
            let rows = if cj + 1 == cells {
                j0..=j1
            } else {
                j0..=j1 - 1
            };
            for ci in 0..cells {
                let (i0, i1) = (lattice[ci], lattice[ci + 1]);
                let c = [below[ci], below[ci + 1], above[ci], above[ci + 1]];
                // NaN counts as off: a cell that cannot be checked is evaluated exactly.
                let off = |got: f64, bilinear: f64| {
                    let e = (got - bilinear).abs();
                    e.is_nan() || e > spec.tol
                };
                let exact = site_cells.contains(&(ci, cj))
                    || c.iter().any(|v| !v.is_finite())
                    || off(centre[ci], 0.25 * (c[0] + c[1] + c[2] + c[3]))
                    || off(below_mid[ci], 0.5 * (c[0] + c[1]))
                    || off(above_mid[ci], 0.5 * (c[2] + c[3]))
                    || off(side_mid[ci], 0.5 * (c[0] + c[2]))
                    || off(side_mid[ci + 1], 0.5 * (c[1] + c[3]));
                let cols = if ci + 1 == cells {
                    i0..=i1
                } else {
                    i0..=i1 - 1
                };
                for j in rows.clone() {
                    let y = spec.y(j);
                    let ty = (j - j0) as f64 / (j1 - j0) as f64;
                    for i in cols.clone() {
                        let x = spec.x(i);
                        if self.wafer.edge_distance(x, y) < spec.limit {
                            continue;
                        }
                        let v = if (i == i0 || i == i1) && (j == j0 || j == j1) {
                            c[(i == i1) as usize + 2 * (j == j1) as usize]
                        } else if exact {
                            s.at(x, y)
                        } else {
                            let tx = (i - i0) as f64 / (i1 - i0) as f64;
                            (c[0] * (1.0 - tx) + c[1] * tx) * (1.0 - ty)
                                + (c[2] * (1.0 - tx) + c[3] * tx) * ty
                        };
                        out[(j - first_row) * n + i] = v;
                    }
                }
            }
            below = above;
            below_mid = above_mid;
        }
    }
}

/// Nodes between exact evaluations of [`Field::grid`].
pub const COARSE_STRIDE: usize = 4;
/// Largest bilinear error accepted in a coarse cell, as a fraction of the value range
/// (1e-3: 0.025 nm on a 25 nm range, which moves an isoline by well under a pixel).
pub const GRID_TOLERANCE: f64 = 1e-3;

/// Geometry of a grid being filled.
struct GridSpec {
    n: usize,
    x0: f64,
    y0: f64,
    step: f64,
    /// Nodes with `edge_distance` below this stay empty.
    limit: f64,
    /// Absolute tolerance of the centre check.
    tol: f64,
}

impl GridSpec {
    fn x(&self, i: usize) -> f64 {
        self.x0 + i as f64 * self.step
    }
    fn y(&self, j: usize) -> f64 {
        self.y0 + j as f64 * self.step
    }
}

/// Repeated look-ups into a [`Field`].
pub struct Sampler<'a> {
    field: &'a Field,
    nn: spade::NaturalNeighbor<'a, DelaunayTriangulation<Node>>,
    weights: std::cell::RefCell<Vec<(spade::handles::FixedVertexHandle, f64)>>,
}

impl Sampler<'_> {
    /// The interpolated value at (x, y); NaN outside the ghost ring.
    ///
    /// Sibson's C¹ interpolant (Sibson 1981; Flötotto's thesis, ch. 4): the natural-neighbour
    /// blend of the sites' values (`c0`) and of their first-order Taylor extrapolations
    /// weighted by natural-neighbour weight over distance (`c1`), mixed by
    /// `(α c0 + β c1)/(α + β)` with α = Σ(wᵢ/rᵢ)rᵢ² / Σ(wᵢ/rᵢ) and β = Σ wᵢ rᵢ². The same
    /// formula as spade's `interpolate_gradient` with flatness ½, with a square root where
    /// spade raises to the power ½ (the profile's largest single cost).
    pub fn at(&self, x: f64, y: f64) -> f64 {
        let tri = &self.field.tri;
        let grads = &self.field.grads;
        let position = Point2::new(x, y);
        let weights = &mut *self.weights.borrow_mut();
        self.nn.get_weights(position, weights);
        if weights.is_empty() {
            return f64::NAN;
        }
        let (mut sum_c0, mut sum_c1, mut sum_c1_weights) = (0.0, 0.0, 0.0);
        let (mut alpha, mut beta) = (0.0, 0.0);
        for &(handle, weight) in weights.iter() {
            let vertex = tri.vertex(handle);
            let (p, h) = (vertex.position(), vertex.data().value);
            let (dx, dy) = (x - p.x, y - p.y);
            let r2 = dx * dx + dy * dy;
            if r2 == 0.0 {
                return h;
            }
            let c1_weight = weight / r2.sqrt();
            let g = grads[handle.index()];
            let zeta = h + dx * g[0] + dy * g[1];
            alpha += c1_weight * r2;
            beta += weight * r2;
            sum_c1_weights += c1_weight;
            sum_c1 += zeta * c1_weight;
            sum_c0 += h * weight;
        }
        alpha /= sum_c1_weights;
        sum_c1 /= sum_c1_weights;
        (alpha * sum_c0 + beta * sum_c1) / (alpha + beta)
    }
}

/// Drops non-finite sites and averages sites at the same position.
fn merge_duplicates(sites: &[(f64, f64, f64)]) -> Vec<(f64, f64, f64)> {
    let mut s: Vec<(f64, f64, f64)> = sites
        .iter()
        .copied()
        .filter(|(x, y, v)| x.is_finite() && y.is_finite() && v.is_finite())
        .collect();
    s.sort_by(|a, b| a.0.total_cmp(&b.0).then(a.1.total_cmp(&b.1)));
    let mut out: Vec<(f64, f64, f64)> = Vec::with_capacity(s.len());
    let mut count = 0.0;
    for p in s {
        match out.last_mut() {
            Some(last) if last.0 == p.0 && last.1 == p.1 => {
                count += 1.0;
                last.2 += (p.2 - last.2) / count;
            }
            _ => {
                out.push(p);
                count = 1.0;
            }
        }
    }
    out
}

/// The ghost ring: positions just outside the usable disc and every site, values
/// extrapolated from the sites (see the module doc). `sites` holds (x, y, value) and the
/// gradient of each site.
fn ghost_ring(sites: &[([f64; 3], [f64; 2])], r_usable: f64) -> Vec<(f64, f64, f64)> {
    let (lo, hi) = sites.iter().fold((f64::MAX, f64::MIN), |(a, b), s| {
        (a.min(s.0[2]), b.max(s.0[2]))
    });
    let widen = 0.25 * (hi - lo);
    let r_max = sites
        .iter()
        .fold(r_usable, |m, s| m.max(s.0[0].hypot(s.0[1])));
    // The ring polygon's inradius must clear the disc: R / cos(π/N), plus 2 % room.
    let ring = (r_max + 0.02 * r_usable) / (std::f64::consts::PI / GHOSTS as f64).cos();
    (0..GHOSTS)
        .map(|k| {
            let a = 2.0 * std::f64::consts::PI * k as f64 / GHOSTS as f64;
            let (gx, gy) = (ring * a.cos(), ring * a.sin());
            let (mut wsum, mut vsum) = (0.0, 0.0);
            for ([x, y, v], [dx, dy]) in sites {
                let (ox, oy) = (gx - x, gy - y);
                let d2 = ox * ox + oy * oy;
                let w = 1.0 / (d2 * d2).max(1e-300);
                wsum += w;
                vsum += w * (v + dx * ox + dy * oy);
            }
            (gx, gy, (vsum / wsum).clamp(lo - widen, hi + widen))
        })
        .collect()
}

/// Gradient at every vertex: weighted least squares of a quadratic (or, with few
/// neighbours, a plane) through the vertex's Delaunay neighbours, weights 1/d².
fn estimate_gradients(tri: &DelaunayTriangulation<Node>) -> Vec<[f64; 2]> {
    let mut grads = vec![[0.0; 2]; tri.num_vertices()];
    for v in tri.vertices() {
        let p = v.position();
        let h = v.data().value;
        let nbrs: Vec<(f64, f64, f64)> = v
            .out_edges()
            .map(|e| {
                let q = e.to();
                (
                    q.position().x - p.x,
                    q.position().y - p.y,
                    q.data().value - h,
                )
            })
            .collect();
        grads[v.fix().index()] = local_gradient(&nbrs);
    }
    grads
}

/// Gradient from neighbour offsets (dx, dy, dv).
fn local_gradient(nbrs: &[(f64, f64, f64)]) -> [f64; 2] {
    let quadratic = nbrs.len() >= 6;
    let cols = if quadratic { 5 } else { 2 };
    if nbrs.len() < 2 {
        return [0.0, 0.0];
    }
    let a = nalgebra::DMatrix::from_fn(nbrs.len(), cols, |i, c| {
        let (dx, dy, _) = nbrs[i];
        let w = 1.0 / (dx * dx + dy * dy).sqrt().max(1e-12);
        w * match c {
            0 => dx,
            1 => dy,
            2 => 0.5 * dx * dx,
            3 => dx * dy,
            _ => 0.5 * dy * dy,
        }
    });
    let b = nalgebra::DVector::from_iterator(
        nbrs.len(),
        nbrs.iter()
            .map(|&(dx, dy, dv)| dv / (dx * dx + dy * dy).sqrt().max(1e-12)),
    );
    match a.svd(true, true).solve(&b, 1e-10) {
        Ok(x) if x[0].is_finite() && x[1].is_finite() => [x[0], x[1]],
        _ => [0.0, 0.0],
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::recipe::geometry::Orientation;

    fn wafer() -> Wafer {
        Wafer {
            diameter_mm: 150.0,
            edge_exclusion_mm: 5.0,
            orientation: Orientation::None,
        }
    }

    #[test]
    fn a_plane_is_reproduced_everywhere_inside_the_sites() {
        let f = |x: f64, y: f64| 1000.0 + 0.3 * x - 0.2 * y;
        let mut sites = vec![(0.0, 0.0, f(0.0, 0.0))];
        for ring in 1..=3 {
            let r = 70.0 * ring as f64 / 3.0;
            for k in 0..8 * ring {
                let a = 2.0 * std::f64::consts::PI * k as f64 / (8 * ring) as f64;
                sites.push((r * a.cos(), r * a.sin(), f(r * a.cos(), r * a.sin())));
            }
        }
        let field = Field::new(&sites, &wafer()).unwrap();
        for &(x, y) in &[(10.0, 5.0), (-33.0, 21.0), (40.0, -40.0)] {
            let err = field.at(x, y) - f(x, y);
            assert!(err.abs() < 1e-6, "at {x},{y}: error {err}");
        }
    }

    #[test]
    fn duplicates_are_averaged() {
        let m = merge_duplicates(&[(1.0, 2.0, 10.0), (0.0, 0.0, 5.0), (1.0, 2.0, 14.0)]);
        assert_eq!(m, vec![(0.0, 0.0, 5.0), (1.0, 2.0, 12.0)]);
    }

    #[test]
    fn adaptive_grid_matches_exact_evaluation_within_tolerance() {
        let f = |x: f64, y: f64| {
            let r2 = (x * x + y * y) / 4900.0;
            1000.0 + 20.0 * (1.0 - r2) + 0.06 * x + 3.0 * (x / 9.0).sin() * (y / 11.0).cos()
        };
        let mut sites = vec![(0.0, 0.0, f(0.0, 0.0))];
        for ring in 1..=4 {
            let r = 70.0 * ring as f64 / 4.0;
            for k in 0..8 * ring {
                let a = std::f64::consts::TAU * k as f64 / (8 * ring) as f64;
                sites.push((r * a.cos(), r * a.sin(), f(r * a.cos(), r * a.sin())));
            }
        }
        let field = Field::new(&sites, &wafer()).unwrap();
        let g = field.grid(512, 0.0);
        let tol = GRID_TOLERANCE * field.value_span();
        let s = field.sampler();
        let (mut worst, mut differ, mut filled) = (0.0f64, 0, 0);
        for j in 0..g.ny() {
            for i in 0..g.nx() {
                let v = g.at(i, j);
                if v.is_finite() {
                    let e = (v - s.at(g.x(i), g.y(j))).abs();
                    worst = worst.max(e);
                    differ += (e > 0.0) as usize;
                    filled += 1;
                }
            }
        }
        // The bilinear fill was really used (most nodes are not bit-identical to exact).
        assert!(
            differ > filled / 2,
            "{differ} of {filled} nodes interpolated"
        );
        // Measured: worst 0.021 nm against a tolerance of 0.031 nm (1e-3 of the range).
        assert!(worst <= tol, "worst {worst} vs tolerance {tol}");
    }

    #[test]
    fn grid_is_empty_outside_the_usable_disc() {
        let field = Field::new(&[(0.0, 0.0, 1.0), (10.0, 0.0, 2.0)], &wafer()).unwrap();
        let g = field.grid(41, 0.0);
        let w = wafer();
        for j in 0..g.ny() {
            for i in 0..g.nx() {
                let inside = w.is_usable(g.x(i), g.y(j));
                assert_eq!(g.at(i, j).is_finite(), inside, "node {i},{j}");
            }
        }
    }
}
