"""The built-in validation set behind ``shellmodes check``.

Each check solves a small problem through the public pipeline and compares
one number with an exact or published value, with a stated tolerance and
source.  Checks register with :func:`check`; adding one is one function.
"""

from __future__ import annotations

import functools
import time
from dataclasses import dataclass

import numpy as np
from scipy import constants

from . import references as ref
from .case import case_from_dict
from .run import discretise, run_case
from .units import ENERGY_UNITS, INERTIA_UNITS

__all__ = ["CheckResult", "CHECKS", "check", "run_checks", "format_table", "observed_order"]

CHECKS: dict = {}


@dataclass(frozen=True)
class CheckResult:
    name: str
    value: float
    reference: float
    error: float
    tolerance: float
    source: str
    seconds: float

    @property
    def passed(self) -> bool:
        return bool(np.isfinite(self.error) and self.error <= self.tolerance)


def check(name: str, source: str, tolerance: float):
    """Register ``fn() -> (value, reference, error)`` as a validation check."""

    def wrap(fn):
        CHECKS[name] = (fn, source, tolerance)
        return fn

    return wrap


@functools.lru_cache(maxsize=8)
def _solve_cached(key):
    import json

    return run_case(case_from_dict(json.loads(key), "<check>"))


def _solve(surface, degree, subdivisions, count, **extra):
    import json

    data = {"surface": surface, "resolution": {"degree": degree, "subdivisions": subdivisions},
            "modes": {"count": count}, **extra}
    # checks that share a problem share its solve
    return _solve_cached(json.dumps(data, sort_keys=True))


def _max_rel(values, exact, skip_zero=True):
    values, exact = np.asarray(values), np.asarray(exact)
    n = min(len(values), len(exact))
    mask = np.abs(exact[:n]) > 1e-12 if skip_zero else np.ones(n, bool)
    return float(np.max(np.abs(values[:n][mask] - exact[:n][mask]) / np.abs(exact[:n][mask])))


def observed_order(h, errors) -> float:
    """Least-squares slope of log(error) against log(h)."""
    return float(np.polyfit(np.log(h), np.log(errors), 1)[0])


@check("sphere: first 100 eigenvalues l(l+1), degree 4", "exact: l(l+1) on the unit sphere "
       "(DLMF 14.30.10)", 1e-6)
def _sphere100():
    s = _solve({"shape": "sphere"}, 4, 3, 100)
    exact = ref.sphere_eigenvalues(100)
    return np.nan, 0.0, _max_rel(s.eigenvalues[:100], exact)


@check("sphere: multiplet sizes 2l+1 for l <= 9", "exact: (2l+1)-fold degeneracy (DLMF 14.30)", 0)
def _sphere_sizes():
    s = _solve({"shape": "sphere"}, 4, 3, 100)
    sizes = [m.size for m in s.multiplets]
    wrong = sum(1 for l, size in enumerate(sizes) if size != 2 * l + 1) + abs(len(sizes) - 10)
    return float(len(sizes)), 10.0, float(wrong)


def _convergence(shape, degree, levels, count, exact):
    h, err = [], []
    for level in levels:
        s = _solve(shape, degree, level, count)
        h.append(s.info["mesh"]["h"])
        err.append(_max_rel(s.eigenvalues[:count], exact))
    return observed_order(h, err)


@check("sphere: eigenvalue convergence order, degree 1", "surface FEM theory, order 2k "
       "(Dziuk 1988; Demlow 2009)", 0.3)
def _order1():
    p = _convergence({"shape": "sphere"}, 1, (2, 3, 4), 9, ref.sphere_eigenvalues(9))
    return p, 2.0, abs(p - 2.0)


@check("sphere: eigenvalue convergence order, degree 2", "surface FEM theory, order 2k "
       "(Demlow 2009; Bonito, Demlow and Owen 2018)", 0.4)
def _order2():
    p = _convergence({"shape": "sphere"}, 2, (1, 2, 3), 9, ref.sphere_eigenvalues(9))
    return p, 4.0, abs(p - 4.0)


@check("hemisphere, hard rim: 16 eigenvalues, l+m odd", "exact: l(l+1) with l+m odd (odd in z)", 1e-5)
def _hemi_d():
    s = _solve({"shape": "cap", "half_angle": 90.0, "rim": "dirichlet"}, 4, 4, 16)
    return np.nan, 0.0, _max_rel(s.eigenvalues[:16], ref.hemisphere_eigenvalues(16, "dirichlet"))


@check("hemisphere, free rim: 16 eigenvalues, l+m even", "exact: l(l+1) with l+m even (even in z)", 1e-5)
def _hemi_n():
    s = _solve({"shape": "cap", "half_angle": 90.0, "rim": "neumann"}, 4, 4, 16)
    return np.nan, 0.0, _max_rel(s.eigenvalues[:16], ref.hemisphere_eigenvalues(16, "neumann"))


@check("cap of 120 degrees, hard rim: 12 eigenvalues", "nu(nu+1), P_nu^-m(cos theta0) = 0 via "
       "scipy.special.hyp2f1 (DLMF 14.3.1)", 1e-5)
def _cap120():
    s = _solve({"shape": "cap", "half_angle": 120.0, "rim": "dirichlet"}, 4, 4, 12)
    return np.nan, 0.0, _max_rel(s.eigenvalues[:12], ref.cap_eigenvalues(np.radians(120.0), 12, "dirichlet"))


def _area(shape, exact):
    s = discretise(case_from_dict({"surface": shape, "resolution": {"degree": 4, "subdivisions": 3}}))
    one = np.ones(s.ndofs)
    from skfem import asm

    from .problem import mass

    area = float(one @ (asm(mass, s.basis) @ one))
    return area, exact, abs(area - exact) / exact


@check("area of the unit sphere, degree 4", "exact: 4 pi R^2", 1e-8)
def _area_sphere():
    return _area({"shape": "sphere"}, 4 * np.pi)


@check("area of a prolate spheroid 1 x 1 x 2, degree 4", "closed form for spheroids "
       "(e.g. CRC Standard Mathematical Tables)", 1e-8)
def _area_spheroid():
    return _area({"shape": "spheroid", "equatorial_radius": 1.0, "polar_radius": 2.0},
                 float(ref.spheroid_area(1.0, 2.0)))


@check("area of a torus R = 2, r = 1, degree 4", "exact: 4 pi^2 R r (Pappus)", 1e-8)
def _area_torus():
    return _area({"shape": "torus", "major_radius": 2.0, "minor_radius": 1.0}, float(ref.torus_area(2.0, 1.0)))


@check("Gauss-Bonnet on an ellipsoid 1 x 1.2 x 0.8: integral of K", "Gauss-Bonnet, 2 pi chi = 4 pi "
       "(do Carmo 4-5); elementwise curvature converges as h^2", 0.1)
def _gauss_bonnet():
    from .curvature import total_gaussian_curvature

    s = discretise(case_from_dict({"surface": {"shape": "ellipsoid", "axes": [1.0, 1.2, 0.8]},
                                   "resolution": {"degree": 4, "subdivisions": 3}}))
    total = total_gaussian_curvature(s)
    return total, 4 * np.pi, abs(total - 4 * np.pi)


@check("rigid rotor I = 2 amu A^2: E(l=1) = 2B in cm^-1", "B = h/(8 pi^2 c I), scipy.constants", 1e-8)
def _rotor():
    s = _solve({"shape": "sphere"}, 4, 3, 4, particle={"moment_of_inertia": 2.0, "inertia_unit": "amu angstrom2"},
               units={"length": "1", "energy": "cm-1"})
    B = float(ref.rotational_constant_cm(2.0 * INERTIA_UNITS["amu angstrom2"]))
    e1 = float(np.mean(s.energies[1:4]))
    return e1, 2 * B, abs(e1 - 2 * B) / (2 * B)


@check("electron on a 1 nm sphere: E(l=1) in meV", "hbar^2 l(l+1)/(2 m_e R^2), scipy.constants", 1e-8)
def _electron():
    s = _solve({"shape": "sphere", "radius": 1.0}, 4, 3, 4, units={"length": "nm", "energy": "meV"})
    exact = constants.hbar**2 * 2 / (2 * constants.m_e * constants.nano**2) / ENERGY_UNITS["meV"]
    e1 = float(np.mean(s.energies[1:4]))
    return e1, exact, abs(e1 - exact) / exact


def run_checks(only: str | None = None) -> list[CheckResult]:
    out = []
    for name, (fn, source, tol) in CHECKS.items():
        if only and only not in name:
            continue
        t0 = time.perf_counter()
        value, reference, error = fn()
        out.append(CheckResult(name, float(value), float(reference), float(error), float(tol), source,
                               time.perf_counter() - t0))
    return out


def format_table(results: list[CheckResult]) -> str:
    width = max((len(r.name) for r in results), default=10)
    head = f"{'check':<{width}}  {'result':<6} {'error':>10} {'tolerance':>10} {'time':>6}  source"
    lines = [head, "-" * len(head)]
    for r in results:
        lines.append(f"{r.name:<{width}}  {'pass' if r.passed else 'FAIL':<6} {r.error:>10.2e} "
                     f"{r.tolerance:>10.1e} {r.seconds:>5.1f}s  {r.source}")
    passed = sum(r.passed for r in results)
    lines.append(f"{passed} passed, {len(results) - passed} failed")
    return "\n".join(lines)
