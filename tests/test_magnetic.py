"""Magnetic fields and flux lines on surfaces: complex Hermitian modes, Zeeman and Aharonov-Bohm levels."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import constants as C
from scipy import integrate, special

from shellmodes import run_case
from shellmodes.case.fields import field_strength_lambda, flux_lambda
from shellmodes.case.schema import case_from_dict
from shellmodes.errors import CaseError
from shellmodes.io.outputs import mode_array_names, write_outputs
from shellmodes.studies.profile_reference import torus_profile_levels

UNITS = {"length": "nm", "energy": "meV"}


def _case(surface, fields, degree=3, subdivisions=3, count=9, **extra):
    return case_from_dict({"surface": surface, "units": UNITS, "fields": fields, "modes": {"count": count},
                           "resolution": {"degree": degree, "subdivisions": subdivisions}, **extra})


def _mean_sin2(l, m):
    """<l m| sin^2 theta |l m> by quadrature of |Y_l^m|^2 (scipy.special.sph_harm_y) over the sphere."""
    def integrand(theta):
        return np.abs(special.sph_harm_y(l, m, theta, 0.0)) ** 2 * np.sin(theta) ** 3 * 2 * np.pi
    return integrate.quad(integrand, 0, np.pi, epsabs=1e-14)[0]


def test_uniform_field_on_a_sphere_zeeman_and_diamagnetic_shifts():
    # first-order perturbation theory in b for H = (-i grad - a)^2, a = (b/2) n x x (Landau and Lifshitz,
    # Quantum Mechanics, sect. 111-112, section numbers recalled from memory):
    # lam = l(l+1)/R^2 - b m + (b^2 R^2 / 4) <sin^2 theta>_lm; the
    # paramagnetic term commutes with H0 on the sphere, the next correction is O(b^4)
    R = 10.0
    case = _case({"shape": "sphere", "radius": R}, {"magnetic": {"strength": 2.0, "direction": [0, 0, 1]}})
    spectrum = run_case(case)
    b = field_strength_lambda(case)
    assert b == pytest.approx(-C.e * 2.0 * C.nano**2 / C.hbar, rel=1e-14)  # q B L^2 / hbar, electron
    expected = sorted(l * (l + 1) / R**2 - b * m + b**2 * R**2 / 4 * _mean_sin2(l, m)
                      for l in range(3) for m in range(-l, l + 1))
    lam = spectrum.eigenvalues[:9]
    # FE error of these levels ~1e-9 (degree 3, 3 subdivisions); the second-order mixing of l and l +- 2 by
    # the diamagnetic term is ~8e-8 here ((b^2 R^2/4 * (2/3)/sqrt(5))^2 / (6/R^2) for l = 0, our estimate);
    # the diamagnetic term itself is ~1.5e-4, so an absolute 2e-7 tests it to ~1e-3 of its size
    np.testing.assert_allclose(lam, expected, rtol=0, atol=2e-7)
    table = spectrum.modes_table()
    # <L_z> of every mode is an integer m (axial symmetry), parent l by overlap is the sphere's l
    lz = np.array([row["mean_Lz"] for row in table[:9]])
    np.testing.assert_allclose(lz, np.rint(lz), atol=1e-6)
    assert sorted(np.rint(lz).astype(int).tolist()) == sorted(m for l in range(3) for m in range(-l, l + 1))
    assert [row["parent_l"] for row in table[:9]] == [0, 1, 1, 1, 2, 2, 2, 2, 2]
    # an electron's orbital moment is -(e / 2m) L, so E = (e / 2m) B L_z: the lowest l = 1 state has m = -1
    assert lz[1] == pytest.approx(-1.0, abs=1e-6) and lz[3] == pytest.approx(1.0, abs=1e-6)
    # paramagnetic part = -b <L_z> E0, diamagnetic part = (b^2 R^2 / 4) <sin^2> E0
    e0 = spectrum.info["units"]["energy_per_lambda"]
    for row, m in zip(table[:9], np.rint(lz).astype(int)):
        assert row["paramagnetic"] / e0 == pytest.approx(-b * m, abs=1e-9)
        l = row["parent_l"]
        # <|a_t|^2> in the field's mode: first-order mixing changes it by ~1e-3 relative (as above)
        assert row["diamagnetic"] / e0 == pytest.approx(b**2 * R**2 / 4 * _mean_sin2(l, m), rel=3e-3)
    # the linear Zeeman splitting of l = 1 in meV is mu_B B (scipy.constants Bohr magneton)
    l1 = np.sort(spectrum.energies[1:4])
    assert (l1[2] - l1[0]) / 2 == pytest.approx(C.physical_constants["Bohr magneton"][0] * 2.0 / (C.milli * C.e),
                                                rel=1e-3)  # the diamagnetic terms differ by ~1e-4 between m = +-1 and 0


def test_gauge_symmetric_and_landau_agree_and_converge_together():
    # the same field in two gauges: the levels differ only by discretisation error, which falls with h
    surface = {"shape": "spheroid", "equatorial_radius": 6.0, "polar_radius": 4.0}
    differences = []
    for sub in (1, 2):
        levels = [run_case(_case(surface, {"magnetic": {"strength": 5.0, "direction": [1, 0, 1], "gauge": g}},
                                 degree=2, subdivisions=sub, count=6)).eigenvalues[:6] for g in ("symmetric", "landau")]
        differences.append(np.max(np.abs(levels[0] - levels[1])) / np.max(np.abs(levels[0])))
    assert differences[1] < 1e-3
    assert differences[0] / differences[1] > 8  # degree 2: eigenvalue error O(h^4); at least O(h^3) here


def _torus_levels(flux, R=2.0, r=1.0, count=8, subdivisions=2, degree=3):
    case = _case({"shape": "torus", "major_radius": R, "minor_radius": r}, {"flux_line": {"flux": flux}},
                 degree=degree, subdivisions=subdivisions, count=count)
    return case, run_case(case)


def test_aharonov_bohm_torus_against_the_profile_equation():
    case, spectrum = _torus_levels(0.3)
    c = flux_lambda(case)
    assert c == pytest.approx(-0.3, rel=1e-14)  # charge -1 times 0.3 flux quanta h/e
    reference = np.sort(np.concatenate([torus_profile_levels(2.0, 1.0, m, 3, vector_potential=lambda rho: c / rho)
                                        for m in range(-5, 6)]))[:8]
    # degree 3, 2 subdivisions: measured FE errors ~1e-5 on levels below 2 (1/nm^2)
    np.testing.assert_allclose(spectrum.eigenvalues[:8], reference, atol=5e-5)


def test_aharonov_bohm_periodic_in_the_flux_quantum_and_symmetric_about_half():
    # Byers and Yang, Phys. Rev. Lett. 7, 46 (1961): the spectrum is periodic in Phi with period h/e
    # and (by time reversal) even in Phi, hence symmetric about Phi = h/2e
    levels = {flux: _torus_levels(flux, subdivisions=1)[1].eigenvalues[:8] for flux in (0.3, 1.3, 0.7, -0.3)}
    np.testing.assert_allclose(levels[0.3], levels[-0.3], rtol=1e-10)  # complex conjugation: exact in the FE too
    scale = np.max(levels[0.3])
    # periodicity is a gauge transformation exp(i phi), exact for the operator but not in the FE space:
    # differences of the discretisation's size (degree 3, 1 subdivision: ~1e-4)
    assert np.max(np.abs(levels[1.3] - levels[0.3])) / scale < 1e-3
    assert np.max(np.abs(levels[0.7] - levels[0.3])) / scale < 1e-3
    assert np.max(np.abs(levels[0.7] - levels[0.3])) < 0.05 * np.max(np.abs(levels[0.3] - _torus_levels(
        0.0, subdivisions=1)[1].eigenvalues[:8]))  # ... and far below the flux's own effect


def test_thin_ring_limit():
    # a thin torus (r / R = 0.05): the tube's ground state carries E = (m - q Phi / h)^2 <1/rho^2>,
    # <1/rho^2> = 1 / (R sqrt(R^2 - r^2)) for a uniform tube density (integral of rho^-1 over rho), so
    # E -> (m - Phi/Phi_0)^2 / R^2 as r / R -> 0; corrections O((r/R)^2) from the tube's deformation
    R, r, flux = 1.0, 0.05, 0.3
    case, spectrum = _torus_levels(flux, R=R, r=r, count=5, subdivisions=0, degree=4)
    c = flux_lambda(case)
    ring = np.sort([(m - c) ** 2 / (R * np.sqrt(R**2 - r**2)) for m in range(-4, 5)])[:5]
    np.testing.assert_allclose(spectrum.eigenvalues[:5], ring, rtol=5e-3)  # (r/R)^2 = 2.5e-3
    assert np.allclose(ring, np.sort([(m - c) ** 2 / R**2 for m in range(-4, 5)])[:5], rtol=2e-3)


def test_complex_mode_fields_in_the_vtu(tmp_path):
    import meshio

    case = _case({"shape": "torus", "major_radius": 2.0, "minor_radius": 1.0}, {"flux_line": {"flux": 0.25}},
                 degree=2, subdivisions=1, count=3)
    spectrum = run_case(case)
    assert np.iscomplexobj(spectrum.vectors)
    write_outputs(spectrum, tmp_path / "out")
    data = meshio.read(tmp_path / "out" / "modes.vtu").point_data
    names = mode_array_names(1, True)
    re, im, density, current = (data[names[k]] for k in ("re", "im", "density", "current"))
    np.testing.assert_allclose(density, re**2 + im**2, rtol=1e-12, atol=1e-14)
    assert names["phase"] in data and current.shape == (len(re), 3)
    # energies never in array names (they are in spectrum.json)
    assert not any("E=" in k for k in data)
    # the ground state of the flux-threaded ring carries a persistent current around z:
    # j = Im(conj(psi) grad psi) - a |psi|^2 = ((m - q Phi / h) / rho) |psi|^2 e_phi; the ground state has
    # m = 0 and q Phi / h = -0.25, so j . e_phi = 0.25 |psi|^2 / rho > 0 everywhere
    x = spectrum.nodes
    rho = np.hypot(x[:, 0], x[:, 1])
    ephi = np.column_stack([-x[:, 1], x[:, 0], np.zeros(len(x))]) / rho[:, None]
    j0 = np.sum(data[mode_array_names(0, True)["current"]] * ephi, axis=1)
    assert np.all(j0 > 0)
    # L2-projected nodal values of degree 2 on a coarse mesh: within 5 % of the closed form
    np.testing.assert_allclose(j0, 0.25 * data[mode_array_names(0, True)["density"]] / rho, rtol=0.05,
                               atol=0.05 * np.max(j0))


@pytest.mark.parametrize("surface, fields, key", [
    ({"shape": "sphere", "radius": 2.0}, {"flux_line": {"flux": 0.5}}, "fields.flux_line"),
    ({"shape": "sphere", "radius": 2.0}, {"magnetic": {"strength": 1.0}, "charge": 0.0}, "fields.charge"),
    ({"shape": "sphere", "radius": 2.0}, {"spin": {}}, "fields.spin"),
])
def test_bad_magnetic_input(surface, fields, key):
    with pytest.raises(CaseError, match=key):
        run_case(_case(surface, fields, degree=1, subdivisions=1, count=2))


def test_lz_of_x_plus_iy_is_plus_one():
    # L_z = -i d/dphi; x + i y = r sin(theta) e^{i phi} has m = +1 (sign convention check of the operator)
    from shellmodes.case.model import build_shape
    from shellmodes.fem.discretisation import discretise
    from shellmodes.fem.forms import assemble_surface
    from shellmodes.fem.magnetic import lz_matrix

    case = _case({"shape": "sphere", "radius": 1.0}, {"magnetic": {"strength": 1.0}}, degree=2, subdivisions=2)
    surface = discretise(case, build_shape(case))
    M = assemble_surface(surface).M
    u = surface.nodes[:, 0] + 1j * surface.nodes[:, 1]
    mean = np.vdot(u, lz_matrix(surface.basis, (0, 0, 1), surface=True) @ u) / np.vdot(u, M @ u)
    assert mean.real == pytest.approx(1.0, abs=1e-3) and abs(mean.imag) < 1e-12  # degree-2 interpolation error


def test_spin_splits_every_level_by_g_mu_b_b():
    # E = E_orbital + g mu_B B m_s (mu_B from scipy.constants); the orbital levels are those without spin
    fields = {"magnetic": {"strength": 3.0}}
    plain = run_case(_case({"shape": "sphere", "radius": 8.0}, fields, degree=2, subdivisions=2, count=4))
    spin = run_case(_case({"shape": "sphere", "radius": 8.0}, {**fields, "spin": {"g_factor": -0.44}},
                          degree=2, subdivisions=2, count=4))
    g_mu_b_b = -0.44 * C.physical_constants["Bohr magneton"][0] * 3.0 / (C.milli * C.e)  # meV
    table = spin.modes_table()
    for row in table:
        orbital = plain.energies[row["orbital_mode"]]
        assert row["energy"] == pytest.approx(orbital + g_mu_b_b * row["m_s"], rel=1e-12)
    # complete: every orbital level below the cut appears with both spins
    assert {(r["orbital_mode"], r["m_s"]) for r in table} >= {(0, -0.5), (0, 0.5)}
    assert np.all(np.diff(spin.energies) >= 0)


def test_magnetic_field_on_prisms_is_refused_not_ignored():
    case = case_from_dict({"shell": {"inner": {"shape": "sphere", "radius": 1.0},
                                     "outer": {"shape": "sphere", "radius": 2.0}, "cells": "prisms"},
                           "units": UNITS, "fields": {"magnetic": {"strength": 1.0}}, "modes": {"count": 2}})
    with pytest.raises(CaseError, match="fields.magnetic: .*tetrahedra only"):
        run_case(case)


def test_flux_sweep_tracks_keep_their_angular_momentum_through_crossings(tmp_path):
    # L_z commutes with the Hamiltonian of a flux-threaded torus, so each tracked level keeps its m while
    # E ~ (m - q Phi / h)^2 levels cross; the tracker must follow complex modes through the crossings
    # at q Phi / h = -1/2 (between the steps 0.3 and 0.7)
    from shellmodes.studies.sweep import load_step, run_sweep

    case = case_from_dict({"surface": {"shape": "torus", "major_radius": 2.0, "minor_radius": 1.0},
                           "units": UNITS, "resolution": {"degree": 2, "subdivisions": 1}, "modes": {"count": 5},
                           "fields": {"flux_line": {"flux": 0.1}},
                           "sweep": {"parameters": [{"key": "fields.flux_line.flux", "values": [0.1, 0.3, 0.7, 0.9]}],
                                     "workers": 1}})
    result = run_sweep(case, tmp_path)
    lz = {}
    for step in result.steps:
        table = load_step(tmp_path / "steps" / step.folder_name)[0]["modes"]
        for row in result.rows:
            if row["step"] == step.index:
                lz.setdefault(row["track"], []).append(table[row["mode"]]["mean_Lz"])
    whole = {t: v for t, v in lz.items() if len(v) == 4}
    assert len(whole) >= 3
    for values in whole.values():
        np.testing.assert_allclose(values, np.rint(values[0]), atol=1e-3)  # one m per track
    # the m = 0 level (lowest at the start) rises through the crossing instead of bouncing off it
    ground = next(t for t, v in whole.items() if np.rint(v[0]) == 0)
    energies = result.track_energies(ground)
    assert np.all(np.diff(energies) > 0)


def test_uniform_field_in_a_ball_zeeman_and_diamagnetic_shifts():
    # hard-wall ball of radius R: ground state sin(pi r/R)/r, first-order diamagnetic shift
    # (b^2/4) <x^2 + y^2> = (b^2/4)(2/3)<r^2> (Landau and Lifshitz QM sect. 112, recalled from memory),
    # <r^2> by quadrature of the radial density (scipy.integrate.quad); the 1p level splits linearly by
    # -b m, i.e. mu_B B per step
    R, B = 10.0, 1.0
    def case(strength):
        return case_from_dict({"shell": {"outer": {"shape": "sphere", "radius": R}, "layers": 4,
                                         "cells": "tetrahedra"},
                               "units": UNITS, "resolution": {"degree": 2, "subdivisions": 2},
                               "modes": {"count": 4}, "fields": {"magnetic": {"strength": strength}}})
    field, free = run_case(case(B)), run_case(case(0.0))
    assert np.iscomplexobj(field.vectors)
    e0 = field.info["units"]["energy_per_lambda"]
    b = field_strength_lambda(case(B))
    density = integrate.quad(lambda r: np.sin(np.pi * r / R) ** 2, 0, R)[0]
    mean_r2 = integrate.quad(lambda r: np.sin(np.pi * r / R) ** 2 * r**2, 0, R)[0] / density
    expected = b**2 / 4 * (2 / 3) * mean_r2 * e0
    shift = field.energies[0] - free.energies[0]
    # same mesh for both runs; P2 tetrahedra at this size resolve <r^2> to ~1e-3, second order is ~1e-6
    assert shift / expected == pytest.approx(1.0, rel=1e-2)
    p = np.sort(field.energies[1:4])
    mu_b_b = C.physical_constants["Bohr magneton"][0] * B / (C.milli * C.e)
    assert (p[2] - p[0]) / 2 / mu_b_b == pytest.approx(1.0, rel=2e-3)  # diamagnetic m-dependence ~1e-3
    lz = sorted(round(r["mean_Lz"]) for r in field.modes_table()[1:4])
    assert lz == [-1, 0, 1]


def test_pictures_of_complex_modes_show_density_and_current(tmp_path):
    # output.pictures on a flux-threaded ring: one render per multiplet (density colour, current arrows)
    pytest.importorskip("pyvista")
    pytest.importorskip("matplotlib")
    case = _case({"shape": "torus", "major_radius": 2.0, "minor_radius": 0.7}, {"flux_line": {"flux": 0.25}},
                 degree=2, subdivisions=1, count=3, output={"pictures": True, "picture_multiplets": 2})
    write_outputs(run_case(case), tmp_path / "out")
    for name in ("levels.png", "mode-0000.png", "mode-0001.png"):
        data = (tmp_path / "out" / name).read_bytes()
        assert data[:8] == b"\x89PNG\r\n\x1a\n" and len(data) > 10_000  # a real picture, not an empty canvas


def test_memory_guard_counts_complex_modes_and_the_reference_solve():
    # complex Hermitian matrices, factor and modes take twice the bytes of real ones (16 against 8 per value),
    # and the labels need a field-free solve of the same size as the real one
    from shellmodes.eigen.resources import estimate_case

    base = {"surface": {"shape": "sphere"}, "units": UNITS, "resolution": {"degree": 4, "subdivisions": 3},
            "modes": {"count": 100}}
    real = estimate_case(case_from_dict(base)).parts
    field = estimate_case(case_from_dict({**base, "fields": {"magnetic": {"strength": 1.0}}})).parts
    for part in ("matrices", "factor", "eigen-iteration", "modes written"):
        assert field[part] == pytest.approx(2 * real[part])
    assert field["field-free reference"] == pytest.approx(real["eigen-iteration"])
