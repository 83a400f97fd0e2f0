"""Issue 11, items 11-12 (and the mesh part of items 6-7): mesh files, refused with exit 2 naming the file.

Headers that claim more than the file holds are refused before anything is allocated; meshio's
own printing and exits are contained; folded curved triangles, non-finite and out-of-range
coordinates are refused.
"""

from __future__ import annotations

import meshdata
import meshio
import numpy as np
import pytest
from hostile import assert_refused, write_case

from shellmodes.fem.shellmesh import shell_mesh
from shellmodes.shapes.reference import icosphere


def surface_case(name: str) -> str:
    return f'[surface]\nshape = "mesh"\nfile = "{name}"\n\n[resolution]\ndegree = 1\n\n[modes]\ncount = 3\n'


def shell_case(name: str) -> str:
    return f'[shell]\nfile = "{name}"\n\n[resolution]\ndegree = 1\n\n[modes]\ncount = 3\n'


def claims_vtk(path):
    path.write_text("# vtk DataFile Version 4.2\nprobe\nASCII\nDATASET UNSTRUCTURED_GRID\n"
                    "POINTS 2000000000 float\n0 0 0\n1 0 0\n0 1 0\n")


def claims_off(path):
    path.write_text("OFF\n2000000000 1 0\n0 0 0\n1 0 0\n0 1 0\n3 0 1 2\n")


def claims_ply(path):
    path.write_bytes(b"ply\nformat binary_little_endian 1.0\nelement vertex 2000000000\nproperty float x\n"
                     b"property float y\nproperty float z\nelement face 1\nproperty list uchar int vertex_indices\n"
                     b"end_header\n" + bytes(64))


def far_coordinates(scale):
    def write(path):
        p, t = meshdata.sphere(1)
        meshio.write(path, meshio.Mesh(p * scale, [("triangle", t)]))
    return write


def folded_triangle6(path):
    """Every edge node at 0.9 of its edge (then on the sphere): each curved edge runs back on itself."""
    p, t = icosphere(1)
    half = np.stack([t[:, [0, 1]], t[:, [1, 2]], t[:, [2, 0]]], axis=1)
    edges, inverse = np.unique(np.sort(half, axis=2).reshape(-1, 2), axis=0, return_inverse=True)
    mid = p[edges[:, 0]] + 0.9 * (p[edges[:, 1]] - p[edges[:, 0]])
    mid /= np.linalg.norm(mid, axis=1)[:, None]
    cells = np.column_stack([t, len(p) + inverse.reshape(-1, 3)])
    meshio.write(path, meshio.Mesh(np.vstack([p, mid]), [("triangle6", cells)]))


SURFACES = {  # name: (file name, writer, text the message must hold)
    "vtk header 2e9 points": ("claims.vtk", claims_vtk, "2,000,000,000"),
    "off header 2e9 vertices": ("claims.off", claims_off, "2,000,000,000"),
    "binary ply header 2e9 vertices": ("claims.ply", claims_ply, "2,000,000,000"),
    "coordinates 1e160": ("far.vtu", far_coordinates(1e160), "units.length"),
    "coordinates 1e-160": ("near.vtu", far_coordinates(1e-160), "units.length"),
    "folded triangle6": ("folded.vtu", folded_triangle6, "folded"),
}


@pytest.mark.parametrize("name, writer, says", list(SURFACES.values()), ids=list(SURFACES))
def test_bad_surface_file_is_refused(tmp_path, run_cli, name, writer, says):
    writer(tmp_path / name)
    case = write_case(tmp_path, surface_case(name))
    out = tmp_path / "out"
    result = run_cli("run", case, "--out", out)
    assert_refused(result, tmp_path / name, "surface.file", says, out=out)
    assert result.stdout == ""


def test_unfolded_triangle6_is_accepted(tmp_path, run_cli):
    """The same sphere with edge nodes at the edge middles passes (so the check above is not blanket)."""
    p, c = meshdata.quadratic_sphere(1)
    meshio.write(tmp_path / "sphere6.vtu", meshio.Mesh(p, [("triangle6", c)]))
    case = write_case(tmp_path, surface_case("sphere6.vtu").replace("degree = 1", "degree = 2"))
    result = run_cli("run", case, "--out", tmp_path / "out", "--quiet")
    assert result.status == 0, result.stderr


def tetra_file(path, nan: bool = False, truncate: bool = False):
    mesh = shell_mesh([1.0, 2.0], level=1, layers_per_region=1)
    points = mesh.points.copy()
    if nan:
        points[5, 1] = np.nan
    meshio.write(path, meshio.Mesh(points, [("tetra", mesh.tets)]))
    if truncate:
        data = path.read_bytes()
        path.write_bytes(data[: len(data) // 2])


@pytest.mark.parametrize("kind", ["nan", "truncated"])
def test_bad_volume_file_is_refused(tmp_path, run_cli, kind):
    """A NaN vertex (was blamed on modes.backend) and a truncated .vtu (meshio printed and exited)."""
    tetra_file(tmp_path / "shell.vtu", nan=kind == "nan", truncate=kind == "truncated")
    case = write_case(tmp_path, shell_case("shell.vtu"))
    out = tmp_path / "out"
    result = run_cli("run", case, "--out", out)
    assert_refused(result, tmp_path / "shell.vtu", "shell.file", out=out)
    assert result.stdout == ""


def test_volume_header_claim_is_refused(tmp_path, run_cli):
    claims_vtk(tmp_path / "shell.vtk")
    case = write_case(tmp_path, shell_case("shell.vtk"))
    assert_refused(run_cli("run", case, "--out", tmp_path / "out"), "shell.file", "2,000,000,000",
                   out=tmp_path / "out")
