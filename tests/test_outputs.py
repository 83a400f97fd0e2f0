"""The output contract of ``shellmodes run`` (docs/MEASURED.md, "Contracts that other people rely on").

Small cases (degree 1, 2, 3 on a coarse sphere, degree 2 on a hemispherical
cap) are run through the command line into tmp_path and the files read back:
spectrum.json (fields, order, internal consistency), spectrum.csv (one row
per mode, equal to the JSON), modes.vtu (one point field per mode, the cell
kind of the degree, the values are the M-orthonormal eigenvectors) and
run.log.  Then the JSON Schema of the case file, the ``keys`` listing, and
write-then-read of :func:`shellmodes.io.outputs.write_outputs` (atomic
replacement, a failing writer leaves everything as it was).
"""

from __future__ import annotations

import csv
import json
import math
import os
import re
import sys
from pathlib import Path

import meshio
import numpy as np
import pytest
from scipy import constants

from shellmodes.case.schema import case_from_dict, case_schema, load_case
from shellmodes.fem.discretisation import discretise
from shellmodes.fem.forms import assemble_surface
from shellmodes.io import outputs
from shellmodes.pipeline import run_case
from shellmodes.spectrum.tables import csv_key

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

MODE_FIELDS = {"index", "energy", "eigenvalue", "multiplet", "l", "residual"}
MULTIPLET_FIELDS = {"index", "energy", "size", "l", "expected_size", "spread"}
CSV_COLUMNS = ["index", "energy", "eigenvalue", "multiplet", "l", "residual"]

CASES_DIR = Path(__file__).resolve().parent.parent / "cases"

RADIUS = 2.0


def sphere_case(degree: int, count: int = 9, extra: str = "") -> str:
    # 1 + 3 + 5 = 9 modes close the l = 2 multiplet exactly, so the count is not extended
    return (f'title = "output probe"\n\n[surface]\nshape = "sphere"\nradius = {RADIUS}\n\n'
            f"[resolution]\ndegree = {degree}\nsubdivisions = 2\n\n[modes]\ncount = {count}\n{extra}")


CAP = """\
title = "cap probe"

[surface]
shape = "cap"
radius = 1.0
half_angle = 90.0
rim = "dirichlet"

[resolution]
degree = 2
subdivisions = 2

[modes]
count = 6
"""

# Relative error allowed against the exact sphere eigenvalues l(l+1)/R^2 at
# subdivisions = 2 (exact formula: Laplace-Beltrami spectrum of the sphere).
# Measured on this mesh for l <= 2: 4.7e-2 (P1, O(h^2)), 1.7e-4 (P2 on P2
# geometry), 3.5e-5 (P3); each tolerance is about twice that, so a loss of
# an order of convergence fails.
SPHERE_TOLERANCE = {1: 0.1, 2: 5e-4, 3: 1e-4}

# A constant mode, an M-orthonormal vector and a residual computed from the
# file agree with the solver to round-off: the solve asks for 1e-13 and
# float64 VTU arrays are written and read bit for bit.  1e-9 leaves room
# for the conditioning of K and M on these meshes (common practice).
ROUND_OFF = 1e-9


def run_into(tmp_path: Path, run_cli, text: str, name: str = "case.toml") -> Path:
    case = tmp_path / name
    case.write_text(text, encoding="utf-8")
    out = tmp_path / "out"
    result = run_cli("run", case, "--out", out)
    assert result.status == 0, result.stderr
    assert result.stderr == ""
    assert f"wrote {out}/" in result.stdout
    return out


def _refuse_constant(name):
    raise AssertionError(f"spectrum.json holds {name}, which strict JSON parsers reject")


def read_json(out: Path) -> dict:
    # strict JSON: no NaN or Infinity literals
    return json.loads((out / "spectrum.json").read_text(), parse_constant=_refuse_constant)


@pytest.mark.parametrize("degree", [1, 2, 3])
def test_spectrum_json_fields_order_and_consistency(degree, tmp_path, run_cli):
    data = read_json(run_into(tmp_path, run_cli, sphere_case(degree)))

    for key in ("modes", "multiplets", "units", "mesh", "solver", "versions"):
        assert key in data, key
    for key in ("units", "mesh", "solver", "versions"):
        assert isinstance(data[key], dict) and data[key], key
    modes, multiplets = data["modes"], data["multiplets"]
    assert len(modes) == 9
    for mode in modes:
        assert MODE_FIELDS <= set(mode), set(mode)
    assert [m["index"] for m in modes] == list(range(len(modes)))
    energies = [m["energy"] for m in modes]
    assert energies == sorted(energies)
    # dimensionless case: the energy is the eigenvalue itself
    assert [m["eigenvalue"] for m in modes] == energies
    assert max(m["residual"] for m in modes) < 1e-6  # the default residual_limit

    assert len(multiplets) == 3
    for m in multiplets:
        assert MULTIPLET_FIELDS <= set(m), set(m)
    assert [m["index"] for m in multiplets] == list(range(len(multiplets)))
    assert sum(m["size"] for m in multiplets) == len(modes)
    assert [m["energy"] for m in multiplets] == sorted(m["energy"] for m in multiplets)
    # the sphere's ladder: l = 0, 1, 2 with 2l + 1 members each, unsplit
    assert [m["l"] for m in multiplets] == [0, 1, 2]
    assert [m["size"] for m in multiplets] == [m["expected_size"] for m in multiplets] == [1, 3, 5]
    for m in multiplets:
        members = [mode for mode in modes if mode["multiplet"] == m["index"]]
        assert len(members) == m["size"]
        assert all(mode["l"] == m["l"] for mode in members)
        member_energy = [mode["energy"] for mode in members]
        # mean and max - min of the members, to round-off of a sum of <= 5 terms
        assert m["energy"] == pytest.approx(float(np.mean(member_energy)), rel=1e-12, abs=1e-12)
        assert m["spread"] == pytest.approx(max(member_energy) - min(member_energy), abs=1e-12)

    exact = [l * (l + 1) / RADIUS**2 for l in (0, 1, 1, 1, 2, 2, 2, 2, 2)]
    assert energies[0] == pytest.approx(0.0, abs=1e-10)  # the constant mode, to round-off
    assert energies[1:] == pytest.approx(exact[1:], rel=SPHERE_TOLERANCE[degree])

    assert data["mesh"]["degree"] == degree
    assert data["mesh"]["closed"] is True
    assert data["mesh"]["area"] == pytest.approx(4 * math.pi * RADIUS**2, rel=SPHERE_TOLERANCE[degree])
    assert data["solver"]["returned"] == len(modes)
    assert data["versions"]["shellmodes"]
    assert {"numpy", "scipy", "scikit-fem", "meshio"} <= set(data["versions"])


def test_physical_units_energy_is_hbar2_over_2m_times_eigenvalue(tmp_path, run_cli):
    text = ('[surface]\nshape = "sphere"\nradius = 5.0\n\n[units]\nlength = "nm"\nenergy = "meV"\n\n'
            '[particle]\nmass = 1.0\nmass_unit = "electron"\n\n[resolution]\ndegree = 2\nsubdivisions = 2\n\n'
            "[modes]\ncount = 4\n")
    data = read_json(run_into(tmp_path, run_cli, text))

    # E0 = hbar^2 / (2 m_e (1 nm)^2) in meV, from scipy.constants (about 38.1 meV)
    e0 = constants.hbar**2 / (2 * constants.m_e * constants.nano**2) / (constants.milli * constants.eV)
    assert data["units"]["length"] == "nm" and data["units"]["energy"] == "meV"
    assert data["units"]["energy_per_lambda"] == pytest.approx(e0, rel=1e-12)
    modes = data["modes"]
    assert len(modes) == 4
    for mode in modes[1:]:
        assert mode["energy"] == pytest.approx(e0 * mode["eigenvalue"], rel=1e-12)
    # l = 1 on a 5 nm sphere: lambda = 2 / 25 per nm^2, to the P2 tolerance above
    assert modes[1]["eigenvalue"] == pytest.approx(2 / 25, rel=SPHERE_TOLERANCE[2])


@pytest.mark.parametrize("text", [sphere_case(1), sphere_case(3), CAP],
                         ids=["sphere-p1", "sphere-p3", "cap-p2"])
def test_spectrum_csv_has_one_row_per_mode_equal_to_json(text, tmp_path, run_cli):
    out = run_into(tmp_path, run_cli, text)
    modes = read_json(out)["modes"]
    with open(out / "spectrum.csv", newline="") as f:
        reader = csv.DictReader(f)
        rows = list(reader)
    # the contract's six columns first (energy and eigenvalue with their units in brackets); any
    # further column is a field of the JSON modes too
    keys = [csv_key(h) for h in reader.fieldnames]
    assert keys[:len(CSV_COLUMNS)] == CSV_COLUMNS
    assert reader.fieldnames[1:3] == ["energy [hbar^2/(2 m L^2)]", "eigenvalue [1/L^2]"]  # dimensionless cases
    assert set(keys) <= set(modes[0])

    assert len(rows) == len(modes)
    for row, mode in zip(rows, modes):
        for heading, key in zip(reader.fieldnames, keys):
            value = mode[key]
            if value is None:
                assert row[heading] == "", key
            elif isinstance(value, int):
                assert int(row[heading]) == value, key
            elif isinstance(value, str):  # label_rule
                assert row[heading] == value, key
            else:
                # both files print repr(float): equal bit for bit
                assert float(row[heading]) == value, key


def read_modes(out: Path) -> tuple[meshio.Mesh, np.ndarray, list[str]]:
    """The VTU mesh, its mode fields as columns (Ndofs, n) in index order, and their names."""
    mesh = meshio.read(out / "modes.vtu")
    names = sorted(name for name in mesh.point_data if name.startswith("psi_"))
    return mesh, np.column_stack([mesh.point_data[n] for n in names]), names


@pytest.mark.parametrize("degree, cell_type", [(1, "triangle"), (2, "triangle6"), (3, "triangle")])
def test_vtu_has_every_mode_as_point_field_and_cells_of_the_degree(degree, cell_type, tmp_path, run_cli):
    out = run_into(tmp_path, run_cli, sphere_case(degree))
    data = read_json(out)
    mesh, fields, names = read_modes(out)

    assert len(names) == len(data["modes"])
    assert [c.type for c in mesh.cells] == [cell_type]
    assert len(mesh.points) == data["mesh"]["dofs"]
    assert fields.shape == (data["mesh"]["dofs"], len(data["modes"]))
    assert fields.dtype == np.float64
    # every node on the sphere of radius R: geometry nodes are exact images (docs/MEASURED.md, Discretisation)
    np.testing.assert_allclose(np.linalg.norm(mesh.points, axis=1), RADIUS, rtol=1e-12)
    for name, mode in zip(names, data["modes"]):
        # stable names: the mode index only, never the energy (outputs.mode_array_names)
        assert name == f"psi_{mode['index']:04d}"
    if degree == 2:
        # every triangle6 cell uses six distinct nodes, corners first
        cells = mesh.cells_dict["triangle6"]
        assert cells.shape == (data["mesh"]["elements"], 6)
        assert all(len(set(row)) == 6 for row in cells.tolist())
    else:
        # degree k is exported as k^2 flat sub-triangles per element
        assert len(mesh.cells_dict["triangle"]) == degree**2 * data["mesh"]["elements"]


@pytest.mark.parametrize("degree", [1, 2, 3])
def test_vtu_values_are_the_m_orthonormal_eigenvectors(degree, tmp_path, run_cli):
    text = sphere_case(degree)
    out = run_into(tmp_path, run_cli, text)
    data = read_json(out)
    _, U, _ = read_modes(out)

    # Mode 0 of a closed surface without potential is the constant c with
    # c^2 * (1^T M 1) = 1, and 1^T M 1 is the discrete area: |u| = 1/sqrt(area).
    area = data["mesh"]["area"]
    np.testing.assert_allclose(np.abs(U[:, 0]), 1 / np.sqrt(area), rtol=ROUND_OFF)
    assert np.ptp(U[:, 0]) <= ROUND_OFF / np.sqrt(area)  # one sign throughout
    # ... and against the exact area 4 pi R^2, to the discretisation error of the area
    np.testing.assert_allclose(np.abs(U[:, 0]), 1 / np.sqrt(4 * np.pi * RADIUS**2),
                               rtol=SPHERE_TOLERANCE[degree])

    # Rebuild K and M of the same case: the fields are M-orthonormal eigenvectors of the
    # eigenvalues in spectrum.json.
    problem = assemble_surface(discretise(case_from_dict(tomllib.loads(text))))
    lam = np.array([m["eigenvalue"] for m in data["modes"]])
    assert U.shape == (problem.M.shape[0], len(lam))
    gram = U.T @ (problem.M @ U)
    np.testing.assert_allclose(gram, np.eye(len(lam)), atol=ROUND_OFF)
    residual = np.linalg.norm(problem.K @ U - (problem.M @ U) * lam, axis=0)
    # relative to |lam| (at least 1/R^2 for the zero mode, the residual floor of solve.py)
    scale = np.maximum(np.abs(lam), 1 / RADIUS**2) * np.linalg.norm(problem.M @ U, axis=0)
    assert np.max(residual / scale) < 1e-8  # well below the 1e-6 residual_limit, far above round-off


def test_vtu_modes_vanish_on_a_hard_rim(tmp_path, run_cli):
    out = run_into(tmp_path, run_cli, CAP)
    data = read_json(out)
    mesh, U, names = read_modes(out)

    assert len(names) == len(data["modes"]) == 6  # 1 + 2 + 3: the count ends at a gap
    assert [c.type for c in mesh.cells] == ["triangle6"]
    assert data["mesh"]["closed"] is False
    # hemisphere: the rim is the equator z = 0 (exact map, so to round-off); the reference
    # hexagon's 6 sides are cut into 2^2 segments, each with 2 degree-2 nodes: 48 rim nodes
    rim = np.abs(mesh.points[:, 2]) < 1e-12
    assert rim.sum() == 48
    assert np.all(U[rim] == 0.0)  # Dirichlet values are set, not solved for
    assert np.all(np.abs(U[~rim]).max(axis=0) > 0)
    # no parent l on an open surface
    assert all(m["l"] is None for m in data["modes"])
    assert all(m["l"] is None and m["expected_size"] is None for m in data["multiplets"])
    # Exact: a hemisphere with a hard rim keeps the sphere harmonics odd about the equator
    # (l + m odd), so lambda = l(l+1) with multiplicity l: 2 (l=1), 6 twice (l=2), 12 three times.
    # (the discrete cap has only hexagonal symmetry, so the l = 3 triple may split into 2 + 1)
    assert sum(m["size"] for m in data["multiplets"]) == 6
    exact = [2.0, 6.0, 6.0, 12.0, 12.0, 12.0]
    # measured max relative error 2.5e-3 at subdivisions 2 (1.2e-4 at 3, 1.2e-5 at 4: order ~4);
    # twice that
    assert [m["eigenvalue"] for m in data["modes"]] == pytest.approx(exact, rel=5e-3)


def test_run_log_mentions_dofs_timings_and_versions(tmp_path, run_cli):
    out = run_into(tmp_path, run_cli, sphere_case(2))
    data = read_json(out)
    log = (out / "run.log").read_text()

    assert f"{data['mesh']['dofs']} dofs" in log
    assert "timings" in log
    for step in ("mesh", "assembly", "eigensolve", "total"):
        assert re.search(rf"\b{step} \d+\.\d+", log), step
    assert "versions" in log
    for package, version in data["versions"].items():
        assert f"{package} {version}" in log


def test_output_vtu_false_writes_the_tables_only(tmp_path, run_cli):
    out = run_into(tmp_path, run_cli, sphere_case(1, extra="\n[output]\nvtu = false\n"))

    assert sorted(p.name for p in out.iterdir()) == ["run.log", "spectrum.csv", "spectrum.json"]


def test_default_out_folder_is_named_after_the_case(tmp_path, run_cli):
    case = tmp_path / "little.toml"
    case.write_text(sphere_case(1), encoding="utf-8")

    result = run_cli("run", case, "--quiet")

    assert result.status == 0, result.stderr
    assert result.stdout == ""
    assert sorted(p.name for p in (tmp_path / "little").iterdir()) == sorted(outputs.EXPORTERS)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["little", "little.toml"]


def test_run_through_python_m(tmp_path, run_module):
    case = tmp_path / "case.toml"
    case.write_text(sphere_case(2), encoding="utf-8")

    result = run_module("run", case, "--out", tmp_path / "out", cwd=tmp_path)

    assert result.status == 0, result.stderr
    assert "Traceback" not in result.stderr
    assert sorted(p.name for p in (tmp_path / "out").iterdir()) == sorted(outputs.EXPORTERS)
    assert len(read_json(tmp_path / "out")["modes"]) == 9


# --- JSON Schema and keys ---

def schema_validator():
    jsonschema = pytest.importorskip("jsonschema", reason="jsonschema is not installed (test extra)")
    schema = case_schema()
    jsonschema.Draft202012Validator.check_schema(schema)
    return jsonschema.Draft202012Validator(schema)


def test_schema_command_prints_a_valid_draft_2020_12_schema(run_cli):
    result = run_cli("schema")
    assert result.status == 0
    schema = json.loads(result.stdout)
    assert schema == json.loads(json.dumps(case_schema()))
    assert schema["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    validator = schema_validator()
    assert validator.schema == case_schema()


@pytest.mark.parametrize("path", sorted(CASES_DIR.glob("*.toml")), ids=lambda p: p.name)
def test_every_demo_case_validates_against_the_schema(path):
    validator = schema_validator()
    data = tomllib.loads(path.read_text(encoding="utf-8"))
    errors = [e.message for e in validator.iter_errors(data)]
    assert errors == []
    load_case(path)  # and pydantic agrees


BAD_FOR_SCHEMA = {
    "unknown-top-key": {"titel": "x", "surface": {"shape": "sphere"}},
    "unknown-surface-key": {"surface": {"shape": "sphere", "raduis": 1.0}},
    "unknown-shape": {"surface": {"shape": "sphear"}},
    "no-surface": {},
    "radius-zero": {"surface": {"shape": "sphere", "radius": 0.0}},
    "degree-5": {"surface": {"shape": "sphere"}, "resolution": {"degree": 5}},
    "length-unit": {"surface": {"shape": "sphere"}, "units": {"length": "furlong"}},
    "count-text": {"surface": {"shape": "sphere"}, "modes": {"count": "ten"}},
    "expression-number": {"surface": {"shape": "sphere"}, "potential": {"expression": 3}},
}


@pytest.mark.parametrize("name", list(BAD_FOR_SCHEMA))
def test_bad_case_fails_schema_validation(name):
    validator = schema_validator()
    assert list(validator.iter_errors(BAD_FOR_SCHEMA[name])), name


def schema_keys(schema: dict) -> set[str]:
    """Every property name anywhere in the schema (top level and every $defs table)."""
    names = set()

    def walk(node):
        if isinstance(node, dict):
            names.update(node.get("properties", {}))
            for value in node.values():
                walk(value)
        elif isinstance(node, list):
            for value in node:
                walk(value)

    walk(schema)
    return names


def test_keys_command_mentions_every_schema_key(run_cli):
    result = run_cli("keys")
    assert result.status == 0
    # keys appear as `table.key` (or `key` in the deformation and snap tables), tables as [table]
    listed = set(re.findall(r"`(?:[\w\[\]]+\.)*(\w+)`", result.stdout))
    listed |= set(re.findall(r"^## \[(\w+)\]", result.stdout, flags=re.MULTILINE))
    keys = schema_keys(case_schema())
    # sanity: the walk found the tables' keys, not just the top level
    assert {"radius", "degree", "count", "expression", "major_radius", "amplitude", "vtu"} <= keys
    assert keys - listed == set()


# --- write-then-read of write_outputs ---

@pytest.fixture
def spectrum():
    """A freshly solved tiny spectrum (42 P1 DOFs, 4 modes) per test."""
    return run_case(case_from_dict({"surface": {"shape": "sphere"},
                                    "resolution": {"degree": 1, "subdivisions": 1}, "modes": {"count": 4}}))


def snapshot(folder: Path) -> dict[str, bytes]:
    return {p.name: p.read_bytes() for p in sorted(folder.iterdir())}


def test_write_outputs_into_a_new_folder(spectrum, tmp_path):
    target = tmp_path / "fresh"

    assert outputs.write_outputs(spectrum, target) == target

    assert sorted(p.name for p in target.iterdir()) == sorted(outputs.EXPORTERS)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["fresh"]
    assert json.loads((target / "spectrum.json").read_text()) == json.loads(
        json.dumps(outputs.spectrum_json(spectrum), default=outputs._plain))
    _, U, _ = read_modes(target)
    np.testing.assert_array_equal(U, spectrum.vectors)  # float64 written and read bit for bit


def test_new_output_folder_has_ordinary_permissions(spectrum, tmp_path):
    reference = tmp_path / "made-by-mkdir"
    reference.mkdir()  # mode 0777 less the umask

    outputs.write_outputs(spectrum, tmp_path / "fresh")

    assert (tmp_path / "fresh").stat().st_mode & 0o777 == reference.stat().st_mode & 0o777


def test_write_outputs_replaces_files_of_an_existing_folder_atomically(spectrum, tmp_path, monkeypatch):
    target = tmp_path / "results"
    target.mkdir()
    (target / "spectrum.json").write_text('{"old": true}\n')
    (target / "notes.txt").write_text("the user's own notes\n")
    old_inode = (target / "spectrum.json").stat().st_ino
    seen = []

    def probe(spectrum, folder):
        # runs after spectrum.json was written into the temporary folder: the target still
        # holds the old file, untouched, and the new one is complete beside it
        seen.append(((target / "spectrum.json").read_text(), folder.parent == target.parent,
                     (folder / "spectrum.json").exists()))

    monkeypatch.setitem(outputs.EXPORTERS, "probe", probe)
    outputs.write_outputs(spectrum, target, ["spectrum.json", "probe", "spectrum.csv"])

    assert seen == [('{"old": true}\n', True, True)]
    new = json.loads((target / "spectrum.json").read_text())
    assert len(new["modes"]) == len(spectrum.eigenvalues)
    # replaced by a rename (a new file), not rewritten in place
    assert (target / "spectrum.json").stat().st_ino != old_inode
    assert (target / "notes.txt").read_text() == "the user's own notes\n"
    assert sorted(p.name for p in target.iterdir()) == ["notes.txt", "spectrum.csv", "spectrum.json"]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["results"]  # no temporary folder left


@pytest.mark.parametrize("failing", ["spectrum.json", "modes.vtu", "run.log"])
def test_a_writer_that_raises_leaves_an_existing_folder_as_it_was(failing, spectrum, tmp_path, monkeypatch):
    target = tmp_path / "results"
    outputs.write_outputs(spectrum, target)
    (target / "notes.txt").write_text("keep me\n")
    before = snapshot(target)

    def broken(spectrum, folder):
        (folder / failing).write_text("half")
        raise OSError("disk full")

    monkeypatch.setitem(outputs.EXPORTERS, failing, broken)
    with pytest.raises(OSError, match="disk full"):
        outputs.write_outputs(spectrum, target)

    assert snapshot(target) == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["results"]


def test_a_writer_that_raises_creates_no_folder(spectrum, tmp_path, monkeypatch):
    def broken(spectrum, folder):
        raise RuntimeError("exporter bug")

    monkeypatch.setitem(outputs.EXPORTERS, "run.log", broken)
    with pytest.raises(RuntimeError):
        outputs.write_outputs(spectrum, tmp_path / "results")

    assert list(tmp_path.iterdir()) == []


def test_a_writer_that_raises_creates_no_parent_folders(spectrum, tmp_path, monkeypatch):
    def broken(spectrum, folder):
        raise RuntimeError("exporter bug")

    monkeypatch.setitem(outputs.EXPORTERS, "run.log", broken)
    with pytest.raises(RuntimeError):
        outputs.write_outputs(spectrum, tmp_path / "deep" / "er" / "results")

    assert list(tmp_path.iterdir()) == []


def test_write_outputs_refuses_unknown_names_before_writing(spectrum, tmp_path):
    with pytest.raises(ValueError, match="unknown outputs"):
        outputs.write_outputs(spectrum, tmp_path / "results", ["spectrum.json", "pictures.png"])

    assert list(tmp_path.iterdir()) == []


def test_internal_failure_in_a_writer_exits_1_and_writes_nothing(tmp_path, run_cli, monkeypatch):
    case = tmp_path / "case.toml"
    case.write_text(sphere_case(1), encoding="utf-8")

    def broken(spectrum, folder):
        raise RuntimeError("exporter bug")

    monkeypatch.setitem(outputs.EXPORTERS, "modes.vtu", broken)
    result = run_cli("run", case, "--out", tmp_path / "out")

    assert result.status == 1
    assert result.stderr.count("\n") == 1
    assert "internal error" in result.stderr and "exporter bug" in result.stderr
    assert "Traceback" not in result.stderr
    assert sorted(p.name for p in tmp_path.iterdir()) == ["case.toml"]


def test_rerun_into_the_same_folder_replaces_the_results(tmp_path, run_cli):
    first = read_json(run_into(tmp_path, run_cli, sphere_case(1, count=4)))
    second = read_json(run_into(tmp_path, run_cli, sphere_case(1, count=9)))

    assert (len(first["modes"]), len(second["modes"])) == (4, 9)
    _, _, names = read_modes(tmp_path / "out")
    assert len(names) == 9  # the second run's fields, none left over from the first
    assert sorted(p.name for p in tmp_path.iterdir()) == ["case.toml", "out"]
    assert sorted(os.listdir(tmp_path / "out")) == sorted(outputs.EXPORTERS)


def empty_spectrum():
    # nothing lies below lambda = -1 on a sphere without potential: a valid request with no modes
    return run_case(case_from_dict({"surface": {"shape": "sphere"}, "resolution": {"degree": 1, "subdivisions": 1},
                                    "modes": {"below": -1.0}}))


def test_spectrum_with_no_modes_is_written_and_read_back(tmp_path):
    spectrum = empty_spectrum()
    assert len(spectrum.eigenvalues) == 0

    outputs.write_outputs(spectrum, tmp_path / "out")

    data = read_json(tmp_path / "out")
    assert data["modes"] == [] and data["multiplets"] == []
    headings = (tmp_path / "out" / "spectrum.csv").read_text().splitlines()[0].split(",")[:6]
    assert [csv_key(h) for h in headings] == CSV_COLUMNS
    assert len((tmp_path / "out" / "spectrum.csv").read_text().splitlines()) == 1
    mesh = meshio.read(tmp_path / "out" / "modes.vtu")
    assert [n for n in mesh.point_data if n.startswith("psi_")] == []


def test_spectrum_with_no_modes_has_a_repr():
    assert "modes=0" in repr(empty_spectrum())


def test_doubtful_result_is_written_with_a_warning(tmp_path, run_module):
    """A residual above the case's limit is a result to doubt, not bad input: exit 0, files, a warning.

    Through a fresh interpreter, because the test suite turns DoubtfulResultWarning into an error.
    """
    case = tmp_path / "case.toml"
    # no residual is below 1e-300: round-off alone (~1e-14) exceeds the limit
    case.write_text(sphere_case(1, count=4, extra="residual_limit = 1e-300\n"), encoding="utf-8")

    result = run_module("run", case, "--out", tmp_path / "out", "--quiet", cwd=tmp_path)

    assert result.status == 0, result.stderr
    lines = result.stderr.splitlines()
    assert len(lines) == 1 and lines[0].startswith("warning: largest relative residual"), result.stderr
    data = read_json(tmp_path / "out")
    assert len(data["modes"]) == 4
    assert len(data["warnings"]) == 1 and "residual" in data["warnings"][0]
    assert "warning: largest relative residual" in (tmp_path / "out" / "run.log").read_text()
