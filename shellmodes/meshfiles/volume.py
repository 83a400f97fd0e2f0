"""Tetrahedral meshes from files through meshio (``tetra`` and ``tetra10`` cells).

Region ids come from a cell-data array: the one named by the caller, else the
first of :data:`REGION_KEYS` present; region names from the file's physical
names (meshio ``field_data``), so a case can refer to ``tag = "core"``.  meshio already converts gmsh's
``tetra10`` node order to VTK's (vertices, then edges 01, 12, 02, 03, 13, 23),
which is the order :func:`~shellmodes.fem.tetrahedra.discretise_tetrahedra`
expects.
"""

from __future__ import annotations

import dataclasses
import os

import meshio
import numpy as np

from shellmodes.errors import MeshError
from shellmodes.fem.tetrahedra import VolumeDiscretisation, discretise_tetrahedra
from shellmodes.meshfiles.surface import SurfaceFormat, _read_with_meshio, check_coordinate_range, check_header_sizes

__all__ = ["read_volume_mesh", "region_names", "REGION_KEYS"]

REGION_KEYS = ("region", "gmsh:physical", "medit:ref", "CellEntityIds")
_TET_TYPES = ("tetra", "tetra10")


def read_volume_mesh(
    path: str | os.PathLike,
    degree: int | None = None,
    region_key: str | None = None,
    require_regions: bool = False,
    quadrature_order: int | None = None,
) -> VolumeDiscretisation:
    """Read a tetrahedral mesh and discretise it.

    Parameters
    ----------
    path
        Any file meshio reads (``.msh``, ``.vtu``, ``.mesh``, ...).
    degree
        1 or 2; by default 1 for ``tetra`` and 2 for ``tetra10`` cells.
    region_key
        Cell-data array holding region ids; by default the first of
        ``region``, ``gmsh:physical``, ``medit:ref``, ``CellEntityIds``.
    require_regions
        Raise if the file has no region ids (else every tetrahedron is region 0).

    Raises
    ------
    MeshError
        Unreadable file, no tetrahedra, mixed linear and quadratic cells,
        missing region tags when required, inverted or zero-volume cells.
    """
    source = os.fspath(path)
    if not os.path.isfile(source):
        raise MeshError("cannot read mesh: file not found", source)
    check_header_sizes(source)
    # meshio.read prints and exits on files it cannot read: read with its output and exit contained
    data = _read_with_meshio(SurfaceFormat("a mesh file", meshio.read), source)
    kinds = {block.type for block in data.cells if block.type in _TET_TYPES}
    if not kinds:
        found = sorted({block.type for block in data.cells}) or ["none"]
        raise MeshError(f"no tetrahedra (found cells: {', '.join(found)}); allowed: tetra, tetra10", source)
    if len(kinds) > 1:
        raise MeshError("mixes tetra and tetra10 cells; use one kind", source)
    kind = kinds.pop()
    blocks = [i for i, block in enumerate(data.cells) if block.type == kind]
    cells = np.vstack([data.cells[i].data for i in blocks])
    keys = [region_key] if region_key is not None else list(REGION_KEYS)
    key = next((k for k in keys if k in data.cell_data), None)
    if key is None:
        if require_regions or region_key is not None:
            wanted = region_key if region_key is not None else " or ".join(REGION_KEYS)
            have = ", ".join(sorted(data.cell_data)) or "none"
            raise MeshError(f"no region tags: cell data {wanted} is missing (cell data present: {have})",
                            source)
        regions = None
    else:
        regions = np.concatenate([np.asarray(data.cell_data[key][i]).reshape(-1) for i in blocks])
        if not np.all(np.equal(np.mod(regions, 1), 0)):
            raise MeshError(f"region tags in {key!r} must be integers", source)
        regions = regions.astype(np.int64)
    if degree is None:
        degree = 2 if kind == "tetra10" else 1
    if kind == "tetra10" and degree == 1:
        cells = cells[:, :4]
    if data.points.ndim != 2 or data.points.shape[1] != 3:
        raise MeshError(f"points have shape {data.points.shape}; a volume mesh needs 3-D points", source)
    if cells.size and (cells.min() < 0 or cells.max() >= len(data.points)):
        raise MeshError(f"cells refer to points outside 0..{len(data.points) - 1}", source)
    used = data.points[np.unique(cells)]
    if not np.all(np.isfinite(used)):
        point = int(np.unique(cells)[np.flatnonzero(~np.isfinite(used).all(axis=1))[0]])
        raise MeshError(f"point {point} has a coordinate that is not finite; coordinates must be finite", source)
    check_coordinate_range(used, source)
    disc = discretise_tetrahedra(data.points, cells, regions, degree, source=source,
                                 quadrature_order=quadrature_order)
    names = region_names(data.field_data)
    return dataclasses.replace(disc, region_names=names) if names else disc


def region_names(field_data: dict) -> dict[int, str]:
    """Region id -> name from meshio ``field_data`` (gmsh physical names; entries [id, dimension]).

    Only three-dimensional entries name volume regions; entries without a
    dimension are taken as they are.
    """
    names = {}
    for name, value in field_data.items():
        value = np.asarray(value).reshape(-1)
        if len(value) == 0 or (len(value) >= 2 and int(value[1]) != 3):
            continue
        names[int(value[0])] = str(name)
    return names
