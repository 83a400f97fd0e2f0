"""Graded radial layers per medium and automatic layers for states bound in a finite well.

References: the finite spherical well's bound-state condition (j_l inside matched
to the modified spherical Bessel k_l outside, ``references.finite_spherical_well``;
S. Fluegge, Practical Quantum Mechanics, problem on the spherical potential well,
recalled from memory; scipy.special), and the same matching with a hard outer
wall (``references.core_shell_dot_dirichlet``, BenDaniel and Duke, Phys. Rev. 152,
683 (1966)).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import constants

from shellmodes.case.schema import case_from_dict
from shellmodes.errors import CaseError
from shellmodes.fem.grading import decay_fractions, explicit_fractions, geometric_fractions
from shellmodes.pipeline import run_case
from shellmodes.studies import references as ref

WELL = {"shell": {"interfaces": [{"shape": "sphere", "radius": 5.0}], "outer": {"shape": "sphere", "radius": 40.0},
                  "layers": [2, 2], "radial_degree": 8, "decay": 1e-8,
                  "regions": [{"name": "well"}, {"name": "barrier", "offset": 300.0}]},
        "units": {"length": "nm", "energy": "meV"}, "particle": {"mass": 1.0, "effective_mass": 0.067},
        "resolution": {"degree": 4, "subdivisions": 1}, "modes": {"count": 4}, "output": {"vtu": False}}


def test_grading_rules():
    f = geometric_fractions(4, 2.0)
    np.testing.assert_allclose(np.diff(f)[1:] / np.diff(f)[:-1], 2.0)  # widths grow by the ratio
    assert f[0] == 0.0 and f[-1] == 1.0
    np.testing.assert_allclose(explicit_fractions([0.25, 0.5]), [0.0, 0.25, 0.5, 1.0])
    # decay into a barrier of thickness 40 from its inner wall: first layer 2/kappa_max (radial degree 8),
    # widths never above 2/kappa_min, zone ends where exp(-kappa_min d) = 1e-6
    g = decay_fractions(40.0, 0.5, 3.0, 1e-6, True, False) * 40.0
    widths = np.diff(g)
    assert widths[0] == pytest.approx(2 / 3.0)
    assert np.all(widths[:-1] <= 2 / 0.5 + 1e-12)
    assert g[-2] == pytest.approx(np.log(1e6) / 0.5, rel=1e-12)


def test_finite_well_binds_both_states_with_automatic_layers():
    # equal masses: V0 = 300 meV in lambda units through hbar^2 / (2 * 0.067 m_e * nm^2) (scipy.constants)
    e0 = constants.hbar**2 / (2 * 0.067 * constants.m_e * 1e-18) / constants.e * 1e3
    spectrum = run_case(case_from_dict(WELL))
    walled = [ref.core_shell_dot_dirichlet(l, 1, 5.0, 40.0, 1.0, 1.0, 300.0 / e0)[0] * e0 for l in (0, 1)]
    free = [ref.finite_spherical_well(l, 300.0 / e0, 5.0, 1.0, 1.0) * e0 for l in (0, 1, 2)]
    assert [len(f) for f in free] == [1, 1, 0]  # the exact condition binds 1s and 1p only
    energies = spectrum.energies
    assert np.all(energies[:4] < 300.0)  # both bound in the discrete model too
    expected = np.array([walled[0]] + [walled[1]] * 3)
    # measured 6e-9 (1s) and 2.4e-7 (1p, l = 1 on 12 directions at degree 4); 1e-6 is the target of issue 9
    np.testing.assert_allclose(energies[:4], expected, rtol=1e-6)
    # the wall at 40 nm moves the levels by less than 1e-8: the infinite-barrier condition agrees too
    np.testing.assert_allclose(walled, [free[0][0], free[1][0]], rtol=1e-8)


def test_graded_ball_keeps_the_exact_separation():
    # a graded ball (layers shrink outward) still separates and matches the zeros of j_l (A&S Table 10.6)
    data = {"shell": {"outer": {"shape": "sphere", "radius": 1.0}, "layers": 3, "grading": 0.7,
                      "radial_degree": 6}, "resolution": {"degree": 3, "subdivisions": 1}, "modes": {"count": 4},
            "output": {"vtu": False}}
    spectrum = run_case(case_from_dict(data))
    assert spectrum.info["solver"]["plan"]["path"] == "separable"
    exact = np.array([ref.ball_dirichlet(0, 1)[0] ** 2] + [ref.ball_dirichlet(1, 1)[0] ** 2] * 3)
    np.testing.assert_allclose(spectrum.eigenvalues[:4], exact, rtol=2e-5)  # measured 5.9e-6 (l = 1, P3)


@pytest.mark.parametrize("edit, fragment", [
    ({"cells": "tetrahedra", "radial_degree": None}, "decay applies to cells = 'prisms' only"),
    ({"layer_boundaries": [[0.5, 0.3], []]}, "layer_boundaries[0]"),
    ({"grading": [1.0]}, "grading has 1 entries for 2 media"),
    ({"decay": 2.0}, "decay"),
])
def test_bad_layer_keys_name_the_key(edit, fragment):
    data = {**WELL, "shell": {k: v for k, v in {**WELL["shell"], **edit}.items() if v is not None}}
    with pytest.raises(CaseError) as info:
        case_from_dict(data, "bad.toml")
    assert fragment in str(info.value) and "bad.toml" in str(info.value)


def test_a_shallow_well_in_a_large_ball_binds_its_weak_p_level_only_with_automatic_layers():
    # well r < 1, barrier 10 out to r = 60 (eigenvalue units): the exact matching condition (j_l to k_l,
    # references.finite_spherical_well) binds 1s at 5.3758 and 1p at 9.9503, barely below the barrier.
    # Equal layers (two across 59 units) leave 1s 29 % high and 1p unbound (measured 10.0028);
    # decay = 1e-8 binds both (measured 3e-10 and 1.6e-7)
    exact = [ref.finite_spherical_well(l, 10.0, 1.0, 1.0, 1.0) for l in range(3)]
    assert [len(e) for e in exact] == [1, 1, 0]

    def lowest(decay):
        shell = {"interfaces": [{"shape": "sphere", "radius": 1.0}], "outer": {"shape": "sphere", "radius": 60.0},
                 "layers": [2, 2], "radial_degree": 8,
                 "regions": [{"name": "well"}, {"name": "barrier", "offset": 10.0}], **decay}
        return run_case(case_from_dict({"shell": shell, "resolution": {"degree": 4, "subdivisions": 1},
                                        "modes": {"count": 4}, "output": {"vtu": False}})).eigenvalues[:4]

    from shellmodes.errors import DoubtfulResultWarning

    with pytest.warns(DoubtfulResultWarning, match="decay lengths"):  # and the run says so
        assert lowest({})[1] > 10.0  # equal layers: the p level is pushed above the barrier
    auto = lowest({"decay": 1e-8})
    assert np.all(auto < 10.0)
    np.testing.assert_allclose(auto, [exact[0][0]] + [exact[1][0]] * 3, rtol=1e-6)


def test_layers_too_coarse_for_a_bound_state_are_reported():
    import warnings

    from shellmodes.errors import DoubtfulResultWarning

    shell = {"interfaces": [{"shape": "sphere", "radius": 1.0}], "outer": {"shape": "sphere", "radius": 60.0},
             "layers": [2, 2], "radial_degree": 8, "regions": [{"name": "well"}, {"name": "barrier", "offset": 10.0}]}
    data = {"shell": shell, "resolution": {"degree": 2, "subdivisions": 0}, "modes": {"count": 1},
            "output": {"vtu": False}}
    with pytest.warns(DoubtfulResultWarning, match="decay lengths"):
        spectrum = run_case(case_from_dict(data))
    assert any("shell.decay" in w for w in spectrum.info["warnings"])
    with warnings.catch_warnings():
        warnings.simplefilter("error", DoubtfulResultWarning)
        run_case(case_from_dict({**data, "shell": {**shell, "decay": 1e-8}}))


def test_explicit_layer_boundaries_place_the_layers():
    # layer_boundaries are fractions of each medium's thickness: r = 0.5 inside the core (0, 1) and
    # r = 1.25, 1.5 inside the shell (1, 2) must be radial element ends
    from shellmodes.fem.discretisation import build_discretisation

    data = {"shell": {"interfaces": [{"shape": "sphere", "radius": 1.0}], "outer": {"shape": "sphere", "radius": 2.0},
                      "layer_boundaries": [[0.5], [0.25, 0.5]], "radial_degree": 2},
            "resolution": {"degree": 1, "subdivisions": 0}}
    disc = build_discretisation(case_from_dict(data)).raw
    ends = np.unique(disc.tau[disc.radial_elements[:, [0, -1]]])
    np.testing.assert_allclose(ends, [0.0, 0.5, 1.0, 1.25, 1.5, 2.0])  # tau = medium + fraction; radii 0, 1, 2
    radii = np.linalg.norm(disc.nodes.reshape(disc.n_surface, disc.n_radial, 3)[0], axis=1)
    np.testing.assert_allclose(radii[disc.radial_elements[:, -1]], [0.5, 1.0, 1.25, 1.5, 2.0])
