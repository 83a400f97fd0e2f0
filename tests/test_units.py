"""Unit conversions against scipy.constants (CODATA values shipped with scipy)."""

import numpy as np
import pytest
from scipy import constants as C

from shellmodes.case import units
from shellmodes.case.model import energy_scale
from shellmodes.case.schema import case_from_dict


@pytest.mark.parametrize("unit,joules", [
    ("J", 1.0),
    ("eV", C.physical_constants["electron volt"][0]),
    ("meV", 1e-3 * C.physical_constants["electron volt"][0]),
    ("hartree", C.physical_constants["Hartree energy"][0]),
    # E / (h c) in cm^-1: scipy's "joule-inverse meter relationship" / 100
    ("cm-1", 1.0 / (C.physical_constants["joule-inverse meter relationship"][0] / 100.0)),
    ("K", 1.0 / C.physical_constants["joule-kelvin relationship"][0]),
    ("Hz", 1.0 / C.physical_constants["joule-hertz relationship"][0]),
])
def test_energy_units_against_codata_relationships(unit, joules):
    assert units.to_joule(1.0, unit) == pytest.approx(joules, rel=1e-12)
    assert units.joule_to(joules, unit) == pytest.approx(1.0, rel=1e-12)


def test_electron_volt_relationships():
    # 1 eV in K and in cm^-1 (scipy.constants physical_constants relationships)
    ev = units.to_joule(1.0, "eV")
    assert units.joule_to(ev, "K") == pytest.approx(C.physical_constants["electron volt-kelvin relationship"][0],
                                                    rel=1e-10)
    assert units.joule_to(ev, "cm-1") == pytest.approx(
        C.physical_constants["electron volt-inverse meter relationship"][0] / 100, rel=1e-10)


@pytest.mark.parametrize("unit,metres", [("m", 1.0), ("um", 1e-6), ("nm", 1e-9), ("angstrom", 1e-10),
                                         ("bohr", C.physical_constants["Bohr radius"][0])])
def test_length_units(unit, metres):
    assert units.LENGTH_UNITS[unit] == pytest.approx(metres, rel=1e-15)


@pytest.mark.parametrize("unit,kg", [("electron", C.m_e), ("amu", C.physical_constants["atomic mass constant"][0]),
                                     ("proton", C.m_p), ("kg", 1.0)])
def test_mass_units(unit, kg):
    assert units.MASS_UNITS[unit] == pytest.approx(kg, rel=1e-15)


def test_kinetic_scale_electron_nm():
    # hbar^2 / (2 m_e (1 nm)^2) = 38.0998 meV (recalled from memory; here recomputed from scipy.constants)
    e0 = units.kinetic_scale_joule(C.m_e, 1e-9) / (1e-3 * C.eV)
    assert e0 == pytest.approx(C.hbar**2 / (2 * C.m_e * 1e-18) / (1e-3 * C.eV), rel=1e-14)
    assert e0 == pytest.approx(38.0998, rel=1e-4)


def test_rotor_constant_against_definition():
    inertia = 2.0 * units.INERTIA_UNITS["amu angstrom2"]
    expected = C.h / (8 * np.pi**2 * C.c * inertia) / 100.0  # B = h/(8 pi^2 c I), in cm^-1
    assert units.rotational_constant_cm(inertia) == pytest.approx(expected, rel=1e-14)
    # H2: I ~ 4.6e-48 kg m^2 gives B ~ 60.8 cm^-1 (from memory, loose tolerance)
    assert units.rotational_constant_cm(4.6e-48) == pytest.approx(60.8, rel=0.02)


def test_rotor_energy_scale_is_B():
    case = case_from_dict({"surface": {"shape": "sphere"}, "units": {"length": "1", "energy": "cm-1"},
                           "particle": {"moment_of_inertia": 2.0, "inertia_unit": "amu angstrom2"}})
    e0, origin = energy_scale(case)
    # E = hbar^2 l(l+1) / (2 I) = B l(l+1) when E is expressed in cm^-1
    assert e0 == pytest.approx(units.rotational_constant_cm(2.0 * units.INERTIA_UNITS["amu angstrom2"]), rel=1e-12)
    assert "rotor" in origin


def test_effective_mass_scales_energy():
    base = {"surface": {"shape": "sphere"}, "units": {"length": "nm", "energy": "meV"}}
    e1, _ = energy_scale(case_from_dict(base))
    e2, _ = energy_scale(case_from_dict({**base, "particle": {"effective_mass": 0.067}}))
    assert e2 == pytest.approx(e1 / 0.067, rel=1e-14)  # E ~ 1/m
