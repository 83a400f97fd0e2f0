"""Units: lengths, masses, moments of inertia and energies, all from scipy.constants.

Energies are E = (hbar^2 / 2m) lambda with lambda in 1/length^2 (surface or
volume eigenvalue).  A rigid rotor of moment of inertia I on a sphere of
radius R has m R^2 = I, so E = hbar^2 lambda R^2 / (2 I).  Each table maps a
unit name to its size in SI units; conversions are plain multiplications.
"""

from __future__ import annotations

import numpy as np
from scipy import constants as C

__all__ = [
    "LENGTH_UNITS",
    "MASS_UNITS",
    "INERTIA_UNITS",
    "ENERGY_UNITS",
    "joule_to",
    "to_joule",
    "kinetic_scale_joule",
    "rotational_constant_cm",
]

#: metres per unit; "1" is dimensionless (energies then only as lambda)
LENGTH_UNITS: dict[str, float | None] = {
    "m": 1.0,
    "um": C.micro,
    "nm": C.nano,
    "angstrom": C.angstrom,
    "bohr": C.physical_constants["Bohr radius"][0],
    "1": None,
}

#: kilograms per unit
MASS_UNITS: dict[str, float] = {
    "electron": C.m_e,
    "amu": C.atomic_mass,
    "proton": C.m_p,
    "kg": 1.0,
}

#: kg m^2 per unit
INERTIA_UNITS: dict[str, float] = {
    "kg m2": 1.0,
    "amu angstrom2": C.atomic_mass * C.angstrom**2,
    "electron bohr2": C.m_e * C.physical_constants["Bohr radius"][0] ** 2,
}

#: joules per unit ("K" means E/k_B, "Hz" means E/h, "cm-1" means E/(h c) per cm);
#: "1" is the dimensionless eigenvalue lambda itself.
ENERGY_UNITS: dict[str, float | None] = {
    "J": 1.0,
    "eV": C.electron_volt,
    "meV": C.milli * C.electron_volt,
    "ueV": C.micro * C.electron_volt,
    "hartree": C.physical_constants["Hartree energy"][0],
    "cm-1": C.h * C.c / C.centi,
    "K": C.k,
    "Hz": C.h,
    "GHz": C.h * C.giga,
    "THz": C.h * C.tera,
    "1": None,
}


def joule_to(energy_joule, unit: str):
    """Convert energies in joules to ``unit`` (a key of :data:`ENERGY_UNITS`, not "1")."""
    scale = ENERGY_UNITS[unit]
    if scale is None:
        raise ValueError("the dimensionless unit '1' has no joule equivalent")
    return np.asarray(energy_joule) / scale


def to_joule(value, unit: str):
    """Convert energies in ``unit`` to joules."""
    scale = ENERGY_UNITS[unit]
    if scale is None:
        raise ValueError("the dimensionless unit '1' has no joule equivalent")
    return np.asarray(value) * scale


def kinetic_scale_joule(mass_kg: float, length_m: float) -> float:
    """hbar^2 / (2 m L^2) in joules: the energy of lambda = 1 / L^2.

    Examples
    --------
    >>> round(kinetic_scale_joule(9.1093837e-31, 1e-9) / 1.602176634e-22, 2)  # meV
    38.1
    """
    return C.hbar**2 / (2.0 * mass_kg * length_m**2)


def rotational_constant_cm(inertia_kg_m2: float) -> float:
    """Rotational constant B = h / (8 pi^2 c I) in cm^-1 (Herzberg, Spectra of Diatomic Molecules)."""
    return C.h / (8.0 * np.pi**2 * C.c * inertia_kg_m2) * C.centi


def without_noise(value: float, series=None) -> float:
    """A value of a series without float noise: 12 significant digits of the series' largest value.

    0.30000000000000004 -> 0.3, and 1.3877787807814457e-17 in a series reaching 0.1 -> 0.0.
    """
    scale = max((abs(float(v)) for v in (series if series is not None else [value])), default=0.0)
    if scale == 0.0 or not np.isfinite(scale):
        return float(value)
    digits = 11 - int(np.floor(np.log10(scale)))
    return float(f"{round(float(value), digits):.12g}") + 0.0  # + 0.0: no -0.0
