"""|m| labels and parent l by continuation on surfaces of revolution, against independent 1-D solves.

References:
- the unit sphere's levels l(l+1) for every |m| <= l (DLMF 14.30.10, ``references.sphere_eigenvalues``)
  check the 1-D profile solver itself;
- spheroid and torus levels per m: the 1-D spectral Galerkin solve of the separated profile
  equation (``studies.profile_levels``: no mesh, no finite elements), itself checked on the sphere;
- the continuation rule (k-th level of class |m| has parent l = |m| + k) rests on the simplicity of
  1-D Sturm-Liouville eigenvalues (Courant and Hilbert, vol. 1, ch. VI: no crossing within a class).
"""

from __future__ import annotations

import json
import warnings

import numpy as np
import pytest

from shellmodes.case.schema import case_from_dict
from shellmodes.harmonics import parent_degree
from shellmodes.pipeline import run_case
from shellmodes.spectrum.azimuthal import azimuthal_matrix, continuation_parents, multiplet_abs_m
from shellmodes.studies import references as ref
from shellmodes.studies.profile_levels import spheroid_levels, torus_levels


def solve(shape, degree, subdivisions, count):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return run_case(case_from_dict({"surface": shape, "resolution": {"degree": degree,
                                                                         "subdivisions": subdivisions},
                                        "modes": {"count": count}}, "<test>"))


@pytest.fixture(scope="module")
def prolate():
    # a strongly elongated spheroid (c/a = 2), degree 2 on 642 directions
    return solve({"shape": "spheroid", "equatorial_radius": 1.0, "polar_radius": 2.0}, 2, 3, 25)


@pytest.fixture(scope="module")
def torus():
    return solve({"shape": "torus", "major_radius": 3.0, "minor_radius": 1.0}, 3, 2, 25)


def test_profile_solver_reproduces_the_sphere_for_every_m():
    exact = np.unique(np.round(ref.sphere_eigenvalues(100), 9))  # l(l+1), DLMF 14.30.10
    for m in range(4):
        got = spheroid_levels(1.0, 1.0, m, 4)
        assert np.allclose(got, exact[m:m + 4], rtol=1e-10, atol=1e-10), (m, got)  # spectral: rounding only


def test_profile_solver_has_converged_in_its_basis_size():
    # exponential convergence: 32 and 48 basis functions agree to rounding for these smooth profiles
    for m in (0, 2):
        assert np.allclose(spheroid_levels(1.0, 2.0, m, 5, size=32), spheroid_levels(1.0, 2.0, m, 5), rtol=1e-10)
        assert np.allclose(torus_levels(3.0, 1.0, m, 5, size=32), torus_levels(3.0, 1.0, m, 5), rtol=1e-10)


def _classes(spectrum):
    """(multiplet, |m|) for multiplets of one resolved |m| class."""
    return [(m, m.abs_m[0]) for m in spectrum.multiplets if m.abs_m and len(set(m.abs_m)) == 1 and m.abs_m[0] >= 0]


def test_spheroid_levels_per_m_and_continuation_parents_match_the_1d_solve(prolate):
    checked = 0
    for mult, m in _classes(prolate):
        assert mult.label_rule == "continuation"
        k = mult.l - m  # continuation: the k-th level of class m
        reference = spheroid_levels(1.0, 2.0, m, k + 1)[k]
        if reference == 0:
            assert abs(mult.eigenvalue) < 1e-10
            continue
        # FE degree 2 on 642 directions: measured up to 7.4e-4 relative on these levels; the next level of
        # the same class lies at least 31 % higher, so 2e-3 cannot pass a wrong |m| or a wrong parent
        assert abs(mult.eigenvalue - reference) <= 2e-3 * reference, (m, k, mult.eigenvalue, reference)
        checked += 1
    assert checked >= 14


def test_continuation_corrects_the_nearest_l_on_an_elongated_spheroid(prolate):
    # the third m = 0 level: its parent and dominant degree are 3, nearest l(l+1) of lambda R_eq^2 says 2
    m0 = [m for m in prolate.multiplets if m.abs_m == (0,)]
    third = m0[3]
    radius_eq2 = prolate.problem.operators.extra["area"] / (4 * np.pi)
    assert int(parent_degree(third.eigenvalue * radius_eq2)) == 2
    assert third.l == 3 and third.subspace_l == 3 and third.label_rule == "continuation"


def test_torus_m_classes_match_the_tube_angle_solve(torus):
    counts: dict[int, int] = {}
    checked = 0
    for mult, m in _classes(torus):
        n = counts.get(m, 0)
        counts[m] = n + len(mult.members)
        k = n // (1 if m == 0 else 2)  # the k-th level of class m (a +-m pair counts once)
        reference = torus_levels(3.0, 1.0, m, k + 1)[k]
        if reference == 0:
            continue
        # FE degree 3 on the torus at subdivisions 2: measured up to 8.6e-6 relative; the next level of the
        # same class lies at least 6 % higher
        assert abs(mult.eigenvalue - reference) <= 1e-4 * reference, (m, k, mult.eigenvalue, reference)
        checked += 1
    assert checked >= 10
    assert all(m.l is None for m in torus.multiplets)  # no sphere parent on a torus


def test_abs_m_is_basis_invariant_inside_multiplets(prolate):
    rng = np.random.default_rng(7)
    V = prolate.vectors.copy()
    for m in prolate.multiplets:
        idx = list(m.members)
        q, _ = np.linalg.qr(rng.standard_normal((len(idx), len(idx))))
        V[:, idx] = V[:, idx] @ q  # another orthonormal basis of the same subspace
    Q = azimuthal_matrix(prolate.problem.disc.raw.basis)
    groups = [m.members for m in prolate.multiplets]
    assert [tuple(v) for v in multiplet_abs_m(Q, V, groups)] == [m.abs_m for m in prolate.multiplets]


def test_sphere_multiplets_hold_every_m_up_to_l():
    sphere = solve({"shape": "sphere"}, 2, 2, 16)
    for m in sphere.multiplets:  # Y_lm for |m| <= l (DLMF 14.30): 0, 1, 1, ..., l, l
        assert m.abs_m == tuple(sorted([0] + [k for k in range(1, m.l + 1) for _ in (0, 1)]))
        assert m.label_rule == "continuation"


def test_continuation_counts_pairs_once_and_stops_at_an_unresolved_m():
    assert continuation_parents([(0,), (1, 1), (0,), (1,), (1,), (-1,), (0,)]) == [0, 1, 1, 2, 2, None, None]


def test_rule_and_m_are_written_to_json_and_csv(tmp_path, run_cli):
    case = tmp_path / "s.toml"
    case.write_text('[surface]\nshape = "spheroid"\nequatorial_radius = 1.0\npolar_radius = 2.0\n'
                    "[resolution]\ndegree = 2\nsubdivisions = 2\n[modes]\ncount = 9\n", encoding="utf-8")
    result = run_cli("run", case, "--out", tmp_path / "out")
    assert result.status == 0, result.stderr
    assert "l rule" in result.stdout and "|m|" in result.stdout
    data = json.loads((tmp_path / "out" / "spectrum.json").read_text())
    assert {m["label_rule"] for m in data["multiplets"]} == {"continuation"}
    assert all(isinstance(m["abs_m"], list) for m in data["multiplets"])
    header = (tmp_path / "out" / "spectrum.csv").read_text().splitlines()[0].split(",")
    assert "label_rule" in header and "abs_m" in header


def test_cap_m_classes_match_the_ferrers_roots():
    # 120-degree cap, hard rim: lambda = nu(nu+1) with P_nu^-m(cos theta0) = 0 and the order m of each
    # root (references.cap_eigenvalues, DLMF 14.3 Ferrers functions)
    cap = solve({"shape": "cap", "half_angle": 120.0, "rim": "dirichlet"}, 3, 3, 12)
    exact, _, order = ref.cap_eigenvalues(np.radians(120.0), 14, return_labels=True)
    checked = 0
    for mult, m in _classes(cap):
        same = exact[np.abs(order) == m]
        nearest = same[np.argmin(np.abs(same - mult.eigenvalue))]
        # degree 3 at subdivisions 3: measured FE error up to 6.0e-5 relative; levels of different |m|
        # differ by at least 6 % here, so a wrong |m| cannot pass
        assert abs(mult.eigenvalue - nearest) <= 3e-4 * nearest, (m, mult.eigenvalue, nearest)
        assert mult.l is None  # a cap is not sphere-like: no parent l, no continuation
        checked += 1
    assert checked >= 7


@pytest.mark.parametrize("m", [0, 1, 2])
def test_the_two_independent_profile_solvers_agree(m):
    """studies/profile_levels (Galerkin on a generic profile of revolution) and studies/profile_reference
    (shape-specific bases, with the optional thin-layer potential) are written independently: with the
    potential off they must give the same class-m levels (spectral accuracy, so to 1e-10)."""
    from shellmodes.studies.profile_reference import spheroid_profile_levels, torus_profile_levels

    assert np.allclose(spheroid_levels(1.0, 2.0, m, 5), spheroid_profile_levels(1.0, 2.0, m, 5), rtol=1e-10)
    assert np.allclose(torus_levels(2.0, 0.7, m, 5), torus_profile_levels(2.0, 0.7, m, 5), rtol=1e-10)
