#!/usr/bin/env python3
"""Reference for isopach's map interpolation: scipy.interpolate.griddata on the same sites.

Writes fixtures/map/griddata_49.csv: the 49 sites of the standard pattern on a 150 mm wafer
(5 mm edge exclusion, no flat) sampled from the analytic field that tests/map_common uses,
then an 81 x 81 grid over the usable disc with the true value and scipy's linear and cubic
(Clough-Tocher) griddata values (NaN outside the sites' convex hull).

With --timing it times griddata for the benchmark cases of docs/performance.md on the very
points isopach's benchmark uses (49 sites -> 512^2 grid; 5000 sites on Vogel's sunflower
spiral -> 1024^2 grid), wall and CPU, median and spread of repeated calls, and prints each
method's error; with --dense it prints scipy's errors on the 256^2 grid of the dense-site test
(tests/map_interpolation.rs), the bound that test holds isopach to.

Run: python3 scripts/griddata_reference.py --fixture | --timing | --dense
(the fixture is written only with --fixture).
"""
import math
import sys
import time

import numpy as np
import scipy
from scipy.interpolate import griddata

R_USABLE = 70.0  # 150 mm wafer, 5 mm edge exclusion


def analytic(x, y, r_u=R_USABLE):
    """Dome plus tilt plus three-fold ripple, nm (same formula as tests/map_common/mod.rs)."""
    rho2 = (x * x + y * y) / (r_u * r_u)
    theta = np.arctan2(y, x)
    return 1000.0 + 20.0 * (1.0 - rho2) + 0.06 * x - 0.035 * y + 1.2 * np.cos(3.0 * theta) * rho2


def standard_49():
    """Centre + rings of 8, 16, 24 sites at radii evenly spaced to the usable radius, first
    site of each ring on +x (isopach's `standard` 49-site pattern)."""
    pts = [(0.0, 0.0)]
    for k, n in enumerate([8, 16, 24], start=1):
        r = R_USABLE * k / 3.0
        for j in range(n):
            a = 2.0 * math.pi * j / n
            pts.append((r * math.cos(a), r * math.sin(a)))
    return np.array(pts)


def disc_grid(n, r=R_USABLE):
    xs = np.linspace(-r, r, n)
    gx, gy = np.meshgrid(xs, xs)
    inside = gx * gx + gy * gy <= r * r + 1e-9
    return gx[inside], gy[inside]


def write_fixture(path):
    sites = standard_49()
    values = analytic(sites[:, 0], sites[:, 1])
    gx, gy = disc_grid(81)
    lin = griddata(sites, values, (gx, gy), method="linear")
    cub = griddata(sites, values, (gx, gy), method="cubic")
    with open(path, "w") as f:
        f.write("# scipy.interpolate.griddata reference, written by scripts/griddata_reference.py\n")
        f.write(f"# scipy {scipy.__version__}, numpy {np.__version__}\n")
        f.write("# field: 1000 + 20(1 - rho^2) + 0.06x - 0.035y + 1.2 cos(3 theta) rho^2, rho = r/70\n")
        f.write("# kind=site: x,y,true ; kind=grid: x,y,true,linear,cubic (nan outside the hull)\n")
        f.write("kind,x_mm,y_mm,true_nm,linear_nm,cubic_nm\n")
        for (x, y), v in zip(sites, values):
            f.write(f"site,{x:.12g},{y:.12g},{v:.12g},,\n")
        for x, y, t, l, c in zip(gx, gy, analytic(gx, gy), lin, cub):
            f.write(f"grid,{x:.12g},{y:.12g},{t:.12g},{l:.12g},{c:.12g}\n")
    for name, est in [("linear", lin), ("cubic", cub)]:
        ok = np.isfinite(est)
        err = est[ok] - analytic(gx, gy)[ok]
        print(f"{name:6s}: rms {np.sqrt(np.mean(err**2)):.4f} nm, max {np.abs(err).max():.4f} nm "
              f"over {ok.sum()} of {len(gx)} nodes")


def spiral(n):
    """Vogel's sunflower spiral over the usable disc: the points of benches/map.rs and of the
    dense-site test (radius 69.5 mm)."""
    golden = math.pi * (3.0 - math.sqrt(5.0))
    i = np.arange(n, dtype=float)
    r = 69.5 * np.sqrt((i + 0.5) / n)
    a = i * golden
    return np.column_stack([r * np.cos(a), r * np.sin(a)])


def errors(pts, n, method):
    """griddata of the analytic field at `pts` on an n x n grid over the usable disc; returns
    (estimate, truth, inside)."""
    values = analytic(pts[:, 0], pts[:, 1])
    xs = np.linspace(-R_USABLE, R_USABLE, n)
    gx, gy = np.meshgrid(xs, xs)
    est = griddata(pts, values, (gx, gy), method=method)
    return est, analytic(gx, gy), gx * gx + gy * gy <= R_USABLE ** 2


def report(label, method, est, truth, inside, extra=""):
    ok = inside & np.isfinite(est)
    err = est[ok] - truth[ok]
    print(f"{label:22s} {method:6s} {extra} rms {np.sqrt(np.mean(err**2)):.4f} nm"
          f"  max {np.abs(err).max():.4f} nm  ({ok.sum() / inside.sum() * 100:.1f} % of disc)")


def timing(repeats=7):
    """Wall and CPU time of each griddata call (Qhull and the interpolation run on one
    thread), median and range over `repeats` calls, timed like the criterion figures."""
    cases = [("49 sites -> 512^2", standard_49(), 512), ("5000 sites -> 1024^2", spiral(5000), 1024)]
    for label, pts, n in cases:
        for method in ["linear", "cubic"]:
            values = analytic(pts[:, 0], pts[:, 1])
            xs = np.linspace(-R_USABLE, R_USABLE, n)
            gx, gy = np.meshgrid(xs, xs)
            walls, cpus = [], []
            for _ in range(repeats):
                w0, c0 = time.perf_counter(), time.process_time()
                est = griddata(pts, values, (gx, gy), method=method)
                cpus.append(time.process_time() - c0)
                walls.append(time.perf_counter() - w0)
            truth, inside = analytic(gx, gy), gx * gx + gy * gy <= R_USABLE ** 2
            ms = lambda v: f"{np.median(v) * 1000:7.1f} ms [{min(v) * 1000:.1f}-{max(v) * 1000:.1f}]"
            report(label, method, est, truth, inside, f"wall {ms(walls)} cpu {ms(cpus)}")


def dense():
    """scipy's errors on the dense-site test's points and 256^2 grid."""
    for method in ["linear", "cubic"]:
        est, truth, inside = errors(spiral(5000), 256, method)
        report("5000 sites -> 256^2", method, est, truth, inside)


if __name__ == "__main__":
    args = set(sys.argv[1:])
    if not args & {"--fixture", "--timing", "--dense"}:
        sys.exit(__doc__)
    print(f"scipy {scipy.__version__}, numpy {np.__version__}; load average "
          f"{' '.join(f'{x:.2f}' for x in __import__('os').getloadavg())}")
    if "--fixture" in args:
        write_fixture("fixtures/map/griddata_49.csv")
    if "--timing" in args:
        timing()
    if "--dense" in args:
        dense()
