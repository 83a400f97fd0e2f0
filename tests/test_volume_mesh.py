"""Layered shell/ball meshes, curved P2 geometry nodes, file import, export cells, errors."""

from __future__ import annotations

import meshio
import numpy as np
import pytest
import skfem

from shellmodes.errors import CaseError, GeometryError, MeshError
from shellmodes.fem.assemble import assemble_volume, free_dofs, restricted
from shellmodes.fem.shellmesh import shell_mesh, signed_volumes
from shellmodes.fem.tetrahedra import discretise, discretise_tetrahedra, export_cells
from shellmodes.harmonics import real_sph_harm
from shellmodes.meshfiles.volume import read_volume_mesh


def bumpy(radius, amplitude):
    """Star-shaped wall r = R (1 + a Y_20 + a Y_32)."""
    def wall(d):
        theta = np.arccos(np.clip(d[:, 2], -1, 1))
        phi = np.arctan2(d[:, 1], d[:, 0])
        return radius * (1 + amplitude * real_sph_harm(2, 0, theta, phi)
                         + amplitude * real_sph_harm(3, 2, theta, phi))
    return wall


def ellipsoid(a, b, c):
    def wall(d):
        return 1.0 / np.sqrt((d[:, 0] / a) ** 2 + (d[:, 1] / b) ** 2 + (d[:, 2] / c) ** 2)
    return wall


def volume_of(disc):
    K, M = assemble_volume(disc, 1.0)
    return float(M.sum())  # sum of all mass-matrix entries = integral of 1


def tiny_tetra():
    """One right-handed unit tetrahedron and its tetra10 version."""
    p = np.array([[0, 0, 0], [1, 0, 0], [0, 1, 0], [0, 0, 1]], dtype=float)
    mids = np.array([(p[i] + p[j]) / 2 for i, j in ((0, 1), (1, 2), (0, 2), (0, 3), (1, 3), (2, 3))])
    return p, np.array([[0, 1, 2, 3]]), np.vstack([p, mids]), np.array([np.arange(10)])


# ----------------------------------------------------------------------------- structure

def test_counts_and_regions_of_layered_shell():
    m = shell_mesh([1.0, 1.5, 2.0], level=1, layers_per_region=(2, 3))
    # icosphere(1): 42 directions, 80 triangles; 6 node levels, 5 layers x 80 prisms x 3 tets
    assert m.points.shape == (42 * 6, 3)
    assert m.tets.shape == (80 * 5 * 3, 4)
    assert len(m.regions) == len(m.tets)
    assert np.array_equal(np.bincount(m.regions), [80 * 2 * 3, 80 * 3 * 3])
    assert np.all(signed_volumes(m.points, m.tets) > 0)
    r = np.linalg.norm(m.points, axis=1)
    # region 0 tets lie in 1 <= r <= 1.5 and region 1 in 1.5 <= r <= 2 (tolerance: rounding)
    r0, r1 = r[m.tets[m.regions == 0]], r[m.tets[m.regions == 1]]
    assert r0.min() > 1 - 1e-12 and r0.max() < 1.5 + 1e-12
    assert r1.min() > 1.5 - 1e-12 and r1.max() < 2 + 1e-12


def test_prism_split_is_conforming():
    """Every interior face is shared by exactly two tets, boundary faces lie on the walls."""
    m = shell_mesh([1.0, 1.2], level=2, layers_per_region=3)
    faces = np.sort(np.vstack([m.tets[:, f] for f in ((0, 1, 2), (0, 1, 3), (0, 2, 3), (1, 2, 3))]), axis=1)
    _, counts = np.unique(faces, axis=0, return_counts=True)
    assert counts.max() == 2
    # boundary faces: 2 x 320 icosphere(2) triangles (inner and outer wall)
    assert np.count_nonzero(counts == 1) == 2 * 320


def test_thin_shell_has_no_needles():
    """Radial and angular resolution are independent: 8 layers in a 1 % shell."""
    m = shell_mesh([1.0, 1.01], level=2, layers_per_region=8)
    e = m.points[m.tets[:, [0, 1, 2, 3, 0, 1]]] - m.points[m.tets[:, [1, 2, 3, 0, 2, 3]]]
    lengths = np.linalg.norm(e, axis=2)
    assert lengths.min() == pytest.approx(0.01 / 8, rel=1e-9)  # the radial edges
    assert np.all(signed_volumes(m.points, m.tets) > 0)


@pytest.mark.parametrize("core_layers", [0, 3])
def test_ball_core_is_a_block_not_a_fan(core_layers):
    m = shell_mesh([None, 1.0], level=3, layers_per_region=core_layers)
    centre = np.nonzero(np.linalg.norm(m.points, axis=1) < 1e-14)[0]
    assert len(centre) == 1
    touching = np.count_nonzero(np.any(m.tets == centre[0], axis=1))
    # red refinement of the 20-tet icosahedron keeps the centre valence bounded
    # (a radial fan would touch it with all 20 * 4^3 = 1280 tets)
    assert touching <= 40
    assert np.all(signed_volumes(m.points, m.tets) > 0)
    # the total volume approaches 4 pi / 3 (tolerance: straight faces at level 3, h ~ 0.14)
    assert np.sum(signed_volumes(m.points, m.tets)) / 6 == pytest.approx(4 * np.pi / 3, rel=2e-2)


def test_curved_p2_nodes_are_exact_images():
    wall_in, wall_out = bumpy(1.0, 0.1), ellipsoid(2.0, 2.2, 2.5)
    shell = shell_mesh([wall_in, wall_out], level=1, layers_per_region=2)
    disc = discretise(shell, degree=2)
    r = np.linalg.norm(disc.nodes, axis=1)
    d = disc.nodes / r[:, None]
    inner, outer = disc.wall_dofs("inner"), disc.wall_dofs("outer")
    assert len(inner) == len(outer) == 42 + 120  # vertices + edges of icosphere(1)
    # every wall node is exactly on its wall (tolerance: rounding)
    np.testing.assert_allclose(r[inner], wall_in(d[inner]), rtol=1e-13)
    np.testing.assert_allclose(r[outer], wall_out(d[outer]), rtol=1e-13)
    # an edge midpoint of a layered edge: normalised direction, averaged radial parameter
    t = disc.basis.element_dofs
    a, b, mid = t[0, 0], t[1, 0], t[4, 0]  # local edge 01 is the first edge dof
    ea, eb = disc.mesh.t[0, 0], disc.mesh.t[1, 0]
    direction = shell.directions[ea] + shell.directions[eb]
    direction /= np.linalg.norm(direction)
    q = 0.5 * (shell.radial[ea] + shell.radial[eb])
    np.testing.assert_allclose(disc.nodes[mid], shell.place(direction[None], np.array([q]))[0], rtol=1e-13)
    assert a == ea and b == eb


@pytest.mark.parametrize("walls, exact", [
    # ellipsoid volume 4 pi a b c / 3 (common practice)
    ([1.0, ellipsoid(2.0, 2.2, 2.5)], 4 * np.pi / 3 * (2.0 * 2.2 * 2.5 - 1.0)),
    ([None, ellipsoid(1.0, 1.2, 1.5)], 4 * np.pi / 3 * (1.0 * 1.2 * 1.5)),
])
def test_curved_geometry_orders_on_ellipsoids(walls, exact):
    """Volume error of straight P1 and curved P2 geometry: order h^2 and h^4.

    h is taken as 2^-level: each level halves every edge, while the largest edge of the
    coarse icosphere/block shrinks irregularly at first.
    """
    levels = np.array([1, 2, 3])
    h = 2.0 ** -levels
    for degree, order in ((1, 2.0), (2, 4.0)):
        err = np.array([abs(volume_of(discretise(shell_mesh(walls, lev, 1 if walls[0] else 0), degree))
                            - exact) / exact for lev in levels])
        assert len(err) == len(h)
        # measured slopes: 1.93 and 1.92 (P1), 3.95 and 3.94 (P2); allow +-0.3 (pre-asymptotic level 1)
        slope = float(np.polyfit(np.log(h), np.log(err), 1)[0])
        assert slope == pytest.approx(order, abs=0.3)
        if degree == 2:
            assert err[-1] < 3e-5  # measured 1.1e-5 (shell) and 1.4e-5 (ball)


def test_export_cells_follow_vtk_tetra10_order():
    disc = discretise(shell_mesh([1.0, 2.0], 0, 1), degree=2)
    points, cells, data = export_cells(disc)
    assert len(cells) == 1 and cells[0][0] == "tetra10"
    conn = cells[0][1]
    assert conn.shape == (disc.mesh.nelements, 10)
    assert len(data["region"][0]) == len(conn)
    # meshio/VTK tetra10: vertices, then midpoints of edges 01, 12, 02, 03, 13, 23.  On a sphere-only
    # shell the nodes are curved, so compare to the exact map of each edge instead of straight midpoints.
    shell = shell_mesh([1.0, 2.0], 0, 1)
    for k, (i, j) in enumerate(((0, 1), (1, 2), (0, 2), (0, 3), (1, 3), (2, 3))):
        expected = shell.edge_midpoints(np.column_stack([conn[:, i], conn[:, j]]))
        np.testing.assert_allclose(points[conn[:, 4 + k]], expected, rtol=1e-13)
    p1 = export_cells(discretise(shell, degree=1))
    assert p1[1][0][0] == "tetra" and p1[1][0][1].shape == (60, 4)


def test_folded_curved_elements_raise_and_refinement_cures_them():
    """A wall with a strong l = 6 ripple folds coarse quadratic tetrahedra (straight ones are fine)."""
    def rippled(d):
        theta = np.arccos(np.clip(d[:, 2], -1, 1))
        phi = np.arctan2(d[:, 1], d[:, 0])
        return 1.6 * (1 + 0.3 * real_sph_harm(6, 3, theta, phi))

    coarse = shell_mesh([1.0, rippled], level=1, layers_per_region=1)
    assert np.all(signed_volumes(coarse.points, coarse.tets) > 0)
    with pytest.raises(MeshError, match=r"curved tetrahedron \d+ is inverted or flat \(Jacobian -"):
        discretise(coarse, degree=2)
    fine = discretise(shell_mesh([1.0, rippled], level=3, layers_per_region=1), degree=2)
    assert fine.ndofs > 0


def test_degree_three_is_refused():
    with pytest.raises(CaseError, match="degree 3"):
        discretise(shell_mesh([1.0, 2.0], 0, 1), degree=3)


# ----------------------------------------------------------------------------- geometry errors

@pytest.mark.parametrize("walls, message", [
    ([2.0, 1.0], r"wall 1 \(radius 1\) crosses wall 0 \(radius 2\)"),
    ([1.0, 1.0], r"wall 1 \(radius 1\) touches wall 0"),
    ([0.0, 1.0], r"wall 0 has radius 0 "),
    ([-1.0, 1.0], r"wall 0 has radius -1 "),
    ([None, 1.0, 0.5], r"wall 2 \(radius 0.5\) crosses wall 1"),
])
def test_impossible_walls_raise(walls, message):
    with pytest.raises(GeometryError, match=message):
        shell_mesh(walls, level=1, layers_per_region=1)


def test_crossing_found_between_mesh_directions():
    """Walls crossing only in a narrow spot between the level-0 vertices are still caught."""
    spot = np.array([0.0, 0.0, 1.0]) + np.array([0.3, 0.2, 0.0])
    spot /= np.linalg.norm(spot)
    ico = shell_mesh([1.0, 2.0], 0, 1).directions[:12]
    assert np.min(np.linalg.norm(ico - spot, axis=1)) > 0.2  # the spot is far from every vertex

    def dented(d):
        return 2.0 - 1.5 * np.exp(-np.sum((d - spot) ** 2, axis=1) / 0.01)

    with pytest.raises(GeometryError, match=r"wall 1 .* crosses wall 0 .* at direction \(0\.2[0-9]*, 0\.1"):
        shell_mesh([1.0, dented], level=0, layers_per_region=1)
    assert np.all(dented(ico) > 1.9)  # at the mesh vertices alone the walls look fine


@pytest.mark.parametrize("kwargs, message", [
    (dict(interfaces=[1.0], level=1, layers_per_region=1), "at least two walls"),
    (dict(interfaces=[1.0, None], level=1, layers_per_region=1), "wall 1 is None"),
    (dict(interfaces=[1.0, 2.0], level=1, layers_per_region=0), "region 0 has 0 layers"),
    (dict(interfaces=[1.0, 2.0], level=1, layers_per_region=(1, 2)), "2 entries for 1 regions"),
    (dict(interfaces=[1.0, "big"], level=1, layers_per_region=1), "wall 1 is 'big'"),
    (dict(interfaces=[1.0, lambda d: np.ones(3)], level=1, layers_per_region=1), "returned 3 radii"),
    (dict(interfaces=[None, 1.0], level=1, layers_per_region=2, core_fraction=1.5), "core_fraction 1.5"),
])
def test_bad_arguments_raise(kwargs, message):
    with pytest.raises(GeometryError, match=message):
        shell_mesh(**kwargs)


def test_region_without_inverse_mass_raises():
    disc = discretise(shell_mesh([1.0, 1.5, 2.0], 0, 1), 1)
    with pytest.raises(CaseError, match=r"no value for region\(s\) \[1\]"):
        assemble_volume(disc, {0: 1.0})
    with pytest.raises(CaseError, match="inverse mass -1.0 in region 1"):
        assemble_volume(disc, {0: 1.0, 1: -1.0})
    with pytest.raises(CaseError, match="no inner wall"):
        free_dofs(discretise(shell_mesh([None, 1.0], 0, 0), 1), ("inner",))


# ----------------------------------------------------------------------------- files

def test_write_then_read_tetra10_keeps_geometry_and_regions(tmp_path):
    disc = discretise(shell_mesh([1.0, 1.5, 2.0], 1, 1), degree=2)
    points, cells, data = export_cells(disc)
    path = tmp_path / "shell.vtu"
    meshio.write(path, meshio.Mesh(points, cells, cell_data=data))
    back = read_volume_mesh(path, require_regions=True)
    assert back.degree == 2 and back.ndofs == disc.ndofs
    assert np.array_equal(np.bincount(back.regions), np.bincount(disc.regions))
    K0, M0 = assemble_volume(disc, {0: 1.0, 1: 0.5})
    K1, M1 = assemble_volume(back, {0: 1.0, 1: 0.5})
    # same curved elements, so the same total mass and stiffness (tolerance: rounding in the sums)
    assert float(M1.sum()) == pytest.approx(float(M0.sum()), rel=1e-12)
    assert abs(K1).sum() == pytest.approx(abs(K0).sum(), rel=1e-12)
    # walls found from boundary components: 162 P2 nodes on each sphere of icosphere(1)
    assert len(back.wall_dofs("inner")) == len(back.wall_dofs("outer")) == 162


def test_gmsh_tetra10_round_trip_keeps_curved_nodes(tmp_path):
    """meshio reorders gmsh's tetra10 nodes to VTK's on write and read; the curved geometry survives."""
    disc = discretise(shell_mesh([1.0, 2.0], 1, 1), degree=2)
    points, cells, data = export_cells(disc)
    path = tmp_path / "shell.msh"
    meshio.write(path, meshio.Mesh(points, cells, cell_data={"gmsh:physical": data["region"],
                                                            "gmsh:geometrical": data["region"]}),
                 file_format="gmsh22", binary=False)
    back = read_volume_mesh(path, require_regions=True)
    assert back.degree == 2 and back.ndofs == disc.ndofs
    # tolerance: the ASCII file keeps about 16 significant digits
    assert volume_of(back) == pytest.approx(volume_of(disc), rel=1e-12)
    r = np.linalg.norm(back.nodes[back.wall_dofs("outer")], axis=1)
    np.testing.assert_allclose(r, 2.0, rtol=1e-12)


def test_gmsh_physical_tags_are_regions(tmp_path):
    m = skfem.MeshTet.init_tensor(np.linspace(0, 1, 3), np.linspace(0, 1, 3), np.linspace(0, 1, 3))
    m = m.oriented() if hasattr(m, "oriented") else m
    tags = np.where(m.p[0, m.t].mean(axis=0) < 0.5, 7, 9)
    path = tmp_path / "cube.msh"
    mesh = meshio.Mesh(m.p.T, [("tetra", m.t.T)],
                       cell_data={"gmsh:physical": [tags], "gmsh:geometrical": [tags]})
    meshio.write(path, mesh, file_format="gmsh22", binary=False)
    disc = read_volume_mesh(path)
    assert disc.region_ids == [7, 9]
    assert float(assemble_volume(disc, {7: 1.0, 9: 2.0})[1].sum()) == pytest.approx(1.0, rel=1e-12)


def test_missing_region_tags_raise_when_asked(tmp_path):
    p, t, _, _ = tiny_tetra()
    path = tmp_path / "plain.vtu"
    meshio.write(path, meshio.Mesh(p, [("tetra", t)]))
    assert read_volume_mesh(path).region_ids == [0]
    with pytest.raises(MeshError, match=r"plain.vtu: no region tags: cell data region or gmsh:physical"):
        read_volume_mesh(path, require_regions=True)
    with pytest.raises(MeshError, match="cell data material is missing"):
        read_volume_mesh(path, region_key="material")


def test_inverted_and_flat_tets_raise(tmp_path):
    p, t, p10, t10 = tiny_tetra()
    with pytest.raises(MeshError, match=r"tetrahedron 0 has negative volume \(inverted\) -0.167"):
        discretise_tetrahedra(p, t[:, [1, 0, 2, 3]])
    flat = p.copy()
    flat[3] = [0.3, 0.3, 0.0]
    with pytest.raises(MeshError, match="tetrahedron 0 has zero volume"):
        discretise_tetrahedra(flat, t)
    # a tetra10 whose edge node is pulled through the opposite face folds the element
    folded = p10.copy()
    folded[4] = [0.5, 0.0, 1.4]
    with pytest.raises(MeshError, match="curved tetrahedron 0 is inverted or flat"):
        discretise_tetrahedra(folded, t10, degree=2)
    assert discretise_tetrahedra(p10, t10, degree=2).ndofs == 10
    path = tmp_path / "bad.vtu"
    meshio.write(path, meshio.Mesh(p, [("tetra", t[:, [1, 0, 2, 3]])]))
    with pytest.raises(MeshError, match=r"bad.vtu: tetrahedron 0 has negative volume"):
        read_volume_mesh(path)


def test_file_without_tetrahedra_raises(tmp_path):
    path = tmp_path / "surface.vtu"
    meshio.write(path, meshio.Mesh(np.eye(3), [("triangle", np.array([[0, 1, 2]]))]))
    with pytest.raises(MeshError, match=r"no tetrahedra \(found cells: triangle\); allowed: tetra, tetra10"):
        read_volume_mesh(path)
    with pytest.raises(MeshError, match="cannot read mesh"):
        read_volume_mesh(tmp_path / "absent.vtu")


def test_restricted_equals_double_indexing():
    disc = discretise(shell_mesh([1.0, 2.0], 1, 2), 1)
    K, _ = assemble_volume(disc, 1.0)
    free = free_dofs(disc, ("inner", "outer"))
    assert len(free) == disc.ndofs - 2 * 42
    A = restricted(K, free)
    B = K[free][:, free]
    assert A.shape == B.shape
    assert abs(A - B).max() == 0.0
