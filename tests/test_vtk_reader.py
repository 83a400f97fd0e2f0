"""modes.vtu and series.pvd as a VTK reader (pyvista on VTK) sees them.

Orientation: every volume cell has a positive volume in VTK's own cell-size
filter, and every surface triangle's right-hand normal points out (normal .
position > 0 on star-shaped surfaces about the origin; away from the tube's
core circle on a torus); a scanned mesh keeps the file's orientation.
Names: the point arrays are named by mode index only, the per-mode records
are field data, and a sweep's series.pvd offers the same array names at
every step.
"""

from __future__ import annotations

import json
import math
import xml.etree.ElementTree as ET

import meshio
import numpy as np
import pytest

pv = pytest.importorskip("pyvista", reason="pyvista (the plot extra) reads the files as a viewer would")

from shellmodes import run_case  # noqa: E402
from shellmodes.case.schema import case_from_dict  # noqa: E402
from shellmodes.io.outputs import mode_array_names, write_outputs  # noqa: E402
from shellmodes.shapes.reference import icosphere  # noqa: E402


def _write(tmp_path, data, name="out"):
    out = tmp_path / name
    write_outputs(run_case(case_from_dict(data)), out)
    return out


def _read(out):
    with pv.vtk_verbosity("off"):
        return pv.read(out / "modes.vtu")


def _corner_normals(grid):
    """Right-hand normal of each cell's first three nodes (triangle and triangle6 corners), and centroids."""
    cells = []
    for kind, block in grid.cells_dict.items():
        assert kind in (pv.CellType.TRIANGLE, pv.CellType.QUADRATIC_TRIANGLE), kind
        cells.append(np.asarray(block)[:, :3])
    tri = np.concatenate(cells)
    p = np.asarray(grid.points)[tri]
    return np.cross(p[:, 1] - p[:, 0], p[:, 2] - p[:, 0]), p.mean(axis=1)


@pytest.mark.parametrize("degree", [1, 2, 3])
def test_surface_normals_point_out_on_a_deformed_sphere(degree, tmp_path):
    # a harmonically deformed sphere is star-shaped about the origin, so outward means normal . position > 0
    out = _write(tmp_path, {"surface": {"shape": "star", "radius": 1.0,
                                        "deformation": [{"l": 2, "m": 0, "amplitude": 0.2}]},
                            "resolution": {"degree": degree, "subdivisions": 2}, "modes": {"count": 4}})
    normal, centre = _corner_normals(_read(out))
    assert np.all(np.einsum("ij,ij->i", normal, centre) > 0)


def test_torus_normals_point_away_from_the_core_circle(tmp_path):
    out = _write(tmp_path, {"surface": {"shape": "torus", "major_radius": 2.0, "minor_radius": 0.5},
                            "resolution": {"degree": 2, "subdivisions": 2}, "modes": {"count": 4}})
    normal, centre = _corner_normals(_read(out))
    rho = np.hypot(centre[:, 0], centre[:, 1])
    core = np.column_stack([2.0 * centre[:, 0] / rho, 2.0 * centre[:, 1] / rho, np.zeros(len(rho))])
    assert np.all(np.einsum("ij,ij->i", normal, centre - core) > 0)


def test_open_cap_faces_away_from_its_sphere_centre(tmp_path):
    out = _write(tmp_path, {"surface": {"shape": "cap", "radius": 1.0, "half_angle": 60.0},
                            "resolution": {"degree": 1, "subdivisions": 2}, "modes": {"count": 3}})
    normal, centre = _corner_normals(_read(out))
    assert np.all(np.einsum("ij,ij->i", normal, centre) > 0)


@pytest.mark.parametrize("inward", [False, True])
def test_scanned_mesh_keeps_the_files_orientation(inward, tmp_path):
    points, triangles = icosphere(2)
    points = points / np.linalg.norm(points, axis=1)[:, None]
    p = points[triangles]
    outward = np.einsum("ij,ij->i", np.cross(p[:, 1] - p[:, 0], p[:, 2] - p[:, 0]), p[:, 0]) > 0
    triangles = np.where(outward[:, None], triangles, triangles[:, ::-1])  # all outward first
    if inward:
        triangles = triangles[:, ::-1]
    # rotate each row by a varying amount: the file's orientation, not its first vertex, is what must survive
    shift = np.arange(len(triangles)) % 3
    triangles = np.stack([np.roll(row, s) for row, s in zip(triangles, shift)])
    meshio.write(tmp_path / "scan.vtu", meshio.Mesh(points, [("triangle", triangles)]))
    out = _write(tmp_path, {"surface": {"shape": "mesh", "file": str(tmp_path / "scan.vtu")},
                            "resolution": {"degree": 1}, "modes": {"count": 4}})
    grid = _read(out)
    normal, centre = _corner_normals(grid)
    dots = np.einsum("ij,ij->i", normal, centre)
    assert np.all(dots < 0) if inward else np.all(dots > 0)
    # and the cells are the file's own triangles in its own cyclic order, not sorted ones
    written = {tuple(np.roll(row, -int(np.argmin(row)))) for row in np.asarray(grid.cells_dict[pv.CellType.TRIANGLE])}
    given = {tuple(np.roll(row, -int(np.argmin(row)))) for row in triangles}
    assert written == given


def _volumes(grid):
    return np.asarray(grid.compute_cell_sizes(length=False, area=False, volume=True).cell_data["Volume"])


def test_prism_shell_cells_have_positive_volume_summing_to_the_shell(tmp_path):
    out = _write(tmp_path, {"shell": {"inner": {"shape": "sphere", "radius": 1.0},
                                      "outer": {"shape": "sphere", "radius": 2.0},
                                      "cells": "prisms", "layers": 1, "radial_degree": 4},
                            "resolution": {"degree": 2, "subdivisions": 2}, "modes": {"count": 4}})
    volumes = _volumes(_read(out))
    assert np.all(volumes > 0)
    # 4/3 pi (b^3 - a^3) (exact); the linear wedges on the curved nodes are flat-faced chords of the
    # sphere, O(h^2) short of it: 2e-2 allows that at 2 subdivisions of degree 2 (measured 8.6e-3 low)
    # (a viewer's integral of the old file, half its wedges negative, gave ~1e-14 instead)
    assert np.sum(volumes) == pytest.approx(4.0 / 3.0 * math.pi * (2.0**3 - 1.0**3), rel=2e-2)


@pytest.mark.parametrize("cells, degree", [("tetrahedra", 1), ("tetrahedra", 2), ("prisms", 1)])
def test_ball_and_tetrahedral_cells_have_positive_volume(cells, degree, tmp_path):
    out = _write(tmp_path, {"shell": {"outer": {"shape": "ellipsoid", "axes": [1.0, 1.2, 1.5]},
                                      "cells": cells, "layers": 2},
                            "resolution": {"degree": degree, "subdivisions": 2}, "modes": {"count": 3}})
    volumes = _volumes(_read(out))
    assert np.all(volumes > 0)
    # 4/3 pi abc (exact ellipsoid volume); 6e-2: flat-faced linear cells on a coarse (2 subdivisions)
    # mesh fall short of the curved wall, O(h^2) (measured 3.8e-2 for degree-1 tetrahedra)
    assert np.sum(volumes) == pytest.approx(4.0 / 3.0 * math.pi * 1.0 * 1.2 * 1.5, rel=6e-2)


def test_array_names_and_field_data(tmp_path):
    out = _write(tmp_path, {"surface": {"shape": "sphere"}, "resolution": {"degree": 2, "subdivisions": 2},
                            "modes": {"count": 9}})
    grid = _read(out)
    data = json.loads((out / "spectrum.json").read_text())
    names = [mode_array_names(m["index"])["psi"] for m in data["modes"]]
    assert sorted(k for k in grid.point_data.keys() if k.startswith("psi_")) == names == \
        [f"psi_{i:04d}" for i in range(9)]
    np.testing.assert_array_equal(grid.field_data["energy"], [m["energy"] for m in data["modes"]])
    np.testing.assert_array_equal(grid.field_data["residual"], [m["residual"] for m in data["modes"]])
    np.testing.assert_array_equal(grid.field_data["l"], [m["l"] for m in data["modes"]])
    table = (out / "arrays.csv").read_text().splitlines()
    assert table[0].startswith("arrays,mode,energy") and table[4].startswith("psi_0003,3,")


def test_complex_modes_and_currents_are_written_under_their_names(tmp_path):
    from shellmodes.io.outputs import write_vtu

    rng = np.random.default_rng(1)
    points = rng.standard_normal((4, 3))
    psi = rng.standard_normal((4, 2)) + 1j * rng.standard_normal((4, 2))
    current = rng.standard_normal((4, 3, 2))
    from shellmodes.io.outputs import mode_point_data

    write_vtu(tmp_path / "c.vtu", points, [("tetra", np.array([[0, 1, 2, 3]]))],
              point_data=mode_point_data(psi, current), field_data={"energy": np.array([1.0, 2.0])})
    grid = pv.read(tmp_path / "c.vtu")
    for i in range(2):
        names = mode_array_names(i, complex_=True)
        u = grid.point_data[names["re"]] + 1j * grid.point_data[names["im"]]
        np.testing.assert_array_equal(u, psi[:, i])
        np.testing.assert_allclose(grid.point_data[names["density"]], np.abs(psi[:, i]) ** 2, rtol=1e-15)
        np.testing.assert_allclose(np.exp(1j * grid.point_data[names["phase"]]), psi[:, i] / np.abs(psi[:, i]),
                                   rtol=1e-14)
        assert grid.point_data[names["current"]].shape == (4, 3)
        np.testing.assert_array_equal(grid.point_data[names["current"]], current[:, :, i])


def _series(folder):
    root = ET.parse(folder / "series.pvd").getroot()
    return [(d.get("timestep"), folder / d.get("file")) for d in root.iter("DataSet")]


def test_pvd_series_keeps_track_names_and_signs_through_the_steps(tmp_path):
    from shellmodes.studies.sweep import run_sweep

    amplitudes = [-0.1, 0.0, 0.1]  # oblate through the sphere (5-fold l = 2 degeneracy) to prolate
    case = case_from_dict({"surface": {"shape": "star", "radius": 1.0,
                                       "deformation": [{"l": 2, "m": 0, "amplitude": -0.1}]},
                           "resolution": {"degree": 2, "subdivisions": 1}, "modes": {"count": 9},
                           "sweep": {"workers": 1, "parameters": [
                               {"key": "surface.deformation[0].amplitude", "values": amplitudes},
                               {"key": "surface.radius", "values": [1.0, 1.1, 1.2]}]}})
    result = run_sweep(case, tmp_path / "sweep")
    folder = tmp_path / "sweep"
    assert not (folder / ".track-states").exists()
    series = _series(folder)
    # clean time values: the first key's values as written in the case, no float noise
    assert [t for t, _ in series] == [repr(a) for a in amplitudes]
    reader = pv.get_reader(folder / "series.pvd")
    assert reader.time_values == amplitudes
    names, grids = None, []
    for k, t in enumerate(reader.time_values):
        reader.set_active_time_value(t)
        grid = reader.read()[0]
        grids.append(grid)
        these = sorted(grid.point_data.keys())
        assert these == [f"track_{i:02d}" for i in range(len(result.tracks))]
        names = names or these
        assert these == names  # the same names at every step: a viewer keeps its colouring
        # every swept key recorded at every step
        assert grid.field_data["surface.deformation[0].amplitude"][0] == amplitudes[k]
        assert grid.field_data["surface.radius"][0] == pytest.approx([1.0, 1.1, 1.2][k], rel=1e-15)
        energies = {r["track"]: r["energy"] for r in result.rows if r["step"] == k}
        np.testing.assert_array_equal(grid.field_data["track_energy"][list(energies)], list(energies.values()))
    # signs consistent step to step: each track's state overlaps its previous state positively.  The
    # nodal (not mass-weighted) dot product serves as the sign test, both steps numbering nodes alike.
    for before, after in zip(grids, grids[1:]):
        for name in names:
            a, b = np.asarray(before.point_data[name]), np.asarray(after.point_data[name])
            if np.all(np.isfinite(a)) and np.all(np.isfinite(b)):
                assert np.dot(a, b) > 0.5 * np.linalg.norm(a) * np.linalg.norm(b), name
