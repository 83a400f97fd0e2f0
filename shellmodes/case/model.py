"""The physics a case describes, before any mesh: shape or walls, energy scale, potential, media.

Everything here reads the validated :class:`~shellmodes.case.schema.Case` and returns
plain objects (a shape, radius functions of directions, an
:class:`EnergyScale`, a compiled potential, :class:`Media`); the
discretisations (:mod:`shellmodes.fem.discretisation`) and the pipeline
(:mod:`shellmodes.pipeline`) build on them.  Case-file errors are raised
here with the key they concern.
"""

from __future__ import annotations

import functools
import platform
from dataclasses import dataclass
from pathlib import Path
from typing import NamedTuple

import numpy as np

from shellmodes import _version
from shellmodes.case.expression import ExpressionError, compile_expression
from shellmodes.case.schema import Case, Wall
from shellmodes.case.units import ENERGY_UNITS, INERTIA_UNITS, LENGTH_UNITS, MASS_UNITS, joule_to, kinetic_scale_joule
from shellmodes.errors import CaseError, GeometryError, MeshError
from shellmodes.harmonics import angles, real_sph_harm
from shellmodes.limits import DEFAULT_SHELL_SUBDIVISIONS, DEFAULT_SUBDIVISIONS, MAX_SHELL_SUBDIVISIONS, MAX_SUBDIVISIONS
from shellmodes.shapes import Shape, make_shape

__all__ = ["EnergyScale", "Media", "versions", "build_shape", "energy_scale", "compiled_potential",
           "point_potential", "radial_potential", "wall_function", "shell_walls", "media",
           "dirichlet_walls", "spherically_symmetric", "subdivision_level", "shell_level"]



def versions() -> dict:
    """Versions of shellmodes and the libraries that shape its results (a fresh dict each call)."""
    return dict(_versions())


@functools.cache
def _versions() -> dict:
    import meshio
    import scipy
    import skfem

    return {"shellmodes": _version.__version__, "python": platform.python_version(), "numpy": np.__version__,
            "scipy": scipy.__version__, "scikit-fem": skfem.__version__, "meshio": meshio.__version__}


# --------------------------------------------------------------------------------------------- surfaces
def mesh_file(case: Case, value: str, key: str) -> Path:
    """The mesh file a case names (a ``sample:`` name or a path relative to the case file)."""
    from shellmodes.errors import ProblemError
    from shellmodes.meshfiles.samples import resolve_mesh_file

    try:
        return resolve_mesh_file(value, case.base_dir, key)
    except ProblemError as exc:
        raise CaseError(exc.reason, case.source, exc.key) from None


def build_shape(case: Case) -> Shape:
    """The :class:`~shellmodes.shapes.Shape` a surface case describes.

    Parameters
    ----------
    case : Case
        A case with a ``[surface]`` table.

    Returns
    -------
    Shape
        The exact map of the surface (a mesh file is read here).

    Raises
    ------
    CaseError
        Impossible parameters or an unreadable mesh, naming the case key.
    """
    spec = case.surface.model_dump()
    name = spec.pop("shape")
    spec.pop("rim", None)
    try:
        if name == "deformed_sphere":
            spec["deformation"] = [(d["l"], d["m"], d["amplitude"]) for d in spec["deformation"]]
        if name == "mesh":
            path = mesh_file(case, spec["file"], "surface.file")
            snap = spec.pop("snap")
            target = None
            if snap is not None:
                snap_name = snap.pop("shape")
                params = {k: v for k, v in snap.items() if v is not None}
                if snap_name == "deformed_sphere":
                    params["deformation"] = [(d["l"], d["m"], d["amplitude"])
                                             for d in snap.get("deformation") or ()]
                target = make_shape(snap_name, **params)
            return make_shape("mesh", file=path, snap=target)
        return make_shape(name, **spec)
    except GeometryError as exc:
        raise CaseError(str(exc), case.source, "surface") from None
    except MeshError as exc:
        raise CaseError(exc.reason, exc.source or case.source, "surface.file") from None
    except TypeError as exc:
        raise CaseError(f"incomplete parameters for shape {name!r} ({exc})", case.source, "surface") from None


def subdivision_level(case: Case, shape) -> int:
    """Halvings of the shape's reference mesh that the case's resolution asks for."""
    res = case.resolution
    if res.edge_length is not None:
        level = shape.subdivisions_for(res.edge_length)
        if level > MAX_SUBDIVISIONS:
            raise CaseError(f"value {res.edge_length!r}: needs {level} subdivisions of the reference mesh, "
                            f"at most {MAX_SUBDIVISIONS} are allowed (base edge {shape.base_edge:.4g}); "
                            "use a larger edge_length", case.source, "resolution.edge_length")
        return level
    if res.subdivisions is not None:
        return res.subdivisions
    return 0 if shape.name == "mesh" else DEFAULT_SUBDIVISIONS


# ------------------------------------------------------------------------------------------ energy scale
class EnergyScale(NamedTuple):
    """E0, the energy of lambda = 1 (per length unit squared), in the case's energy unit.

    ``per_lambda`` is None for dimensionless cases (``units.energy = "1"``),
    where energies are the eigenvalues themselves; :attr:`factor` is then 1.
    Unpacks as ``(per_lambda, origin)``.
    """

    per_lambda: float | None
    origin: str

    @property
    def factor(self) -> float:
        """Energy per unit eigenvalue: E0, or 1 for dimensionless cases."""
        return 1.0 if self.per_lambda is None else self.per_lambda

    def energies(self, lam: np.ndarray) -> np.ndarray:
        """Energies (a new array) of eigenvalues ``lam``."""
        return np.asarray(lam, dtype=float) * self.factor

    def eigenvalue(self, energy: float) -> float:
        """The eigenvalue of an energy given in the case's unit."""
        return energy / self.factor


def as_scale(scale) -> EnergyScale:
    """An :class:`EnergyScale` from one, or from E0 alone (a float, or None for dimensionless)."""
    return scale if isinstance(scale, EnergyScale) else EnergyScale(scale, "")


def energy_scale(case: Case, shape=None) -> EnergyScale:
    """E0 (energy of lam = 1 per length unit squared) in the case's energy unit, and its origin."""
    units, particle = case.units, case.particle
    if units.energy == "1":
        return EnergyScale(None, "dimensionless: energies are the eigenvalues lambda")
    if particle.moment_of_inertia is not None:
        inertia = particle.moment_of_inertia * INERTIA_UNITS[particle.inertia_unit]
        radius = case.surface.radius
        # E = hbar^2 lam R^2 / (2 I); lam R^2 is dimensionless, so the length unit cancels
        from scipy.constants import hbar

        e0 = hbar**2 * radius**2 / (2.0 * inertia)
        return EnergyScale(float(joule_to(e0, units.energy)), f"rigid rotor, I = {inertia:.6g} kg m^2")
    mass = (particle.mass if particle.mass is not None else 1.0) * MASS_UNITS[particle.mass_unit]
    mass *= particle.effective_mass
    length = LENGTH_UNITS[units.length]
    e0 = kinetic_scale_joule(mass, length)
    return EnergyScale(float(joule_to(e0, units.energy)), f"hbar^2/(2 m L^2), m = {mass:.6g} kg, L = {length:.6g} m")


# --------------------------------------------------------------------------------------------- potential
def compiled_potential(case: Case, scale: EnergyScale):
    """The case's potential (expression and electric field) as a function of x, y, z, r, theta, phi in lambda
    units (V / E0), or None."""
    from shellmodes.case.fields import add_potentials, field_potential

    return add_potentials(_expression_potential(case, scale), field_potential(case, as_scale(scale).per_lambda))


def _expression_potential(case: Case, scale: EnergyScale):
    if case.potential is None:
        return None
    scale = as_scale(scale)
    compiled = compile_expression(case.potential.expression)

    def expr(**kw):
        try:
            return compiled(**kw)
        except ExpressionError as exc:  # not finite somewhere in the domain
            raise CaseError(str(exc), case.source, "potential.expression") from None

    unit = case.potential.unit
    if unit == "1":
        return expr
    if scale.per_lambda is None:
        raise CaseError("a potential with a physical unit needs a physical units.energy", case.source,
                        "potential.unit")
    # V given in an energy unit: divide by E0 expressed in that same unit
    e0_here = scale.per_lambda * ENERGY_UNITS[case.units.energy] / ENERGY_UNITS[unit]
    return lambda **kw: expr(**kw) / e0_here


def point_potential(expression):
    """A compiled expression as a function of Cartesian coordinate arrays ``(x, y, z) -> V``."""
    if expression is None:
        return None

    def function(x, y, z):
        points = np.column_stack([np.ravel(x), np.ravel(y), np.ravel(z)])
        theta, phi = angles(points)
        values = expression(x=points[:, 0], y=points[:, 1], z=points[:, 2], r=np.linalg.norm(points, axis=1),
                            theta=theta, phi=phi)
        return values.reshape(np.shape(x))

    return function


def radial_potential(case: Case, scale: EnergyScale):
    """The case's potential as a function of r alone (lambda units), or None when it uses x, y, z or angles."""
    from shellmodes.case.fields import breaks_radial_symmetry

    if case.potential is None or breaks_radial_symmetry(case):
        return None
    try:
        compile_expression(case.potential.expression, variables=("r",))
    except ExpressionError:
        return None
    full = compiled_potential(case, scale)

    def potential(r):
        r = np.asarray(r, dtype=float)
        zero = np.zeros_like(r)
        return full(x=zero, y=zero, z=zero, r=r, theta=zero, phi=zero)

    return potential


# ------------------------------------------------------------------------------------------------ shells
def wall_function(wall: Wall):
    """Radius of the wall along unit directions (N, 3) -> (N,)."""
    if wall.offset:  # constant normal distance from the shape (shapes/parallel_wall)
        from shellmodes.shapes.parallel_wall import parallel_radius

        base = wall_function(wall.model_copy(update={"offset": None}))
        return parallel_radius(base, wall.offset, float(np.max(base(np.eye(3)))))
    if wall.shape == "sphere":
        radius = float(wall.radius)
        return lambda d: np.full(len(d), radius)
    if wall.shape in ("ellipsoid", "spheroid"):
        axes = np.array(wall.axes if wall.shape == "ellipsoid" else
                        (wall.equatorial_radius, wall.equatorial_radius, wall.polar_radius), dtype=float)
        # the point t d lies on x^2/a^2 + y^2/b^2 + z^2/c^2 = 1 for t = 1/sqrt(sum (d_i/a_i)^2)
        return lambda d: 1.0 / np.sqrt(np.sum((d / axes) ** 2, axis=1))
    terms = [(t.l, t.m, t.amplitude) for t in (wall.deformation or ())]
    radius = float(wall.radius)

    def star(d):
        theta, phi = angles(d)
        factor = np.ones(len(d))
        for l, m, a in terms:
            factor = factor + a * real_sph_harm(l, m, theta, phi)
        return radius * factor

    return star


def shell_walls(case: Case) -> list:
    """Radius functions of the shell's walls, inside out (None for the missing inner wall of a ball)."""
    shell = case.shell
    return [None if w is None else wall_function(w) for w in (shell.inner, *shell.interfaces, shell.outer)]


def spherically_symmetric(case: Case) -> bool:
    """Whether a shell case is spherically symmetric (concentric spheres, no potential)."""
    from shellmodes.case.fields import breaks_radial_symmetry

    shell = case.shell
    if shell.file is not None or case.potential is not None or breaks_radial_symmetry(case):
        return False
    walls = [w for w in (shell.inner, *shell.interfaces, shell.outer) if w is not None]
    return all(w.shape == "sphere" or (w.shape == "deformed_sphere" and not w.deformation) for w in walls)


def shell_level(case: Case) -> int:
    """Icosphere subdivisions of a shell's directions (``resolution.subdivisions`` or from ``edge_length``)."""
    shell, res = case.shell, case.resolution
    level = res.subdivisions if res.subdivisions is not None else DEFAULT_SHELL_SUBDIVISIONS
    most = MAX_SHELL_SUBDIVISIONS[shell.cells]
    if res.edge_length is not None and shell.outer is not None:
        outer = float(np.max(wall_function(shell.outer)(np.eye(3))))
        level = max(0, int(np.ceil(np.log2(1.05 * outer / res.edge_length))))
        if level > most:
            raise CaseError(f"value {res.edge_length!r}: needs {level} subdivisions of the directions, at most "
                            f"{most} are allowed for shell {shell.cells}; use a larger edge_length", case.source,
                            "resolution.edge_length")
    if level > most:
        raise CaseError(f"value {level!r}: shell {shell.cells} allow at most {most} subdivisions", case.source,
                        "resolution.subdivisions")
    return level


def dirichlet_walls(case: Case, disc=None) -> list[str]:
    """Walls held at zero; a ball (from walls or a mesh file without an inner boundary) has no inner wall."""
    shell = case.shell
    walls = [w for w, c in (("inner", shell.inner_condition), ("outer", shell.outer_condition)) if c == "dirichlet"]
    ball = shell.inner is None if shell.file is None else not len(getattr(disc, "walls", {}).get("inner", ()))
    return [w for w in walls if w != "inner"] if ball else walls


@dataclass(frozen=True)
class Media:
    """Per region: inverse mass m0/m, potential offset in lambda units, and a name for the tables."""

    inverse_mass: dict
    offsets: dict
    names: dict

    @classmethod
    def uniform(cls, region_ids=(0,)) -> Media:
        """One medium of the particle's own mass and no offset in every region."""
        return cls({r: 1.0 for r in region_ids}, {r: 0.0 for r in region_ids}, {r: f"region {r}" for r in region_ids})

    @property
    def lowest_offset(self) -> float:
        """min(0, offsets): part of a lower bound of the spectrum."""
        return min([0.0, *self.offsets.values()])

    def as_dict(self) -> dict:
        return {str(r): {"name": self.names[r], "inverse_mass": self.inverse_mass[r], "offset": self.offsets[r]}
                for r in sorted(self.inverse_mass)}


def media(case: Case, disc, scale: EnergyScale) -> Media:
    """Per-region inverse mass m0/m and potential offset (lambda units), checked against the mesh."""
    shell, particle = case.shell, case.particle
    scale = as_scale(scale)
    ids = disc.region_ids
    entries_by_id = {}
    named = {name: tag for tag, name in getattr(disc, "region_names", {}).items()}
    for i, region in enumerate(shell.media):
        # default tag: the region's place (inside out), or the i-th tag present in a mesh file
        tag = region.tag if region.tag is not None else (ids[i] if shell.file is not None and i < len(ids) else i)
        if isinstance(tag, str):
            if tag not in named:
                present = ", ".join(sorted(named)) if named else "none (the mesh names no volume regions)"
                raise CaseError(f"value {tag!r}: no region of that name in the mesh; names present: {present}",
                                case.source, f"shell.media[{i}].tag")
            tag = named[tag]
        if tag not in ids:
            raise CaseError(f"value {tag!r}: no such region in the mesh; regions present: "
                            f"{', '.join(map(str, ids))}", case.source, f"shell.media[{i}].tag")
        entries_by_id[tag] = region
    missing = [r for r in ids if r not in entries_by_id]
    if shell.media and missing:
        raise CaseError(f"the mesh has regions {', '.join(map(str, missing))} that shell.media does not "
                        "describe; list every region", case.source, "shell.media")
    # offsets are always in units.energy (whatever potential.unit is)
    offset_scale = 1.0 if (case.units.energy == "1" or scale.per_lambda is None) else 1.0 / scale.per_lambda
    inverse_mass, offsets, names = {}, {}, {}
    for r in ids:
        region = entries_by_id.get(r)
        mass = particle.effective_mass if region is None or region.effective_mass is None else region.effective_mass
        inverse_mass[r] = particle.effective_mass / mass
        offsets[r] = 0.0 if region is None else region.offset * offset_scale
        file_name = getattr(disc, "region_names", {}).get(r)
        names[r] = (region.name if region is not None and region.name else file_name or f"region {r}")
    return Media(inverse_mass, offsets, names)
