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

from shellmodes.case.schema import case_from_dict
from shellmodes.case.units import ENERGY_UNITS, INERTIA_UNITS
from shellmodes.fem.discretisation import discretise
from shellmodes.pipeline import run_case
from shellmodes.studies import references as ref

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


@check("cap of 120 degrees, hard rim: 12 eigenvalues", "nu(nu+1) with P_nu^-m(cos theta0) = 0 (Mehler-Dirichlet "
       "integral and degree recurrence, DLMF 14.12.1, 14.10.3)", 1e-5)
def _cap120():
    s = _solve({"shape": "cap", "half_angle": 120.0, "rim": "dirichlet"}, 4, 4, 12)
    return np.nan, 0.0, _max_rel(s.eigenvalues[:12], ref.cap_eigenvalues(np.radians(120.0), 12, "dirichlet"))


def _area(shape, exact):
    s = discretise(case_from_dict({"surface": shape, "resolution": {"degree": 4, "subdivisions": 3}}))
    one = np.ones(s.ndofs)
    from skfem import asm

    from shellmodes.fem.forms import mass

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
    from shellmodes.fem.curvature import total_gaussian_curvature

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
    """Run the validation set (or the checks whose name contains ``only``).

    Parameters
    ----------
    only : str, optional
        Run only checks whose name contains this text.

    Returns
    -------
    list of CheckResult
        One result per check run, in the order of :data:`CHECKS`; progress goes to
        :mod:`shellmodes.io.progress` (one step per check).
    """
    from shellmodes.io import progress

    chosen = [(name, entry) for name, entry in CHECKS.items() if not only or only in name]
    out = []
    with progress.task("checks", len(chosen), "check") as bar:
        for name, (fn, source, tol) in chosen:
            progress.stage(name)
            t0 = time.perf_counter()
            value, reference, error = fn()
            out.append(CheckResult(name, float(value), float(reference), float(error), float(tol), source,
                                   time.perf_counter() - t0))
            bar.advance()
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


def _shell_case(inner, outer, count, degree=2, subdivisions=2, layers=6, **shell):
    walls = {"outer": {"shape": "sphere", "radius": outer}, "layers": layers, **shell}
    if inner is not None:
        walls["inner"] = {"shape": "sphere", "radius": inner}
    data = {"shell": walls, "resolution": {"degree": degree, "subdivisions": subdivisions},
            "modes": {"count": count}}
    return run_case(case_from_dict(data, "<check>"))


def _by_l(spectrum, l, count):
    """Eigenvalues of the modes labelled with degree l (multiplet means), lowest first."""
    means = [m.eigenvalue for m in spectrum.multiplets if m.l == l]
    return np.array(means[:count])


@check("hard-wall shell 1 < r < 2: l = 0, k = n pi", "exact: k = n pi / (b - a) (j_0, y_0 cross product)", 5e-4)
def _shell_l0():
    s = _shell_case(1.0, 2.0, 30)
    got = _by_l(s, 0, 2)
    exact = np.array([np.pi**2, (2 * np.pi) ** 2])
    return float(got[0]), float(exact[0]), _max_rel(got, exact[:len(got)])


# tolerance: degree 2 on 162 directions (subdivisions 2); the angular error grows like l^4 h^4, 2e-3 at l = 3
@check("hard-wall shell 1 < r < 2: l = 1, 2, 3", "roots of j_l(ka) y_l(kb) - j_l(kb) y_l(ka), "
       "scipy.special.spherical_jn/yn", 3e-3)
def _shell_l123():
    s = _shell_case(1.0, 2.0, 30)
    got = np.array([_by_l(s, l, 1)[0] for l in (1, 2, 3)])
    exact = np.array([ref.shell_dirichlet(l, 1, 1.0, 2.0)[0] ** 2 for l in (1, 2, 3)])
    return float(got[0]), float(exact[0]), _max_rel(got, exact)


@check("hard-wall ball r < 1 on tetrahedra: l = 0, 1, 2", "zeros of j_l (Abramowitz and Stegun Table 10.6; "
       "scipy.special.spherical_jn)", 1e-3)
def _ball():
    s = _shell_case(None, 1.0, 16, subdivisions=2, layers=4, cells="tetrahedra")
    got = np.array([_by_l(s, l, 1)[0] for l in (0, 1, 2)])
    exact = np.array([ref.ball_dirichlet(l, 1, 1.0)[0] ** 2 for l in (0, 1, 2)])
    return float(got[0]), float(exact[0]), _max_rel(got, exact)


@check("free-wall shell 1 < r < 2: zero mode and l = 1", "roots with j_l', y_l' (scipy.special)", 5e-4)
def _shell_neumann():
    s = _shell_case(1.0, 2.0, 6, inner_condition="neumann", outer_condition="neumann")
    zero = abs(float(s.eigenvalues[0]))
    got = _by_l(s, 1, 1)[0]
    exact = float(ref.shell_neumann(1, 1, 1.0, 2.0)[0] ** 2)
    return float(got), exact, max(abs(got - exact) / exact, zero)


@check("hard-wall shell 1 < r < 2 on prisms: first 50 modes", "roots of j_l(ka) y_l(kb) - j_l(kb) y_l(ka), "
       "scipy.special.spherical_jn/yn, each (2l+1)-fold", 1e-6)
def _shell_prisms50():
    # degree 4 x radial 8 on 642 directions (92,178 dofs): 6.9e-8 measured
    s = _shell_case(1.0, 2.0, 50, degree=4, subdivisions=3, layers=1, cells="prisms", radial_degree=8)
    exact = np.sort([float(k) ** 2 for l in range(10) for k in ref.shell_dirichlet(l, 2, 1.0, 2.0)
                     for _ in range(2 * l + 1)])[:50]
    got = np.asarray(s.eigenvalues[:50])
    return float(got[-1]), float(exact[-1]), _max_rel(got, exact)


@check("two-media hard-wall shell with a mass jump (prisms)", "j_l, y_l in each medium, continuity of R and "
       "(1/m) dR/dr at r = 1.5 (BenDaniel and Duke 1966)", 1e-6)
def _layered_prisms():
    shell = {"inner": {"shape": "sphere", "radius": 1.0}, "interfaces": [{"shape": "sphere", "radius": 1.5}],
             "outer": {"shape": "sphere", "radius": 2.0}, "cells": "prisms", "layers": [1, 1],
             "radial_degree": 8, "media": [{"effective_mass": 1.0}, {"effective_mass": 0.4}]}
    return _levels_check(shell, 2, 9, lambda l: ref.layered_shell_dirichlet(l, 2, 1.0, 1.5, 2.0, 1.0, 0.4), 2)


def _levels_check(shell: dict, subdivisions: int, count: int, values, l_max: int):
    """Run a degree-4 prism case; compare its lowest ``count`` with ``values(l)``, each (2l+1)-fold, l <= l_max."""
    data = {"shell": shell, "resolution": {"degree": 4, "subdivisions": subdivisions}, "modes": {"count": count}}
    got = np.asarray(run_case(case_from_dict(data, "<check>")).eigenvalues[:count])
    exact = np.sort([float(v) for l in range(l_max + 1) for v in values(l) for _ in range(2 * l + 1)])[:count]
    return float(got[0]), float(exact[0]), _max_rel(got, exact)


@check("finite spherical well with a mass jump on tetrahedra: ground state", "j_l inside, k_l outside, continuity "
       "of psi and (1/m) dpsi/dr (BenDaniel and Duke 1966)", 5e-3)
def _finite_well():
    data = {"shell": {"interfaces": [{"shape": "sphere", "radius": 1.0}], "outer": {"shape": "sphere", "radius": 2.5},
                      "layers": [6, 6], "media": [{"effective_mass": 1.0}, {"effective_mass": 2.0, "offset": 30.0}],
                      "cells": "tetrahedra"},
            "resolution": {"degree": 2, "subdivisions": 2}, "modes": {"count": 1}}
    s = run_case(case_from_dict(data, "<check>"))
    exact = float(ref.finite_spherical_well(0, 30.0, 1.0, 1.0, 2.0)[0])
    got = float(s.eigenvalues[0])
    return got, exact, abs(got - exact) / exact


def _ball_levels(roots, l_max: int, n: int, count: int) -> np.ndarray:
    """The lowest ``count`` values k^2 of ``roots(l, n)``, each (2l+1)-fold, l <= l_max."""
    return np.sort([float(k) ** 2 for l in range(l_max + 1) for k in roots(l, n) for _ in range(2 * l + 1)])[:count]


@check("hard-wall ball r < 1 on prisms: first 50 modes", "zeros of j_l (Abramowitz and Stegun Table 10.6, DLMF "
       "10.21; scipy.special.spherical_jn with a root finder), each (2l+1)-fold", 1e-6)
def _ball_prisms50():
    # degree 4 x radial 8 on 642 directions, centre merged into one dof: 5.3e-9 measured
    s = _shell_case(None, 1.0, 50, degree=4, subdivisions=3, layers=2, radial_degree=8)
    exact = _ball_levels(ref.ball_dirichlet, 9, 4, 50)
    got = np.asarray(s.eigenvalues[:50])
    return float(got[-1]), float(exact[-1]), _max_rel(got, exact)


@check("free-wall ball r < 1 on prisms: first 30 modes", "zeros of j_l' (Abramowitz and Stegun Table 10.6; "
       "scipy.special.spherical_jn with a root finder), each (2l+1)-fold; k = 0 the constant", 1e-6)
def _ball_prisms_free():
    s = _shell_case(None, 1.0, 30, degree=4, subdivisions=3, layers=2, radial_degree=8, outer_condition="neumann")
    exact = _ball_levels(ref.ball_neumann, 9, 4, 30)
    got = np.asarray(s.eigenvalues[:30])
    return float(got[-1]), float(exact[-1]), max(_max_rel(got, exact), abs(float(got[0])))


@check("core/shell dot on prisms: first 20 levels", "j_l in the core, j_l/y_l or i_l/k_l in the shell, continuity "
       "of R and (1/m) dR/dr at the interface (BenDaniel and Duke 1966), scipy.special", 1e-6)
def _dot_prisms():
    # core r < 1 (mass 1), shell 1 < r < 2 (mass 2.5, offset 5 in eigenvalue units), hard wall at r = 2
    shell = {"interfaces": [{"shape": "sphere", "radius": 1.0}], "outer": {"shape": "sphere", "radius": 2.0},
             "layers": [2, 2], "radial_degree": 8,
             "media": [{"effective_mass": 1.0}, {"effective_mass": 2.5, "offset": 5.0}]}
    return _levels_check(shell, 3, 20, lambda l: ref.core_shell_dot_dirichlet(l, 4, 1.0, 2.0, 1.0, 2.5, 5.0), 9)


@check("finite spherical well on prisms, automatic layers: 1s and 1p", "j_l inside, k_l outside, continuity of "
       "psi and dpsi/dr (finite spherical well; scipy.special.spherical_jn, kve)", 1e-6)
def _finite_well_auto():
    # well r < 1, barrier 15 (eigenvalue units) out to a hard wall at r = 12: binds l = 0 and l = 1 only, and
    # the wall moves them by less than 1e-9 (core_shell_dot_dirichlet with the wall agrees to 8 digits)
    shell = {"interfaces": [{"shape": "sphere", "radius": 1.0}], "outer": {"shape": "sphere", "radius": 12.0},
             "layers": [2, 2], "radial_degree": 8, "decay": 1e-8,
             "media": [{"name": "well"}, {"name": "barrier", "offset": 15.0}]}
    return _levels_check(shell, 1, 4, lambda l: ref.finite_spherical_well(l, 15.0, 1.0, 1.0, 1.0), 2)


# --------------------------------------------------------------------------- fields and the thin-layer potential
_UNITS = {"length": "nm", "energy": "meV"}


@check("rigid rotor in a field: J = 0 Stark shift", "-(mu F)^2/(6B), second order (Townes and Schawlow, "
       "Microwave Spectroscopy, ch. 10, formula recalled from memory); mu F / B = 0.05", 1e-2)
def _rotor_stark():
    from shellmodes.case.fields import DIPOLE_UNITS, ELECTRIC_UNITS
    from shellmodes.case.units import INERTIA_UNITS, rotational_constant_cm

    B = rotational_constant_cm(10.0 * INERTIA_UNITS["amu angstrom2"])
    field = 0.05 * B * constants.h * constants.c / constants.centi / DIPOLE_UNITS["debye"] / ELECTRIC_UNITS["kV/cm"]

    def level(strength):
        return run_case(case_from_dict({"surface": {"shape": "sphere"}, "resolution": {"degree": 3, "subdivisions": 3},
                                        "particle": {"moment_of_inertia": 10.0}, "units": {"energy": "cm-1"},
                                        "modes": {"count": 1}, "fields": {"electric": {"strength": strength,
                                                                          "unit": "kV/cm"}, "dipole_moment": 1.0}},
                                       "<check>")).energies[0]

    shift = level(field) - level(0.0)
    exact = -((0.05 * B) ** 2) / (6 * B)
    return float(shift), float(exact), abs(shift - exact) / abs(exact)


@check("electron on a 10 nm sphere in 2 T: l = 1 Zeeman splitting", "mu_B B per step of m (orbital Zeeman "
       "effect, Landau and Lifshitz QM sect. 112, section recalled from memory; scipy.constants Bohr magneton)", 1e-3)
def _sphere_zeeman():
    s = run_case(case_from_dict({"surface": {"shape": "sphere", "radius": 10.0}, "units": _UNITS,
                                 "resolution": {"degree": 3, "subdivisions": 2}, "modes": {"count": 4},
                                 "fields": {"magnetic": {"strength": 2.0}}}, "<check>"))
    p = np.sort(s.energies[1:4])
    exact = constants.physical_constants["Bohr magneton"][0] * 2.0 / (constants.milli * constants.e)
    got = float((p[2] - p[0]) / 2)
    return got, exact, abs(got - exact) / exact


@check("torus ring with a flux line: 8 levels", "1-D Fourier solve of the profile equation with (m/rho - a_phi)^2 "
       "(shellmodes.profile_reference); periodic in the flux (Byers and Yang 1961)", 1e-4)
def _torus_flux():
    from shellmodes.case.fields import flux_lambda
    from shellmodes.studies.profile_reference import torus_profile_levels

    case = case_from_dict({"surface": {"shape": "torus", "major_radius": 2.0, "minor_radius": 1.0}, "units": _UNITS,
                           "resolution": {"degree": 3, "subdivisions": 2}, "modes": {"count": 8},
                           "fields": {"flux_line": {"flux": 0.3}}}, "<check>")
    c = flux_lambda(case)
    exact = np.sort(np.concatenate([torus_profile_levels(2.0, 1.0, m, 3, vector_potential=lambda rho: c / rho)
                                    for m in range(-5, 6)]))[:8]
    got = run_case(case).eigenvalues[:8]
    return float(got[-1]), float(exact[-1]), float(np.max(np.abs(got - exact) / np.abs(exact)))


@check("spheroid with the thin-layer potential: 9 levels", "1-D Legendre-Galerkin solve of the profile equation "
       "with -(k1 - k2)^2/4 (shellmodes.profile_reference; da Costa, Phys. Rev. A 23, 1982 (1981))", 1e-5)
def _spheroid_thin_layer():
    from shellmodes.studies.profile_reference import spheroid_profile_levels

    s = run_case(case_from_dict({"surface": {"shape": "spheroid", "equatorial_radius": 1.5, "polar_radius": 1.0},
                                 "resolution": {"degree": 4, "subdivisions": 2}, "modes": {"count": 9},
                                 "fields": {"curvature_potential": True}}, "<check>"))
    levels = []
    for m in range(4):
        levels += list(spheroid_profile_levels(1.5, 1.0, m, 3, thin_layer=True)) * (1 if m == 0 else 2)
    exact = np.sort(levels)[:9]
    got = s.eigenvalues[:9]
    return float(got[0]), float(exact[0]), float(np.max(np.abs(got - exact)) / np.max(np.abs(exact)))
