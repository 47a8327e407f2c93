#!/usr/bin/env python3
"""Times the same single-layer fit with the Python reference stack -- the PyPI `tmm`
package for reflectance and scipy.optimize.least_squares (Levenberg-Marquardt) -- and
with isopach (criterion bench `benches/fit.rs`), in one run, and prints the ratio.

  python3 scripts/time_reference_fit.py            # runs the Rust bench too (release build)
  python3 scripts/time_reference_fit.py --no-cargo # reuses target/criterion results

The problem is the bench's: SiO2 on Si, 2048 pixels over 420-980 nm, 0.3 % noise, search
range 100-3000 nm. The Python fit follows the same algorithm (grid search with the same step
on the same pixel subset, then Levenberg-Marquardt from the best grid minima on all pixels),
so the ratio measures implementation speed, not a different method.
"""

import json
import os
import subprocess
import sys
import time
from importlib.metadata import version

import numpy as np
import tmm
from scipy.optimize import least_squares

sys.path.insert(0, os.path.dirname(__file__))
from optical_data import MATERIALS  # noqa: E402

ROOT = os.path.join(os.path.dirname(__file__), "..")
BENCH = "model_sio2_2048px_100-3000nm"


def model(d, lam, ns):
    return np.array([tmm.coh_tmm("s", [ns[0][i], ns[1][i], ns[2][i]], [np.inf, d, np.inf], 0.0, w)["R"]
                     for i, w in enumerate(lam)])


def fit(lam, r, ns, lo=100.0, hi=3000.0):
    n_film = ns[1].real
    step = lam[0] / (10.0 * n_film[0])
    grid = np.linspace(lo, hi, int(np.ceil((hi - lo) / step)) + 1)
    # search pixels: 5 per fringe at the shortest wavelength for the thickest film (as isopach)
    ppf = lam[0] ** 2 / (2.0 * n_film[0] * hi) / ((lam[-1] - lam[0]) / (len(lam) - 1))
    stride = max(1, min(int(ppf / 5.0), len(lam) // 48))
    sub = slice(None, None, stride)
    sub_ns = [n[sub] for n in ns]
    chi2 = np.array([np.sum((model(d, lam[sub], sub_ns) - r[sub]) ** 2) for d in grid])
    minima = [i for i in range(len(grid))
              if (i == 0 or chi2[i] <= chi2[i - 1]) and (i == len(grid) - 1 or chi2[i] < chi2[i + 1])]
    minima.sort(key=lambda i: chi2[i])
    best = None
    for i in minima[:2]:
        res = least_squares(lambda p: model(p[0], lam, ns) - r, [grid[i]], method="lm")
        if best is None or res.cost < best.cost:
            best = res
    return best.x[0]


def rust_median_ns():
    est = os.path.join(ROOT, "target", "criterion", BENCH + "_cpu", "new", "estimates.json")
    with open(est) as f:
        return json.load(f)["median"]["point_estimate"]


def main():
    lam = np.linspace(420.0, 980.0, 2048)
    ns = [MATERIALS[m](lam) for m in ("air", "sio2", "si")]
    rng = np.random.default_rng(7)
    r = model(1234.0, lam, ns) + rng.normal(0.0, 0.003, lam.shape)
    times = []
    for _ in range(3):
        t0 = time.process_time()
        d = fit(lam, r, ns)
        times.append(time.process_time() - t0)
    py = float(np.median(times))
    print(f"python: tmm {version('tmm')} + scipy {version('scipy')} least_squares: "
          f"fitted {d:.3f} nm (true 1234), median CPU {py * 1e3:.1f} ms over {len(times)} runs")
    if "--no-cargo" not in sys.argv:
        subprocess.run(["cargo", "bench", "--bench", "fit", "--", f"{BENCH}/cpu"], cwd=ROOT, check=True,
                       stdout=subprocess.DEVNULL)
    rust = rust_median_ns() * 1e-9
    print(f"isopach: criterion median CPU {rust * 1e3:.3f} ms ({BENCH}/cpu)")
    print(f"ratio python/isopach: {py / rust:.0f}x")


if __name__ == "__main__":
    main()
