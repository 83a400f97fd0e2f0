"""Convergence studies: observed orders, Richardson extrapolation, error bars, ``shellmodes converge``.

References: the unit sphere's spectrum l(l+1) with multiplicity 2l+1 (DLMF
14.30.10, via ``references.sphere_eigenvalues``); the hemisphere's closed form
(l(l+1) with l + m odd under a hard rim, DLMF 14.7 parity, via
``references.hemisphere_eigenvalues``); the energy of lambda = 1/nm^2 for an
electron, hbar^2/(2 m_e nm^2), from ``scipy.constants``.  Expected orders 2k
for k = 1, 2 (Dziuk 1988; Demlow 2009), measured here in tests/test_surface.py.

Numbers measured on this machine when the tolerances were set (group means):
- sphere, degree 1, subdivisions 2-4: orders 2.05, 2.07 (l = 1, 2); the
  extrapolated error is 26x and 21x smaller than the finest raw error; the
  estimate / true error ratio 0.96 and 0.95;
- sphere, degree 2, subdivisions 1-3: orders 4.25, 4.29; extrapolation 7.9x
  and 6.8x better; estimate / true 0.87, 0.85;
- hemisphere (hard rim), degree 2, subdivisions 3-5: orders 4.68, 5.12, 4.29;
  extrapolation 5.7x, 4.2x, 16x better; estimate / true 0.82, 0.76, 0.94;
- sphere, degree 1 from the bare icosahedron (subdivisions 0-2): orders 2.81,
  2.82, 40% above 2, so flagged; the conservative estimate is 3.0x and 3.1x
  the true error.
"""

from __future__ import annotations

import csv
import json
import math
import warnings

import numpy as np
import pytest
from scipy import constants

from shellmodes.case.model import build_shape
from shellmodes.case.schema import case_from_dict
from shellmodes.case.units import ENERGY_UNITS
from shellmodes.errors import CaseError, DoubtfulResultWarning
from shellmodes.studies import references as ref
from shellmodes.studies.convergence import (
    ConvergenceStudy,
    convergence_study,
    error_bar,
    expected_order,
    extrapolate,
    observed_order_three,
    order_range,
    shared_groups,
)


def sphere_case(degree, subdivisions, count=9, **extra):
    return case_from_dict({"surface": {"shape": "sphere"},
                           "resolution": {"degree": degree, "subdivisions": subdivisions},
                           "modes": {"count": count}, **extra}, "<test>")


def exact_means(study, exact):
    """Exact group means over the same mode indices as each row (the lengths must allow it)."""
    assert max(max(r.modes) for r in study.rows) < len(exact)
    return np.array([np.mean(exact[list(r.modes)]) for r in study.rows])


# Studies are frozen dataclasses: sharing one per module cannot leak a mutation between tests.
@pytest.fixture(scope="module", params=[(1, 2), (2, 1)], ids=["degree1", "degree2"])
def sphere_study(request):
    degree, start = request.param
    with warnings.catch_warnings():
        warnings.simplefilter("error", DoubtfulResultWarning)  # resolved meshes: no doubt expected
        return convergence_study(sphere_case(degree, start), refinements=3)


# ----------------------------------------------------------------------------- unit tests
def test_observed_order_three_recovers_a_synthetic_rate_on_uneven_h():
    h = np.array([0.5, 0.26, 0.12])  # not a constant ratio: the simple log formula would be off
    lam = 3.0 + 0.7 * h**3
    assert abs(observed_order_three(lam, h) - 3.0) < 1e-9  # exact data: only root-finding error
    assert math.isnan(observed_order_three([3.0, 2.0, 2.5], h))  # change of sign: no order
    assert math.isnan(observed_order_three([3.0, 2.9, 2.7], h))  # growing changes: no order


def test_error_bar_follows_roaches_safety_factors_on_synthetic_data():
    h = [0.4, 0.2, 0.1, 0.05]
    # a clean second-order sequence: verified and stable, Fs = 1.25 on the Richardson correction
    # (Roache, J. Fluids Eng. 116 (1994) 405); the correction is exact here, so the bar is 1.25x the error
    clean = error_bar([1 + 0.3 * x**2 for x in h], h, (2.0, 2.0))
    assert clean.status == "asymptotic" and clean.safety_factor == 1.25
    assert math.isclose(clean.error, 1.25 * 0.3 * 0.05**2, rel_tol=1e-9)
    # orders 2 then 2.6 over the last two triples (both inside the window around 2, but not agreeing
    # within 0.15 x 2): unstable, so Fs = 3 at the expected order 2
    lam = [1 + 0.3 * x**2 for x in h[:3]]
    lam.append(lam[-1] - (lam[1] - lam[2]) / 2**2.6)
    unstable = error_bar(lam, h, (2.0, 2.0))
    assert math.isclose(unstable.order, 2.6, rel_tol=1e-9) and math.isclose(unstable.previous_order, 2.0)
    assert unstable.status == "order-unstable" and unstable.safety_factor == 3.0 and not unstable.asymptotic
    assert math.isclose(unstable.error, 3 * abs(lam[2] - lam[3]) / 3.0, rel_tol=1e-9)  # r^p - 1 = 3
    # growing changes: no order at all, flagged, the bar at least the last change
    off = error_bar([1.0, 1.1, 1.3], h[:3], (2.0, 2.0))
    assert off.status == "order-off" and math.isclose(off.error, 0.2)  # 3 x 0.2 / (2^2 - 1)


def test_extrapolation_is_exact_for_a_pure_power_on_uneven_h():
    h = np.array([0.5, 0.26, 0.12])
    lam = 5.0 + 0.3 * h**2.5
    p = observed_order_three(lam, h)
    assert abs(extrapolate(lam, h, p) - 5.0) < 1e-12  # exact data: rounding only
    assert abs(extrapolate(lam, h, 2.0) - 5.0) > 5e-4  # the wrong order does not (off by 9e-4)


def test_shared_groups_keep_only_boundaries_every_refinement_has():
    # refinement 0: multiplets {0} {1,2,3} {4..8}; refinement 1 splits {4..8} as {4,5,6} {7,8}
    # and ends at 12; refinement 2 orders the split pieces differently and stops at 9
    groups = shared_groups([[0, 1, 4], [0, 1, 4, 7, 9], [0, 1, 4, 6]], [9, 12, 9])
    assert groups == [(0, 1), (1, 4), (4, 9)]
    assert shared_groups([[0, 1, 4], [0, 1, 3]], [9, 9]) == [(0, 1), (1, 9)]
    with pytest.raises(ValueError):
        shared_groups([[0]], [1, 2])


def test_expected_orders_are_the_rates_measured_in_test_surface():
    # tests/test_surface.py docstring: 2, 4, 4, 6 for k = 1..4, and 6 for k = 3 on degree-4 geometry
    assert [expected_order(k) for k in (1, 2, 3, 4)] == [2.0, 4.0, 4.0, 6.0]
    assert expected_order(3, 4) == 6.0
    assert expected_order(2, exact_geometry=False) is None
    # up to 2k where the geometry error does not show (hemisphere, k = 4: measured 7.6-8.0)
    assert order_range(2) == (4.0, 4.0) and order_range(4) == (6.0, 8.0)
    assert order_range(1, exact_geometry=False) is None


# ----------------------------------------------------------------------------- sphere: exact l(l+1)
def test_rows_are_whole_sphere_multiplets(sphere_study):
    assert [r.size for r in sphere_study.rows] == [1, 3, 5]  # 2l+1 (DLMF 14.30)
    assert [r.l for r in sphere_study.rows] == [0, 1, 2]
    assert len(sphere_study.refinements) == 3
    assert all(len(r.values) == 3 for r in sphere_study.rows)
    zero = sphere_study.rows[0]  # the constant mode is reproduced to rounding
    assert abs(zero.finest) < 1e-10 and zero.error < 1e-10 and zero.asymptotic


def test_observed_orders_match_theory(sphere_study):
    expected = {1: 2.0, 2: 4.0}[sphere_study.degree]
    # measured 2.05-2.07 (k = 1) and 4.25-4.29 (k = 2); the tolerance allows the
    # pre-asymptotic drift of coarse meshes, 15% of the rate, and no more
    orders = [r.order for r in sphere_study.rows[1:]]
    assert len(orders) == 2
    assert all(abs(p - expected) <= 0.15 * expected for p in orders), orders
    assert all(r.asymptotic for r in sphere_study.rows)


def test_richardson_beats_the_finest_value(sphere_study):
    exact = exact_means(sphere_study, ref.sphere_eigenvalues(9))  # l(l+1), DLMF 14.30.10
    rows = sphere_study.rows[1:]
    raw = np.array([abs(r.finest - e) for r, e in zip(rows, exact[1:], strict=True)])
    extrapolated = np.array([abs(r.extrapolated - e) for r, e in zip(rows, exact[1:], strict=True)])
    # measured improvement 21-26x (k = 1) and 6.8-7.9x (k = 2): demand about half of that
    factor = {1: 10.0, 2: 4.0}[sphere_study.degree]
    assert len(raw) == len(extrapolated) == 2
    assert np.all(extrapolated * factor <= raw), (raw, extrapolated)


def test_error_bar_brackets_the_true_error_within_a_factor_3(sphere_study):
    exact = exact_means(sphere_study, ref.sphere_eigenvalues(9))
    rows = sphere_study.rows[1:]
    ratio = np.array([r.error / abs(r.finest - e) for r, e in zip(rows, exact[1:], strict=True)])
    assert len(ratio) == 2
    # a bar must hold (>= 1); measured 1.26-1.27 (k = 1) and 1.31-1.32 (k = 2) with Fs = 1.25
    assert np.all((ratio >= 1) & (ratio <= 3)), ratio
    assert all(r.status == "asymptotic" and r.safety_factor == 1.25 for r in rows)


def test_hemisphere_error_bars_hold_against_the_closed_form():
    case = case_from_dict({"surface": {"shape": "cap", "half_angle": 90.0, "rim": "dirichlet"},
                           "resolution": {"degree": 2, "subdivisions": 3}, "modes": {"count": 6}}, "<test>")
    study = convergence_study(case)
    assert [r.size for r in study.rows] == [1, 2, 3]  # l = 1, 2, 3 with l + m odd: l orders each
    exact = exact_means(study, ref.hemisphere_eigenvalues(6, "dirichlet"))
    raw = np.array([abs(r.finest - e) for r, e in zip(study.rows, exact, strict=True)])
    extrapolated = np.array([abs(r.extrapolated - e) for r, e in zip(study.rows, exact, strict=True)])
    estimate = np.array([r.error for r in study.rows])
    assert all(r.asymptotic for r in study.rows)
    assert np.all(extrapolated * 3 <= raw), (raw, extrapolated)  # measured 4.2-16x
    ratio = estimate / raw
    assert np.all((ratio >= 1) & (ratio <= 3)), ratio  # the bar holds; measured 1.42-2.01
    # orders measured 4.3-5.1: the map onto the cap converges from above the rate 4
    assert all(3.5 <= r.order <= 5.4 for r in study.rows), [r.order for r in study.rows]


# ----------------------------------------------------------------------------- tolerance and flags
def test_reachable_tolerance_refines_until_met_and_is_true():
    seen = []
    study = convergence_study(sphere_case(1, 1, count=4), refinements=3, tolerance=2e-3,
                              progress=lambda s, spectrum: seen.append((s, len(spectrum.eigenvalues))))
    # at subdivisions 3 the l = 1 estimate is ~5e-3 relative, at 4 ~1.4e-3: one extra refinement
    assert study.subdivisions == (1, 2, 3, 4)
    assert seen == [(1, 4), (2, 4), (3, 4), (4, 4)]
    assert study.reached == 4 and study.tolerance_reached
    assert [r.reached_at for r in study.rows] == [3, 4]  # the zero mode meets it at once
    l1 = study.rows[1]
    assert l1.relative_error <= 2e-3
    assert abs(l1.finest - 2.0) / 2.0 <= 2e-3  # and it is true: l(l+1) = 2 (DLMF 14.30.10)


def test_unreachable_tolerance_is_reported_with_the_best_estimate():
    with pytest.warns(DoubtfulResultWarning, match="not reached"):
        study = convergence_study(sphere_case(1, 1, count=4), tolerance=1e-9, max_subdivisions=4)
    assert study.subdivisions == (1, 2, 3, 4)  # refined to the limit, no further
    assert study.reached is None and study.tolerance_reached is False
    assert study.rows[1].reached_at is None
    assert study.rows[1].values[-1] == study.rows[1].finest  # the best (finest) estimate is reported
    assert any("not reached" in w for w in study.warnings)
    assert study.as_dict()["tolerance_reached"] is False


def test_coarse_start_is_flagged_not_asymptotic_with_a_conservative_bar():
    with pytest.warns(DoubtfulResultWarning, match="not in the asymptotic range"):
        study = convergence_study(sphere_case(1, 0, count=9))  # 12, 42 and 162 DOFs
    assert [r.size for r in study.rows] == [1, 3, 5]
    assert [r.asymptotic for r in study.rows] == [True, False, False]  # orders measured 2.81, 2.82
    exact = exact_means(study, ref.sphere_eigenvalues(9))
    for row, e in zip(study.rows[1:], exact[1:], strict=True):
        assert row.error >= abs(row.finest - e)  # the fallback bar still covers the error (3.0x, 3.1x)


def test_edge_length_starts_at_the_shapes_subdivisions():
    case = case_from_dict({"surface": {"shape": "sphere"}, "resolution": {"degree": 1, "edge_length": 0.5},
                           "modes": {"count": 4}}, "<test>")
    start = build_shape(case).subdivisions_for(0.5)
    study = convergence_study(case)
    assert study.subdivisions == (start, start + 1, start + 2)
    assert [r.dofs for r in study.refinements] == sorted({r.dofs for r in study.refinements})  # refining


def test_counts_that_differ_between_refinements_keep_the_common_multiplets():
    case = case_from_dict({"surface": {"shape": "sphere"}, "resolution": {"degree": 1, "subdivisions": 1},
                           "modes": {"below": 7.0}}, "<test>")
    study = convergence_study(case)
    # at subdivisions 1 the l = 2 level sits at 7.17 (above 7), later at 6.28 and 6.07
    assert [len(r.eigenvalues) for r in study.refinements] == [4, 9, 9]
    assert [r.size for r in study.rows] == [1, 3]


def test_energies_are_in_the_case_unit():
    study = convergence_study(sphere_case(1, 1, count=4, units={"length": "nm", "energy": "meV"}))
    e0 = constants.hbar**2 / (2 * constants.m_e * constants.nano**2) / ENERGY_UNITS["meV"]  # scipy.constants
    assert study.energy_unit == "meV"
    assert math.isclose(study.energy_per_lambda, e0, rel_tol=1e-12)
    for row in study.rows:
        assert math.isclose(row.energy_extrapolated, row.extrapolated * e0, rel_tol=1e-12, abs_tol=1e-12)
        assert math.isclose(row.energy_error, row.error * e0, rel_tol=1e-12, abs_tol=1e-15)
    # the terminal's error column is the CSV's energy_error, with its unit (issue 12 item 10)
    assert "energy_error [meV]" in study.table().splitlines()[0]


def test_repr_is_one_compact_line(sphere_study):
    text = repr(sphere_study)
    assert isinstance(sphere_study, ConvergenceStudy)
    assert text.startswith("ConvergenceStudy(") and "\n" not in text and len(text) < 300
    assert f"degree={sphere_study.degree}" in text


# ----------------------------------------------------------------------------- bad input
@pytest.mark.parametrize("kwargs, key", [
    ({"refinements": 2}, "refinements"),
    ({"tolerance": 0.0}, "tolerance"),
    ({"tolerance": -1e-3}, "tolerance"),
    ({"tolerance": float("nan")}, "tolerance"),
    ({"max_subdivisions": 10}, "max_subdivisions"),
    ({"refinements": 4, "max_subdivisions": 3}, "resolution.subdivisions"),
])
def test_bad_requests_raise_case_errors_before_solving(kwargs, key):
    with pytest.raises(CaseError) as info:
        convergence_study(sphere_case(1, 1, count=4), **kwargs)
    assert info.value.key == key and info.value.source == "<test>"


def test_too_fine_an_edge_length_names_that_key_and_value():
    case = case_from_dict({"surface": {"shape": "sphere"}, "resolution": {"degree": 1, "edge_length": 0.01},
                           "modes": {"count": 4}}, "<test>")
    with pytest.raises(CaseError, match="value 0.01") as info:
        convergence_study(case)
    assert info.value.key == "resolution.edge_length"


# ----------------------------------------------------------------------------- command line
CASE = """\
title = "converge probe"
[surface]
shape = "sphere"
[resolution]
degree = 1
subdivisions = 1
[modes]
count = 4
"""


def write_case(folder):
    path = folder / "case.toml"
    path.write_text(CASE, encoding="utf-8")
    return path


def test_cli_writes_table_json_and_csv(run_cli, tmp_path):
    path = write_case(tmp_path)
    done = run_cli("converge", path)
    assert done.status == 0, done.stderr
    out = tmp_path / "case-convergence"  # the run folder's name + "-convergence", beside the case
    assert sorted(p.name for p in out.iterdir()) == ["convergence.csv", "convergence.json"]
    data = json.loads((out / "convergence.json").read_text())
    rows = list(csv.DictReader((out / "convergence.csv").open()))
    assert len(rows) == len(data["rows"]) == 2  # l = 0 and l = 1
    assert [r["size"] for r in rows] == ["1", "3"] and [r["asymptotic"] for r in rows] == ["true", "true"]
    assert [r["subdivisions"] for r in data["refinements"]] == [1, 2, 3]
    assert data["case"]["title"] == "converge probe"  # the configuration, as for spectrum.json
    study = convergence_study(sphere_case(1, 1, count=4))  # the CLI does what the API does
    assert len(study.rows) == len(data["rows"])
    for row, written in zip(study.rows, data["rows"], strict=True):
        assert written["extrapolated"] == pytest.approx(row.extrapolated, rel=1e-9, abs=1e-12)
    assert "asymptotic" in done.stdout and "extrapolated" in done.stdout
    assert "wrote" in done.stdout


def test_cli_quiet_and_out(run_cli, tmp_path):
    done = run_cli("converge", write_case(tmp_path), "--out", tmp_path / "here", "--tolerance", "1e-2", "-q")
    assert done.status == 0 and done.stdout == ""
    data = json.loads((tmp_path / "here" / "convergence.json").read_text())
    assert data["tolerance"] == 1e-2 and data["tolerance_reached"] is True


@pytest.mark.parametrize("argv", [["--refinements", "2"], ["--tolerance", "0"], ["--tolerance", "-1"],
                                  ["--refinements", "9"]])
def test_cli_bad_input_exits_2_with_one_line_and_writes_nothing(run_cli, tmp_path, argv):
    out = tmp_path / "never"
    done = run_cli("converge", write_case(tmp_path), "--out", out, *argv)
    assert done.status == 2
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("shellmodes: error:") and "case.toml" in lines[0]
    assert not out.exists() and list(tmp_path.iterdir()) == [tmp_path / "case.toml"]


def test_shell_cases_converge_with_layers_refined_alongside():
    # a shell study used to stop with an internal error; now subdivisions and radial layers are refined
    # together (h halves in every direction). Degree-2 prisms between exact spheres converge at h^4
    # (common practice for conforming elements); measured 3.52, 3.32, 2.90 from 486 to 23,058 DOFs
    # against k from j_l(ka) y_l(kb) - j_l(kb) y_l(ka) = 0 (scipy.special)
    from shellmodes.studies.references import shell_dirichlet

    case = case_from_dict({"shell": {"inner": {"shape": "sphere", "radius": 1.0},
                                     "outer": {"shape": "sphere", "radius": 2.0}, "cells": "prisms", "layers": 1},
                           "resolution": {"degree": 2, "subdivisions": 1}, "modes": {"count": 9}})
    study = convergence_study(case)
    assert [r.dofs for r in study.refinements] == [486, 3210, 23058]
    assert study.order_range[1] == 4.0  # 2k for k = min(degree, radial_degree) = 2
    first = study.rows[0]
    exact = float(shell_dirichlet(0, 1, 1.0, 2.0)[0]) ** 2
    assert 2.5 < first.order < 4.5
    # the extrapolated value is closer to the exact one than the finest solve
    assert abs(first.extrapolated - exact) < abs(study.refinements[-1].eigenvalues[0] - exact)


# ----------------------------------------------------------------------------- error bars on five shapes
def _revolution_reference(levels, m_max: int, count: int) -> np.ndarray:
    """Sorted eigenvalues from per-m 1-D levels (m = 0 once, each m > 0 as a +-m pair)."""
    values = [v for m in range(m_max + 1) for v in levels(m) for _ in range(1 if m == 0 else 2)]
    return np.sort(values)[:count]


def _five_shapes():
    from shellmodes.studies.profile_levels import spheroid_levels, torus_levels

    def surface(shape, subdivisions, count):
        return {"surface": shape, "resolution": {"degree": 2, "subdivisions": subdivisions},
                "modes": {"count": count}}

    ball = {"shell": {"outer": {"shape": "sphere", "radius": 1.0}, "layers": 2, "radial_degree": 2},
            "resolution": {"degree": 2, "subdivisions": 2}, "modes": {"count": 20}}
    return {
        # l(l+1) (DLMF 14.30.10)
        "sphere": (surface({"shape": "sphere"}, 1, 16), ref.sphere_eigenvalues),
        # the 1-D profile solve per m (studies.profile_levels, checked on the sphere in test_axial_labels)
        "spheroid": (surface({"shape": "spheroid", "equatorial_radius": 1.0, "polar_radius": 1.5}, 1, 16),
                     lambda n: _revolution_reference(lambda m: spheroid_levels(1.0, 1.5, m, 8), 7, n)),
        "torus": (surface({"shape": "torus", "major_radius": 3.0, "minor_radius": 1.0}, 1, 20),
                  lambda n: _revolution_reference(lambda m: torus_levels(3.0, 1.0, m, 8), 9, n)),
        # Ferrers-function roots (references.cap_eigenvalues)
        "cap": (surface({"shape": "cap", "half_angle": 120.0, "rim": "dirichlet"}, 2, 12),
                lambda n: ref.cap_eigenvalues(np.radians(120.0), n)),
        # squares of the zeros of j_l (DLMF 10.21, references.ball_dirichlet)
        "ball": (ball, lambda n: np.sort([k**2 for l in range(7) for k in ref.ball_dirichlet(l, 4)
                                          for _ in range(2 * l + 1)])[:n]),
    }


@pytest.mark.slow
@pytest.mark.parametrize("name", ["sphere", "spheroid", "torus", "cap", "ball"])
def test_error_bars_bracket_the_true_error_on_five_shapes(name):
    data, exact = _five_shapes()[name]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DoubtfulResultWarning)  # coarse starts are flagged; the bar must hold
        study = convergence_study(case_from_dict(data, "<test>"), refinements=4)
    reference = np.asarray(exact(max(max(r.modes) for r in study.rows) + 1))
    ratios, verified = [], []
    for row in study.rows:
        true = abs(row.finest - np.mean(reference[list(row.modes)]))
        if true > 1e-11 * max(1.0, abs(row.finest)):  # not at rounding level
            ratios.append(row.error / true)
            verified.append(row.asymptotic)
    ratios, verified = np.array(ratios), np.array(verified, dtype=bool)
    assert len(ratios) >= 3
    # the target: the bar brackets the true error for >= 95 % of levels (measured: all), and is
    # <= 10x it for most: measured 1.25-1.6x on every row whose order is verified; flagged rows of
    # pre-asymptotic coarse starts (the 120-degree cap and the ball at degree 2, orders drifting from 6 to
    # 4.5 or from 1 to 4) carry Fs = 3 at the expected order and measured 12-15x (bench_errorbars.py)
    assert np.mean(ratios >= 1) >= 0.95, ratios
    assert np.all(ratios[verified] <= 10), (ratios, verified)
    assert np.all(ratios[~verified] <= 20), (ratios, verified)  # flagged: conservative, but not absurd
