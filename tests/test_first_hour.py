"""A user's first hour: one install, progress and silence, readable tables and CSV.

Each test names the item of the first-hour list it guards (install 1, progress 3-5, tables 9 and 13).
"""

from __future__ import annotations

import csv
import io
import logging
import sys
from pathlib import Path

import numpy as np
import pytest

from shellmodes.cli.progress import TerminalReporter
from shellmodes.io import progress
from shellmodes.spectrum.tables import clean_zeros, csv_cell, csv_key

ROOT = Path(__file__).resolve().parent.parent

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

SPHERE = """\
[surface]
shape = "sphere"
[resolution]
degree = 2
subdivisions = 1
[modes]
count = {count}
"""


def _case(tmp_path, text, name="case.toml") -> Path:
    path = tmp_path / name
    path.write_text(text)
    return path


# -- item 1: one install ------------------------------------------------------------------------

def test_pictures_renders_and_progress_are_ordinary_dependencies():
    project = tomllib.loads((ROOT / "pyproject.toml").read_text())["project"]
    required = {d.split(">")[0].split("[")[0].split(";")[0].strip() for d in project["dependencies"]}
    assert {"pyvista", "matplotlib", "tqdm"} <= required
    # heavy optional parts stay optional
    assert not {"dask", "pypardiso", "python-mumps", "scikit-sparse"} & required


def test_readme_opens_with_one_paragraph_and_two_commands():
    text = (ROOT / "README.md").read_text()
    commands = [line.strip() for line in text.splitlines() if line.startswith("    python3 -m pip install")]
    assert commands[0].endswith("python3 -m shellmodes run cases/unit-sphere.toml")
    assert any("[test]" in c and c.endswith("python3 -m pytest -q") for c in commands)


# -- items 3-5: progress and silence ----------------------------------------------------------

def test_quiet_and_verbose_are_accepted_after_the_command_too(tmp_path, run_cli):
    case = _case(tmp_path, SPHERE.format(count=4))
    after = run_cli("run", case, "--out", tmp_path / "a", "-q")
    before = run_cli("-q", "run", case, "--out", tmp_path / "b")
    assert after.status == before.status == 0
    assert after.stdout == before.stdout == "" and after.stderr == before.stderr == ""
    loud = run_cli("run", case, "--out", tmp_path / "c", "-v")
    assert loud.status == 0 and "building the mesh" in loud.stderr


def test_verbose_without_a_terminal_has_no_carriage_returns_and_no_third_party_logs(tmp_path, run_cli):
    case = _case(tmp_path, SPHERE.format(count=4))
    result = run_cli("run", case, "--out", tmp_path / "out", "--verbose")
    assert result.status == 0
    assert "\r" not in result.stderr and "\r" not in result.stdout
    assert "assembling and solving" in result.stderr
    # our own logger says INFO with -v; the libraries' loggers stay at WARNING
    assert logging.getLogger("shellmodes.pipeline").getEffectiveLevel() == logging.INFO
    for name in ("matplotlib", "pyvista", "distributed", "numba", "PIL"):
        assert logging.getLogger(name).getEffectiveLevel() >= logging.WARNING, name


def test_raising_the_mode_count_to_finish_a_multiplet_is_said(tmp_path, run_cli):
    # the sphere's l = 1 level is threefold (modes 1, 2, 3): asking for 2 modes gets 4
    case = _case(tmp_path, SPHERE.format(count=2))
    result = run_cli("run", case, "--out", tmp_path / "out")
    assert result.status == 0
    assert "modes.count raised from 2 to 4" in result.stderr
    quiet = run_cli("run", case, "--out", tmp_path / "out", "-q")
    assert quiet.stderr == ""


def test_terminal_reporter_draws_bars_on_a_terminal_and_plain_lines_elsewhere():
    stream = io.StringIO()
    with progress.reporting(TerminalReporter(bars=True, stream=stream)):
        with progress.task("refinements", 3, "solve") as t:
            for s in (1, 2, 3):
                progress.stage(f"subdivisions {s}")
                t.advance(subdivisions=s)
        progress.note("something to know")
    drawn = stream.getvalue()
    assert "refinements" in drawn and "\r" in drawn and "note: something to know" in drawn

    plain = io.StringIO()
    with progress.reporting(TerminalReporter(verbose=True, stream=plain)):  # StringIO is no terminal
        with progress.task("checks", 2, "check") as t:
            t.advance()
            t.advance()
        progress.note("said once")
        progress.note("said once")
    text = plain.getvalue()
    assert "\r" not in text
    assert "checks: 2 of 2 done" in text
    assert text.count("note: said once") == 1


def test_library_progress_is_silent_without_a_reporter(capsys):
    with progress.task("nothing", 2) as t:
        t.advance()
    progress.stage("quiet")
    progress.note("unheard")
    assert capsys.readouterr() == ("", "")


def test_thin_shell_has_out_and_quiet_and_writes_files(tmp_path, run_cli):
    case = _case(tmp_path, SPHERE.format(count=4))
    out = tmp_path / "thin"
    result = run_cli("thin-shell", case, "--thickness", "0.2", "--out", out, "-q")
    assert result.status == 0, result.stderr
    assert result.stdout == ""
    assert sorted(p.name for p in out.iterdir()) == ["thin-shell.csv", "thin-shell.json"]
    rows = list(csv.DictReader((out / "thin-shell.csv").open()))
    assert [csv_key(h) for h in rows[0]][:3] == ["mode", "surface", "d=0.2"]


# -- items 9 and 13: tables and CSV -----------------------------------------------------------

def test_terminal_table_names_its_columns_and_prints_exact_zeros_as_0(tmp_path, run_cli):
    case = _case(tmp_path, SPHERE.format(count=4))
    result = run_cli("run", case, "--out", tmp_path / "out")
    lines = result.stdout.splitlines()
    head = next(line for line in lines if "multiplet" in line)
    for column in ("multiplet", "E [hbar^2/(2 m L^2)]", "lambda [1/L^2]", "rel. spread", "max residual"):
        assert column in head
    first = lines[lines.index(head) + 2].split()
    assert first[:3] == ["0", "0", "0"]  # the constant mode's eigenvalue is exactly 0 (rounding below 1e-10)
    assert "[1]" not in result.stdout
    assert any("in units of hbar^2/(2 m L^2)" in line for line in lines)


def test_shell_table_shows_radial_order_n(tmp_path, run_cli):
    text = """\
[shell]
inner = { shape = "sphere", radius = 1.0 }
outer = { shape = "sphere", radius = 2.0 }
cells = "prisms"
layers = 1
radial_degree = 4
[resolution]
degree = 2
subdivisions = 1
[modes]
count = 4
"""
    result = run_cli("run", _case(tmp_path, text), "--out", tmp_path / "out")
    assert result.status == 0, result.stderr
    head = next(line for line in result.stdout.splitlines() if "multiplet" in line).split()
    assert "n" in head and "l" in head


def test_csv_cells_are_plain():
    assert [csv_cell(v) for v in (True, False, None, float("nan"), 2, 0.5)] == ["true", "false", "", "", 2, 0.5]
    # rounding noise of an exact zero (the constant mode) becomes 0; a small real value stays
    assert clean_zeros([-4.6e-14, 1e-6, 2.0]).tolist() == [0.0, 1e-6, 2.0]


def test_torus_csv_leaves_l_empty_and_has_units_in_headers(tmp_path, run_cli):
    text = """\
[surface]
shape = "torus"
major_radius = 2.0
minor_radius = 1.0
[units]
length = "nm"
energy = "meV"
[resolution]
degree = 2
subdivisions = 1
[modes]
count = 3
"""
    out = tmp_path / "out"
    assert run_cli("run", _case(tmp_path, text), "--out", out, "-q").status == 0
    rows = list(csv.DictReader((out / "spectrum.csv").open()))
    assert "energy [meV]" in rows[0] and "eigenvalue [1/nm^2]" in rows[0]
    assert all(row["l"] == "" for row in rows)
    assert "nan" not in (out / "spectrum.csv").read_text().lower()


@pytest.mark.parametrize("case_name, axisymmetric", [("unit-sphere.toml", True),
                                                     ("squashed-nanoshell.toml", False)])
def test_abs_m_is_in_the_outputs_where_the_readme_says(case_name, axisymmetric, tmp_path, run_cli):
    # the README lists abs_m among the modes' fields for axisymmetric shapes (|m| is a good quantum
    # number only there); the squashed nanoshell has a Y_22 term
    text = (ROOT / "cases" / case_name).read_text()
    text = text.replace("degree = 4", "degree = 2").replace("subdivisions = 4", "subdivisions = 1")
    out = tmp_path / "out"
    result = run_cli("run", _case(tmp_path, text), "--out", out, "-q")
    assert result.status == 0, result.stderr
    head = (out / "spectrum.csv").read_text().splitlines()[0].split(",")
    assert ("abs_m" in head) == axisymmetric
    assert "abs_m (axisymmetric shapes)" in (ROOT / "README.md").read_text()


# -- item 14: names ---------------------------------------------------------------------------

def test_old_names_keep_working_with_a_one_line_warning(tmp_path):
    import warnings

    from shellmodes.case.schema import load_case
    from shellmodes.errors import RenamedKeyWarning

    path = _case(tmp_path, """\
[surface]
shape = "star"
radius = 2.0
deformation = [{ l = 2, m = 0, amplitude = 0.05 }]
[output]
pictures = true
picture_modes = 2
""")
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        case = load_case(path)
    assert case.surface.shape == "deformed_sphere" and case.output.picture_multiplets == 2
    texts = [str(w.message) for w in caught if issubclass(w.category, RenamedKeyWarning)]
    assert len(texts) == 2 and all("\n" not in t and str(path) in t for t in texts)
    assert any("'deformed_sphere'" in t for t in texts) and any("output.picture_multiplets" in t for t in texts)


def test_bundled_cases_and_docs_use_the_new_names():
    for path in (ROOT / "cases").glob("*.toml"):
        text = path.read_text()
        assert '"star"' not in text and "picture_modes" not in text, path.name
    keys = (ROOT / "docs" / "CASE_KEYS.md").read_text()
    assert 'shape = "deformed_sphere"' in keys and "output.picture_multiplets" in keys


def test_thin_shell_table_names_its_rows_for_what_they_hold():
    import numpy as np

    from shellmodes.studies.thin_shell import ThinShellComparison

    result = ThinShellComparison(thickness=(0.1,), surface=np.array([0.0, 2.0]),
                                 shell={0.1: np.array([987.0, 989.0])}, energy_per_lambda=None, energy_unit="1")
    table = result.table()
    assert "hbar^2 pi^2/(2 m d^2)" in table and "pi^2/d^2 " not in table
    assert "bridge" not in table and "references." not in table


# -- item 16: schema ----------------------------------------------------------------------------

def test_schema_has_an_id_a_shape_discriminator_and_a_description_on_every_key():
    from shellmodes.case.schema import case_schema, schema_properties

    schema = case_schema()
    assert schema["$id"].startswith("urn:")
    surface = schema["properties"]["surface"]["anyOf"][0]
    assert surface["discriminator"]["propertyName"] == "shape"
    assert "deformed_sphere" in surface["discriminator"]["mapping"]

    missing = [f"{where}.{name}" for where, name, prop in schema_properties(schema) if not prop.get("description")]
    assert missing == []


# -- item 15: sample meshes travel with the package -----------------------------------------------

def test_a_copied_scanned_mesh_case_still_finds_its_mesh(tmp_path):
    from shellmodes.case.model import build_shape
    from shellmodes.case.schema import load_case

    copy = tmp_path / "elsewhere" / "scanned-pebble.toml"
    copy.parent.mkdir()
    copy.write_text((ROOT / "cases" / "scanned-pebble.toml").read_text())
    shape = build_shape(load_case(copy))
    assert shape.name == "mesh" and shape.closed
    # the pebble r = 1 + 0.15 cos 2theta + 0.05 sin^3 theta cos 3phi lies between 0.8 and 1.2 of the origin
    # (the formula in meshes/make_samples.py; bounds from |0.15| + |0.05|)
    r = np.linalg.norm(shape.data.points, axis=1)
    assert 0.8 - 1e-9 <= r.min() and r.max() <= 1.2 + 1e-9  # the bounds are attained: rounding allowed


def test_an_unknown_sample_is_refused_naming_the_ones_shipped(tmp_path, run_cli):
    case = _case(tmp_path, '[surface]\nshape = "mesh"\nfile = "sample:pebble7.vtu"\n')
    result = run_cli("run", case, "--out", tmp_path / "out")
    assert result.status == 2
    assert "surface.file" in result.stderr and "sample:pebble6.vtu" in result.stderr
    assert result.stderr.count("\n") == 1
    assert not (tmp_path / "out").exists()


def test_sample_meshes_are_package_data():
    project = tomllib.loads((ROOT / "pyproject.toml").read_text())
    data = project["tool"]["setuptools"]["package-data"]["shellmodes"]
    assert "samples/*.vtu" in data and "samples/*.stl" in data


def test_run_log_has_no_python_reprs_and_help_loads_no_numerics(tmp_path, run_cli):
    import re
    import subprocess

    case = _case(tmp_path, SPHERE.format(count=4))
    assert run_cli("run", case, "--out", tmp_path / "out", "-q").status == 0
    log = (tmp_path / "out" / "run.log").read_text()
    assert not re.search(r"[A-Z]\w+\(\w+=", log), log  # e.g. CurvedSurface(degree=...)
    assert "cells: curved triangles on a surface" in log
    # item 2: --help parses the commands without loading numpy, scipy or any solver (the start stays quick)
    code = ("import sys\nfrom shellmodes.cli import main\ntry:\n    main(['--help'])\nexcept SystemExit:\n    pass\n"
            "print(sorted(m for m in ('numpy', 'scipy', 'skfem', 'pyvista', 'matplotlib') if m in sys.modules))")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=ROOT, timeout=120)
    assert done.stdout.strip().splitlines()[-1] == "[]"


def test_a_missing_optional_part_is_refused_before_solving(tmp_path, run_cli, monkeypatch):
    import importlib.util

    from shellmodes.eigen.backends import BACKENDS

    monkeypatch.setitem(BACKENDS, "mumps", {**BACKENDS["mumps"], "available": lambda: False})
    case = _case(tmp_path, SPHERE.format(count=4) + 'backend = "mumps"\n')
    result = run_cli("run", case, "--out", tmp_path / "out")
    assert result.status == 2 and result.stderr.count("\n") == 1
    assert "modes.backend" in result.stderr and "shellmodes[mumps]" in result.stderr
    assert not (tmp_path / "out").exists()

    real = importlib.util.find_spec
    monkeypatch.setattr(importlib.util, "find_spec", lambda name, *a: None if name == "distributed" else real(name, *a))
    sweep = _case(tmp_path, SPHERE.format(count=4) + """\
[sweep]
scheduler = "tcp://127.0.0.1:1"
parameters = [{ key = "surface.radius", values = [1.0, 2.0] }]
""", "sweep.toml")
    result = run_cli("sweep", sweep, "--out", tmp_path / "sweep-out")
    assert result.status == 2 and "sweep.scheduler" in result.stderr and "shellmodes[sweep]" in result.stderr
    assert not (tmp_path / "sweep-out").exists()


def test_shell_regions_is_now_media_and_errors_name_the_key_as_written():
    import warnings

    from shellmodes.case.schema import case_from_dict
    from shellmodes.errors import CaseError, RenamedKeyWarning

    walls = {"inner": {"shape": "sphere", "radius": 1.0}, "interfaces": [{"shape": "sphere", "radius": 1.5}],
             "outer": {"shape": "sphere", "radius": 2.0}, "layers": 1}
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        case = case_from_dict({"shell": {**walls, "regions": [{"name": "a"}, {"name": "b", "offset": 1.0}]}})
    assert [m.name for m in case.shell.media] == ["a", "b"] and case.shell.regions == case.shell.media
    assert any(issubclass(w.category, RenamedKeyWarning) and "shell.media" in str(w.message) for w in caught)
    with pytest.raises(CaseError) as bad:
        case_from_dict({"shell": {**walls, "regions": [{"name": "a"}, {"effective_mass": 0.0}]}})
    assert bad.value.key == "shell.regions[1].effective_mass"  # the file's own words
    with pytest.raises(CaseError) as bad:
        case_from_dict({"shell": {**walls, "media": [{"name": "a"}, {"effective_mass": 0.0}]}})
    assert bad.value.key == "shell.media[1].effective_mass"


def test_convergence_files_say_which_subdivisions_met_the_tolerance(tmp_path, run_cli):
    case = _case(tmp_path, SPHERE.format(count=4))
    out = tmp_path / "conv"
    result = run_cli("converge", case, "--out", out, "--tolerance", "1e-2", "-q")
    assert result.status == 0, result.stderr
    head = (out / "convergence.csv").read_text().splitlines()[0].split(",")
    assert "tolerance_met_at_subdivisions" in head and "reached_at" not in head
    rows = list(csv.DictReader((out / "convergence.csv").open()))
    assert {row["asymptotic"] for row in rows} <= {"true", "false"}


# -- item 16: the Python API and packaging --------------------------------------------------------

def test_every_public_name_has_numpydoc_sections_and_every_public_function_full_hints():
    import inspect

    import shellmodes

    sections = ("Parameters", "Returns", "Attributes", "Raises", "Examples", "Yields", "Notes")
    lacking = []
    for name in shellmodes.__all__:
        obj = getattr(shellmodes, name)
        if not (inspect.isfunction(obj) or inspect.isclass(obj)):
            continue
        doc = inspect.getdoc(obj) or ""
        if not any(f"{s}\n---" in doc for s in sections):
            lacking.append(f"{name}: no numpydoc section")
        if inspect.isfunction(obj):
            sig = inspect.signature(obj)
            missing = [p for p, v in sig.parameters.items() if v.annotation is inspect.Parameter.empty
                       and v.kind not in (v.VAR_KEYWORD, v.VAR_POSITIONAL)]
            if sig.return_annotation is inspect.Signature.empty:
                missing.append("return")
            if missing:
                lacking.append(f"{name}: no type hint on {', '.join(missing)}")
    assert lacking == []


def test_examples_of_the_new_modules_run():
    import doctest

    import shellmodes.case.aliases
    import shellmodes.case.schema
    import shellmodes.errors
    import shellmodes.io.progress
    import shellmodes.meshfiles.samples
    import shellmodes.shapes
    import shellmodes.spectrum.tables

    for module in (shellmodes.io.progress, shellmodes.spectrum.tables, shellmodes.case.aliases,
                   shellmodes.meshfiles.samples, shellmodes.errors, shellmodes.shapes, shellmodes.case.schema):
        failures, tried = doctest.testmod(module)
        assert tried > 0 and failures == 0, module.__name__


def test_pyproject_has_classifiers():
    text = (ROOT / "pyproject.toml").read_text()
    project = tomllib.loads(text)["project"]
    assert "Topic :: Scientific/Engineering :: Physics" in project["classifiers"]
    assert "Typing :: Typed" in project["classifiers"] and (ROOT / "shellmodes" / "py.typed").exists()


def test_the_command_line_names_old_keys_after_success_and_keeps_an_error_to_one_line(tmp_path, run_cli):
    old = SPHERE.format(count=4).replace('shape = "sphere"', 'shape = "star"\nradius = 1.0')
    done = run_cli("run", _case(tmp_path, old), "--out", tmp_path / "out", "-q")
    assert done.status == 0
    assert "is now called 'deformed_sphere'" in done.stderr and done.stderr.count("\n") == 1
    bad = run_cli("run", _case(tmp_path, old.replace("count = 4", "count = 0"), "bad.toml"), "--out", tmp_path / "x")
    assert bad.status == 2 and bad.stderr.count("\n") == 1 and bad.stderr.startswith("shellmodes: error:")
