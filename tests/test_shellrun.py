"""Shell and ball cases through the whole pipeline (case file -> spectrum -> outputs).

References: roots of j_l(ka) y_l(kb) - j_l(kb) y_l(ka) and zeros of j_l from
shellmodes.studies.references (checked there against scipy.special and Abramowitz and
Stegun Table 10.6); the thin-shell limit pi^2/d^2 + l(l+1)/R^2 for hard walls
(the separation of the radial and angular parts; common practice).
"""

import json

import numpy as np
import pytest

from shellmodes.case.schema import case_from_dict
from shellmodes.cli import main
from shellmodes.errors import CaseError
from shellmodes.pipeline import run_case
from shellmodes.studies import references as ref
from shellmodes.studies.checks import observed_order
from shellmodes.studies.thin_shell import thin_shell_comparison


def _shell(count=10, degree=2, subdivisions=1, layers=3, inner=1.0, outer=2.0, **extra):
    shell = {"outer": {"shape": "sphere", "radius": outer}, "layers": layers, **extra.pop("shell", {})}
    if inner is not None:
        shell["inner"] = {"shape": "sphere", "radius": inner}
    return {"shell": shell, "resolution": {"degree": degree, "subdivisions": subdivisions},
            "modes": {"count": count}, **extra}


def test_hard_wall_shell_labels_and_l0_exact():
    data = _shell(count=9, subdivisions=1, layers=4)
    # 42 directions split each multiplet by ~1e-3 (mesh anisotropy): group with a matching tolerance
    data["modes"]["multiplet_tolerance"] = 1e-2
    s = run_case(case_from_dict(data))
    rows = s.modes_table()
    assert len(rows) == 9
    assert rows[0]["l"] == 0 and rows[0]["n"] == 1
    assert [m.size for m in s.multiplets[:3]] == [1, 3, 5]  # (2l+1)-fold, l = 0, 1, 2
    assert [m.l for m in s.multiplets[:3]] == [0, 1, 2]
    # l = 0: k = pi / (b - a) exactly; degree 2, 42 directions, 4 layers: measured error 1.9e-3
    assert s.eigenvalues[0] == pytest.approx(np.pi**2, rel=3e-3)
    assert max(r["residual"] for r in rows) < 1e-8


@pytest.mark.parametrize("degree,levels,expected,tolerance", [(1, (1, 2, 3), 2.0, 0.35), (2, (0, 1, 2), 4.0, 0.8)])
def test_shell_convergence_order(degree, levels, expected, tolerance):
    # refine directions and layers together; eigenvalue error ~ h^(2k) for curved degree k (common practice);
    # degree 2 from the bare icosahedron is still pre-asymptotic (measured 4.6 over levels 0-2)
    h, err = [], []
    exact = ref.shell_dirichlet(1, 1, 1.0, 2.0)[0] ** 2
    for level in levels:
        s = run_case(case_from_dict(_shell(count=4, degree=degree, subdivisions=level, layers=2 * 2**level)))
        h.append(s.info["mesh"]["h"])
        err.append(abs(np.mean(s.eigenvalues[1:4]) - exact) / exact)
    assert np.all(np.diff(err) < 0), err
    assert abs(observed_order(h, err) - expected) < tolerance, (observed_order(h, err), err)


def test_ball_has_no_inner_wall_and_matches_j_l_zeros():
    s = run_case(case_from_dict(_shell(count=4, subdivisions=1, layers=3, inner=None, outer=1.0)))
    assert s.info["mesh"]["dirichlet_walls"] == ["outer"]
    k = ref.ball_dirichlet(0, 1, 1.0)[0]  # pi (A&S Table 10.6: zeros of j_0 are n pi)
    assert s.eigenvalues[0] == pytest.approx(k**2, rel=3e-3)  # coarse ball: 3e-3 (measured 1.4e-3)


def test_core_shell_mass_jump_against_matching_condition():
    data = _shell(count=1, subdivisions=2, layers=[6, 6], inner=None, outer=2.5,
                  shell={"interfaces": [{"shape": "sphere", "radius": 1.0}],
                         "media": [{"name": "core", "effective_mass": 1.0},
                                     {"name": "barrier", "effective_mass": 2.0, "offset": 30.0}]})
    s = run_case(case_from_dict(data))
    exact = ref.finite_spherical_well(0, 30.0, 1.0, 1.0, 2.0)[0]  # BenDaniel-Duke matching, k_l tail
    assert s.eigenvalues[0] == pytest.approx(exact, rel=5e-3)
    same_mass = ref.finite_spherical_well(0, 30.0, 1.0, 1.0, 1.0)[0]
    assert abs(s.eigenvalues[0] - same_mass) > 10 * abs(s.eigenvalues[0] - exact)  # the mass jump matters


def test_thin_shell_limit_trend():
    case = case_from_dict({"surface": {"shape": "sphere", "radius": 1.0},
                           "resolution": {"degree": 2, "subdivisions": 2}, "modes": {"count": 4}})
    result = thin_shell_comparison(case, [0.4, 0.2], layers=4)
    assert set(result.shell) == {0.4, 0.2}
    # exact spherical shell: the band above its bottom tends to l(l+1)/R^2 like d^2 (measured 0.091, 0.022)
    exact = [result.deviation(d, exact=True) for d in (0.4, 0.2)]
    assert exact[1] < exact[0] / 3
    # the band bottom approaches pi^2/d^2 (relative)
    for d in (0.4, 0.2):
        assert result.shell[d][0] == pytest.approx(np.pi**2 / d**2, rel=2e-3)
    assert "band bottom" in result.table()


@pytest.mark.parametrize("shell,key,fragment", [
    ({"inner": {"shape": "sphere", "radius": 2.0}, "outer": {"shape": "sphere", "radius": 1.0}}, "shell", "2"),
    ({"inner": {"shape": "sphere", "radius": 1.0},
      "outer": {"shape": "star", "radius": 1.2, "deformation": [{"l": 2, "m": 0, "amplitude": -0.9}]}}, "shell", ""),
    ({"outer": {"shape": "sphere", "radius": 1.0}, "media": [{"tag": 7}]}, "shell.media[0].tag", "7"),
    ({"outer": {"shape": "sphere", "radius": -1.0}}, "shell.outer.radius", "-1"),
    ({"outer": {"shape": "sphere", "radius": 1.0}, "layers": 0}, "shell", "layer"),
    ({"outer": {"shape": "sphere", "radius": 1.0}, "media": [{"effective_mass": 0.0}]},
     "shell.media[0].effective_mass", "0"),
    ({"outer": {"shape": "sphere"}}, "shell.outer", "radius"),
])
def test_bad_shells_name_the_key(shell, key, fragment):
    data = {"shell": {"layers": 2, **shell}, "resolution": {"degree": 1, "subdivisions": 0}, "modes": {"count": 2}}
    with pytest.raises(CaseError) as info:
        run_case(case_from_dict(data, "bad.toml"))
    assert info.value.key is not None and info.value.key.startswith(key), (info.value.key, str(info.value))
    assert fragment in str(info.value)


def test_shell_outputs_through_cli(tmp_path):
    import meshio

    case = tmp_path / "shell.toml"
    case.write_text('[shell]\ninner = { shape = "sphere", radius = 1.0 }\nouter = { shape = "sphere", radius = 2.0 }\n'
                    'layers = 2\n[resolution]\ndegree = 2\nsubdivisions = 0\n[modes]\ncount = 4\n')
    assert main(["run", str(case), "--out", str(tmp_path / "out"), "-q"]) == 0
    data = json.loads((tmp_path / "out" / "spectrum.json").read_text())
    assert len(data["modes"]) == len(data["modes"]) >= 4
    assert data["mesh"]["kind"] == "shell"
    mesh = meshio.read(tmp_path / "out" / "modes.vtu")
    assert [c.type for c in mesh.cells] == ["tetra10"]
    assert "region" in mesh.cell_data
    assert len([k for k in mesh.point_data if k.startswith("psi_")]) == len(data["modes"])


def test_lobpcg_path_agrees_with_shift_invert():
    base = _shell(count=4, subdivisions=1, layers=3)
    direct = run_case(case_from_dict(base))
    iterative = run_case(case_from_dict({**base, "modes": {"count": 4, "method": "lobpcg"}}))
    assert iterative.info["solver"]["method"] == "lobpcg"
    assert len(iterative.eigenvalues) == len(direct.eigenvalues)
    # same discrete problem, two solvers: agreement to the LOBPCG tolerance (1e-9 residual -> ~1e-12 relative)
    np.testing.assert_allclose(iterative.eigenvalues, direct.eigenvalues, rtol=1e-8)
    assert "fits in memory" in direct.info["log"]


def test_pictures_output_for_a_shell(tmp_path):
    pytest.importorskip("pyvista")
    case = tmp_path / "shell.toml"
    case.write_text('[shell]\ninner = { shape = "sphere", radius = 1.0 }\nouter = { shape = "sphere", radius = 2.0 }\n'
                    'layers = 2\n[resolution]\ndegree = 2\nsubdivisions = 0\n[modes]\ncount = 4\n'
                    '[output]\npictures = true\npicture_modes = 2\n')
    assert main(["run", str(case), "--out", str(tmp_path / "out"), "-q"]) == 0
    pngs = sorted(p.name for p in (tmp_path / "out").glob("*.png"))
    assert "levels.png" in pngs and len(pngs) == 3  # the diagram and one render per multiplet asked for
    for name in pngs:
        assert (tmp_path / "out" / name).read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def _named_dot(tmp_path):
    """A ball core r < 1 in a shell 1 < r < 2 written as gmsh with physical names core (1), shell (2)."""
    import meshio

    from shellmodes.fem.shellmesh import shell_mesh
    from shellmodes.fem.tetrahedra import discretise, export_cells

    disc = discretise(shell_mesh([None, 1.0, 2.0], 1, 1), degree=1)
    points, cells, data = export_cells(disc)
    tags = data["region"][0] + 1
    path = tmp_path / "dot.msh"
    meshio.write(path, meshio.Mesh(points, cells, cell_data={"gmsh:physical": [tags], "gmsh:geometrical": [tags]},
                                   field_data={"core": np.array([1, 3]), "shell": np.array([2, 3]),
                                               "skin": np.array([5, 2])}),
                 file_format="gmsh22", binary=False)
    return path


def test_regions_can_be_named_by_the_mesh_files_physical_names(tmp_path):
    path = _named_dot(tmp_path)
    by_tag = {"shell": {"file": str(path), "media": [{"tag": 1}, {"tag": 2, "effective_mass": 0.5}]},
              "resolution": {"degree": 1}, "modes": {"count": 2}, "output": {"vtu": False}}
    by_name = {**by_tag, "shell": {"file": str(path), "media": [{"tag": "shell", "effective_mass": 0.5},
                                                                  {"tag": "core"}]}}
    a, b = run_case(case_from_dict(by_tag)), run_case(case_from_dict(by_name))
    np.testing.assert_allclose(a.eigenvalues, b.eigenvalues, rtol=1e-12)
    regions = b.info["mesh"]["regions"]
    assert regions["1"]["name"] == "core" and regions["2"]["inverse_mass"] == 2.0


def test_unknown_region_name_lists_the_names_present(tmp_path):
    path = _named_dot(tmp_path)
    data = {"shell": {"file": str(path), "media": [{"tag": "cor"}, {"tag": "shell"}]},
            "resolution": {"degree": 1}, "modes": {"count": 2}}
    with pytest.raises(CaseError) as info:
        run_case(case_from_dict(data, "dot.toml"))
    assert info.value.key == "shell.media[0].tag"
    assert "'cor'" in str(info.value) and "core, shell" in str(info.value) and "skin" not in str(info.value)


def test_thin_shell_bridge_on_prisms_tracks_the_exact_band():
    # prisms have exact spherical walls, so the finite-element band above its bottom follows the exact
    # shell's (roots of j_l(ka) y_l(kb) - j_l(kb) y_l(ka), scipy.special) down to d/R = 0.05
    # (measured: 0.0058 against 0.0061 at d = 0.1); curved tetrahedra were 0.56 there
    case = case_from_dict({"surface": {"shape": "sphere", "radius": 1.0},
                           "resolution": {"degree": 3, "subdivisions": 2}, "modes": {"count": 9}})
    result = thin_shell_comparison(case, [0.1, 0.05])
    for d in (0.1, 0.05):
        assert result.deviation(d) == pytest.approx(result.deviation(d, exact=True), rel=0.1)
        np.testing.assert_allclose(result.shell[d][:9], result.exact[d], rtol=1e-4)
