"""Reading and validating surface mesh files (shellmodes.meshfiles.surface).

Write-then-read through every registered format, then one test per defect
that feeds the bad input and checks what the message says.
"""

from __future__ import annotations

import dataclasses
import importlib.util
import logging
from pathlib import Path

import meshdata
import meshio
import numpy as np
import pytest

from shellmodes.errors import MeshError, ShellmodesError
from shellmodes.meshfiles.surface import (
    DEGENERATE_TOLERANCE,
    DUPLICATE_TOLERANCE,
    SURFACE_FORMATS,
    SurfaceFormat,
    read_surface_mesh,
    register_surface_format,
    validate_surface,
)

MESHES = Path(__file__).resolve().parent.parent / "meshes"  # the generating script
SAMPLES = Path(__file__).resolve().parent.parent / "shellmodes" / "samples"  # the meshes, package data

# (suffix, meshio file_format, writer keywords): every suffix in the registry
# is covered, binary and ASCII variants where meshio writes both.
FLAT_WRITES = [
    (".vtu", "vtu", {}),
    (".vtk", "vtk", {}),
    (".vtk", "vtk", {"binary": False}),
    (".msh", "gmsh", {}),
    (".msh", "gmsh22", {"binary": False}),
    (".stl", "stl", {"binary": True}),
    (".stl", "stl", {"binary": False}),
    (".obj", "obj", {}),
    (".ply", "ply", {}),
    (".ply", "ply", {"binary": False}),
    (".off", "off", {}),
]
QUADRATIC_WRITES = [
    (".vtu", "vtu", {}),
    (".vtk", "vtk", {}),
    (".msh", "gmsh", {}),
    (".msh", "gmsh22", {"binary": False}),
]


def write(tmp_path: Path, name: str, points, cells, file_format: str | None = None, **keywords) -> Path:
    """Write cells, a list of (type, array) pairs, with meshio; return the path."""
    path = tmp_path / name
    meshio.write(path, meshio.Mesh(points, cells), file_format=file_format, **keywords)
    return path


def mesh_error(points, triangles) -> str:
    """The message validate_surface raises for a defective mesh."""
    with pytest.raises(MeshError) as info:
        validate_surface(points, triangles, source="bad.vtu")
    assert info.value.source == "bad.vtu"
    assert "\n" not in str(info.value)
    return str(info.value)


def file_error(path) -> str:
    """The message read_surface_mesh raises for a defective file; it names the file."""
    with pytest.raises(MeshError) as info:
        read_surface_mesh(path)
    assert info.value.source == str(path)
    assert str(info.value).startswith(f"{path}: ")
    assert "\n" not in str(info.value)
    return str(info.value)


# --- write-then-read -------------------------------------------------------

def test_every_registered_suffix_is_round_tripped():
    assert {suffix for suffix, _, _ in FLAT_WRITES} == set(SURFACE_FORMATS)


@pytest.mark.parametrize("suffix, file_format, keywords", FLAT_WRITES)
def test_flat_round_trip(tmp_path, suffix, file_format, keywords):
    p, t = meshdata.sphere(2)
    path = write(tmp_path, f"sphere{suffix}", p, [("triangle", t)], file_format, **keywords)
    mesh = read_surface_mesh(path)
    assert mesh.source == str(path)
    assert mesh.closed
    assert mesh.quadratic_nodes is None
    assert mesh.points.shape == p.shape and mesh.triangles.shape == t.shape
    assert mesh.points.dtype == np.float64 and mesh.triangles.dtype == np.int64
    if suffix == ".stl":
        # STL keeps float32 coordinates and its own vertex order: compare the
        # total area to float32 round-off (~6e-8 relative, 1e-6 leaves margin).
        assert meshdata.triangle_areas(mesh.points, mesh.triangles).sum() == pytest.approx(
            meshdata.triangle_areas(p, t).sum(), rel=1e-6)
    else:
        # These formats store doubles (or print 16+ digits) and keep the order.
        np.testing.assert_array_equal(mesh.points, p)
        np.testing.assert_array_equal(mesh.triangles, t)
    # Orientation survives: the divergence-theorem volume stays positive and
    # within the same float32 margin of the written one.
    assert meshdata.enclosed_volume(mesh.points, mesh.triangles) == pytest.approx(
        meshdata.enclosed_volume(p, t), rel=1e-6)


@pytest.mark.parametrize("suffix, file_format, keywords", QUADRATIC_WRITES)
def test_quadratic_round_trip(tmp_path, suffix, file_format, keywords):
    p, cells = meshdata.quadratic_sphere(1)
    path = write(tmp_path, f"sphere6{suffix}", p, [("triangle6", cells)], file_format, **keywords)
    mesh = read_surface_mesh(path)
    n_corners = len(np.unique(cells[:, :3]))
    assert mesh.closed
    assert mesh.points.shape == (n_corners, 3)
    assert mesh.triangles.shape == (len(cells), 3)
    assert mesh.quadratic_nodes.shape == (len(cells), 6, 3)
    np.testing.assert_array_equal(mesh.quadratic_nodes, p[cells])
    # The corners in `triangles` are the first three quadratic nodes.
    np.testing.assert_array_equal(mesh.points[mesh.triangles], mesh.quadratic_nodes[:, :3])
    # Every node was written on the unit sphere; doubles round-trip exactly,
    # so only the normalisation's round-off (a few ulp) remains.
    np.testing.assert_allclose(np.linalg.norm(mesh.quadratic_nodes, axis=2), 1.0, rtol=0, atol=1e-15)


def test_quadratic_cells_need_not_share_edge_nodes(tmp_path):
    # Each triangle with its own copy of its edge nodes (as some exporters
    # write) describes the same surface: positions agree, so it is accepted.
    p, cells = meshdata.quadratic_sphere(1)
    own_nodes = p[cells].reshape(-1, 3)
    own_cells = np.arange(len(own_nodes)).reshape(-1, 6)
    own_cells[:, :3] = cells[:, :3]
    points = np.vstack([p, own_nodes])
    own_cells[:, 3:] += len(p)
    mesh = read_surface_mesh(write(tmp_path, "own.vtu", points, [("triangle6", own_cells)]))
    np.testing.assert_array_equal(mesh.quadratic_nodes, p[cells])


# gmsh 4.1 needs entity tags to write several cell kinds; gmsh 2.2 does not.
@pytest.mark.parametrize("suffix, file_format", [(".vtu", "vtu"), (".msh", "gmsh22")])
def test_other_cells_ignored_and_unused_vertices_dropped(tmp_path, suffix, file_format):
    p, t = meshdata.octahedron()
    stray = np.array([[5.0, 5.0, 5.0], [6.0, 5.0, 5.0]])
    points = np.vstack([stray, p])  # unused vertices first, so triangles must be renumbered
    cells = [("vertex", np.array([[0]])), ("line", np.array([[0, 1], [2, 3]])), ("triangle", t + 2)]
    mesh = read_surface_mesh(write(tmp_path, f"extra{suffix}", points, cells, file_format))
    assert mesh.points.shape == p.shape and mesh.triangles.shape == t.shape
    np.testing.assert_array_equal(mesh.points[mesh.triangles], p[t])
    assert mesh.closed


def test_open_cap_and_closed_sphere(tmp_path):
    p, t = meshdata.cap()
    assert len(t) > 10  # the fixture really is a patch, not a single triangle
    cap = read_surface_mesh(write(tmp_path, "cap.vtu", p, [("triangle", t)]))
    assert cap.closed is False
    assert validate_surface(p, t) is False
    p, t = meshdata.sphere(1)
    assert validate_surface(p, t) is True


def test_stl_facets_are_welded(tmp_path):
    p, t = meshdata.sphere(1)
    path = write(tmp_path, "sphere.stl", p, [("triangle", t)], "stl", binary=True)
    mesh = read_surface_mesh(path)
    # 42 shared vertices, not 3 per facet.
    assert len(mesh.points) == len(p)
    assert mesh.closed


def test_facet_formats_weld_exactly_coincident_corners(tmp_path, monkeypatch):
    # A stand-in facet format whose reader returns three fresh vertices per
    # triangle, with signed zeros, as a raw STL holds them.
    p, t = meshdata.octahedron()
    corners = p[t].reshape(-1, 3)
    half = corners[: len(corners) // 2]
    half[half == 0.0] = -0.0  # the other half keeps +0.0: both must weld together
    facets = meshio.Mesh(corners, [("triangle", np.arange(len(corners)).reshape(-1, 3))])
    monkeypatch.setitem(SURFACE_FORMATS, ".facets", SurfaceFormat("test facets", lambda name: facets,
                                                                  separate_facets=True))
    path = tmp_path / "octahedron.facets"
    path.write_text("read by the stand-in reader\n")
    mesh = read_surface_mesh(path)
    assert mesh.points.shape == p.shape and mesh.closed
    np.testing.assert_array_equal(np.sort(mesh.points[mesh.triangles].reshape(-1, 3), axis=0),
                                  np.sort(p[t].reshape(-1, 3), axis=0))
    # The same data from a format that shares vertices is a defect.
    monkeypatch.setitem(SURFACE_FORMATS, ".facets", SurfaceFormat("test facets", lambda name: facets))
    assert "at the same position" in file_error(path)


def test_register_surface_format_needs_a_dot():
    with pytest.raises(ValueError, match="must start with '.'"):
        register_surface_format("vtu", SURFACE_FORMATS[".vtu"])


def test_planar_points_get_z_zero(tmp_path):
    p, t = meshdata.cap()
    mesh = read_surface_mesh(write(tmp_path, "flat.vtu", p[:, :2], [("triangle", t)]))
    assert mesh.points.shape == p.shape
    np.testing.assert_array_equal(mesh.points[:, 2], 0.0)


def test_result_is_frozen_and_read_only(tmp_path):
    p, t = meshdata.tetrahedron()
    mesh = read_surface_mesh(write(tmp_path, "tet.vtu", p, [("triangle", t)]))
    with pytest.raises(dataclasses.FrozenInstanceError):
        mesh.closed = False
    with pytest.raises(ValueError):
        mesh.points[0, 0] = 1.0
    assert "tet.vtu" in repr(mesh) and "4 points" in repr(mesh) and "closed" in repr(mesh)


def test_validate_surface_leaves_inputs_untouched():
    p, t = meshdata.octahedron()
    p0, t0 = p.copy(), t.copy()
    validate_surface(p, t)
    np.testing.assert_array_equal(p, p0)
    np.testing.assert_array_equal(t, t0)
    assert p.flags.writeable and t.flags.writeable


# --- file-level errors -----------------------------------------------------

def test_missing_file(tmp_path):
    assert "not found" in file_error(tmp_path / "nowhere.vtu")


def test_directory(tmp_path):
    assert "directory" in file_error(tmp_path)


def test_unknown_suffix_lists_supported(tmp_path):
    path = tmp_path / "sphere.xyz"
    path.write_text("1 2 3\n")
    message = file_error(path)
    assert "'.xyz'" in message
    for suffix in (".vtu", ".vtk", ".msh", ".stl", ".obj", ".ply"):
        assert suffix in message


def test_empty_file(tmp_path):
    path = tmp_path / "empty.stl"
    path.write_bytes(b"")
    assert "empty" in file_error(path)


@pytest.mark.parametrize("suffix", sorted(SURFACE_FORMATS))
def test_garbage_is_wrapped_and_nothing_printed(tmp_path, capsys, suffix):
    path = tmp_path / f"garbage{suffix}"
    path.write_bytes(np.random.default_rng(7).bytes(2000))
    message = file_error(path)
    assert "cannot read as" in message
    assert SURFACE_FORMATS[suffix].description in message
    captured = capsys.readouterr()
    assert captured.out == "" and captured.err == ""


@pytest.mark.parametrize("suffix, reason", [(".vtu", "ParseError: syntax error"),
                                            (".msh", "not a valid file of this kind"),
                                            (".stl", "could not convert string to float")])
def test_unreadable_text_says_why(tmp_path, suffix, reason):
    path = tmp_path / f"note{suffix}"
    path.write_text("hello world\n1 2 3\n")
    assert reason in file_error(path)


def test_meshio_warnings_go_to_logging(tmp_path, caplog, capsys):
    # A gmsh block without its $End line makes meshio warn (on stderr).
    p, t = meshdata.tetrahedron()
    path = write(tmp_path, "tet.msh", p, [("triangle", t)], "gmsh22", binary=False)
    text = path.read_text()
    assert "$EndMeshFormat" in text
    path.write_text(text.replace("$EndElements", ""))
    capsys.readouterr()  # drop what meshio's writer printed
    with caplog.at_level(logging.WARNING, logger="shellmodes.meshfiles.surface"):
        mesh = read_surface_mesh(path)
    assert len(mesh.triangles) == 4
    assert capsys.readouterr().err == ""
    assert any("Elements" in record.getMessage() for record in caplog.records)


def test_no_triangle_cells(tmp_path):
    p, _ = meshdata.tetrahedron()
    path = write(tmp_path, "lines.vtu", p, [("line", np.array([[0, 1], [1, 2], [2, 3]])),
                                            ("quad", np.array([[0, 1, 2, 3]]))])
    message = file_error(path)
    assert "no triangle cells; found: line (3), quad (1)" in message


def test_mixed_flat_and_quadratic(tmp_path):
    p, cells = meshdata.quadratic_sphere(1)
    path = write(tmp_path, "mixed.vtu", p, [("triangle6", cells[1:]), ("triangle", cells[:1, :3])])
    assert "mixes flat 'triangle' and quadratic 'triangle6'" in file_error(path)


def test_mismatched_quadratic_edge_node(tmp_path):
    p, cells = meshdata.quadratic_sphere(1)
    own_nodes = p[cells].reshape(-1, 3)
    own_nodes[3] *= 1.01  # triangle 0's node on edge 01 moves off its neighbour's
    own_cells = len(p) + np.arange(len(own_nodes)).reshape(-1, 6)
    own_cells[:, :3] = cells[:, :3]
    path = write(tmp_path, "crack.vtu", np.vstack([p, own_nodes]), [("triangle6", own_cells)])
    message = file_error(path)
    assert "quadratic triangles 0 and " in message and "1 such edges" in message


def test_quadratic_node_index_out_of_range(tmp_path):
    p, cells = meshdata.quadratic_sphere(1)
    cells[5, 4] = len(p) + 3
    path = write(tmp_path, "bad6.vtu", p, [("triangle6", cells)])
    assert f"triangle 5 refers to vertex {len(p) + 3}, but there are {len(p)} vertices" in file_error(path)


def test_nan_coordinate_in_file(tmp_path):
    p, t = meshdata.octahedron()
    p[4, 1] = np.nan
    message = file_error(write(tmp_path, "nan.vtu", p, [("triangle", t)]))
    assert "vertex 4 has coordinates (0, nan, 1)" in message and "finite" in message


def test_nan_in_quadratic_edge_node(tmp_path):
    p, cells = meshdata.quadratic_sphere(1)
    node = cells[2, 5]
    p[node] = [np.nan, np.nan, np.nan]
    message = file_error(write(tmp_path, "nan6.vtu", p, [("triangle6", cells)]))
    assert f"vertex {node} has coordinates (nan, nan, nan)" in message


def test_index_out_of_range_in_file(tmp_path):
    p, t = meshdata.octahedron()
    t[6, 2] = 9
    message = file_error(write(tmp_path, "index.vtu", p, [("triangle", t)]))
    assert "triangle 6 refers to vertex 9, but there are 6 vertices (allowed indices 0 to 5)" in message


def test_duplicated_vertices_in_file(tmp_path):
    # The octahedron with its vertex 4 split: triangles 2 and 3 use a copy.
    p, t = meshdata.octahedron()
    p = np.vstack([p, p[4]])
    t[2:4][t[2:4] == 4] = 6
    message = file_error(write(tmp_path, "split.vtu", p, [("triangle", t)]))
    assert "vertices 4 and 6 are at the same position (0, 0, 1)" in message
    assert "1 such pairs" in message


def test_defect_in_stl_is_found_after_welding(tmp_path):
    # Welding is exact, so a flipped facet stays a defect.
    p, t = meshdata.octahedron()
    t[3] = t[3, ::-1]
    path = write(tmp_path, "flipped.stl", p, [("triangle", t)], "stl", binary=True)
    assert "opposite directions" in file_error(path)


# --- validate_surface on planted defects -----------------------------------

def test_wrong_shapes_and_types():
    p, t = meshdata.tetrahedron()
    assert "points have shape (4, 2); expected (N, 3)" in mesh_error(p[:, :2], t)
    assert "expected integers" in mesh_error(p, t.astype(float))
    assert "triangles have shape (4, 4); expected (M, 3)" in mesh_error(p, np.column_stack([t, t[:, 0]]))
    assert "not an array of numbers" in mesh_error([[0, 0, "x"]], t)


def test_no_triangles():
    p, _ = meshdata.tetrahedron()
    assert "no triangles" in mesh_error(p, np.empty((0, 3), dtype=int))
    assert "no triangles" in mesh_error(p, [])


def test_negative_index():
    p, t = meshdata.tetrahedron()
    t[1, 0] = -1
    assert "triangle 1 refers to vertex -1, but there are 4 vertices" in mesh_error(p, t)


def test_infinite_coordinate():
    p, t = meshdata.tetrahedron()
    p[2, 0] = -np.inf
    assert "vertex 2 has coordinates (-inf, 1, 0)" in mesh_error(p, t)


def test_nan_in_unused_vertex_is_ignored():
    p, t = meshdata.tetrahedron()
    assert validate_surface(np.vstack([p, [np.nan, 0, 0]]), t) is True


def test_degenerate_triangle():
    # A closed "tetrahedron" whose fourth corner lies on the edge 1-2:
    # face (1, 2, 3) has zero area, while the others stay regular.
    p, t = meshdata.tetrahedron()
    p[3] = [0.5, 0.5, 0.0]
    message = mesh_error(p, t)
    assert "triangle 3 (vertices 1, 2, 3) has zero area" in message
    assert f"{DEGENERATE_TOLERANCE:g} x mean edge length squared" in message


def test_repeated_vertex_in_triangle():
    p, t = meshdata.octahedron()
    t[5] = [1, 1, 5]
    assert "triangle 5 (vertices 1, 1, 5) has zero area" in mesh_error(p, t)


def test_thin_but_valid_triangle_is_accepted():
    # A cap whose one vertex is lifted only 1e-5 of the edge length off the
    # plane of its neighbours: area ratio ~1e-5 >> DEGENERATE_TOLERANCE.
    p = np.array([[0.0, 0, 0], [1, 0, 0], [0.5, 1e-5, 0], [0.5, -1, 0]])
    assert validate_surface(p, np.array([[0, 1, 2], [0, 3, 1]])) is False


def test_near_duplicate_vertices():
    # Distance 1e-13 on a mesh of diagonal sqrt(2): below 1e-10 x diagonal.
    p, t = meshdata.tetrahedron()
    p = np.vstack([p, p[3] + [1e-13, 0, 0]])
    t[3, 2] = 4
    message = mesh_error(p, t)
    assert "vertices 3 and 4 are at the same position" in message
    assert f"<= {DUPLICATE_TOLERANCE:g} x bounding-box diagonal" in message


def test_close_but_distinct_vertices_are_accepted():
    # Two cap triangles meeting along an edge, plus a third vertex 1e-7 of
    # the size away from vertex 2 (above the duplicate tolerance).
    p = np.array([[0.0, 0, 0], [1, 0, 0], [0, 1, 0], [1e-7, 1, 0.5]])
    assert validate_surface(p, np.array([[0, 1, 2], [1, 3, 2]])) is False


def test_non_manifold_edge():
    # Three triangles hinged on the edge 0-1 (a "book" with three pages).
    p = np.array([[0.0, 0, 0], [1, 0, 0], [0.5, 1, 0], [0.5, -1, 0], [0.5, 0, 1]])
    t = np.array([[0, 1, 2], [1, 0, 3], [0, 1, 4]])
    message = mesh_error(p, t)
    assert "edge between vertices 0 and 1 is shared by 3 triangles (0, 1, 2)" in message
    assert "at most two" in message


def test_inconsistent_orientation():
    p, t = meshdata.octahedron()
    t[5] = t[5, ::-1]
    message = mesh_error(p, t)
    assert "both run along edge" in message and "opposite directions" in message
    # Triangle 5 shares all three edges with correctly oriented neighbours.
    assert "3 such edges" in message and " 5 " in message


def test_disconnected_pieces():
    p, t = meshdata.two_tetrahedra()
    message = mesh_error(p, t)
    assert "mesh has 2 disconnected pieces (triangles per piece: 4, 4)" in message


def test_many_pieces_are_counted():
    pieces = []
    for shift in range(7):
        p, t = meshdata.tetrahedron()
        pieces.append((p + [2.0 * shift, 0, 0], t + 4 * shift))
    p = np.vstack([q for q, _ in pieces])
    t = np.vstack([s for _, s in pieces])
    assert "mesh has 7 disconnected pieces (triangles per piece: 4, 4, 4, 4, 4, ...)" in mesh_error(p, t)


def test_pinch_vertex():
    p, t = meshdata.pinched_tetrahedra()
    assert meshdata.enclosed_volume(p, t) > 0  # the fixture is outward oriented
    message = mesh_error(p, t)
    assert "vertex 0 (0, 0, 0) joins 2 fans of triangles that share no edge" in message


def test_bow_tie_of_two_triangles():
    p = np.array([[0.0, 0, 0], [1, 0, 0], [1, 1, 0], [-1, 0, 0], [-1, -1, 0]])
    message = mesh_error(p, np.array([[0, 1, 2], [0, 3, 4]]))
    assert "vertex 0 (0, 0, 0) joins 2 fans" in message and "1 such vertices" in message


def test_pinch_inside_one_piece():
    # Glue a sphere's vertex to its antipode: still one edge-connected piece
    # with manifold, consistently oriented edges, but vertex `a` now has two
    # fans (its own and the antipode's).
    p, t = meshdata.sphere(1)
    a = 0
    b = int(np.argmin(p @ p[a]))
    assert p[b] @ p[a] == pytest.approx(-1.0)  # icosphere vertices come in antipodal pairs
    t[t == b] = a
    assert f"vertex {a} " in mesh_error(p, t) and "joins 2 fans" in mesh_error(p, t)


def test_errors_are_project_errors():
    p, t = meshdata.two_tetrahedra()
    with pytest.raises(ShellmodesError):
        validate_surface(p, t)
    with pytest.raises(ValueError):  # MeshError is also a ValueError
        validate_surface(p, t)


# --- sample meshes ---------------------------------------------------------

def _make_samples():
    spec = importlib.util.spec_from_file_location("make_samples", MESHES / "make_samples.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def _pebble_volume(make_samples) -> float:
    """V = (1/3) integral of R^3 over the sphere, by a rule exact for R^3.

    R^3 is a polynomial of degree 9 in (x, y, z): Gauss-Legendre with 10
    nodes in z = cos(theta) (exact to degree 19) times 24 equally spaced phi
    (exact for trigonometric degree below 24) integrates it exactly.
    """
    z, weights = np.polynomial.legendre.leggauss(10)
    phi = 2 * np.pi * np.arange(24) / 24
    Z, PHI = np.meshgrid(z, phi, indexing="ij")
    s = np.sqrt(1 - Z**2)
    directions = np.column_stack([(s * np.cos(PHI)).ravel(), (s * np.sin(PHI)).ravel(), Z.ravel()])
    R = make_samples.pebble_radius(directions).reshape(Z.shape)
    return float((weights[:, None] * R**3).sum() * (2 * np.pi / 24) / 3)


def test_sample_pebble_stl():
    make_samples = _make_samples()
    mesh = read_surface_mesh(SAMPLES / "pebble.stl")
    assert mesh.closed and mesh.quadratic_nodes is None
    assert mesh.triangles.shape == (1280, 3) and mesh.points.shape == (642, 3)
    assert (SAMPLES / "pebble.stl").stat().st_size < 500_000
    # Vertices lie on the pebble to float32 precision (STL), ~1e-7 relative.
    r = np.linalg.norm(mesh.points, axis=1)
    np.testing.assert_allclose(r, make_samples.pebble_radius(mesh.points / r[:, None]), rtol=1e-6)
    # Inscribed flat triangles lose volume of order h^2: at 1280 triangles
    # (h ~ 0.1) the deficit is a few 1e-3; it must be positive (outward
    # faces, inscribed polyhedron of a convex-ish shape) and below 1%.
    exact = _pebble_volume(make_samples)
    deficit = 1 - meshdata.enclosed_volume(mesh.points, mesh.triangles) / exact
    assert 0 < deficit < 1e-2


def test_sample_flat_pebble_volume_converges_at_second_order():
    make_samples = _make_samples()
    exact = _pebble_volume(make_samples)
    errors = [abs(1 - meshdata.enclosed_volume(*make_samples.pebble_flat(level)) / exact)
              for level in (2, 3, 4)]
    # Halving h divides an O(h^2) error by ~4; accept 3.5 to 4.5 for the
    # pre-asymptotic levels.
    ratios = [errors[0] / errors[1], errors[1] / errors[2]]
    assert all(3.5 < ratio < 4.5 for ratio in ratios), ratios


def test_sample_pebble6_vtu():
    make_samples = _make_samples()
    mesh = read_surface_mesh(SAMPLES / "pebble6.vtu")
    assert mesh.closed
    assert mesh.triangles.shape == (320, 3) and mesh.points.shape == (162, 3)
    assert mesh.quadratic_nodes.shape == (320, 6, 3)
    assert (SAMPLES / "pebble6.vtu").stat().st_size < 1_000_000
    # Every node, corner or edge node, lies on the surface (doubles: 1e-14).
    nodes = mesh.quadratic_nodes.reshape(-1, 3)
    r = np.linalg.norm(nodes, axis=1)
    np.testing.assert_allclose(r, make_samples.pebble_radius(nodes / r[:, None]), rtol=1e-14)
    # Edge nodes are off the chords: the geometry really is curved.
    chord_mid = 0.5 * (mesh.quadratic_nodes[:, [0, 1, 2]] + mesh.quadratic_nodes[:, [1, 2, 0]])
    assert np.linalg.norm(mesh.quadratic_nodes[:, 3:] - chord_mid, axis=2).min() > 1e-3


def test_samples_are_regenerated_identically(tmp_path):
    make_samples = _make_samples()
    written = make_samples.write_samples(tmp_path)
    assert [path.name for path in written] == ["pebble.stl", "pebble6.vtu"]
    for path in written:
        fresh, stored = read_surface_mesh(path), read_surface_mesh(SAMPLES / path.name)
        assert fresh.points.shape == stored.points.shape
        np.testing.assert_array_equal(fresh.points, stored.points)
        np.testing.assert_array_equal(fresh.triangles, stored.triangles)


# --- scale -----------------------------------------------------------------

@pytest.mark.slow
def test_million_triangles_validate():
    # 1.3M triangles; a few seconds on this machine (see the module docstring).
    p, t = meshdata.sphere(8)
    assert validate_surface(p, t) is True
    t[-1] = t[-1, ::-1]
    assert "3 such edges" in mesh_error(p, t)
