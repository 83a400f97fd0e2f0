"""One interface for every discretisation: curved surfaces, curved tetrahedra, layered curved prisms.

The pipeline (:mod:`shellmodes.pipeline`), the solver planner
(:mod:`shellmodes.eigen.planner`) and the outputs only ever talk to a
:class:`Discretisation`: nodes, dof count, size h, free dofs for given walls,
assembled operators for given media and potential, the mass matrix, cells for
VTK, a one-line description and a mesh record.  Each kind wraps the object its
own module builds (:class:`~shellmodes.fem.surface.CurvedSurface`,
:class:`~shellmodes.volume.VolumeDiscretisation`,
:class:`~shellmodes.fem.prisms.PrismShell`) and registers a builder from a
case under its name; :func:`build_discretisation` picks the builder.  Adding a
discretisation is one class and one ``@register_builder`` function: nothing in
the pipeline, the planner or the outputs changes.

Lower layers raise :class:`~shellmodes.errors.GeometryError` and
:class:`~shellmodes.errors.MeshError`; the builders here turn them into a
:class:`~shellmodes.errors.CaseError` naming the case key.
"""

from __future__ import annotations

import time
import warnings
from abc import ABC, abstractmethod
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, ClassVar

import numpy as np
import scipy.sparse as sp

from shellmodes.case.model import (
    Media,
    build_shape,
    dirichlet_walls,
    point_potential,
    shell_level,
    shell_walls,
    subdivision_level,
)
from shellmodes.case.schema import Case
from shellmodes.errors import CaseError, GeometryError, MeshError, ProblemError
from shellmodes.fem.assemble import restricted
from shellmodes.fem.forms import expand
from shellmodes.fem.shellmesh import check_wall_order

if TYPE_CHECKING:
    from shellmodes.fem.surface import CurvedSurface
    from shellmodes.shapes import Shape

__all__ = ["Discretisation", "Operators", "ExportCells", "SurfaceDiscretisation", "TetrahedralDiscretisation",
           "PrismDiscretisation", "build_discretisation", "register_builder", "BUILDERS", "discretise",
           "check_walls", "fixed_walls"]


@dataclass(frozen=True, eq=False)
class SelectedDofs:
    """The free unknowns when each is one dof of the mesh (``free``, sorted).

    The interface every free space honours (a ball's merged centre, :mod:`shellmodes.fem.ball`,
    is the other kind): ``representative`` dofs, ``size``, ``restrict(A)``, ``expand(U)``,
    ``coordinates(U)``; ``radial_free`` for prisms.
    """

    free: np.ndarray
    ndofs: int
    radial_free: np.ndarray | None = None
    centre: bool = False

    @property
    def representative(self) -> np.ndarray:
        return self.free

    @property
    def size(self) -> int:
        return len(self.free)

    def restrict(self, A):
        """``A`` on the free dofs."""
        return restricted(A, self.free) if len(self.free) < self.ndofs else A

    def expand(self, U: np.ndarray) -> np.ndarray:
        """Vectors on every dof (zero on fixed walls) from vectors on the free dofs."""
        return expand(U, self.free, self.ndofs)

    def coordinates(self, U: np.ndarray) -> np.ndarray:
        """Free-dof coordinates of vectors given on every dof."""
        return U[self.free]


@dataclass(frozen=True, eq=False)
class Operators:
    """Assembled K (kinetic + potential) and M on every dof, in lambda units.

    ``lower_bound`` is a guaranteed lower bound of the spectrum (0, or the
    potential's and the offsets' minimum); ``extra`` holds what a kind
    measures on the way (a surface's area, a shell's volume).
    """

    K: sp.csr_matrix
    M: sp.csr_matrix
    lower_bound: float
    seconds: float
    extra: dict = field(default_factory=dict)


@dataclass(frozen=True, eq=False)
class ExportCells:
    """Points, meshio cell blocks and cell data for a VTU file (mode values are point data)."""

    points: np.ndarray
    cells: list
    cell_data: dict = field(default_factory=dict)

    def as_dict(self) -> dict:
        return {"points": self.points, "cells": self.cells, "cell_data": self.cell_data}


class Discretisation(ABC):
    """What every discretisation provides (see the module docstring).

    Attributes
    ----------
    kind
        ``"surface"``, ``"tetrahedra"`` or ``"prisms"``.
    labeller
        Name of the labeller in :mod:`shellmodes.spectrum.labelling` that gives modes
        their parent labels (``"surface"`` or ``"volume"``).
    raw
        The wrapped object of the kind's own module.
    """

    kind: ClassVar[str]
    labeller: ClassVar[str]
    raw: object

    @property
    def nodes(self) -> np.ndarray:
        """(ndofs, 3) position of every degree of freedom."""
        return self.raw.nodes

    @property
    def ndofs(self) -> int:
        return int(self.raw.ndofs)

    @property
    def h(self) -> float:
        """Mesh size: the largest reference edge."""
        return float(self.raw.h)

    @property
    def degree(self) -> int:
        return int(self.raw.degree)

    @property
    @abstractmethod
    def nelements(self) -> int:
        """Number of cells."""

    @property
    def region_ids(self) -> list[int]:
        return [0]

    @property
    def region_names(self) -> dict:
        return {}

    @abstractmethod
    def free_dofs(self, fixed) -> np.ndarray:
        """Sorted dofs left free when the walls named in ``fixed`` (``"rim"``, ``"inner"``, ``"outer"``) are 0."""

    def free_space(self, fixed):
        """The unknowns of the problem with the walls in ``fixed`` held at zero (see :class:`SelectedDofs`)."""
        return SelectedDofs(self.free_dofs(fixed), self.ndofs)

    @abstractmethod
    def assemble(self, media: Media, potential=None, terms=None) -> Operators:
        """K and M on every dof for the given media, compiled potential and field terms (lambda units).

        ``terms`` (:class:`~shellmodes.case.fields.FieldTerms` or None): the thin-layer potential and
        vector potentials (:mod:`shellmodes.fem.fields`); K is complex Hermitian with a vector potential.
        """

    @abstractmethod
    def mass_matrix(self) -> sp.csr_matrix:
        """The consistent mass matrix on every dof."""

    @abstractmethod
    def export(self) -> ExportCells:
        """Cells for VTK."""

    def spectral_scale(self, operators: Operators | None = None) -> float:
        """A typical eigenvalue spacing (1/R^2 for the object's size R); sets the shift below the spectrum."""
        return 1.0 / float(np.max(np.linalg.norm(self.nodes, axis=1))) ** 2

    def mesh_info(self) -> dict:
        """The mesh record written to spectrum.json."""
        return {"kind": self.kind, "degree": self.degree, "elements": int(self.nelements), "dofs": self.ndofs,
                "h": self.h}

    def problem_info(self, problem) -> dict:
        """What the problem on this mesh adds to the mesh record (walls, media)."""
        return {}

    def azimuthal_matrix(self) -> sp.csr_matrix | None:
        """Q = integral (du/dphi)(dv/dphi) on every dof where the geometry is symmetric about z, else None.

        See :mod:`shellmodes.fem.azimuthal`; the labeller reads each multiplet's |m| from it.
        """
        return None

    def describe(self) -> str:
        """One line for run.log."""
        return f"{self.kind}: degree {self.degree}, {self.nelements} elements, {self.ndofs} dofs, h = {self.h:.4g}"

    def __repr__(self) -> str:
        return repr(self.raw)


def _oriented(points, cells, cell_data) -> ExportCells:
    """Volume cells turned to positive volumes (scikit-fem's sorted vertices face either way)."""
    from shellmodes.fem.orientation import positive_volume_cells

    return ExportCells(points, positive_volume_cells(points, cells), cell_data)


# ------------------------------------------------------------------------------------------------ surfaces
class SurfaceDiscretisation(Discretisation):
    """A curved Lagrange surface (:class:`~shellmodes.fem.surface.CurvedSurface`) of an analytic or mesh shape."""

    kind = "surface"
    labeller = "surface"

    def __init__(self, surface, shape, rim: str | None = None):
        self.raw = surface
        self.shape = shape
        #: the case's rim condition; None for closed surfaces
        self.rim = rim if (not shape.closed and len(surface.boundary_dofs)) else None

    @property
    def nelements(self) -> int:
        return int(self.raw.mesh.nelements)

    def free_dofs(self, fixed) -> np.ndarray:
        free = np.arange(self.ndofs)
        boundary = self.raw.boundary_dofs
        if "rim" in fixed and len(boundary):
            free = np.setdiff1d(free, boundary)
        return free

    def assemble(self, media: Media, potential=None, terms=None) -> Operators:
        from shellmodes.fem.forms import assemble_surface

        problem = assemble_surface(self.raw, potential)
        K, lower, extra, seconds = problem.K, problem.lower_bound, {"area": problem.area}, problem.timings["assembly"]
        if terms is not None:
            from shellmodes.fem.fields import surface_field_operators

            t0 = time.perf_counter()
            K, lower, more = surface_field_operators(self.raw, self.shape, terms, K, lower)
            extra.update(more)
            seconds += time.perf_counter() - t0
        return Operators(K, problem.M, lower, seconds, extra)

    def mass_matrix(self) -> sp.csr_matrix:
        import skfem

        from shellmodes.fem.forms import mass

        return skfem.asm(mass, self.raw.basis).tocsr()

    def spectral_scale(self, operators: Operators | None = None) -> float:
        """4 pi / area = 1/R_eq^2, the first nonzero eigenvalue of the sphere of the same area over 2."""
        area = operators.extra["area"] if operators is not None else float(
            np.ones(self.ndofs) @ (self.mass_matrix() @ np.ones(self.ndofs)))
        return 4.0 * np.pi / area

    def export(self) -> ExportCells:
        """Cells with outward normals (a mesh file's cells keep the file's orientation)."""
        from shellmodes.fem.orientation import flip_cells, outward_flips
        from shellmodes.fem.surface import lagrange_element, lattice_cells

        degree = self.raw.degree
        t = self.raw.basis.element_dofs
        flips = self.raw.input_flipped if self.shape.name == "mesh" else None
        if flips is None:
            flips = outward_flips(t[:3].T, self.raw.nodes)
        if degree == 2:
            return ExportCells(self.raw.nodes, [("triangle6", flip_cells("triangle6", t.T, flips))])
        sub = lattice_cells(lagrange_element(degree), degree)
        cells = t[sub.T].transpose(2, 1, 0)  # (Nel, k^2, 3)
        cells[flips] = cells[flips][:, :, [0, 2, 1]]
        return ExportCells(self.raw.nodes, [("triangle", cells.reshape(-1, 3))])

    def mesh_info(self) -> dict:
        shape = self.shape
        return {"kind": "surface", "shape": shape.parameters(), "degree": self.degree,
                "geometry_degree": self.raw.geometry_degree, "elements": self.nelements, "dofs": self.ndofs,
                "h": self.h, "exact_area": shape.exact_area(), "closed": bool(shape.closed)}

    def problem_info(self, problem) -> dict:
        return {"rim": self.rim}

    def azimuthal_matrix(self) -> sp.csr_matrix | None:
        from shellmodes.fem.azimuthal import basis_azimuthal_matrix, shape_axisymmetric

        return basis_azimuthal_matrix(self.raw.basis) if shape_axisymmetric(self.shape) else None

    def describe(self) -> str:
        return f"mesh: degree {self.degree}, {self.nelements} elements, {self.ndofs} dofs, h = {self.h:.4g}"


def discretise(case: Case, shape: Shape | None = None) -> CurvedSurface:
    """The curved Lagrange surface (:class:`~shellmodes.fem.surface.CurvedSurface`) of a surface case.

    Parameters
    ----------
    case : Case
        A case with a ``[surface]`` table.
    shape : Shape, optional
        The surface's exact map, if already built (default: from the case).

    Returns
    -------
    CurvedSurface
        Elements and geometry of ``case.resolution`` on the shape.
    """
    from shellmodes.fem.surface import curved_surface

    shape = build_shape(case) if shape is None else shape
    res = case.resolution
    level = subdivision_level(case, shape)
    points, triangles = shape.reference(level)
    element_nodes = getattr(shape, "quadratic_nodes", None) if level == 0 else None
    if shape.name == "mesh" and shape.snap_shape is None and res.degree > 1 and (
            element_nodes is None or res.degree != 2):
        warnings.warn(f"{case.source}: degree {res.degree} elements on the flat triangles of "
                      f"{shape.file}: the geometry limits eigenvalue accuracy to O(h^2); give quadratic "
                      "cells with degree 2 or set surface.snap", UserWarning, stacklevel=2)
    return curved_surface(points, triangles, res.degree, project=shape.project,
                          quadrature_order=res.quadrature_order, element_nodes=element_nodes,
                          unwrap=shape.unwrap, geometry_degree=res.geometry_degree)


# ------------------------------------------------------------------------------------------------- volumes
class _Volume(Discretisation):
    labeller = "volume"

    def __init__(self, raw, axisymmetric: bool = False):
        self.raw = raw
        #: every wall and interface is symmetric about z (mesh files: never claimed)
        self.axisymmetric = bool(axisymmetric)

    def assemble(self, media: Media, potential=None, terms=None) -> Operators:
        t0 = time.perf_counter()
        function = point_potential(potential)
        K, M = self._assembled(media.inverse_mass, media.offsets, function)
        lower = media.lowest_offset
        if function is not None:
            lower = min(lower, float(np.min(function(*self.nodes.T))))
        extra = {}
        if terms is not None and terms.complex:
            K, extra = self._field_terms(terms, media, sp.csr_matrix(K))
        return Operators(sp.csr_matrix(K), sp.csr_matrix(M), lower, time.perf_counter() - t0, extra)

    def _field_terms(self, terms, media: Media, K):
        """(K, extra) with a vector potential added; kinds without one refuse (checked before: case/fields)."""
        raise ProblemError(f"shell cells {self.kind!r} take no magnetic field in this version", "fields.magnetic")

    @abstractmethod
    def _assembled(self, inverse_mass: dict, offsets: dict, function):
        """(K, M) of the wrapped object's own assembler."""

    @property
    def region_ids(self) -> list[int]:
        return self.raw.region_ids

    @property
    def region_names(self) -> dict:
        return getattr(self.raw, "region_names", {})

    @property
    def walls(self) -> dict:
        return getattr(self.raw, "walls", {})

    @property
    def source(self) -> str:
        return self.raw.source

    def mesh_info(self) -> dict:
        return {"kind": "shell", "source": self.source, "cells": self.kind, "degree": self.degree,
                "elements": int(self.nelements), "dofs": self.ndofs, "h": self.h}

    def problem_info(self, problem) -> dict:
        return {"regions": problem.media.as_dict(), "dirichlet_walls": list(problem.fixed),
                "spherically_symmetric": problem.symmetric}


class TetrahedralDiscretisation(_Volume):
    """Curved P1/P2 tetrahedra (:class:`~shellmodes.volume.VolumeDiscretisation`): shells, balls, mesh files."""

    kind = "tetrahedra"

    @property
    def nelements(self) -> int:
        return int(self.raw.mesh.nelements)

    def free_dofs(self, fixed) -> np.ndarray:
        from shellmodes.fem.assemble import free_dofs

        fixed = [w for w in fixed if w != "rim"]
        return free_dofs(self.raw, fixed) if fixed else np.arange(self.ndofs)

    def _assembled(self, inverse_mass, offsets, function):
        from shellmodes.fem.assemble import assemble_volume

        return assemble_volume(self.raw, inverse_mass, offsets, function)

    def _field_terms(self, terms, media: Media, K):
        from shellmodes.fem.fields import volume_field_operators

        return volume_field_operators(self.raw, terms, media.inverse_mass, K)

    def mass_matrix(self) -> sp.csr_matrix:
        from shellmodes.fem.assemble import assemble_volume

        return assemble_volume(self.raw, {r: 1.0 for r in self.region_ids})[1].tocsr()

    def export(self) -> ExportCells:
        from shellmodes.fem.tetrahedra import export_cells

        return _oriented(*export_cells(self.raw))

    def describe(self) -> str:
        return f"mesh: degree {self.degree}, {self.nelements} tetrahedra, {self.ndofs} dofs, h = {self.h:.4g}"

    def azimuthal_matrix(self) -> sp.csr_matrix | None:
        from shellmodes.fem.azimuthal import basis_azimuthal_matrix

        return basis_azimuthal_matrix(self.raw.basis) if self.axisymmetric else None


class PrismDiscretisation(_Volume):
    """Layered curved prisms (:class:`~shellmodes.fem.prisms.PrismShell`): surface degree x radial degree."""

    kind = "prisms"

    @property
    def nelements(self) -> int:
        return int(self.raw.nelements)

    def free_dofs(self, fixed) -> np.ndarray:
        return self.raw.free_dofs([w for w in fixed if w != "rim"])

    def free_radial(self, fixed) -> np.ndarray:
        return self.raw.free_radial([w for w in fixed if w != "rim"])

    @property
    def ball(self) -> bool:
        """The innermost layer closes at the centre on one merged dof."""
        return bool(self.raw.ball)

    def free_space(self, fixed):
        from shellmodes.fem.ball import free_space

        space = free_space(self.raw, [w for w in fixed if w != "rim"])
        if space.centre:
            return space
        return SelectedDofs(space.representative, self.ndofs, radial_free=space.radial_free)

    def _assembled(self, inverse_mass, offsets, function):
        from shellmodes.fem.prisms import assemble_prisms

        return assemble_prisms(self.raw, inverse_mass, offsets, function)

    def separates(self) -> bool:
        """Whether the walls are concentric spheres about the origin (the matrices are Kronecker sums)."""
        return self.raw.concentric_spheres()

    def kronecker_factors(self, media: Media, radial=None):
        """(K_s, M_s, A, B, C) with K = K_s (x) B + M_s (x) A, M = M_s (x) C (concentric spheres only)."""
        from shellmodes.fem.prisms import kronecker_factors

        return kronecker_factors(self.raw, media.inverse_mass, media.offsets, radial)

    def azimuthal_matrix(self) -> sp.csr_matrix | None:
        """Q from the walls' own symmetry (exact Kronecker factors for concentric spheres)."""
        from shellmodes.fem.azimuthal import prism_azimuthal_kronecker, prism_azimuthal_matrix, walls_axisymmetric

        if self.separates():
            return prism_azimuthal_kronecker(self.raw)
        return prism_azimuthal_matrix(self.raw) if walls_axisymmetric(self.raw.walls) else None

    def mass_matrix(self) -> sp.csr_matrix:
        from shellmodes.fem.prisms import assemble_prisms, kronecker_factors

        if self.separates():
            Ks, Ms, A, B, C = kronecker_factors(self.raw, {})
            return sp.kron(Ms, C).tocsr()
        return assemble_prisms(self.raw, {})[1].tocsr()

    def export(self) -> ExportCells:
        from shellmodes.fem.prisms import export_prisms

        return _oriented(*export_prisms(self.raw))

    def mesh_info(self) -> dict:
        raw = self.raw
        return {**super().mesh_info(), "radial_degree": raw.radial_degree, "geometry_degree": raw.geometry_degree,
                "surface_dofs": raw.n_surface, "radial_dofs": raw.n_radial}

    def describe(self) -> str:
        return (f"mesh: degree {self.degree} x radial {self.raw.radial_degree}, {self.nelements} prisms, "
                f"{self.ndofs} dofs, h = {self.h:.4g}")


# ------------------------------------------------------------------------------------------------ builders
#: builder name -> function(case) -> Discretisation
BUILDERS: dict[str, Callable[[Case], Discretisation]] = {}


def register_builder(name: str):
    """Register ``function(case) -> Discretisation`` under ``name``."""

    def wrap(function):
        BUILDERS[name] = function
        return function

    return wrap


def builder_name(case: Case) -> str:
    """Which builder a case needs: ``"surface"``, ``"tetrahedra"`` or ``"prisms"``."""
    if case.surface is not None:
        return "surface"
    return "prisms" if case.shell.cells == "prisms" else "tetrahedra"


def build_discretisation(case: Case) -> Discretisation:
    """The discretisation a case describes (see :data:`BUILDERS`)."""
    return BUILDERS[builder_name(case)](case)


@register_builder("surface")
def _surface(case: Case) -> SurfaceDiscretisation:
    shape = build_shape(case)
    return SurfaceDiscretisation(discretise(case, shape), shape, getattr(case.surface, "rim", None))


@register_builder("tetrahedra")
def _tetrahedra(case: Case) -> TetrahedralDiscretisation:
    from shellmodes.fem.azimuthal import walls_axisymmetric
    from shellmodes.fem.shellmesh import shell_mesh
    from shellmodes.fem.tetrahedra import discretise as discretise_volume
    from shellmodes.meshfiles.volume import read_volume_mesh

    shell, res = case.shell, case.resolution
    if shell.file is not None:
        from shellmodes.case.model import mesh_file

        path = mesh_file(case, shell.file, "shell.file")
        try:
            return TetrahedralDiscretisation(read_volume_mesh(
                path, degree=res.degree, require_regions=bool(shell.media), quadrature_order=res.quadrature_order))
        except MeshError as exc:
            raise CaseError(exc.reason, exc.source or case.source, "shell.file") from None
    with _shell_errors(case):
        walls = shell_walls(case)
        mesh = shell_mesh(walls, level=shell_level(case), layers_per_region=_layers(case))
        return TetrahedralDiscretisation(discretise_volume(mesh, res.degree, quadrature_order=res.quadrature_order),
                                         axisymmetric=walls_axisymmetric(walls))


@register_builder("prisms")
def _prisms(case: Case) -> PrismDiscretisation:
    from shellmodes.fem.prisms import prism_shell

    shell, res = case.shell, case.resolution
    from shellmodes.case.model import energy_scale
    from shellmodes.fem.layering import case_fractions

    walls = shell_walls(case)
    with _shell_errors(case):
        return PrismDiscretisation(prism_shell(
            walls, shell_level(case), _layers(case), degree=res.degree,
            radial_degree=shell.radial_degree, geometry_degree=res.geometry_degree,
            quadrature_order=res.quadrature_order,
            fractions=case_fractions(case, walls, energy_scale(case).per_lambda)))


def _layers(case: Case):
    layers = case.shell.layers
    return layers if isinstance(layers, int) else list(layers)


class _shell_errors:
    """Turn geometry and mesh errors of a shell's construction into case errors on the key ``shell``."""

    def __init__(self, case: Case):
        self.case = case

    def __enter__(self):
        return self

    def __exit__(self, kind, exc, tb):
        if isinstance(exc, GeometryError):
            raise CaseError(str(exc), self.case.source, "shell") from None
        if isinstance(exc, MeshError):
            raise CaseError(exc.reason, self.case.source, "shell") from None
        return False


def check_walls(case: Case) -> None:
    """The walls' radii and ordering, checked cheaply (no mesh): what a sweep validates per step."""
    if case.shell.file is not None:
        return
    try:
        check_wall_order(shell_walls(case), min(shell_level(case), 6))
    except GeometryError as exc:
        raise CaseError(str(exc), case.source, "shell") from None


def fixed_walls(case: Case, disc: Discretisation) -> list[str]:
    """Walls held at zero: a surface's hard rim, a shell's Dirichlet walls."""
    if case.surface is not None:
        closed = disc.shape.closed
        return ["rim"] if (not closed and getattr(case.surface, "rim", None) == "dirichlet") else []
    return dirichlet_walls(case, disc)
