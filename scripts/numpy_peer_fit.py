#!/usr/bin/env python3
"""The fair peer for isopach's model fit: the same job written as a vectorised numpy/scipy
program, timed against isopach's criterion benchmark (benches/fit.rs) in one run.

  python3 scripts/numpy_peer_fit.py             # runs the Rust bench too (release build)
  python3 scripts/numpy_peer_fit.py --no-cargo  # reuses target/criterion results

The problems are the bench's: 2048 pixels with 0.3 % Gaussian noise,
  single  SiO2 on Si, 420-980 nm, true 1234 nm, search 100-3000 nm
  bilayer Si3N4 (80-250 nm, true 163) on SiO2 (300-800 nm, true 512) on Si, 400-1000 nm.
The algorithm is isopach's (src/fit/model.rs, src/fit/fitter.rs): each range widened by 1.5
fringe orders on each side; a grid over every fitted thickness with a step of
lambda_min / (10 n) (finer for few fringes) on a weighted pixel subset (5 pixels per fringe of
the thickest stack searched, at every wavelength, each weighted by the pixels it stands for);
the 12 lowest local minima of chi^2 (and any nearly as low) moved to their parabola vertex,
refined by a short Levenberg-Marquardt on that subset unless their predicted chi^2 cannot
compete; the best polished on all pixels. Reflectance is the closed-form Airy sum of the
stack at normal incidence (the transfer-matrix result for one or two layers), evaluated for
the whole grid at once as numpy arrays; the polish is scipy.optimize.least_squares
(method "lm") with the analytic Jacobian. One thread: numpy's BLAS is not used by these
element-wise operations, and OMP/OPENBLAS threads are pinned to 1 anyway.

Each figure is the median and range of repeated calls, wall (perf_counter) and CPU
(process_time), next to isopach's criterion medians of the same run (`/wall` and `/cpu`).
"""

import json
import os
import subprocess
import sys
import time
from importlib.metadata import version

os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import numpy as np  # noqa: E402
from scipy.optimize import least_squares  # noqa: E402

sys.path.insert(0, os.path.dirname(__file__))
from optical_data import MATERIALS  # noqa: E402

ROOT = os.path.join(os.path.dirname(__file__), "..")
REPEATS = 15


def fresnel(a, b):
    """Normal-incidence amplitude reflection coefficient from medium a into b."""
    return (a - b) / (a + b)


class Stack:
    """Ambient / layers (top first) / substrate at fixed wavelengths; reflectance and its
    thickness derivatives for arrays of thicknesses (shape (..., layers))."""

    def __init__(self, lam, names):
        self.lam = lam
        self.n = [MATERIALS[m](lam) for m in names]
        self.k = [4j * np.pi * n / lam for n in self.n[1:-1]]  # 2i * (2 pi n / lambda)
        self.r = [fresnel(self.n[i], self.n[i + 1]) for i in range(len(self.n) - 1)]

    def subset(self, idx):
        s = Stack.__new__(Stack)
        s.lam = self.lam[idx]
        s.n = [n[idx] for n in self.n]
        s.k = [k[idx] for k in self.k]
        s.r = [r[idx] for r in self.r]
        return s

    def reflectance(self, d, jac=False):
        """R for thicknesses d[..., layers], or a list with one array per layer that
        broadcast against each other (a grid: each layer's phase factor is then computed
        once per grid value, not once per grid point), broadcast against the wavelengths on
        the last axis of the result; with jac, also dR/dd_i for each layer."""
        if not isinstance(d, list):
            d = np.asarray(d, dtype=float)
            d = [d[..., i] for i in range(d.shape[-1])]
        layers = len(self.k)
        # Built from the substrate up: r_low is the reflection seen from inside layer i.
        r_low = self.r[-1]
        dr_low = []  # derivatives of r_low with respect to the layers below, bottom first
        for i in reversed(range(layers)):
            e = np.exp(self.k[i] * np.asarray(d[i], dtype=float)[..., None])
            ri = self.r[i]
            den = 1.0 + ri * r_low * e
            r_new = (ri + r_low * e) / den
            if jac:
                common = (1.0 - ri * ri) / den ** 2
                d_self = common * r_low * e * self.k[i]
                d_below = [common * e * dr for dr in dr_low]
                dr_low = d_below + [d_self]
            r_low = r_new
        R = np.abs(r_low) ** 2
        if not jac:
            return R
        # dr_low lists layers bottom first: reverse to top first.
        return R, [2.0 * np.real(np.conj(r_low) * dr) for dr in reversed(dr_low)]


# isopach's search settings (src/fit/fitter.rs): the range widened by 1.5 fringe orders at
# the longest wavelength on each side; a grid step of lambda_min / (10 n), finer in
# proportion below 4 fringes across the window (at most 20x); search pixels 5 per fringe of
# the thickest stack searched, at least 48.
ORDER_MARGIN = 1.5
STEPS_PER_WAVE = 10.0
FEW_FRINGES = 4.0
MAX_REFINEMENT = 20.0
PER_FRINGE = 5.0
MIN_SEARCH_PIXELS = 48


def widened(stack, lower, upper):
    """The search range: each layer's bounds moved out by ORDER_MARGIN orders (never below 0)."""
    out = []
    for n, lo, hi in zip(stack.n[1:-1], lower, upper):
        order = stack.lam[-1] / (2.0 * max(np.real(n[-1]), 1.0))
        out.append((max(lo - ORDER_MARGIN * order, 0.0), hi + ORDER_MARGIN * order))
    return out


def grid_axes(stack, bounds):
    """Each fitted layer's grid points (isopach's steps, the count rounded up)."""
    l0, l1 = stack.lam[0], stack.lam[-1]
    axes, steps = [], []
    for n, (lo, hi) in zip(stack.n[1:-1], bounds):
        n0 = max(np.real(n[0]), 1.0)
        fringes = 2.0 * n0 * hi * (1.0 / l0 - 1.0 / l1)
        finer = np.clip(FEW_FRINGES / max(fringes, 1e-9), 1.0, MAX_REFINEMENT)
        step = l0 / (STEPS_PER_WAVE * finer * n0)
        count = max(int(np.ceil((hi - lo) / step)) + 1, 2)
        axes.append(np.linspace(lo, hi, count))
        steps.append(step)
    return axes, steps


_SEARCH = {}


def search_pixels(stack, thickest):
    """search_pixels_uncached, kept per stack and range as isopach's Fitter keeps them (a
    map fits every site on one wavelength grid and one range)."""
    key = (id(stack), tuple(thickest))
    if key not in _SEARCH:
        _SEARCH[key] = search_pixels_uncached(stack, thickest)
    return _SEARCH[key]


def search_pixels_uncached(stack, thickest):
    """isopach's SearchPixels::by_phase: walking along the window, the last pixel whose
    round-trip phase (sum of Re(beta) d over the layers, beta = 4 pi n / lambda) differs from
    the previous choice's by at most 2 pi / PER_FRINGE, and no further than 1/48 of the
    window; each weighted by the pixels between midpoints, scaled to mean 1."""
    lam = stack.lam
    phase = sum(np.real(k / 1j) * d for k, d in zip(stack.k, thickest))
    max_phase, max_gap = 2.0 * np.pi / PER_FRINGE, (lam[-1] - lam[0]) / MIN_SEARCH_PIXELS
    index, last = [0], 0
    for j in range(1, len(lam)):
        def too_far(a, b):
            return abs(phase[a] - phase[b]) > max_phase or abs(lam[a] - lam[b]) > max_gap
        if too_far(last, j) and j - 1 > last:
            index.append(j - 1)
            last = j - 1
        if too_far(last, j):
            index.append(j)
            last = j
    index = np.array(index)
    edges = np.concatenate([[-0.5], 0.5 * (index[1:] + index[:-1]), [len(lam) - 0.5]])
    weight = np.diff(edges) * len(index) / len(lam)
    return index, weight


def local_minima(chi2):
    """Indices of the grid points lower than their neighbours along every axis (no higher
    than the one before, lower than the one after: isopach's rule), best first."""
    is_min = np.ones(chi2.shape, dtype=bool)
    for a in range(chi2.ndim):
        lo = np.full(chi2.shape, np.inf)
        hi = np.full(chi2.shape, np.inf)
        body = [slice(None)] * chi2.ndim
        prev = [slice(None)] * chi2.ndim
        body[a], prev[a] = slice(1, None), slice(None, -1)
        lo[tuple(body)] = chi2[tuple(prev)]
        hi[tuple(prev)] = chi2[tuple(body)]
        is_min &= (chi2 <= lo) & (chi2 < hi)
    idx = np.argwhere(is_min)
    return idx[np.argsort(chi2[tuple(idx.T)], kind="stable")]


def refined_start(chi2, axes, i):
    """A parabola through each axis' neighbours: the start moved to its vertex (at most one
    half step) and the chi^2 it predicts there (isopach's `Grid::refined`)."""
    start = np.array([ax[j] for ax, j in zip(axes, i)])
    predicted = chi2[tuple(i)]
    for a, ax in enumerate(axes):
        if 0 < i[a] < len(ax) - 1:
            lo, hi = list(i), list(i)
            lo[a] -= 1
            hi[a] += 1
            f0, fm, fp = chi2[tuple(i)], chi2[tuple(lo)], chi2[tuple(hi)]
            curv = (fp + fm - 2.0 * f0) / 2.0
            if curv > 0 and np.isfinite(fp + fm):
                slope = (fp - fm) / 2.0
                off = np.clip(-slope / (2.0 * curv), -0.5, 0.5)
                start[a] += off * (ax[1] - ax[0])
                predicted -= slope * slope / (4.0 * curv)
    return start, predicted


# isopach's settings (src/fit/model.rs): 12 candidates; the coarse LM on the search pixels
# stops after 15 iterations or a relative chi^2 change of 1e-6 or a step under 0.01 nm; the
# polish on all pixels stops at a step under 1e-4 nm; a basin predicted above
# 4 chi2_best + 36 s^2 is skipped.
CANDIDATES = 12
AMBIGUITY_DCHI2 = 9.0


def solve(s, y, x0, lower, upper, coarse, root=None):
    """scipy least_squares (MINPACK lmder) with the analytic Jacobian, residuals times
    root = sqrt(weight) when given; R and dR/dd computed once per point (lmder asks for both
    at the same x)."""
    memo = {}
    root = np.ones_like(y) if root is None else root

    def at(x):
        key = x.tobytes()
        if key not in memo:
            memo.clear()
            memo[key] = s.reflectance(x, jac=True)
        return memo[key]

    scale = max(1.0, float(np.max(np.abs(x0))))
    r = least_squares(
        lambda x: root * (at(x)[0] - y),
        x0,
        jac=lambda x: root[:, None] * np.stack(at(x)[1], axis=-1),
        method="lm",
        xtol=(0.01 if coarse else 1e-4) / scale,
        ftol=1e-6 if coarse else 1e-10,
        max_nfev=16 if coarse else None,
    )
    r.x = np.clip(r.x, lower, upper)
    return r


def fit(stack, measured, lower, upper):
    bounds = widened(stack, lower, upper)
    lower, upper = [b[0] for b in bounds], [b[1] for b in bounds]
    axes, steps = grid_axes(stack, bounds)
    sub, weight = search_pixels(stack, upper)
    root = np.sqrt(weight)
    small = stack.subset(sub)
    # The whole grid at once, each axis along its own array dimension.
    shaped = [ax.reshape([-1 if b == a else 1 for b in range(len(axes))]) for a, ax in enumerate(axes)]
    chi2 = np.sum(weight * (small.reflectance(shaped) - measured[sub]) ** 2, axis=-1)
    minima = local_minima(chi2)
    lowest = chi2[tuple(minima[0])]
    # The best CANDIDATES minima and every further one nearly as low (isopach's rule).
    chosen = [i for k, i in enumerate(minima) if k < CANDIDATES or chi2[tuple(i)] <= 4.0 * lowest]
    starts = sorted((refined_start(chi2, axes, i) for i in chosen), key=lambda sp: sp[1])
    dof_sub = max(1, len(sub) - len(axes))
    refined = []
    for start, predicted in starts:
        if refined:
            best = 2.0 * refined[0].cost
            if predicted > 4.0 * best + 4.0 * AMBIGUITY_DCHI2 * best / dof_sub:
                continue
        r = solve(small, measured[sub], start, lower, upper, coarse=True, root=root)
        if not any(np.all(np.abs(q.x - r.x) < np.maximum(0.2 * np.array(steps), 0.5)) for q in refined):
            refined.append(r)
            refined.sort(key=lambda q: q.cost)
    best = solve(stack, measured, refined[0].x, lower, upper, coarse=False)
    # What isopach reports beside the thickness: its sigma from s^2 (J^T J)^-1, the noise
    # the spectrum shows by itself (median absolute third difference of the spectrum and of
    # the residual, src/fit/quality.rs) and the goodness of fit.
    dof = max(1, len(measured) - len(axes))
    s2 = 2.0 * best.cost / dof
    sigma = np.sqrt(np.diag(s2 * np.linalg.inv(best.jac.T @ best.jac)))
    noise = min(scatter_sigma(measured), scatter_sigma(best.fun))
    gof = 1.0 - 2.0 * best.cost / np.sum((measured - measured.mean()) ** 2)
    return best.x, sigma, noise, gof


def scatter_sigma(v):
    """isopach's noise estimate: median |third difference| / (0.6745 sqrt(20))."""
    return np.median(np.abs(v[3:] - 3.0 * v[2:-1] + 3.0 * v[1:-2] - v[:-3])) / (0.6745 * np.sqrt(20.0))


def problem(names, lam, truth):
    stack = Stack(lam, names)
    rng = np.random.default_rng(7)
    return stack, stack.reflectance(np.array(truth)) + rng.normal(0.0, 0.003, lam.shape)


def timed(f):
    walls, cpus, out = [], [], None
    for _ in range(REPEATS):
        w0, c0 = time.perf_counter(), time.process_time()
        out = f()
        cpus.append(time.process_time() - c0)
        walls.append(time.perf_counter() - w0)
    return out, np.array(walls), np.array(cpus)


def criterion_ns(bench, kind):
    target = os.environ.get("CARGO_TARGET_DIR", os.path.join(ROOT, "target"))
    path = os.path.join(target, "criterion", f"{bench}_{kind}", "new", "estimates.json")
    if not os.path.exists(path):  # criterion names the folder after the full id
        path = os.path.join(target, "criterion", bench, kind, "new", "estimates.json")
    with open(path) as f:
        return json.load(f)["median"]["point_estimate"]


def ms(v):
    return f"{np.median(v) * 1e3:8.2f} ms [{v.min() * 1e3:.2f}-{v.max() * 1e3:.2f}]"


def main():
    cases = [
        ("model_sio2_2048px_100-3000nm", ["air", "sio2", "si"], np.linspace(420.0, 980.0, 2048),
         [1234.0], [100.0], [3000.0]),
        ("model_si3n4_sio2_2048px", ["air", "si3n4", "sio2", "si"], np.linspace(400.0, 1000.0, 2048),
         [163.0, 512.0], [80.0, 300.0], [250.0, 800.0]),
    ]
    if "--no-cargo" not in sys.argv:
        names = "|".join(c[0] for c in cases)
        subprocess.run(["cargo", "bench", "--bench", "fit", "--", f"^({names})/"], cwd=ROOT, check=True,
                       stdout=subprocess.DEVNULL)
    load = " ".join(f"{x:.2f}" for x in os.getloadavg())
    print(f"numpy {version('numpy')}, scipy {version('scipy')}; {REPEATS} calls each; "
          f"load average {load}; {os.cpu_count()} cores")
    for bench, names, lam, truth, lo, hi in cases:
        stack, measured = problem(names, lam, truth)
        (d, sigma, noise, gof), walls, cpus = timed(lambda: fit(stack, measured, lo, hi))
        err = np.abs(np.array(d) - np.array(truth)).max()
        rust_wall = criterion_ns(bench, "wall") * 1e-9
        rust_cpu = criterion_ns(bench, "cpu") * 1e-9
        print(f"{bench}: peer fitted {np.round(d, 3).tolist()} +- {np.round(sigma, 3).tolist()} nm "
              f"(true {truth}, |error| {err:.3f} nm), noise {noise:.5f}, gof {gof:.5f}")
        print(f"  numpy/scipy wall {ms(walls)}  cpu {ms(cpus)}")
        print(f"  isopach     wall {rust_wall * 1e3:8.3f} ms (criterion median)  cpu {rust_cpu * 1e3:8.3f} ms")
        print(f"  ratio peer/isopach: wall {np.median(walls) / rust_wall:.1f}x, "
              f"cpu {np.median(cpus) / rust_cpu:.1f}x")


if __name__ == "__main__":
    main()
