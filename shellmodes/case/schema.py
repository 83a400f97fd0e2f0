"""Case files: TOML text validated into immutable objects.

The schema is a set of pydantic models (one per TOML table) with unknown
keys forbidden, NaN/inf refused and every default in one place.  Errors come
out as :class:`~shellmodes.errors.CaseError` naming the file, the dotted key,
the offending value and what is allowed (nearest valid key for typos).
``case_schema()`` returns the JSON Schema editors use for completion.
"""

from __future__ import annotations

import difflib
import math
import sys
from pathlib import Path
from typing import Annotated, Any, Literal

from pydantic import BaseModel, Field, NonNegativeInt, ValidationError, field_validator, model_validator

from shellmodes.case.aliases import key_as_written, upgrade, warn_renamed
from shellmodes.case.expression import ExpressionError, compile_expression
from shellmodes.case.fields import Fields
from shellmodes.case.tables import Table
from shellmodes.case.units import ENERGY_UNITS, INERTIA_UNITS, LENGTH_UNITS, MASS_UNITS, without_noise
from shellmodes.errors import CaseError
from shellmodes.limits import (
    DEFAULT_MODE_COUNT,
    MAX_MODE_COUNT,
    MAX_RADIAL_DEGREE,
    MAX_SUBDIVISIONS,
    PORT_RANGE,
    SCHEDULER_ADDRESS,
    SLICE_FROM,
    SLICE_MODES,
)

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

__all__ = ["Case", "load_case", "case_from_dict", "case_schema", "CASE_TABLES"]

Positive = Annotated[float, Field(gt=0)]
#: the representable range of lengths, in units.length: twelve decades about 1 keep every derived quantity
#: (areas, volumes, eigenvalues ~ 1/L^2, quadrature weights) far from floating-point underflow and overflow and
#: geometric tolerances meaningful; choose units.length to bring a geometry into it
LENGTH_RANGE = (1e-6, 1e6)
Length = Annotated[float, Field(ge=LENGTH_RANGE[0], le=LENGTH_RANGE[1])]
#: dimensionless factors (effective masses): six decades either way
FACTOR_RANGE = (1e-6, 1e6)
Factor = Annotated[float, Field(ge=FACTOR_RANGE[0], le=FACTOR_RANGE[1])]
#: a mass or moment of inertia in its unit: no subnormal or astronomically large numbers
AMOUNT_RANGE = (1e-40, 1e40)
Amount = Annotated[float, Field(ge=AMOUNT_RANGE[0], le=AMOUNT_RANGE[1])]
#: largest ratio of the longest to the shortest semi-axis of an ellipsoid or spheroid
MAX_AXIS_RATIO = 1000.0
LengthUnit = Literal[tuple(LENGTH_UNITS)]
EnergyUnit = Literal[tuple(ENERGY_UNITS)]
MassUnit = Literal[tuple(MASS_UNITS)]
InertiaUnit = Literal[tuple(INERTIA_UNITS)]
Rim = Literal["dirichlet", "neumann"]


_Table = Table


class DeformationTerm(_Table):
    """One term a_lm Y_lm of a harmonically deformed sphere's radius r = R (1 + sum a_lm Y_lm)."""

    l: int = Field(ge=0, le=40, description="degree of the real spherical harmonic")
    m: int = Field(description="order, -l <= m <= l (m > 0 cosine-like, m < 0 sine-like)")
    amplitude: float = Field(description="dimensionless amplitude a_lm")

    @model_validator(mode="after")
    def _order(self):
        if abs(self.m) > self.l:
            raise ValueError(f"m = {self.m} is outside -l..l for l = {self.l}")
        return self


class SphereSurface(_Table):
    shape: Literal["sphere"]
    radius: Length = Field(1.0, description="radius, in units.length")


class EllipsoidSurface(_Table):
    shape: Literal["ellipsoid"]
    axes: tuple[Length, Length, Length] = Field(description="semi-axes along x, y, z")

    @model_validator(mode="after")
    def _ratio(self):
        _axis_ratio(self.axes)
        return self


class SpheroidSurface(_Table):
    shape: Literal["spheroid"]
    equatorial_radius: Length = Field(description="semi-axis in the x-y plane")
    polar_radius: Length = Field(description="semi-axis along z")

    @model_validator(mode="after")
    def _ratio(self):
        _axis_ratio((self.equatorial_radius, self.polar_radius))
        return self


class DeformedSphereSurface(_Table):
    """A harmonically deformed sphere r = R (1 + sum a_lm Y_lm) (old shape name: star)."""

    shape: Literal["deformed_sphere"]
    radius: Length = Field(1.0, description="mean radius R")
    deformation: tuple[DeformationTerm, ...] = Field((), description="terms of r = R(1 + sum a_lm Y_lm)")


class TorusSurface(_Table):
    shape: Literal["torus"]
    major_radius: Length = Field(description="distance from the z axis to the tube centre")
    minor_radius: Length = Field(description="tube radius, smaller than major_radius")


class CapSurface(_Table):
    shape: Literal["cap"]
    radius: Length = Field(1.0, description="sphere radius")
    half_angle: float = Field(90.0, gt=0, lt=180, description="polar half-angle of the cap in degrees")
    rim: Rim = Field("dirichlet", description="hard rim (dirichlet) or free rim (neumann)")


def _axis_ratio(axes) -> None:
    """Refuse needle- or disc-like ellipsoids beyond :data:`MAX_AXIS_RATIO`."""
    if axes is not None and max(axes) > MAX_AXIS_RATIO * min(axes):
        raise ValueError(f"semi-axes {tuple(axes)!r} differ by more than a factor {MAX_AXIS_RATIO:g}; "
                         "such a needle or disc is outside what the meshes resolve")


def _check_shape_keys(table, keys: dict, what: str):
    """Refuse keys that do not belong to ``table.shape`` and require the ones it needs."""
    required, optional = keys[table.shape]
    _axis_ratio(table.axes)
    if table.equatorial_radius is not None and table.polar_radius is not None:
        _axis_ratio((table.equatorial_radius, table.polar_radius))
    given = {k for k in type(table).model_fields if k != "shape" and getattr(table, k) is not None}
    extra = sorted(given - set(required) - set(optional))
    if extra:
        allowed = ", ".join(required + optional) or "none"
        raise ValueError(f"key {extra[0]!r} does not belong to a {table.shape} {what}; allowed: {allowed}")
    missing = [k for k in required if getattr(table, k) is None]
    if missing:
        raise ValueError(f"a {table.shape} {what} needs {', '.join(missing)}")
    return table


_WALL_KEYS = {"sphere": (("radius",), ()), "ellipsoid": (("axes",), ("offset",)),
              "spheroid": (("equatorial_radius", "polar_radius"), ("offset",)),
              "deformed_sphere": (("radius",), ("deformation", "offset"))}

_SNAP_KEYS = {  # shape -> (required keys, optional keys)
    "sphere": ((), ("radius",)),
    "ellipsoid": (("axes",), ()),
    "spheroid": (("equatorial_radius", "polar_radius"), ()),
    "deformed_sphere": ((), ("radius", "deformation")),
    "torus": (("major_radius", "minor_radius"), ()),
}


class SnapTarget(_Table):
    """An analytic shape to snap an imported mesh's geometry nodes onto (keys as for that shape)."""

    shape: Literal["sphere", "ellipsoid", "spheroid", "deformed_sphere", "torus"]
    radius: Length | None = Field(None, description="sphere or deformed_sphere: radius R")
    axes: tuple[Length, Length, Length] | None = Field(None, description="ellipsoid: semi-axes along x, y, z")
    equatorial_radius: Length | None = Field(None, description="spheroid: semi-axis in the x-y plane")
    polar_radius: Length | None = Field(None, description="spheroid: semi-axis along z")
    deformation: tuple[DeformationTerm, ...] | None = Field(None, description="deformed_sphere: terms of "
                                                              "r = R(1 + sum a_lm Y_lm)")
    major_radius: Length | None = Field(None, description="torus: distance from the z axis to the tube centre")
    minor_radius: Length | None = Field(None, description="torus: tube radius")

    @model_validator(mode="after")
    def _keys_of_shape(self):
        return _check_shape_keys(self, _SNAP_KEYS, "snap target")


class MeshSurface(_Table):
    shape: Literal["mesh"]
    file: str = Field(description="mesh file (.vtu .vtk .msh .stl .obj .ply), relative to the case file; or "
                      "'sample:NAME' for a mesh shipped with shellmodes (sample:pebble6.vtu, sample:pebble.stl)")
    snap: SnapTarget | None = Field(None, description="snap geometry nodes onto this exact shape")
    rim: Rim = Field("dirichlet", description="condition on the rim of an open mesh")


Surface = Annotated[
    SphereSurface | EllipsoidSurface | SpheroidSurface | DeformedSphereSurface | TorusSurface | CapSurface
    | MeshSurface,
    Field(discriminator="shape"),
]


class Wall(_Table):
    """A closed wall of a shell: sphere, ellipsoid, spheroid or harmonically deformed sphere about the origin."""

    shape: Literal["sphere", "ellipsoid", "spheroid", "deformed_sphere"]
    radius: Length | None = Field(None, description="sphere or deformed_sphere: radius R")
    axes: tuple[Length, Length, Length] | None = Field(None, description="ellipsoid: semi-axes")
    equatorial_radius: Length | None = Field(None, description="spheroid: semi-axis in the x-y plane")
    polar_radius: Length | None = Field(None, description="spheroid: semi-axis along z")
    deformation: tuple[DeformationTerm, ...] | None = Field(None, description="deformed_sphere: "
                                                              "r = R(1 + sum a_lm Y_lm)")
    offset: Annotated[float, Field(ge=-LENGTH_RANGE[1], le=LENGTH_RANGE[1])] | None = Field(
        None, description="ellipsoid, spheroid, deformed_sphere: the parallel surface at this signed normal "
                          "distance (outward positive), for shells of constant thickness")

    @model_validator(mode="after")
    def _keys_of_shape(self):
        return _check_shape_keys(self, _WALL_KEYS, "wall")


class Medium(_Table):
    """One medium (material) of a 3-D shell or ball, inside out (core, shell, barrier): mass and band offset."""

    name: str = Field("", description="label used in reports")
    tag: NonNegativeInt | str | None = Field(None, description="region id, or its physical name, in a mesh file "
                                             "(default: position, inside out)")
    effective_mass: Factor | None = Field(None, description="mass as a multiple of particle.mass "
                                                              "(default: particle.effective_mass)")
    offset: float = Field(0.0, description="potential offset (band offset) in units.energy, always (never "
                          "potential.unit; with units.energy = '1' it is in eigenvalue units 1/length^2)")


class Shell(_Table):
    """A 3-D region between closed walls (or a ball), possibly layered into several media."""

    inner: Wall | None = Field(None, description="innermost wall; omit for a ball")
    interfaces: tuple[Wall, ...] = Field((), description="walls between media, inside out")
    outer: Wall | None = Field(None, description="outermost wall")
    file: str | None = Field(None, description="tetrahedral mesh file instead of walls (tetra or tetra10)")
    inner_condition: Rim = Field("dirichlet", description="condition on the inner wall")
    outer_condition: Rim = Field("dirichlet", description="condition on the outer wall")
    layers: int | tuple[int, ...] = Field(4, description="mesh: radial element layers in each medium (one number for "
                                          "all media)")
    media: tuple[Medium, ...] = Field((), description="the materials between the walls, inside out (old name: "
                                      "regions); default: one medium between each pair of walls")
    cells: Literal["tetrahedra", "prisms"] | None = Field(
        None, description="tetrahedra (degree 1-2; mesh files) or layered curved prisms (triangle degree 1-4 "
        "times a radial degree; a ball's innermost layer closes at the centre on one merged dof); default: "
        "prisms for a ball from walls, tetrahedra otherwise")
    radial_degree: int | None = Field(None, ge=1, le=MAX_RADIAL_DEGREE, description="prisms: polynomial degree "
                                      "across each layer (default resolution.degree)")
    grading: Positive | tuple[Positive, ...] | None = Field(
        None, description="prisms: ratio of successive layer widths inside each medium, outward (1: equal "
        "layers; one number for all media)")
    layer_boundaries: tuple[tuple[float, ...], ...] | None = Field(
        None, description="prisms: per medium, the boundaries between its layers as fractions of its thickness, "
        "strictly rising inside (0, 1); an empty list keeps layers and grading for that medium")
    decay: float | None = Field(
        None, gt=0, lt=1, description="prisms: automatic layers for bound states: in every barrier medium (offset "
        "above a level among the lowest modes.count, next to a medium where that level is allowed) the layers reach "
        "out to where the level's state has fallen by this factor (e.g. 1e-8), judged from the level's energy "
        "(a fine 1-D radial estimate between the walls' mean spheres, offsets only) and the barrier")

    @property
    def regions(self) -> tuple[Medium, ...]:
        """The media under their old name (code written against ``shell.regions`` keeps working)."""
        return self.media

    @model_validator(mode="after")
    def _walls_or_file(self):
        if self.cells is None:
            object.__setattr__(self, "cells", "prisms" if self.file is None and self.inner is None else "tetrahedra")
        if self.cells == "prisms":
            if self.file is not None:
                raise ValueError("cells = 'prisms' builds its cells from walls; a mesh file gives tetrahedra")
        else:
            for key in ("radial_degree", "grading", "layer_boundaries", "decay"):
                if getattr(self, key) is not None:
                    raise ValueError(f"{key} applies to cells = 'prisms' only")
        if self.file is None and self.outer is None:
            raise ValueError("give outer (and inner, interfaces) walls, or a mesh file")
        if self.file is not None and (self.outer is not None or self.inner is not None or self.interfaces):
            raise ValueError("give walls or a mesh file, not both")
        layers = (self.layers,) if isinstance(self.layers, int) else self.layers
        if any(n < 1 for n in layers):
            raise ValueError(f"layers {self.layers!r}: every medium needs at least one layer")
        if self.file is None:
            media = len(self.interfaces) + 1
            if not isinstance(self.layers, int) and len(self.layers) != media:
                raise ValueError(f"layers has {len(self.layers)} entries for {media} media")
            if self.media and len(self.media) != media:
                raise ValueError(f"media has {len(self.media)} entries but the walls make {media} media")
            for key in ("grading", "layer_boundaries"):
                value = getattr(self, key)
                if isinstance(value, tuple) and len(value) != media:
                    raise ValueError(f"{key} has {len(value)} entries for {media} media")
            for i, inner in enumerate(self.layer_boundaries or ()):
                f = [0.0, *inner, 1.0]
                if any(b <= a for a, b in zip(f, f[1:])):
                    raise ValueError(f"layer_boundaries[{i}] = {list(inner)}: boundaries must rise strictly "
                                     "inside (0, 1)")
        return self


class Resolution(_Table):
    """Element degree and mesh refinement (give subdivisions or edge_length, not both)."""

    degree: int = Field(2, ge=1, le=4, description="polynomial degree of elements and geometry (1..4)")
    geometry_degree: int | None = Field(
        None, ge=1, le=4, description="degree of the geometry map (default: degree; higher = superparametric)")
    subdivisions: int | None = Field(None, ge=0, le=MAX_SUBDIVISIONS, description="halvings of the reference mesh")
    edge_length: Length | None = Field(None, description="largest reference edge, in units.length")
    quadrature_order: int | None = Field(None, ge=1, le=20, description="exactness of the cell rule")

    @model_validator(mode="after")
    def _one_size(self):
        if self.subdivisions is not None and self.edge_length is not None:
            raise ValueError("give either subdivisions or edge_length, not both")
        if self.geometry_degree is not None and self.geometry_degree < self.degree:
            raise ValueError(f"geometry_degree {self.geometry_degree} must be at least degree {self.degree}")
        if self.quadrature_order is not None and self.quadrature_order < 2 * self.degree:
            # the mass matrix of degree-p elements needs a rule exact for degree 2p on flat cells (common
            # practice); a weaker rule can make it singular
            raise ValueError(f"quadrature_order {self.quadrature_order} is too low for degree {self.degree}; "
                             f"give at least {2 * self.degree}")
        return self


class Particle(_Table):
    """The particle: a mass (times an effective-mass factor) or a rigid rotor's moment of inertia."""

    mass: Amount | None = Field(None, description="particle mass in mass_unit")
    mass_unit: MassUnit = Field("electron", description="unit of mass")
    effective_mass: Factor = Field(1.0, description="factor multiplying mass (band effective mass)")
    moment_of_inertia: Amount | None = Field(None, description="rigid rotor: I = m R^2, in inertia_unit")
    inertia_unit: InertiaUnit = Field("amu angstrom2", description="unit of moment_of_inertia")

    @model_validator(mode="after")
    def _one_kind(self):
        if self.mass is not None and self.moment_of_inertia is not None:
            raise ValueError("give either mass or moment_of_inertia, not both")
        return self


class Units(_Table):
    length: LengthUnit = Field("1", description="unit of every length in the case ('1': dimensionless)")
    energy: EnergyUnit = Field("1", description="unit of reported energies ('1': the eigenvalue lambda)")


class Potential(_Table):
    """A scalar potential V(x, y, z) added to the kinetic energy."""

    expression: str = Field(description="arithmetic in x, y, z, r, theta, phi (lengths in units.length)")
    unit: EnergyUnit = Field("1", description="energy unit of the expression's value")

    @field_validator("expression")
    @classmethod
    def _parse(cls, text):
        try:
            compile_expression(text)
        except ExpressionError as exc:
            raise ValueError(f"{text!r}: {exc}") from None
        return text


class Modes(_Table):
    """Which modes to find and how to group them."""

    count: int | None = Field(None, ge=1, le=MAX_MODE_COUNT, description="number of lowest modes")
    below: float | None = Field(None, description="all modes with energy below this, in units.energy")
    multiplet_tolerance: Positive = Field(1e-4, le=0.05, description="relative gap that separates two multiplets "
                                          "(at most 0.05: larger ones merge distinct levels)")
    backend: Literal["auto", "splu", "cholmod", "cholmod-system", "pardiso", "mumps"] = Field(
        "auto", description="factorization for shift-invert (auto: the fastest installed)")
    method: Literal["auto", "lanczos", "block", "lobpcg", "separable", "slices", "mpi"] = Field(
        "auto", description="eigen-iteration: ARPACK Lanczos, blocked shift-invert for large problems, "
                            "LOBPCG with algebraic multigrid (no factorization) for 3-D problems too big to factor, "
                            "separation into surface and radial problems (prisms between concentric spheres, "
                            "the default there), spectrum slicing with inertia counts for many modes ('slices', "
                            f"the default from {SLICE_FROM} requested modes on where a factorization is planned), "
                            "or 'mpi': SLEPc Krylov-Schur shift-invert distributed over the "
                            "MPI ranks of the run (needs scripts/setup-mpi.sh; 'auto' chooses it under mpiexec "
                            "or run --ranks with more than one rank, except for separable shells)")
    slice_modes: int = Field(SLICE_MODES, ge=10, le=MAX_MODE_COUNT,
                             description="method slices: modes per slice aimed at")
    workers: int = Field(2, ge=1, le=256, description="method slices: local worker processes (1: in this process)")
    scheduler: str | None = Field(None, description="method slices: address tcp://host:port of a running Dask "
                                  "distributed scheduler to run the slices on (instead of local workers)")
    residual_limit: Positive = Field(1e-6, description="largest acceptable relative residual")

    @field_validator("scheduler")
    @classmethod
    def _address(cls, value):
        match = None if value is None else SCHEDULER_ADDRESS.fullmatch(value.strip())
        if value is not None and (match is None or not PORT_RANGE[0] <= int(match.group(2)) <= PORT_RANGE[1]):
            raise ValueError("not a scheduler address; give tcp://host:port (port 1-65535)")
        return value

    @model_validator(mode="before")
    @classmethod
    def _one_target(cls, data):
        if isinstance(data, dict):
            if data.get("count") is not None and data.get("below") is not None:
                raise ValueError("give either count or below, not both")
            if data.get("count") is None and data.get("below") is None:
                data = {**data, "count": DEFAULT_MODE_COUNT}
        return data


class SweepParameter(_Table):
    """One swept case key: a list of values, or an evenly spaced range."""

    key: str = Field(description="dotted case key, e.g. 'surface.deformation[0].amplitude' or 'surface.radius'")
    values: tuple[float, ...] | None = Field(None, min_length=1, description="the values, in order")
    start: float | None = Field(None, description="first value of an evenly spaced range")
    stop: float | None = Field(None, description="last value of the range (included)")
    steps: int | None = Field(None, ge=1, le=10000, description="number of values in the range")

    @model_validator(mode="after")
    def _values_or_range(self):
        ranged = (self.start, self.stop, self.steps)
        if self.values is None and any(v is None for v in ranged):
            raise ValueError("give values, or start, stop and steps")
        if self.values is not None and any(v is not None for v in ranged):
            raise ValueError("give values or a range (start, stop, steps), not both")
        return self

    def resolved(self) -> tuple[float, ...]:
        if self.values is not None:
            return tuple(self.values)
        if self.steps == 1:
            return (float(self.start),)
        raw = [self.start + (self.stop - self.start) * i / (self.steps - 1) for i in range(self.steps)]
        return tuple(without_noise(v, raw) for v in raw)  # 0.0, not 1.4e-17, at the middle of -0.1..0.1


class Sweep(_Table):
    """Solve the case once per step while one or more keys change together."""

    parameters: tuple[SweepParameter, ...] = Field(min_length=1, description="keys swept together, equal lengths")
    workers: int = Field(2, ge=1, le=256, description="parallel local worker processes")
    scheduler: str | None = Field(None, description="address of a running Dask distributed scheduler")

    @model_validator(mode="after")
    def _equal_lengths(self):
        lengths = {len(p.resolved()) for p in self.parameters}
        if len(lengths) > 1:
            raise ValueError(f"swept parameters must have equal numbers of values, got {sorted(lengths)}")
        return self


class Output(_Table):
    """Which files to write besides spectrum.json, spectrum.csv and run.log."""

    vtu: bool = Field(True, description="write modes.vtu with every mode as a point field")
    pictures: bool = Field(False, description="also write levels.png and off-screen renders mode-NNNN.png "
                                              "(cut views for shells; needs the plot extra and vtu = true)")
    picture_multiplets: int = Field(4, ge=1, le=100, description="how many multiplets to render, one mode of each "
                                    "(old name: picture_modes)")
    statistics: bool = Field(False, description="level statistics of the spectrum (surfaces): counting function "
                             "against Weyl's law, heat-trace coefficients, nearest-neighbour spacings per symmetry "
                             "class; numbers in spectrum.json, picture statistics.png (needs the plot extra)")

    @model_validator(mode="after")
    def _pictures_need_vtu(self):
        if self.pictures and not self.vtu:
            raise ValueError("pictures = true renders modes.vtu: set vtu = true as well, or pictures = false")
        return self


class Limits(_Table):
    """Resource limits.  Before building anything, a run estimates its memory (unknowns, matrices, factor,
    eigen-iteration, modes written) and refuses, naming the key to change, when the estimate exceeds the
    limit: the smaller of limits.memory_gib and the environment variable SHELLMODES_MEMORY_LIMIT (GiB, or a
    number with a unit such as 512MiB), or, with neither set, the memory the machine reports as available."""

    memory_gib: float | None = Field(None, gt=0, le=1e6, description="memory the run may use, in GiB "
                                     "(default: the machine's available memory)")


class Case(_Table):
    """A whole case file, validated and immutable.

    Attributes
    ----------
    title : str
        Free text shown in reports.
    surface, shell
        Exactly one geometry table: a curved surface or a 3-D shell or ball.
    resolution, particle, units, potential, modes, output, sweep, limits
        The other tables (``shellmodes keys`` lists every key).
    source : str
        Where the case came from (a file name, or ``"<case>"``).

    Examples
    --------
    >>> case = case_from_dict({"surface": {"shape": "sphere", "radius": 2.0}})
    >>> case.surface.radius, case.modes.count
    (2.0, 20)
    """

    title: str = Field("", description="free text shown in reports")
    surface: Surface | None = Field(None, description="a curved surface (give surface or shell)")
    shell: Shell | None = Field(None, description="a 3-D shell or ball (give surface or shell)")
    resolution: Resolution = Resolution()
    particle: Particle = Particle()
    units: Units = Units()
    potential: Potential | None = None
    fields: Fields | None = Field(None, description="external fields and the thin-layer potential")
    modes: Modes = Modes()
    output: Output = Output()
    sweep: Sweep | None = None
    limits: Limits = Limits()
    source: str = Field("<case>", exclude=True, description="where the case came from (not a TOML key)")

    @model_validator(mode="after")
    def _consistent(self):
        if (self.surface is None) == (self.shell is None):
            raise ValueError("give exactly one of the tables [surface] and [shell]")
        if self.shell is not None:
            if self.resolution.degree > 2 and self.shell.cells == "tetrahedra":
                raise ValueError(f"resolution.degree {self.resolution.degree}: tetrahedra support degrees 1 and 2; "
                                 "shell.cells = 'prisms' allows 1 to 4")
            if self.particle.moment_of_inertia is not None:
                raise ValueError("particle.moment_of_inertia describes a rotor on a sphere, not a shell")
        if self.modes.method == "separable" and (self.shell is None or self.shell.cells != "prisms"
                                                 or self.potential is not None):
            raise ValueError("modes.method 'separable' needs shell.cells = 'prisms', concentric spherical walls "
                             "and no [potential]")
        if self.output.statistics and self.surface is None:
            raise ValueError("output.statistics compares with Weyl's law for surfaces: use a [surface], "
                             "or statistics = false")
        rotor = self.particle.moment_of_inertia is not None
        if self.units.length == "1" and self.units.energy != "1" and not rotor:
            raise ValueError("units.energy needs a physical units.length (m, um, nm, angstrom, bohr) "
                             "or a rotor's particle.moment_of_inertia")
        if self.potential is not None and (self.potential.unit == "1") != (self.units.energy == "1"):
            raise ValueError("potential.unit and units.energy must both be physical or both be '1'")
        if rotor and self.surface is not None and self.surface.shape != "sphere":
            raise ValueError("particle.moment_of_inertia describes a rigid rotor: use surface.shape = 'sphere'")
        return self

    @property
    def base_dir(self) -> Path:
        return Path(self.source).parent if self.source != "<case>" else Path.cwd()


CASE_TABLES = {"surface": Surface, "shell": Shell, "resolution": Resolution, "particle": Particle, "units": Units,
               "potential": Potential, "fields": Fields, "modes": Modes, "output": Output, "sweep": Sweep,
               "limits": Limits}


def _allowed_keys(loc: tuple) -> list[str]:
    """Valid keys of the table at ``loc`` (a pydantic location without the last element)."""
    model: Any = Case
    for part in loc:
        if isinstance(part, int):
            continue
        fields = getattr(model, "model_fields", None)
        if fields is None:
            return []
        if part in fields:
            ann = fields[part].annotation
            model = _model_of(ann)
        else:  # a discriminator tag, e.g. 'sphere'
            model = _variant(part)
        if model is None:
            return []
    return list(getattr(model, "model_fields", {}))


def _model_of(annotation):
    args = getattr(annotation, "__args__", ())
    if isinstance(annotation, type) and issubclass(annotation, BaseModel):
        return annotation
    for a in args:
        found = _model_of(a)
        if found is not None:
            return found
    metadata = getattr(annotation, "__metadata__", None)
    if metadata is not None:
        return _model_of(annotation.__origin__)
    return None


def _variant(tag):
    for cls in (SphereSurface, EllipsoidSurface, SpheroidSurface, DeformedSphereSurface, TorusSurface, CapSurface,
                MeshSurface):
        if cls.model_fields["shape"].annotation.__args__[0] == tag:
            return cls
    return None


_TAGS = {"sphere", "ellipsoid", "spheroid", "deformed_sphere", "torus", "cap", "mesh"}


def _validator_label(part: str) -> bool:
    """pydantic's names of union members in an error location ('constrained-int', 'str', 'tuple[...]')."""
    return part in ("int", "str", "float", "bool", "none") or "-" in part or "[" in part


def _format_error(error: dict) -> tuple[str, str]:
    loc = tuple(error["loc"])
    # drop discriminator tags and pydantic's function-validator labels from the key path
    key_parts = [str(p) if not isinstance(p, int) else f"[{p}]" for p in loc
                 if not (isinstance(p, str) and ((p in _TAGS and len(loc) > 1 and p != loc[0]) or _validator_label(p)))]
    key = ".".join(key_parts).replace(".[", "[")
    value = error.get("input")
    kind = error["type"]
    if kind == "extra_forbidden":
        allowed = _allowed_keys(tuple(p for p in loc[:-1]))
        allowed = [a for a in allowed if a != "source"]
        near = difflib.get_close_matches(str(loc[-1]), allowed, n=1)
        hint = f"did you mean '{near[0]}'? " if near else ""
        return key, f"unknown key; {hint}allowed: {', '.join(allowed)}"
    if kind == "missing":
        return key, "required key is missing"
    if kind == "union_tag_not_found":
        return (key + ".shape" if not key.endswith("shape") else key,
                f"required key is missing; allowed: {', '.join(sorted(_TAGS))}")
    if kind == "union_tag_invalid":
        return key + ".shape" if not key.endswith("shape") else key, (
            f"unknown shape {error.get('ctx', {}).get('tag', value)!r}; allowed: {', '.join(sorted(_TAGS))}")
    msg = error["msg"].replace("Value error, ", "")
    bound = error.get("ctx", {}).get("ge", error.get("ctx", {}).get("le"))
    if kind in ("greater_than_equal", "less_than_equal") and bound in LENGTH_RANGE:
        msg = msg.replace("0.000001", "1e-06").replace("1000000", "1e+06")
        if loc and loc[-1] == "effective_mass":  # the one Factor key: a multiple of particle.mass
            msg += (f"; effective masses must lie between {FACTOR_RANGE[0]:g} and {FACTOR_RANGE[1]:g} "
                    "times particle.mass")
        else:
            msg += (f"; lengths must lie between {LENGTH_RANGE[0]:g} and {LENGTH_RANGE[1]:g} in units.length: "
                    "choose a units.length that brings the geometry into that range")
    if isinstance(value, float) and math.isnan(value):
        value_text = "nan"
    else:
        value_text = repr(value)
    if kind == "value_error" and not loc:
        return "", msg
    return key, f"value {value_text}: {msg}"


#: deepest nesting of tables and arrays a case may have (the schema itself needs four)
MAX_NESTING = 16


def _tuples(value, depth: int = 0):
    """TOML arrays as tuples (the strict schema takes arrays as tuples), nesting depth checked."""
    if depth > MAX_NESTING:
        raise RecursionError
    if isinstance(value, dict):
        return {k: _tuples(v, depth + 1) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return tuple(_tuples(v, depth + 1) for v in value)
    return value


def case_from_dict(data: dict, source: str = "<case>") -> Case:
    """Validate case data (the parsed TOML tables) into a :class:`Case`.

    Raises
    ------
    CaseError
        For the first problem found, naming the key and the value.

    Examples
    --------
    >>> case = case_from_dict({"surface": {"shape": "sphere"}, "modes": {"count": 4}})
    >>> case.resolution.degree
    2
    """
    if not isinstance(data, dict):
        raise CaseError("a case must be a table of tables", source)
    if "source" in data:
        raise CaseError("unknown key; 'source' is reserved", source, "source")
    renamed: list = []
    written, data = data, upgrade(data, source, renamed)  # old names of keys and values: warned once the case validates
    # a table given as None (e.g. from Case.model_dump) counts as absent
    optional = ("surface", "shell", "potential", "fields", "sweep")
    data = {k: v for k, v in data.items() if not (k in optional and v is None)}
    if "surface" not in data and "shell" not in data:
        raise CaseError("required table is missing; give [surface] (a curved surface) or [shell] "
                        "(a 3-D shell or ball)", source, "surface")
    if "surface" in data and "shell" in data:
        raise CaseError("give [surface] or [shell], not both", source, "shell")
    try:
        case = Case.model_validate({**_tuples(data), "source": source})
        warn_renamed(renamed)
        return case
    except RecursionError:
        raise CaseError(f"the case is nested more than {MAX_NESTING} levels deep", source) from None
    except ValidationError as exc:
        errors = exc.errors()
        # a typo'd key usually also leaves a required key missing: report the typo first
        first = next((e for e in errors if e["type"] == "extra_forbidden"), errors[0])
        key, message = _format_error(first)
        raise CaseError(message, source, key_as_written(key, written) or None) from None


def load_case(path: str | Path) -> Case:
    """Read and validate a TOML case file.

    Parameters
    ----------
    path : str or Path
        The TOML file; relative mesh files in it are taken from its folder.

    Returns
    -------
    Case
        The validated case.

    Raises
    ------
    CaseError
        Missing or unreadable file, malformed TOML, or invalid contents.
    """
    path = Path(path)
    source = str(path)
    if not path.is_file():
        raise CaseError("no such case file", source)
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise CaseError(f"cannot read the case file ({exc.__class__.__name__})", source) from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise CaseError(f"malformed TOML: {exc}", source) from None
    except RecursionError:
        raise CaseError(f"the case is nested more than {MAX_NESTING} levels deep", source) from None
    return case_from_dict(data, source)


def case_schema() -> dict:
    """JSON Schema of the case file (for editors: completion and validation).

    Returns
    -------
    dict
        A draft 2020-12 schema with an ``$id``, a ``shape`` discriminator on the surface union and a
        description on every key (``shellmodes schema`` prints it).

    Examples
    --------
    >>> case_schema()["$id"]
    'urn:shellmodes:case-file:schema:1'
    """
    schema = Case.model_json_schema(mode="validation")
    schema.get("properties", {}).pop("source", None)
    schema["title"] = "shellmodes case file"
    # exactly one geometry table (the model validator's rule, in schema form)
    schema["oneOf"] = [{"required": ["surface"], "not": {"required": ["shell"]}},
                       {"required": ["shell"], "not": {"required": ["surface"]}}]
    schema["$schema"] = "https://json-schema.org/draft/2020-12/schema"
    schema["$id"] = SCHEMA_ID
    schema["description"] = ("A shellmodes case file: one geometry table ([surface] or [shell]) and optional "
                             "tables for resolution, particle, units, potential, modes, output, sweep and limits.")
    _describe_every_key(schema)
    return schema


#: the schema's identifier: a URN (the project publishes no web address for it)
SCHEMA_ID = "urn:shellmodes:case-file:schema:1"


def schema_properties(node, where: str = ""):
    """Every ``(path, name, property)`` of a JSON Schema: the top level and every nested table and ``$defs``."""
    if isinstance(node, dict):
        for name, prop in (node.get("properties") or {}).items():
            yield where, name, prop
        for key, value in node.items():
            yield from schema_properties(value, f"{where}/{key}")
    elif isinstance(node, list):
        for value in node:
            yield from schema_properties(value, where)


def _describe_every_key(schema: dict) -> None:
    """Give every property a description: a table its model's docstring, a shape tag the family it picks."""
    defs = schema.get("$defs", {})
    for _, name, prop in list(schema_properties(schema)):
        if "description" in prop:
            continue
        if name == "shape":
            allowed = prop.get("enum") or [prop.get("const")]
            prop["description"] = "which shape this table describes: " + ", ".join(map(str, allowed))
            continue
        ref = prop.get("$ref") or next((a.get("$ref") for a in prop.get("anyOf", []) if "$ref" in a), None)
        target = defs.get(ref.rsplit("/", 1)[-1], {}) if ref else {}
        prop["description"] = target.get("description") or f"the [{name}] table"
