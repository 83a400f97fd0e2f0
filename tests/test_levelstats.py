"""Level statistics: Weyl's law with its corrections, spacings, symmetry classes (shellmodes.spectrum.levelstats)."""

from __future__ import annotations

import json

import numpy as np
import pytest

from shellmodes.case.schema import case_from_dict
from shellmodes.io.outputs import write_outputs
from shellmodes.pipeline import run_case
from shellmodes.spectrum.levelstats import heat_trace_fit, spacing_summary, unfold, weyl_count


def _run(surface: dict, subdivisions: int, count: int, degree: int = 4):
    case = case_from_dict({"surface": surface, "resolution": {"degree": degree, "subdivisions": subdivisions},
                           "units": {"energy": "1", "length": "1"}, "modes": {"count": count},
                           "output": {"statistics": True, "vtu": False}})
    return run_case(case)


# Heat-trace coefficients against McKean and Singer, J. Diff. Geom. 1, 43 (1967) (A / 4 pi and chi / 6)
# and, for the rim, Kac (1966) / Stewartson and Waechter (1971) (-/+ L / (8 sqrt pi)).  Tolerances:
# the fits over t in [t_min, 4 t_min] recover the exact sphere and hemisphere spectra (l(l+1) with
# multiplicities 2l+1, l, l+1) to 2e-3 in a and 1e-3 in b and c (measured), and the meshes' eigenvalue
# errors (< 1e-3 at the top) move Z(t) by less than 1e-3 more: a to 5e-3 relative, b and c to 1e-2.
CASES = [
    ({"shape": "sphere"}, 2, 144, 2, None),
    ({"shape": "ellipsoid", "axes": [1.0, 1.2, 1.5]}, 2, 150, 2, None),
    ({"shape": "cap", "half_angle": 90.0, "rim": "dirichlet"}, 3, 150, 1, "dirichlet"),
    ({"shape": "cap", "half_angle": 90.0, "rim": "neumann"}, 3, 150, 1, "neumann"),
]


@pytest.mark.parametrize("surface, subdivisions, count, euler, rim", CASES,
                         ids=["sphere", "ellipsoid", "hemisphere-dirichlet", "hemisphere-neumann"])
def test_weyl_law_heat_trace(surface, subdivisions, count, euler, rim):
    spectrum = _run(surface, subdivisions, count)
    stats = spectrum.info["statistics"]
    area = spectrum.info["mesh"]["exact_area"]
    assert stats["euler_characteristic"] == euler
    assert stats["rim"] == rim
    perimeter = 2 * np.pi if rim else 0.0  # the hemisphere's rim is the unit equator
    assert stats["perimeter"] == pytest.approx(perimeter, abs=1e-3)  # polyline through the P4 nodes
    h = stats["heat_trace"]
    assert h["a"] == pytest.approx(area / (4 * np.pi), rel=5e-3)
    sign = {None: 0.0, "dirichlet": -1.0, "neumann": 1.0}[rim]
    assert h["b"] == pytest.approx(sign * perimeter / (8 * np.sqrt(np.pi)), abs=1e-2)
    assert h["c"] == pytest.approx(euler / 6.0, abs=1e-2)
    # the staircase follows Weyl's N on average (its oscillation about it has mean ~0; the
    # sphere's degenerate steps swing by l around it, so only the mean is tested: common practice)
    assert abs(stats["weyl"]["mean_deviation"]) < 1.0


def test_heat_trace_fit_of_the_exact_hemisphere_spectra():
    # Dirichlet hemisphere: Y_lm with l + m odd, l per level; Neumann: l + m even, l + 1 per level
    # (Courant and Hilbert, Methods of Mathematical Physics I, ch. VII sec. 5, by reflection)
    L = 30
    dirichlet = np.concatenate([[l * (l + 1.0)] * l for l in range(1, L + 1)])
    neumann = np.concatenate([[l * (l + 1.0)] * (l + 1) for l in range(L + 1)])
    for lam, rim in ((dirichlet, "dirichlet"), (neumann, "neumann")):
        fit = heat_trace_fit(lam, 2 * np.pi, 2 * np.pi, rim)
        assert fit["a"] == pytest.approx(0.5, rel=2e-3)  # A / 4 pi
        assert fit["b"] == pytest.approx(fit["expected_b"], abs=1e-3)
        assert fit["c"] == pytest.approx(1 / 6, abs=1e-3)  # chi / 6 with chi = 1


def test_weyl_count_terms():
    lam = np.array([0.0, 4.0, 100.0])
    closed = weyl_count(lam, 4 * np.pi, 2)
    assert np.allclose(closed, lam + 1 / 3)
    hard = weyl_count(lam, 2 * np.pi, 1, 2 * np.pi, "dirichlet")
    assert np.allclose(hard, lam / 2 - np.sqrt(lam) / 2 + 1 / 6)


def test_spacings_tell_poisson_from_wigner():
    rng = np.random.default_rng(7)
    poisson_levels = np.cumsum(rng.exponential(size=2000))
    p = spacing_summary(poisson_levels)
    # a real symmetric Gaussian matrix (orthogonal ensemble): the middle half of its spectrum
    A = rng.standard_normal((800, 800))
    e = np.linalg.eigvalsh(A + A.T)[200:600]
    w = spacing_summary(unfold(e - e[0] + 1.0))
    # Kolmogorov-Smirnov distances: 1.36 / sqrt(n) is the 5 % critical value (common practice)
    assert p["ks_poisson"] < 1.36 / np.sqrt(p["count"]) < p["ks_wigner"]
    assert w["ks_wigner"] < 1.36 / np.sqrt(w["count"]) < w["ks_poisson"]
    assert w["small_fraction"] < 0.1 < p["small_fraction"]  # level repulsion: few small spacings


def test_deformed_sphere_classes_and_picture(tmp_path):
    pytest.importorskip("matplotlib")
    deformed = {"shape": "deformed_sphere",
                "deformation": [{"l": 2, "m": 0, "amplitude": 0.1}, {"l": 3, "m": 1, "amplitude": 0.05}]}
    spectrum = _run(deformed, 3, 80, degree=2)
    stats = spectrum.info["statistics"]
    # Y_20 is even under every mirror; Y_31 ~ x (5 z^2 - r^2) is odd under x -> -x only
    assert stats["classes"]["planes"] == ["y=0", "z=0"] and stats["classes"]["mixed"] is False
    classes = {k: v for k, v in stats["spacings"].items()}
    assert sorted(classes) == ["++", "+-", "-+", "--"]
    assert sum(v["modes"] for v in classes.values()) == len(spectrum.eigenvalues)
    write_outputs(spectrum, tmp_path / "out")
    assert (tmp_path / "out" / "statistics.png").stat().st_size > 1000
    data = json.loads((tmp_path / "out" / "spectrum.json").read_text())
    assert data["statistics"]["heat_trace"]["expected_c"] == pytest.approx(1 / 3)


def test_sphere_classes_are_mixed():
    spectrum = _run({"shape": "sphere"}, 2, 36, degree=2)
    classes = spectrum.info["statistics"]["classes"]
    assert classes["mixed"] is True and "meaningless" in classes["note"]
