"""Uniform electric fields: a polar rigid rotor (Stark effect) and a charge on a sphere or in a shell."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import constants as C

from shellmodes import run_case
from shellmodes.case.fields import DIPOLE_UNITS, ELECTRIC_UNITS
from shellmodes.case.schema import case_from_dict
from shellmodes.case.units import INERTIA_UNITS, rotational_constant_cm
from shellmodes.errors import CaseError


def _rotor(strength, direction=(0.0, 0.0, 1.0)):
    return case_from_dict({"surface": {"shape": "sphere"}, "resolution": {"degree": 3, "subdivisions": 3},
                           "particle": {"moment_of_inertia": 10.0}, "units": {"energy": "cm-1"},
                           "modes": {"count": 4},
                           "fields": {"electric": {"strength": strength, "unit": "kV/cm", "direction": direction},
                                      "dipole_moment": 1.5}})


def test_rigid_rotor_second_order_stark_shifts():
    # Townes and Schawlow, Microwave Spectroscopy (Dover 1975), ch. 10 (formula as quoted in issue 15, which
    # agrees with our recollection; equation number not checked):
    # E2(J, M) = (mu F)^2 / (2B) [J(J+1) - 3M^2] / [J(J+1)(2J-1)(2J+3)], and -(mu F)^2 / (6B) for J = 0
    B = rotational_constant_cm(10.0 * INERTIA_UNITS["amu angstrom2"])
    mu = 1.5 * DIPOLE_UNITS["debye"]
    x = 0.05  # mu F / B: fourth-order terms are ~x^2 = 0.25 % of the second-order shifts
    field = x * B * C.h * C.c / C.centi / mu / ELECTRIC_UNITS["kV/cm"]
    free = run_case(_rotor(0.0)).energies[:4]
    tilted = run_case(_rotor(field, direction=(1.0, -2.0, 0.5))).energies[:4]  # the direction must not matter
    mu_f = x * B
    J1 = mu_f**2 / (2 * B) / (1 * 2 * 1 * 5)
    expected = np.array([-(mu_f**2) / (6 * B), J1 * (2 - 3), J1 * (2 - 3), J1 * 2])
    shifts = tilted - free  # same mesh: the discretisation error of the free levels cancels
    np.testing.assert_allclose(shifts, expected, rtol=1e-2)  # 1 %: fourth-order terms (x^2) and FE error


def test_charge_on_a_sphere_l0_polarisability():
    # second-order perturbation theory: only |1 0> couples to |0 0> through z = R cos(theta),
    # <1 0|cos|0 0>^2 = 1/3 (Sakurai, Modern Quantum Mechanics, sect. 5.1 for the method), so
    # dE = -(q F R)^2 / (3 * 2 E_R) with E_R = hbar^2 / (2 m R^2), i.e. alpha = 2 m q^2 R^4 / (3 hbar^2)
    R = 5.0
    def case(strength):
        return case_from_dict({"surface": {"shape": "sphere", "radius": R},
                               "resolution": {"degree": 3, "subdivisions": 3},
                               "units": {"length": "nm", "energy": "meV"}, "modes": {"count": 1},
                               "fields": {"electric": {"strength": strength, "unit": "kV/cm"}}})
    F = 0.5  # kV/cm: q F R = 0.25 meV against E_R = 1.52 meV; fourth order measured 0.16 % of the shift
    shift = (run_case(case(F)).energies[0] - run_case(case(0.0)).energies[0]) * C.milli * C.e
    alpha = -2 * shift / (F * ELECTRIC_UNITS["kV/cm"]) ** 2
    expected = 2 * C.m_e * C.e**2 * (R * C.nano) ** 4 / (3 * C.hbar**2)
    # as a ratio: pytest.approx's default absolute tolerance 1e-12 would swamp values of 1e-33
    assert alpha / expected == pytest.approx(1.0, rel=5e-3)  # fourth order 0.16 %, FE error far smaller


def test_field_in_a_shell_lowers_the_ground_level_quadratically():
    # a hard-wall spherical shell: the ground level is even in F (parity), so the shift is ~F^2
    def case(strength):
        return case_from_dict({"shell": {"inner": {"shape": "sphere", "radius": 4.0},
                                         "outer": {"shape": "sphere", "radius": 5.0},
                                         "cells": "prisms", "layers": 1, "radial_degree": 4},
                               "resolution": {"degree": 2, "subdivisions": 2},
                               "units": {"length": "nm", "energy": "meV"}, "modes": {"count": 1},
                               "fields": {"electric": {"strength": strength, "unit": "kV/cm"}}})
    levels = [run_case(case(F)).energies[0] for F in (0.0, 0.25, 0.5)]
    first, second = levels[1] - levels[0], levels[2] - levels[0]
    assert first < 0
    assert second / first == pytest.approx(4.0, rel=5e-3)  # fourth order: ~0.2 % at 0.5 kV/cm on the 5 nm sphere above


@pytest.mark.parametrize("fields, key", [
    ({"electric": {"strength": 1.0}, "charge": 0.0}, "fields.charge"),
    ({"dipole_moment": 1.0}, "fields.dipole_moment"),
])
def test_bad_field_input(fields, key):
    case = case_from_dict({"surface": {"shape": "sphere"}, "units": {"length": "nm", "energy": "meV"},
                           "fields": fields})
    with pytest.raises(CaseError, match=key):
        run_case(case)


def test_rotor_field_without_dipole_is_refused():
    case = case_from_dict({"surface": {"shape": "sphere"}, "particle": {"moment_of_inertia": 10.0},
                           "units": {"energy": "cm-1"}, "fields": {"electric": {"strength": 1.0}}})
    with pytest.raises(CaseError, match="fields.electric: .*dipole_moment"):
        run_case(case)
