"""Layered curved prisms: assembly, separation, and checks against exact shell spectra.

References named beside each check:
- hard-wall and free-wall shells: the cross-product equations of spherical Bessel functions,
  roots with scipy.special (DLMF 10.47, 10.51; Abramowitz and Stegun 9.5),
  :func:`shellmodes.studies.references.shell_dirichlet` / ``shell_neumann``;
- two media with a mass jump: BenDaniel-Duke matching (Phys. Rev. 152, 683 (1966)),
  :func:`shellmodes.studies.references.layered_shell_dirichlet`;
- volumes of spherical and ellipsoidal shells: 4 pi abc / 3 (elementary geometry).
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp

from shellmodes.eigen.separable import separable_modes
from shellmodes.eigen.solve import lowest_modes
from shellmodes.errors import GeometryError
from shellmodes.fem.assemble import restricted
from shellmodes.fem.prisms import (
    assemble_prisms,
    export_prisms,
    kronecker_factors,
    lobatto_nodes,
    prism_shell,
)
from shellmodes.studies.references import layered_shell_dirichlet, shell_dirichlet, shell_neumann


def exact_shell(count, a=1.0, b=2.0, reference=shell_dirichlet, l_max=10, radial=3):
    values = [float(k) ** 2 for l in range(l_max + 1) for k in reference(l, radial, a, b) for _ in range(2 * l + 1)]
    return np.sort(values)[:count]


def interior(disc, walls=("inner", "outer")):
    mask = np.ones(disc.ndofs, dtype=bool)
    for w in walls:
        mask[disc.wall_dofs(w)] = False
    return np.flatnonzero(mask)


def test_lobatto_nodes_are_the_ends_and_roots_of_the_legendre_derivative():
    # Gauss-Lobatto points of degree 4 on [-1, 1]: 0, +-sqrt(3/7) (Abramowitz and Stegun 25.4.32)
    x = 2 * lobatto_nodes(4) - 1
    assert np.allclose(x, [-1, -np.sqrt(3 / 7), 0, np.sqrt(3 / 7), 1], atol=1e-14)


def test_general_assembly_equals_the_kronecker_form_for_two_spherical_media():
    disc = prism_shell([1.0, 1.4, 2.0], level=1, layers_per_region=(1, 2), degree=2, radial_degree=3)
    kappa, offsets = {0: 1.0, 1: 2.5}, {0: 0.0, 1: 0.7}
    K, M = assemble_prisms(disc, kappa, offsets)
    Ks, Ms, A, B, C = kronecker_factors(disc, kappa, offsets)
    K2, M2 = sp.kron(Ks, B) + sp.kron(Ms, A), sp.kron(Ms, C)
    assert abs(K - K2).max() < 1e-12 * abs(K).max()
    assert abs(M - M2).max() < 1e-12 * abs(M).max()
    # the exact map covers the shell: volume 4 pi (2^3 - 1) / 3 up to the quadrature of the
    # non-polynomial direction map (5e-7 at this coarse level)
    assert float(M.sum()) == pytest.approx(4 * np.pi * 7 / 3, rel=2e-6)


def test_separable_modes_match_the_assembled_pencil():
    disc = prism_shell([1.0, 2.0], level=1, layers_per_region=2, degree=2, radial_degree=2)
    K, M = assemble_prisms(disc, {0: 1.0})
    free = interior(disc)
    direct = lowest_modes(restricted(K, free), restricted(M, free), 20, scale=0.25)
    Ks, Ms, A, B, C = kronecker_factors(disc, {0: 1.0})
    split = separable_modes(Ks, Ms, A, B, C, np.arange(1, disc.n_radial - 1), count=20, scale=0.25)
    n = min(len(direct.lam), len(split.lam))
    assert np.allclose(split.lam[:n], direct.lam[:n], rtol=1e-10)
    assert np.max(split.residuals) < 1e-10 and split.orthogonality < 1e-10


def test_hard_wall_shell_fifty_modes_to_1e5_on_prisms():
    # j_l(ka) y_l(kb) - j_l(kb) y_l(ka) = 0 (scipy.special), 1 < r < 2
    disc = prism_shell([1.0, 2.0], level=2, layers_per_region=1, degree=4, radial_degree=8)
    Ks, Ms, A, B, C = kronecker_factors(disc, {0: 1.0})
    found = separable_modes(Ks, Ms, A, B, C, np.arange(1, disc.n_radial - 1), count=50, scale=0.25)
    exact = exact_shell(50)
    assert np.max(np.abs(found.lam[:50] - exact) / exact) < 1e-5
    # l = 0 is exactly k = n pi / (b - a)
    assert found.lam[0] == pytest.approx(np.pi**2, rel=1e-8)
    assert np.max(found.residuals) < 1e-10


def test_free_walls_zero_mode_and_neumann_levels():
    # j_l'(ka) y_l'(kb) - j_l'(kb) y_l'(ka) = 0 (scipy.special); first l = 0 value is the constant
    disc = prism_shell([1.0, 2.0], level=2, layers_per_region=1, degree=3, radial_degree=6)
    Ks, Ms, A, B, C = kronecker_factors(disc, {0: 1.0})
    found = separable_modes(Ks, Ms, A, B, C, np.arange(disc.n_radial), count=16, scale=0.25)
    exact = exact_shell(16, reference=shell_neumann)
    assert abs(found.lam[0]) < 1e-10
    assert np.max(np.abs(found.lam[1:16] - exact[1:]) / exact[1:]) < 1e-4


def test_two_media_with_a_mass_jump_follow_the_flux_matching_condition():
    # BenDaniel-Duke: R and (1/m) R' continuous at r = 1.5 (layered_shell_dirichlet)
    disc = prism_shell([1.0, 1.5, 2.0], level=2, layers_per_region=(1, 1), degree=4, radial_degree=8)
    kappa = {0: 1.0, 1: 1.0 / 0.4}  # m0 / m_i with masses 1 and 0.4
    Ks, Ms, A, B, C = kronecker_factors(disc, kappa)
    found = separable_modes(Ks, Ms, A, B, C, np.arange(1, disc.n_radial - 1), count=9, scale=0.25)
    exact = np.sort([v for l in range(3) for v in layered_shell_dirichlet(l, 2, 1.0, 1.5, 2.0, 1.0, 0.4)
                     for _ in range(2 * l + 1)])[:9]
    assert np.max(np.abs(found.lam[:9] - exact) / exact) < 1e-6
    # an equal-mass model is far off: the jump is really in the matrices
    equal = np.sort([v for l in range(3) for v in layered_shell_dirichlet(l, 2, 1.0, 1.5, 2.0, 1.0, 1.0)
                     for _ in range(2 * l + 1)])[:9]
    assert np.max(np.abs(found.lam[:9] - equal) / equal) > 0.1


def test_observed_order_of_the_degree_two_prisms():
    # sphere walls are exact on the direction map, so the eigenvalue error of degree k in both
    # directions goes like h^(2k) (common practice for conforming Lagrange elements)
    errors, hs = [], []
    exact = exact_shell(9)
    for level, layers in ((1, 1), (2, 2), (3, 4)):
        disc = prism_shell([1.0, 2.0], level=level, layers_per_region=layers, degree=2, radial_degree=2)
        Ks, Ms, A, B, C = kronecker_factors(disc, {0: 1.0})
        found = separable_modes(Ks, Ms, A, B, C, np.arange(1, disc.n_radial - 1), count=9, scale=0.25)
        errors.append(np.max(np.abs(found.lam[:9] - exact) / exact))
        hs.append(disc.h)
    orders = np.diff(np.log(errors)) / np.diff(np.log(hs))
    assert np.all(orders > 3.4) and orders[-1] > 3.8, orders  # measured 3.56, 3.99


def test_deformed_walls_agree_with_curved_tetrahedra_and_keep_the_volume():
    # ellipsoidal outer wall: volume 4 pi (abc - 1) / 3; the lowest levels of the assembled prisms
    # (degree 3 x 4) agree with the independent P2 tetrahedra, whose own error here is about 6e-4
    # (measured against finer prisms: 7.15388 at degree 4 x 6, levels 2 and 3 agreeing to 2e-7)
    from shellmodes.case.schema import case_from_dict
    from shellmodes.pipeline import run_case

    base = {"shell": {"inner": {"shape": "sphere", "radius": 1.0},
                      "outer": {"shape": "ellipsoid", "axes": [2.0, 2.0, 2.4]}, "layers": 4},
            "resolution": {"degree": 2, "subdivisions": 3}, "modes": {"count": 4}, "output": {"vtu": False}}
    prism = dict(base, shell={**base["shell"], "cells": "prisms", "layers": 1, "radial_degree": 4},
                 resolution={"degree": 3, "subdivisions": 2})
    sp_prism = run_case(case_from_dict(prism))
    sp_tet = run_case(case_from_dict(base))
    assert sp_prism.info["mesh"]["volume"] == pytest.approx(4 * np.pi * (2 * 2 * 2.4 - 1) / 3, rel=1e-5)
    assert sp_prism.info["solver"]["method"] != "separable"
    assert sp_prism.eigenvalues[0] == pytest.approx(7.15388, rel=1e-4)  # 7.1544 measured
    assert np.allclose(sp_prism.eigenvalues[:4], sp_tet.eigenvalues[:4], rtol=1.5e-3)
    assert np.max(sp_prism.residuals) < 1e-8


def test_crossing_walls_are_refused():
    with pytest.raises(GeometryError, match="crosses"):
        prism_shell([2.0, 1.0], level=1, layers_per_region=1)


def test_export_gives_wedges_on_every_lattice_node():
    disc = prism_shell([1.0, 2.0], level=0, layers_per_region=2, degree=3, radial_degree=2)
    points, cells, data = export_prisms(disc)
    kind, wedges = cells[0]
    assert kind == "wedge" and wedges.shape == (20 * 9 * 4, 6)
    assert set(np.unique(wedges)) == set(range(disc.ndofs))
    # the outer triangle comes first, so nodes 0-2 lie farther out than 3-5
    r = np.linalg.norm(points, axis=1)
    assert np.all(r[wedges[:, :3]] > r[wedges[:, 3:]])


PRISM_CASE = ('[shell]\ninner = { shape = "sphere", radius = 1.0 }\nouter = { shape = "sphere", radius = 2.0 }\n'
              'cells = "prisms"\nlayers = 1\nradial_degree = 4\n[resolution]\ndegree = 3\nsubdivisions = 1\n'
              '[modes]\ncount = 9\n')


def test_prism_case_through_the_cli_writes_wedges_and_exact_labels(tmp_path):
    import json

    import meshio

    from shellmodes.cli import main

    case = tmp_path / "prisms.toml"
    case.write_text(PRISM_CASE + "[output]\npictures = true\npicture_modes = 1\n")
    assert main(["run", str(case), "--out", str(tmp_path / "out"), "-q"]) == 0
    data = json.loads((tmp_path / "out" / "spectrum.json").read_text())
    assert data["solver"]["method"] == "separable"
    assert data["mesh"]["cells"] == "prisms" and data["solver"]["plan"]["path"] == "separable"
    modes = data["modes"]
    # hard walls: (n, l) = (1, 0), (1, 1) x 3, (1, 2) x 5 (shell_dirichlet ordering)
    assert [(m["n"], m["dominant_l"]) for m in modes[:9]] == [(1, 0)] + [(1, 1)] * 3 + [(1, 2)] * 5
    mesh = meshio.read(tmp_path / "out" / "modes.vtu")
    assert [c.type for c in mesh.cells] == ["wedge"]
    assert len([k for k in mesh.point_data if k.startswith("psi_")]) == len(modes)
    if (tmp_path / "out" / "levels.png").exists():  # pictures need the plot extra
        assert (tmp_path / "out" / "mode-0000.png").read_bytes()[:4] == b"\x89PNG"


@pytest.mark.parametrize("edit, key, fragment", [
    ({"cells": "prisms", "inner": {"shape": "sphere", "radius": 2.5}}, "shell", "crosses"),
    ({"cells": "prisms", "file": "x.vtu", "inner": None, "outer": None}, "shell", "mesh file gives tetrahedra"),
    ({"cells": "tetrahedra", "radial_degree": 3}, "shell", "cells = 'prisms' only"),
    ({"cells": "tetrahedra", "radial_degree": None, "_degree": 3}, "", "tetrahedra support degrees 1 and 2"),
    ({"outer": {"shape": "ellipsoid", "axes": [2.0, 2.0, 2.5]}, "_method": "separable"}, "modes.method",
     "not concentric spheres"),
    ({"cells": "prisms", "radial_degree": 13}, "shell.radial_degree", "13"),
])
def test_bad_prism_requests_name_the_key(edit, key, fragment):
    from shellmodes.case.schema import case_from_dict
    from shellmodes.errors import CaseError
    from shellmodes.pipeline import run_case

    shell = {"inner": {"shape": "sphere", "radius": 1.0}, "outer": {"shape": "sphere", "radius": 2.0},
             "cells": "prisms", "layers": 1, "radial_degree": 2}
    edit = dict(edit)
    degree, method = edit.pop("_degree", 2), edit.pop("_method", "auto")
    shell.update(edit)
    shell = {k: v for k, v in shell.items() if v is not None}
    data = {"shell": shell, "resolution": {"degree": degree, "subdivisions": 0},
            "modes": {"count": 2, "method": method}, "output": {"vtu": False}}
    with pytest.raises(CaseError) as info:
        run_case(case_from_dict(data, "bad.toml"))
    assert (info.value.key or "").startswith(key), (info.value.key, str(info.value))
    assert fragment in str(info.value)


def test_bad_prism_case_exits_2_with_one_line_and_writes_nothing(tmp_path, capsys):
    from shellmodes.cli import main

    case = tmp_path / "bad.toml"
    case.write_text(PRISM_CASE.replace('radius = 1.0 }', 'radius = 2.5 }'))
    assert main(["run", str(case), "--out", str(tmp_path / "out")]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "bad.toml" in err[0] and "crosses" in err[0]
    assert not (tmp_path / "out").exists()


def _prism_case(count, **extra):
    data = {"shell": {"inner": {"shape": "sphere", "radius": 1.0}, "outer": {"shape": "sphere", "radius": 2.0},
                      "cells": "prisms", "layers": 1, "radial_degree": 6},
            "resolution": {"degree": 3, "subdivisions": 1}, "modes": {"count": count}, "output": {"vtu": False}}
    for key, value in extra.items():
        data[key] = {**data.get(key, {}), **value}
    return data


def test_a_constant_potential_shifts_the_exact_shell_levels():
    # V = 3 everywhere: lambda = k^2 + 3 with k from j_l(ka) y_l(kb) - j_l(kb) y_l(ka) = 0 (scipy.special)
    from shellmodes.case.schema import case_from_dict
    from shellmodes.pipeline import run_case

    s = run_case(case_from_dict(_prism_case(4, potential={"expression": "3.0"})))
    assert s.info["solver"]["method"] == "separable"
    exact = exact_shell(4) + 3.0
    assert np.max(np.abs(s.eigenvalues[:4] - exact) / exact) < 1e-4


def test_a_radial_trap_potential_separates_and_agrees_with_the_assembled_pencil():
    # a shell-shaped trap V = 40 (r - 1.5)^2: the separable path and the assembled 3-D pencil (block
    # shift-invert on the same prisms) solve one discrete problem, so they agree to solver accuracy
    from shellmodes.case.schema import case_from_dict
    from shellmodes.pipeline import run_case

    trap = {"expression": "40*(r - 1.5)**2"}
    split = run_case(case_from_dict(_prism_case(9, potential=trap)))
    full = run_case(case_from_dict(_prism_case(9, potential=trap, modes={"method": "lanczos"})))
    assert split.info["solver"]["method"] == "separable" and full.info["solver"]["method"] == "lanczos"
    np.testing.assert_allclose(split.eigenvalues[:9], full.eigenvalues[:9], rtol=1e-9)
    # an angular potential does not separate
    tilted = run_case(case_from_dict(_prism_case(4, potential={"expression": "40*(r - 1.5)**2 + z"})))
    assert tilted.info["solver"]["method"] != "separable"


def test_deformed_prisms_by_lobpcg_with_the_spherical_preconditioner_match_shift_invert():
    # one discrete problem, two solvers: CHOLMOD shift-invert Lanczos and LOBPCG preconditioned by the
    # mean-radius sphere's exact inverse; parent labels come from overlaps with that sphere's modes
    from shellmodes.case.schema import case_from_dict
    from shellmodes.pipeline import run_case

    data = _prism_case(9, shell={"outer": {"shape": "spheroid", "equatorial_radius": 2.0, "polar_radius": 2.3}})
    direct = run_case(case_from_dict(data))
    iterative = run_case(case_from_dict({**data, "modes": {"count": 9, "method": "lobpcg"}}))
    assert iterative.info["solver"]["plan"]["path"] == "lobpcg-spherical"
    assert iterative.info["solver"]["backend"] == "spherical-reference"
    n = min(len(direct.eigenvalues), len(iterative.eigenvalues))
    np.testing.assert_allclose(iterative.eigenvalues[:n], direct.eigenvalues[:n], rtol=1e-8)
    assert np.max(iterative.residuals) < 1e-7
    labels = iterative.mode_columns
    assert (labels["n"][0], labels["dominant_l"][0]) == (1, 0) and labels["l_weight"][0] > 0.5  # 0.72 measured
    assert set(labels["dominant_l"][1:4]) == {1}  # the l = 1 triplet splits 1 + 2 on a spheroid


def test_spherical_preconditioner_is_the_exact_inverse_on_a_sphere():
    from shellmodes.eigen.separable import SphericalPreconditioner

    disc = prism_shell([1.0, 2.0], 1, 2, degree=2, radial_degree=2)
    K, M = assemble_prisms(disc, {0: 1.0})
    free = interior(disc)
    Kf, Mf = restricted(K, free), restricted(M, free)
    P = SphericalPreconditioner(*kronecker_factors(disc, {0: 1.0}), np.arange(1, disc.n_radial - 1), -0.25)
    x = np.random.default_rng(1).standard_normal((len(free), 3))
    assert np.max(np.abs((Kf + 0.25 * Mf) @ P(x) - x)) < 1e-10


@pytest.mark.parametrize("degree, expected", [(3, 6), (4, 8)])
def test_high_degree_prisms_reach_order_2k_on_exact_walls(degree, expected):
    # the walls are exact, so nothing limits the Lagrange eigenvalue rate h^(2k) (common practice for
    # conforming elements); measured 6.35, 6.08 (k = 3) and 8.43, 8.10 (k = 4) over levels 1-3
    errors, hs = [], []
    exact = exact_shell(16)
    for level in (1, 2):
        disc = prism_shell([1.0, 2.0], level, 1, degree=degree, radial_degree=12)
        found = separable_modes(*kronecker_factors(disc, {0: 1.0}), np.arange(1, disc.n_radial - 1), count=16,
                                scale=0.25)
        errors.append(np.max(np.abs(found.lam[:16] - exact) / exact))
        hs.append(disc.h)
    order = np.log(errors[1] / errors[0]) / np.log(hs[1] / hs[0])
    assert order > expected - 0.5, order


def test_star_walls_deformed_independently():
    # inner r = 1 + 0.1 Y_20, outer r = 2 (1 + 0.08 Y_32): the volume against
    # (1/3) int (R_out^3 - R_in^3) dOmega by scipy.integrate.dblquad, and the lowest levels against the
    # independent curved P2 tetrahedra (whose error here is about 4e-4; finer prisms give 9.740084)
    from scipy.integrate import dblquad

    from shellmodes.case.schema import case_from_dict
    from shellmodes.harmonics import real_sph_harm
    from shellmodes.pipeline import run_case

    walls = {"inner": {"shape": "star", "radius": 1.0, "deformation": [{"l": 2, "m": 0, "amplitude": 0.1}]},
             "outer": {"shape": "star", "radius": 2.0, "deformation": [{"l": 3, "m": 2, "amplitude": 0.08}]}}

    def cubes(theta, phi):
        inner = 1.0 + 0.1 * real_sph_harm(2, 0, np.array([theta]), np.array([phi]))[0]
        outer = 2.0 * (1.0 + 0.08 * real_sph_harm(3, 2, np.array([theta]), np.array([phi]))[0])
        return (outer**3 - inner**3) / 3.0 * np.sin(theta)

    volume = dblquad(lambda theta, phi: cubes(theta, phi), 0.0, 2 * np.pi, 0.0, np.pi, epsabs=1e-12)[0]
    base = {"resolution": {"degree": 3, "subdivisions": 2}, "modes": {"count": 4}, "output": {"vtu": False}}
    prism = run_case(case_from_dict({**base, "shell": {**walls, "cells": "prisms", "layers": 1, "radial_degree": 4}}))
    tet = run_case(case_from_dict({"shell": {**walls, "layers": 4}, "resolution": {"degree": 2, "subdivisions": 3},
                                   "modes": {"count": 4}, "output": {"vtu": False}}))
    assert prism.info["mesh"]["volume"] == pytest.approx(volume, rel=2e-6)
    np.testing.assert_allclose(prism.eigenvalues[:4], tet.eigenvalues[:4], rtol=1e-3)
    assert prism.eigenvalues[0] == pytest.approx(9.740084, rel=5e-4)  # measured 9.741603


def test_an_empty_energy_window_names_the_lowest_level():
    # the lowest hard-wall level of 1 < r < 2 is pi^2 (l = 0, k = pi / (b - a))
    import warnings

    from shellmodes.case.schema import case_from_dict
    from shellmodes.pipeline import run_case

    data = _prism_case(1)
    data["modes"] = {"below": 5.0}
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        s = run_case(case_from_dict(data))
    assert len(s.eigenvalues) == 0
    text = next(str(w.message) for w in caught if "no mode lies below" in str(w.message))
    assert f"the lowest is {np.pi**2:.4f}"[:22] in text
