"""External fields and the thin-layer potential: the ``[fields]`` case table and its physics glue.

Keys (our own names; every quantity with a unit key, constants from
``scipy.constants``):

- ``curvature_potential``: add the thin-layer (confinement) potential of a
  particle squeezed onto the surface, V_g = -(hbar^2 / 2m) (H^2 - K)
  (da Costa, Phys. Rev. A 23, 1982 (1981)); see :mod:`shellmodes.fem.thin_layer`.
- ``charge``: the particle's charge in units of the elementary charge e
  (default -1, an electron).
- ``electric``: a uniform field (strength, unit, direction) acting on the
  charge, V = -q F . x; for a rigid rotor on its ``dipole_moment``,
  V = -mu F cos(angle to the field).
- ``magnetic`` and ``flux_line``: see :mod:`shellmodes.fem.magnetic`.

In lambda units (energies over E0 = hbar^2 / (2 m L^2)) every potential is
V / E0 with lengths in the case's length unit L.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Annotated, Literal

import numpy as np
from pydantic import Field, model_validator
from scipy import constants as C

from shellmodes.case.tables import Table
from shellmodes.case.units import ENERGY_UNITS, LENGTH_UNITS
from shellmodes.errors import CaseError

__all__ = ["Fields", "ElectricField", "MagneticField", "FluxLine", "Spin", "ELECTRIC_UNITS", "MAGNETIC_UNITS",
           "FLUX_UNITS", "DIPOLE_UNITS", "field_potential", "needs_complex", "breaks_radial_symmetry",
           "check_fields", "energy_joule_per_lambda", "add_potentials", "FieldTerms", "field_terms",
           "field_strength_lambda", "flux_lambda"]

#: V/m per unit
ELECTRIC_UNITS = {"V/m": 1.0, "kV/m": C.kilo, "V/cm": 1.0 / C.centi, "kV/cm": C.kilo / C.centi,
                  "MV/m": C.mega, "V/nm": 1.0 / C.nano}
#: tesla per unit (1 G = 1e-4 T)
MAGNETIC_UNITS = {"T": 1.0, "mT": C.milli, "G": 1e-4}
#: webers per unit; "h/e" is the flux quantum h / e of a single charge e
FLUX_UNITS = {"h/e": C.h / C.e, "Wb": 1.0}
#: coulomb metres per unit; 1 debye = 1e-21 / c C m (definition: 1e-18 statC cm)
DIPOLE_UNITS = {"debye": 1e-21 / C.c, "e angstrom": C.e * C.angstrom,
                "e bohr": C.e * C.physical_constants["Bohr radius"][0], "C m": 1.0}

Direction = tuple[float, float, float]


#: largest magnitude of any field amount in its unit (strengths, fluxes, charges, dipoles, g factors): keeps
#: every derived quantity finite; common practice, like the length range of the case schema
AMOUNT_LIMIT = 1e12
Amount = Annotated[float, Field(ge=-AMOUNT_LIMIT, le=AMOUNT_LIMIT)]
Strength = Annotated[float, Field(ge=0, le=AMOUNT_LIMIT)]
_Table = Table


def _unit_direction(direction) -> Direction:
    d = np.asarray(direction, dtype=float)
    norm = float(np.linalg.norm(d))
    if norm == 0.0:
        raise ValueError("direction (0, 0, 0) has no direction; give a nonzero vector")
    return tuple(float(v) for v in d / norm)


class _Directed(_Table):
    direction: Direction = Field((0.0, 0.0, 1.0), description="direction of the field (normalised)")

    @model_validator(mode="after")
    def _direction(self):
        _unit_direction(self.direction)
        return self

    @property
    def unit_vector(self) -> np.ndarray:
        return np.array(_unit_direction(self.direction))


class ElectricField(_Directed):
    """A uniform electric field."""

    strength: Strength = Field(description="field strength in unit")
    unit: Literal[tuple(ELECTRIC_UNITS)] = Field("V/m", description="unit of strength")

    @property
    def volts_per_metre(self) -> float:
        return self.strength * ELECTRIC_UNITS[self.unit]


class MagneticField(_Directed):
    """A uniform magnetic field."""

    strength: Strength = Field(description="flux density in unit")
    unit: Literal[tuple(MAGNETIC_UNITS)] = Field("T", description="unit of strength")
    gauge: Literal["symmetric", "landau"] = Field(
        "symmetric", description="vector potential: symmetric A = B x r / 2, or landau A = (B . e3)(r . e1) e2 "
                                 "in a frame (e1, e2, e3) with e3 along the field")

    @property
    def tesla(self) -> float:
        return self.strength * MAGNETIC_UNITS[self.unit]


class FluxLine(_Table):
    """An Aharonov-Bohm flux line along the z axis (no field on the surface, only a vector potential)."""

    flux: Amount = Field(description="enclosed flux in unit (may be negative)")
    unit: Literal[tuple(FLUX_UNITS)] = Field("h/e", description="flux quanta h/e, or webers")

    @property
    def webers(self) -> float:
        return self.flux * FLUX_UNITS[self.unit]


class Spin(_Table):
    """Spin 1/2 with a g factor: each orbital level splits into E + g mu_B B m_s, m_s = -1/2, +1/2."""

    g_factor: Amount = Field(abs(C.physical_constants["electron g factor"][0]),
                            description="g in E = g mu_B B m_s (default: the free electron's |g|; "
                                        "give a band's effective g with its sign)")


class Fields(_Table):
    """Fields acting on the particle, and the thin-layer potential of a surface."""

    curvature_potential: bool = Field(False, description="surfaces: add the thin-layer potential "
                                      "-(hbar^2/2m)(H^2 - K) of a particle confined to the surface")
    charge: Amount = Field(-1.0, description="particle charge in units of e (default -1, an electron)")
    electric: ElectricField | None = Field(None, description="a uniform electric field")
    dipole_moment: Annotated[float, Field(gt=0, le=AMOUNT_LIMIT)] | None = Field(
        None, description="rigid rotor: electric dipole moment in dipole_unit")
    dipole_unit: Literal[tuple(DIPOLE_UNITS)] = Field("debye", description="unit of dipole_moment")
    magnetic: MagneticField | None = Field(None, description="a uniform magnetic field")
    flux_line: FluxLine | None = Field(None, description="an Aharonov-Bohm flux line along the z axis")
    spin: Spin | None = Field(None, description="spin 1/2: split each level by g mu_B B m_s (needs magnetic)")

    @property
    def charge_coulomb(self) -> float:
        return self.charge * C.e


def energy_joule_per_lambda(case, e0) -> float:
    """E0 in joules (the energy of lambda = 1 per length unit squared)."""
    return float(e0 * ENERGY_UNITS[case.units.energy])


def _rotor(case) -> bool:
    return case.particle.moment_of_inertia is not None


def check_fields(case) -> None:
    """Refuse field settings that do not fit the case (one-line :class:`CaseError`)."""
    f = case.fields
    if f is None:
        return
    src = case.source
    physical = case.units.energy != "1"
    rotor = _rotor(case)
    if f.curvature_potential and case.surface is None:
        raise CaseError("value True: the thin-layer potential belongs to a surface; a shell has walls instead",
                        src, "fields.curvature_potential")
    if f.electric is not None:
        if not physical:
            raise CaseError("a field in physical units needs a physical units.energy (and units.length)", src,
                            "fields.electric")
        if rotor and f.dipole_moment is None:
            raise CaseError("a rigid rotor in an electric field needs fields.dipole_moment (in dipole_unit)", src,
                            "fields.electric")
        if not rotor and f.charge == 0:
            raise CaseError("value 0.0: an electric field acts on a charge; give a nonzero charge (units of e)",
                            src, "fields.charge")
    if f.dipole_moment is not None and not rotor:
        raise CaseError("a dipole moment belongs to a rigid rotor (particle.moment_of_inertia); a charged "
                        "particle feels the field through fields.charge", src, "fields.dipole_moment")
    if f.magnetic is not None or f.flux_line is not None:
        key = "fields.magnetic" if f.magnetic is not None else "fields.flux_line"
        if rotor:
            raise CaseError("a rigid rotor has no charge for a magnetic field to act on", src, key)
        if case.shell is not None and (f.flux_line is not None or case.shell.cells == "prisms"):
            raise CaseError("shells take a uniform magnetic field on tetrahedra only in this version (no flux "
                            "line, no prisms; set shell.cells = 'tetrahedra'); refused rather than solved without "
                            "the field", src, key)
        if f.charge == 0:
            raise CaseError("value 0.0: a magnetic field or flux acts on a charge; give a nonzero charge "
                            "(units of e)", src, "fields.charge")
        if not physical:
            raise CaseError("a field in physical units needs a physical units.energy (and units.length)", src, key)
    if f.spin is not None and f.magnetic is None:
        raise CaseError("spin splitting needs fields.magnetic", src, "fields.spin")


def needs_complex(case) -> bool:
    """Whether the case's Hamiltonian has a vector potential (complex Hermitian matrices)."""
    f = case.fields
    return f is not None and (f.magnetic is not None and f.magnetic.strength > 0 or f.flux_line is not None
                              and f.flux_line.flux != 0)


def breaks_radial_symmetry(case) -> bool:
    """Whether the fields add a potential that depends on more than r (shells then cannot separate)."""
    f = case.fields
    return f is not None and ((f.electric is not None and f.electric.strength > 0) or needs_complex(case))


def add_potentials(*potentials):
    """The sum of potentials given as functions of keyword coordinates (None entries skipped), or None."""
    given = [p for p in potentials if p is not None]
    if len(given) <= 1:
        return given[0] if given else None

    def total(**kw):
        return sum(p(**kw) for p in given)

    return total


def field_potential(case, e0):
    """The electric field's potential as a function of x, y, z (lambda units), or None.

    A charge q in a uniform field F: V = -q F . x.  A rigid rotor with dipole
    mu: V = -mu F . x / |x| (the rotor's axis is the direction of x).
    """
    f = case.fields
    if f is None or f.electric is None or f.electric.strength == 0:
        return None
    d = f.electric.unit_vector
    e0_joule = energy_joule_per_lambda(case, e0)
    field = f.electric.volts_per_metre
    if _rotor(case):
        mu = f.dipole_moment * DIPOLE_UNITS[f.dipole_unit]
        amplitude = mu * field / e0_joule

        def rotor(x, y, z, r, **_):
            return -amplitude * (d[0] * x + d[1] * y + d[2] * z) / r

        return rotor
    length = LENGTH_UNITS[case.units.length]
    amplitude = f.charge_coulomb * field * length / e0_joule

    def charge(x, y, z, **_):
        return -amplitude * (d[0] * x + d[1] * y + d[2] * z)

    return charge


def field_strength_lambda(case) -> float:
    """b = q B L^2 / hbar: the uniform field in lambda units (0 without one)."""
    f = case.fields
    if f is None or f.magnetic is None:
        return 0.0
    return f.charge_coulomb * f.magnetic.tesla * LENGTH_UNITS[case.units.length] ** 2 / C.hbar


def flux_lambda(case) -> float:
    """q Phi / h: the flux line's strength in lambda units (0 without one)."""
    f = case.fields
    if f is None or f.flux_line is None:
        return 0.0
    return f.charge_coulomb * f.flux_line.webers / C.h


@dataclass(frozen=True)
class FieldTerms:
    """What the fields add to a discretised problem beyond a scalar potential, in lambda units.

    ``thin_layer``: add v_g = -(H^2 - K) (surfaces); ``b``, ``axis``, ``gauge``: a uniform field
    (b = q B L^2 / hbar along the unit vector ``axis``); ``flux``: q Phi / h of a flux line along z;
    ``spin_shift``: g mu_B B / E0 per unit m_s, or None without spin.  The discretisations add these
    in ``assemble(media, potential, terms)`` (:mod:`shellmodes.fem.fields`).
    """

    thin_layer: bool = False
    b: float = 0.0
    axis: tuple = (0.0, 0.0, 1.0)
    gauge: str = "symmetric"
    flux: float = 0.0
    spin_shift: float | None = None
    #: a shell whose walls are all spheres about the origin (L_z about any axis is a symmetry)
    spherical_walls: bool = False
    #: the record written to spectrum.json as ``fields`` (strengths in SI units)
    record: dict | None = None

    @property
    def complex(self) -> bool:
        """A vector potential: the matrices are complex Hermitian."""
        return bool(self.b or self.flux)

    @property
    def axis_vector(self) -> np.ndarray:
        return np.asarray(self.axis, dtype=float)


def field_terms(case, e0) -> FieldTerms | None:
    """The case's thin-layer and vector-potential terms (``e0``: E0 in units.energy, or None), or None."""
    f = case.fields
    if f is None or not (f.curvature_potential or needs_complex(case)):
        return None
    b, flux = field_strength_lambda(case), flux_lambda(case)
    axis = tuple(f.magnetic.unit_vector) if f.magnetic is not None else (0.0, 0.0, 1.0)
    spin = None
    if f.spin is not None and b:
        spin = (f.spin.g_factor * C.physical_constants["Bohr magneton"][0] * f.magnetic.tesla
                / energy_joule_per_lambda(case, e0))
    record = {"charge_e": f.charge, "vector_potential_lambda": {"uniform_b": b, "flux_q_over_h": flux}}
    if f.magnetic is not None:
        record["magnetic"] = {"tesla": f.magnetic.tesla, "direction": list(axis), "gauge": f.magnetic.gauge}
    if f.flux_line is not None:
        record["flux_line"] = {"webers": f.flux_line.webers, "flux_quanta_h_over_e": f.flux_line.webers / (C.h / C.e)}
    if spin is not None:
        record["spin"] = {"g_factor": f.spin.g_factor, "shift_per_m_s": spin * e0}
    spherical = False
    if case.shell is not None and case.shell.file is None:
        walls = [w for w in (case.shell.inner, *case.shell.interfaces, case.shell.outer) if w is not None]
        spherical = all(w.shape == "sphere" or (w.shape == "deformed_sphere" and not w.deformation) for w in walls)
    return FieldTerms(thin_layer=bool(f.curvature_potential), b=b, axis=axis, spherical_walls=spherical,
                      gauge=f.magnetic.gauge if f.magnetic is not None else "symmetric", flux=flux,
                      spin_shift=spin, record=record)
