"""Optical constants for the reference scripts, read from the same published files that
isopach embeds (data/optical/, refractiveindex.info, CC0), evaluated independently of the
Rust code: Sellmeier "formula 1" with numpy, the Green (2008) Si table with
scipy.interpolate.CubicSpline(bc_type="natural") on n and on k (k held >= 0, end values
held outside the table) -- the interpolation rule isopach states in docs/optics.md.
"""

import os

import numpy as np
from scipy.interpolate import CubicSpline

DATA = os.path.join(os.path.dirname(__file__), "..", "data", "optical")


def _read(name):
    with open(os.path.join(DATA, name)) as f:
        return f.read()


def _field(text, key):
    for line in text.splitlines():
        s = line.strip()
        if s.startswith(key):
            return [float(v) for v in s[len(key):].split()]
    raise KeyError(key)


def sellmeier_formula1(name):
    """n(lambda_nm) for a refractiveindex.info formula-1 file: n^2 - 1 = C1 + sum C2i l^2/(l^2 - C2i+1^2)."""
    c = _field(_read(name), "coefficients:")

    def n(lam_nm):
        l2 = (np.asarray(lam_nm, dtype=float) / 1000.0) ** 2
        n2 = 1.0 + c[0]
        for i in range(1, len(c) - 1, 2):
            n2 = n2 + c[i] * l2 / (l2 - c[i + 1] ** 2)
        return np.sqrt(n2) + 0j

    return n


def tabulated(name):
    rows = []
    in_data = False
    for line in _read(name).splitlines():
        s = line.strip()
        if s.startswith("data:"):
            in_data = True
            continue
        if in_data:
            v = s.split()
            if len(v) == 3:
                rows.append([float(x) for x in v])
            else:
                in_data = False
    a = np.array(rows)
    w = a[:, 0] * 1000.0
    sn = CubicSpline(w, a[:, 1], bc_type="natural")
    sk = CubicSpline(w, a[:, 2], bc_type="natural")

    def n(lam_nm):
        x = np.clip(np.asarray(lam_nm, dtype=float), w[0], w[-1])
        return sn(x) + 1j * np.maximum(sk(x), 0.0)

    return n


MATERIALS = {
    "air": lambda lam: np.ones_like(np.asarray(lam, dtype=float)) + 0j,
    "si": tabulated("Si_nk_Green-2008.yml"),
    "sio2": sellmeier_formula1("SiO2_nk_Malitson.yml"),
    "si3n4": sellmeier_formula1("Si3N4_nk_Luke.yml"),
}
