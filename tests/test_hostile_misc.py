"""Issue 11, the smaller list: disk full, damaged run folders in ``report``, keys and files named."""

from __future__ import annotations

import errno
import json

import pytest
from hostile import SPHERE, assert_refused, write_case

from shellmodes.io import outputs


def test_disk_full_is_one_line_not_an_internal_error(tmp_path, run_cli, monkeypatch):
    case = write_case(tmp_path, SPHERE)
    out = tmp_path / "out"
    assert run_cli("run", case, "--out", out, "--quiet").status == 0
    before = {p.name: p.read_bytes() for p in out.iterdir()}

    def full(spectrum, folder):
        raise OSError(errno.ENOSPC, "No space left on device", str(folder / "run.log"))

    monkeypatch.setitem(outputs.EXPORTERS, "run.log", full)
    line = assert_refused(run_cli("run", case, "--out", out), "No space left on device", "intact")
    assert "please report" not in line
    assert {p.name: p.read_bytes() for p in out.iterdir()} == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["case.toml", "out"]


def test_report_on_a_string_l_is_one_line(tmp_path, run_cli):
    case = write_case(tmp_path, SPHERE)
    out = tmp_path / "out"
    assert run_cli("run", case, "--out", out, "--quiet").status == 0
    data = json.loads((out / "spectrum.json").read_text())
    data["modes"][1]["l"] = "one"
    (out / "spectrum.json").write_text(json.dumps(data))
    assert_refused(run_cli("report", out), "spectrum.json", "'l'")
    assert not (out / "report.html").exists()


def test_report_on_a_truncated_vtu_is_one_line(tmp_path, run_cli, run_module):
    """VTK printed 15 lines of its own before the message; the file is now checked first."""
    pytest.importorskip("pyvista")
    case = write_case(tmp_path, SPHERE)
    out = tmp_path / "out"
    assert run_cli("run", case, "--out", out, "--quiet").status == 0
    vtu = out / "modes.vtu"
    vtu.write_bytes(vtu.read_bytes()[:400])
    result = run_module("report", out)
    assert_refused(result, "modes.vtu")


def test_negative_region_tag_names_the_key(tmp_path, run_cli):
    text = ('[shell]\ninner = { shape = "sphere", radius = 1.0 }\nouter = { shape = "sphere", radius = 2.0 }\n'
            'regions = [{ tag = -1 }]\n\n[resolution]\ndegree = 1\nsubdivisions = 1\n\n[modes]\ncount = 4\n')
    case = write_case(tmp_path, text)
    line = assert_refused(run_cli("run", case, "--out", tmp_path / "out"), case, ": shell.regions[0].tag: ",
                          "-1", out=tmp_path / "out")
    assert "constrained" not in line


def test_thin_shell_thickness_below_the_range_names_the_file(tmp_path, run_cli):
    case = write_case(tmp_path, SPHERE)
    assert_refused(run_cli("thin-shell", case, "--thickness", "1e-9"), case, "--thickness", "1e-09")
