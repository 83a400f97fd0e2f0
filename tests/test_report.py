"""Pictures and the per-run HTML report.

Run folders are made by the real pipeline (``run_case`` + ``write_outputs``)
once per module and copied into each test's own ``tmp_path``, so no test
sees another's report or edits.  Renders are judged by pixel statistics of
the PNG (a blank or single-colour image fails), the level diagram by the
records the drawing function returns.
"""

from __future__ import annotations

import base64
import json
import re
import shutil
import sys
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest

pytest.importorskip("matplotlib")
pytest.importorskip("pyvista")

from shellmodes.case.schema import case_from_dict  # noqa: E402
from shellmodes.errors import CaseError, MeshError, ShellmodesError  # noqa: E402
from shellmodes.io.outputs import mode_array_names, write_outputs  # noqa: E402
from shellmodes.io.pictures import PlotExtraMissing, render_modes, spectrum_picture, sphere_ladder  # noqa: E402
from shellmodes.io.report import SAFETY_NOTE, case_toml, find_convergence, load_run, write_report  # noqa: E402
from shellmodes.pipeline import run_case  # noqa: E402

try:
    import tomllib
except ModuleNotFoundError:  # Python 3.10
    import tomli as tomllib

PNG_MAGIC = b"\x89PNG\r\n\x1a\n"

# a sphere squashed by a Y_20 and a Y_22 term: the l = 1 and l = 2 multiplets split
SQUASHED = {"title": "squashed test shell",
            "surface": {"shape": "star", "radius": 2.0,
                        "deformation": [{"l": 2, "m": 0, "amplitude": -0.05},
                                        {"l": 2, "m": 2, "amplitude": 0.02}]},
            "resolution": {"degree": 2, "subdivisions": 2}, "modes": {"count": 9}}


def _solve_into(folder: Path, data: dict) -> Path:
    write_outputs(run_case(case_from_dict(data, "<test>")), folder)
    return folder


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    """Pristine run folders, solved once: degree 2 (triangle6 cells) and degree 1 (P1)."""
    base = tmp_path_factory.mktemp("runs")
    quadratic = _solve_into(base / "quadratic", SQUASHED)
    linear = _solve_into(base / "linear", {**SQUASHED, "title": "P1 shell",
                                           "resolution": {"degree": 1, "subdivisions": 2}})
    return {"quadratic": quadratic, "linear": linear}


@pytest.fixture
def run_dir(runs, tmp_path):
    """A private copy of the degree-2 run folder."""
    return Path(shutil.copytree(runs["quadratic"], tmp_path / "shell"))


def _pixels(path: Path) -> np.ndarray:
    import matplotlib.image

    return np.asarray(matplotlib.image.imread(path))[..., :3]


def _assert_png(path: Path):
    data = Path(path).read_bytes()
    assert len(data) > 1000 and data[:8] == PNG_MAGIC


# -- level diagram -----------------------------------------------------------


def test_spectrum_picture_draws_one_bar_per_mode_beside_the_ladder(run_dir, tmp_path):
    data = load_run(run_dir)
    drawn = spectrum_picture(data, tmp_path / "levels.png")
    _assert_png(drawn.path)
    assert len(drawn.levels) == len(data["modes"]) == 9
    assert sorted(b["mode"] for b in drawn.levels) == [m["index"] for m in data["modes"]]
    energy = {m["index"]: m["energy"] for m in data["modes"]}
    assert all(b["energy"] == energy[b["mode"]] for b in drawn.levels)
    # bars never overlap sideways within a parent degree (they sit side by side)
    for l in {m["l"] for m in data["multiplets"]}:
        group = sorted((b for b in drawn.levels if data["multiplets"][b["multiplet"]]["l"] == l),
                       key=lambda b: b["x0"])
        assert all(a["x1"] <= b["x0"] for a, b in zip(group, group[1:]))
    # ladder: l = 0, 1, 2 and the rung above; E_l = E0 l(l+1) / R_eq^2, R_eq^2 = A / 4 pi (exact formula)
    assert [l for l, _ in drawn.ladder] == [0, 1, 2, 3]
    r2 = data["mesh"]["area"] / (4 * np.pi)
    assert drawn.ladder[2][1] == pytest.approx(6.0 / r2, rel=1e-12)  # dimensionless run: E0 = 1
    # the split l = 2 multiplets lie within 10% of their rung (a 5% squash, first-order shifts)
    for b in drawn.levels:
        l = data["multiplets"][b["multiplet"]]["l"]
        if l:
            assert abs(b["energy"] - l * (l + 1) / r2) < 0.1 * l * (l + 1) / r2


def test_open_surfaces_get_no_ladder(run_dir, tmp_path):
    data = load_run(run_dir)
    opened = {**data, "mesh": {**data["mesh"], "closed": False}}
    assert sphere_ladder(opened) == []
    drawn = spectrum_picture(opened, tmp_path / "open.png")
    assert drawn.ladder == [] and len(drawn.levels) == len(data["modes"])
    _assert_png(drawn.path)


# -- renders -------------------------------------------------------------------


@pytest.mark.parametrize("kind", ["quadratic", "linear"])
def test_mode_renders_are_not_blank(runs, tmp_path, kind):
    import meshio

    vtu = runs[kind] / "modes.vtu"
    cell_type = meshio.read(vtu).cells[0].type
    assert cell_type == {"quadratic": "triangle6", "linear": "triangle"}[kind]
    paths = render_modes(vtu, [1, 4], str(tmp_path / "m{index:03d}.png"), unit="1")
    assert [p.name for p in paths] == ["m001.png", "m004.png"]
    for p in paths:
        _assert_png(p)
        img = _pixels(p)
        # a blank frame has variance 0; a drawn mode covers a good part of the frame in many colours
        assert img.var() > 1e-3
        background = np.all(np.abs(img - img[0, 0]) < 0.02, axis=-1)
        assert 0.15 < 1 - background.mean() < 0.9
        # a mode with a nodal line shows both ends of the diverging map (blue and red pixels)
        red = (img[..., 0] - img[..., 2]) > 0.25
        blue = (img[..., 2] - img[..., 0]) > 0.15
        assert red.sum() > 500 and blue.sum() > 500


def test_volume_render_cuts_a_tetra10_shell(tmp_path):
    import meshio
    from scipy.sparse.linalg import eigsh

    from shellmodes.fem.assemble import assemble_volume, free_dofs, restricted
    from shellmodes.fem.shellmesh import shell_mesh
    from shellmodes.fem.tetrahedra import discretise, export_cells

    disc = discretise(shell_mesh([1.0, 2.0], 1, 2), degree=2)
    K, M = assemble_volume(disc, 1.0)
    free = free_dofs(disc, ("inner", "outer"))
    # lowest Dirichlet modes of the shell; fixed start vector for reproducibility
    v0 = np.random.default_rng(0).standard_normal(len(free))
    lam, vec = eigsh(restricted(K, free), k=4, M=restricted(M, free), sigma=0.0, v0=v0)
    u = np.zeros((disc.ndofs, 4))
    u[free] = vec
    points, cells, _ = export_cells(disc)
    assert cells[0][0] == "tetra10"
    meshio.Mesh(points, cells, point_data={mode_array_names(i)["psi"]: u[:, i] for i in range(4)}).write(
        tmp_path / "modes.vtu")
    (path,) = render_modes(tmp_path / "modes.vtu", [1], str(tmp_path / "v{index}.png"))
    _assert_png(path)
    img = _pixels(path)
    assert img.var() > 1e-3
    background = np.all(np.abs(img - img[0, 0]) < 0.02, axis=-1)
    assert 0.1 < 1 - background.mean() < 0.9


def test_render_refuses_a_mode_not_in_the_file(runs, tmp_path):
    with pytest.raises(MeshError, match="not in the file"):
        render_modes(runs["linear"] / "modes.vtu", [99], str(tmp_path / "m{index}.png"))
    with pytest.raises(MeshError, match="no such mode file"):
        render_modes(tmp_path / "missing.vtu", [0], str(tmp_path / "m{index}.png"))
    assert list(tmp_path.iterdir()) == []


def test_missing_plot_extra_is_a_clear_error(run_dir, monkeypatch):
    monkeypatch.setitem(sys.modules, "pyvista", None)  # import now raises ImportError
    with pytest.raises(PlotExtraMissing, match="pip install pyvista"):
        write_report(run_dir, modes=1)
    assert issubclass(PlotExtraMissing, ShellmodesError)
    assert not (run_dir / "report.html").exists()


# -- the report --------------------------------------------------------------


class _Page(HTMLParser):
    def __init__(self):
        super().__init__()
        self.images, self.tables, self._rows = [], [], None

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        if tag == "img":
            self.images.append(attrs.get("src", ""))
        elif tag == "tbody":
            self._rows = 0
        elif tag == "tr" and self._rows is not None:
            self._rows += 1

    def handle_endtag(self, tag):
        if tag == "tbody":
            self.tables.append(self._rows)
            self._rows = None


def test_report_is_self_contained_and_complete(run_dir):
    before = sorted(p.name for p in run_dir.iterdir())
    path = write_report(run_dir, modes=3)
    assert path == run_dir / "report.html"
    # only report.html is added: no loose PNGs, no temporary files
    assert sorted(p.name for p in run_dir.iterdir()) == sorted([*before, "report.html"])
    text = path.read_text(encoding="utf-8")
    page = _Page()
    page.feed(text)
    assert not re.search(r"""(src|href)\s*=\s*["']?(https?:)?//""", text)
    assert "<link" not in text and "<script" not in text and "@import" not in text
    # level diagram + 3 mode renders (zero mode skipped), all inline PNGs
    assert len(page.images) == 4
    for src in page.images:
        assert src.startswith("data:image/png;base64,")
        assert base64.b64decode(src.split(",", 1)[1])[:8] == PNG_MAGIC
    data = load_run(run_dir)
    # tables in page order: multiplets, modes
    assert page.tables == [len(data["multiplets"]), len(data["modes"])]
    assert f"{len(data['modes'])} modes in {len(data['multiplets'])} multiplets" in text
    for m in data["multiplets"]:
        assert f"{m['energy']:.10g}" in text
    assert "squashed test shell" in text and SAFETY_NOTE in text
    assert "<h2>Error estimates</h2>" not in text  # no convergence study, no checks asked


def test_report_escapes_text_from_the_run(run_dir):
    data = load_run(run_dir)
    hostile = '<script>alert("x")</script> & co'
    data["case"]["title"] = hostile
    data["warnings"] = ["<b>not bold</b>"]
    (run_dir / "spectrum.json").write_text(json.dumps(data))
    text = write_report(run_dir, modes=0).read_text(encoding="utf-8")
    assert "<script" not in text and "<b>not bold" not in text
    assert "&lt;script&gt;alert(&quot;x&quot;)&lt;/script&gt; &amp; co" in text
    assert "&lt;b&gt;not bold&lt;/b&gt;" in text


def test_case_toml_reads_back_as_the_recorded_case(run_dir):
    case = load_run(run_dir)["case"]

    def without_none(x):
        if isinstance(x, dict):
            return {k: without_none(v) for k, v in x.items() if v is not None}
        if isinstance(x, list):
            return [without_none(v) for v in x if v is not None]
        return x

    assert tomllib.loads(case_toml(case)) == without_none(case)
    # and it is a case the project accepts, describing the same surface
    again = case_from_dict(tomllib.loads(case_toml(case)), "<toml>")
    assert again.model_dump(mode="json") == case


def test_convergence_study_beside_the_run_is_included(run_dir):
    study = run_dir.parent / "shell-convergence"
    study.mkdir()
    rows = [{"mode": 1, "eigenvalue": 0.5123, "error_estimate": 3.1e-7, "order": 3.98},
            {"mode": 2, "eigenvalue": 0.5321, "error_estimate": 4.4e-7, "order": 4.02}]
    (study / "convergence.json").write_text(json.dumps({"levels": [1, 2, 3], "estimates": rows}))
    # a foreign study of another case is never taken as this run's error bars
    other = run_dir.parent / "other-convergence"
    other.mkdir()
    (other / "convergence.json").write_text(json.dumps({"case": {"title": "other"}, "estimates": rows}))
    assert find_convergence(run_dir, load_run(run_dir)) == (study / "convergence.json").resolve()
    text = write_report(run_dir, modes=0).read_text(encoding="utf-8")
    assert "<h2>Error estimates</h2>" in text and "error_estimate" in text and "3.1e-07" in text
    page = _Page()
    page.feed(text)
    assert len(rows) in page.tables


def test_corrupt_or_foreign_convergence_files_are_tolerated(run_dir):
    other = run_dir.parent / "other-convergence"
    other.mkdir()
    (other / "convergence.json").write_text("{ not json")
    assert find_convergence(run_dir, load_run(run_dir)) is None
    assert "Error estimates" not in write_report(run_dir, modes=0).read_text(encoding="utf-8")
    own = run_dir.parent / "shell-convergence"
    own.mkdir()
    (own / "convergence.json").write_text("[1, 2")
    text = write_report(run_dir, modes=0).read_text(encoding="utf-8")
    assert "could not be read" in text


def test_checks_table_in_the_report(run_dir):
    # one fast check of the real validation set (sphere area, degree 4)
    text = write_report(run_dir, checks="area of the unit sphere", modes=0).read_text(encoding="utf-8")
    assert "Validation set" in text and "area of the unit sphere, degree 4" in text
    assert "1 passed, 0 failed" in text


# -- command line ------------------------------------------------------------


def test_cli_report_writes_only_the_page_unless_asked(run_cli, run_dir):
    done = run_cli("report", run_dir, "--modes", "1")
    assert done.status == 0, done.stderr
    assert done.stdout.strip() == f"wrote {run_dir / 'report.html'}"
    assert not list(run_dir.glob("*.png"))
    done = run_cli("report", run_dir, "--modes", "2", "--keep-images", "-q")
    assert done.status == 0 and done.stdout == ""
    # the first member of each of the first two multiplets above the zero mode
    first = [m["modes"][0] for m in load_run(run_dir)["multiplets"][1:3]]
    assert sorted(p.name for p in run_dir.glob("*.png")) == ["report-levels.png", *(
        f"report-mode{i:04d}.png" for i in first)]


@pytest.mark.parametrize("damage", ["missing folder", "no spectrum", "corrupt json", "not a spectrum",
                                    "a file"])
def test_cli_bad_folders_exit_2_with_one_line(run_cli, run_dir, tmp_path, damage):
    target = run_dir
    if damage == "missing folder":
        target = tmp_path / "nowhere"
    elif damage == "no spectrum":
        (run_dir / "spectrum.json").unlink()
    elif damage == "corrupt json":
        (run_dir / "spectrum.json").write_text('{"modes": [1, 2')
    elif damage == "not a spectrum":
        (run_dir / "spectrum.json").write_text('{"modes": 3}')
    else:
        target = run_dir / "run.log"
    done = run_cli("report", target)
    assert done.status == 2
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("shellmodes: error: ")
    assert str(target if damage != "corrupt json" and damage != "not a spectrum"
               else target / "spectrum.json") in lines[0]
    assert "Traceback" not in done.stderr
    assert not (run_dir / "report.html").exists()


def test_load_run_errors_are_case_errors(tmp_path):
    with pytest.raises(CaseError, match="no such run folder"):
        load_run(tmp_path / "x")
    (tmp_path / "spectrum.json").write_text("[]")
    with pytest.raises(CaseError, match="not a shellmodes spectrum"):
        load_run(tmp_path)


def test_a_real_convergence_study_is_tabled(run_dir):
    convergence = pytest.importorskip("shellmodes.studies.convergence")
    case = case_from_dict({"title": "squashed test shell", "surface": SQUASHED["surface"],
                           "resolution": {"degree": 2, "subdivisions": 1}, "modes": {"count": 9}}, "<test>")
    study = convergence.convergence_study(case, refinements=3)
    convergence.write_study(study, run_dir.parent / "shell-convergence")
    text = write_report(run_dir, modes=0).read_text(encoding="utf-8")
    page = _Page()
    page.feed(text)
    assert "Refinements" in text and "asymptotic" in text
    # tables: multiplets, refinements, estimates, modes
    assert page.tables[1:3] == [len(study.refinements), len(study.rows)]
    for row in study.rows:
        assert f"{row.energy_error:.1e}" in text
    # the run (subdivisions 2) is the study's middle refinement: its own levels get error estimates
    assert 2 in study.subdivisions and "The last column estimates the error of this run" in text
    energy = {m["index"]: m["energy"] for m in load_run(run_dir)["modes"]}
    for row in study.rows:
        mine = np.mean([energy[i] for i in row.modes])
        assert f"<td>{abs(row.energy_extrapolated - mine):.1e}</td></tr>" in text
    # a study on other meshes says so, and claims no error for this run's own numbers
    path = run_dir.parent / "shell-convergence" / "convergence.json"
    other = json.loads(path.read_text())
    for r in other["refinements"]:
        r["dofs"] += 1
    path.write_text(json.dumps(other))
    text = write_report(run_dir, modes=0).read_text(encoding="utf-8")
    assert "is not one of the study" in text and "The last column" not in text


# --- what the report and pictures say (issue 12, items 11 and 12) ---

def test_case_block_echoes_only_keys_that_apply():
    from shellmodes.io.report import applicable_case

    electron = {"particle": {"mass": 1.0, "mass_unit": "electron", "effective_mass": 0.067,
                             "moment_of_inertia": None, "inertia_unit": "amu angstrom2"},
                "output": {"vtu": True, "pictures": False, "picture_modes": 4}, "limits": {"memory_gib": None}}
    shown = case_toml(applicable_case(electron))
    assert "inertia_unit" not in shown and "picture_modes" not in shown and "[limits]" not in shown
    assert 'mass_unit = "electron"' in shown and "effective_mass = 0.067" in shown
    rotor = {"particle": {"mass": None, "mass_unit": "electron", "effective_mass": 1.0, "moment_of_inertia": 2.0,
                          "inertia_unit": "amu angstrom2"}}
    shown = case_toml(applicable_case(rotor))
    assert "inertia_unit" in shown and "mass_unit" not in shown and "effective_mass" not in shown


def test_closing_caution_fits_quantum_levels():
    note = SAFETY_NOTE.lower()
    for phrase in ("not measurements", "effective-mass approximation", "hard walls", "finite barrier",
                   "convergence study", "licensed professional practice"):
        assert phrase in note, phrase
    assert "acoustic" not in note and "structural" not in note


def test_level_labels_name_n_and_l():
    from shellmodes.io.pictures import _group_label

    def members(m):
        return m["modes"]

    shell = [{"index": 1, "l": 1, "modes": [1, 2, 3]}]
    assert _group_label(shell, {1: 2, 2: 2, 3: 2}, members) == "n=2, l=1 (3)"
    split = [{"index": 4, "l": 2, "modes": [4]}, {"index": 5, "l": 2, "modes": [5, 6]}]
    assert _group_label(split, {}, members) == "l=2 (1+2)"


def test_sweep_axis_names_are_readable():
    from shellmodes.case.units import without_noise as _clean
    from shellmodes.studies.sweep_files import axis_name

    case = {"surface": {"shape": "star", "deformation": [{"l": 2, "m": 0, "amplitude": 0.1}]},
            "units": {"length": "nm"}}
    assert axis_name("surface.deformation[0].amplitude", case) == "amplitude of the (l=2, m=0) deformation"
    assert axis_name("surface.radius", case) == "radius [nm]"
    # linspace noise: 12 significant digits of the series' largest value
    assert _clean(1.3877787807814457e-17, [-0.1, 0.1]) == 0.0 and _clean(0.30000000000000004) == 0.3
