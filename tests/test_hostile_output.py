"""Issue 11, items 13-17: the output folder.

Writability is checked before solving; the whole folder is swapped at once (a reader sees the old
result or the new one); files an earlier run wrote and this one does not are gone, the user's own
files kept; hidden temporary folders of killed runs are cleaned up; ``--report`` without its extra
is refused before anything is written.  A fault-injection test kills runs at random moments.
"""

from __future__ import annotations

import json
import os
import random
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
from hostile import SPHERE, assert_refused, write_case

from shellmodes.io import outputs


@pytest.fixture
def no_solving(monkeypatch):
    from shellmodes import pipeline as run

    def refuse(case):
        raise AssertionError("solved although the output folder is unusable")

    monkeypatch.setattr(run, "run_case", refuse)


def test_out_below_a_file_is_refused_before_solving(tmp_path, run_cli, no_solving):
    (tmp_path / "plain").write_text("a file\n")
    case = write_case(tmp_path, SPHERE)
    out = tmp_path / "plain" / "results"
    assert_refused(run_cli("run", case, "--out", out), "--out", "plain")
    assert (tmp_path / "plain").read_text() == "a file\n"


def test_out_inside_proc_is_refused_before_solving(tmp_path, run_cli, no_solving):
    case = write_case(tmp_path, SPHERE)
    assert_refused(run_cli("run", case, "--out", "/proc/shellmodes-probe/results"), "--out", "/proc")


def test_out_on_a_read_only_folder_is_refused(tmp_path, run_cli, no_solving, monkeypatch):
    """A folder where making a folder fails (as on a read-only file system; root ignores chmod)."""
    import tempfile

    real = tempfile.mkdtemp

    def read_only(*args, dir=None, **kwargs):
        if dir is not None and Path(dir) == tmp_path / "locked":
            raise OSError(30, "Read-only file system")
        return real(*args, dir=dir, **kwargs)

    (tmp_path / "locked").mkdir()
    monkeypatch.setattr(tempfile, "mkdtemp", read_only)
    case = write_case(tmp_path, SPHERE)
    assert_refused(run_cli("run", case, "--out", tmp_path / "locked" / "results"), "--out", "Read-only")


def test_sweep_out_that_is_a_file_is_refused(tmp_path, run_cli, no_solving):
    (tmp_path / "plain").write_text("a file\n")
    text = SPHERE + '\n[sweep]\nworkers = 1\nparameters = [{ key = "surface.radius", values = [1.0, 1.1] }]\n'
    case = write_case(tmp_path, text)
    assert_refused(run_cli("sweep", case, "--out", tmp_path / "plain"), "--out")
    assert (tmp_path / "plain").read_text() == "a file\n"


def _old_run(folder: Path) -> dict[str, bytes]:
    folder.mkdir()
    files = {"spectrum.json": b'{"old": true}\n', "report.html": b"<p>old</p>\n", "levels.png": b"old png",
             "mode-0003.png": b"old render", "report-levels.png": b"old", "notes.txt": b"the user's own notes\n"}
    for name, data in files.items():
        (folder / name).write_bytes(data)
    return files


def test_rerun_drops_the_earlier_runs_pictures_and_keeps_the_users_files(tmp_path, run_cli):
    case = write_case(tmp_path, SPHERE)
    out = tmp_path / "out"
    _old_run(out)
    result = run_cli("run", case, "--out", out, "--quiet")
    assert result.status == 0, result.stderr
    assert sorted(p.name for p in out.iterdir()) == ["arrays.csv", "modes.vtu", "notes.txt", "run.log", "spectrum.csv",
                                                     "spectrum.json"]
    assert (out / "notes.txt").read_text() == "the user's own notes\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["case.toml", "out"]


def test_report_without_its_extra_is_refused_before_writing(tmp_path, run_cli, no_solving, monkeypatch):
    import importlib.util

    real = importlib.util.find_spec
    monkeypatch.setattr(importlib.util, "find_spec", lambda name, *a: None if name == "pyvista" else real(name, *a))
    case = write_case(tmp_path, SPHERE)
    out = tmp_path / "out"
    before = _old_run(out)
    assert_refused(run_cli("run", case, "--out", out, "--report"), "pyvista", "pip install pyvista")
    assert {p.name: p.read_bytes() for p in out.iterdir()} == before


def test_pictures_without_vtu_are_refused(tmp_path, run_cli):
    case = write_case(tmp_path, SPHERE + "\n[output]\nvtu = false\npictures = true\n")
    assert_refused(run_cli("run", case, "--out", tmp_path / "out"), "output", "vtu = true", out=tmp_path / "out")


def test_leftovers_of_killed_runs_are_removed(tmp_path, run_cli):
    """A hidden temporary folder whose process is gone is removed; one of a live process is not."""
    dead = subprocess.Popen([sys.executable, "-c", "pass"])
    dead.wait()
    stale = tmp_path / f".out.tmp-{dead.pid}-abcd1234"
    stale.mkdir()
    (stale / "spectrum.json").write_text("half")
    live = tmp_path / f".out.tmp-{os.getpid()}-efgh5678"
    live.mkdir()
    case = write_case(tmp_path, SPHERE)
    result = run_cli("run", case, "--out", tmp_path / "out", "--quiet")
    assert result.status == 0, result.stderr
    assert not stale.exists()
    assert live.exists()


def test_the_whole_folder_is_exchanged_at_once(tmp_path, monkeypatch):
    """The new folder replaces the old one in one step: no file of the target is renamed one by one."""
    target = tmp_path / "out"
    _old_run(target)
    renamed = []
    real = os.replace
    monkeypatch.setattr(os, "replace", lambda a, b: (renamed.append((Path(a), Path(b))), real(a, b))[1])
    with outputs.atomic_directory(target, owned=outputs.RUN_FILES) as tmp:
        (tmp / "spectrum.json").write_text('{"new": true}\n')
        assert (target / "report.html").exists()  # the old folder is whole until the swap
    assert not any(b.parent == target for _, b in renamed), renamed
    assert sorted(p.name for p in target.iterdir()) == ["notes.txt", "spectrum.json"]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out"]


def test_picture_files_have_ordinary_permissions(tmp_path):
    pytest.importorskip("matplotlib")
    from shellmodes.io.pictures import _write_atomic_png

    path = _write_atomic_png(tmp_path / "levels.png", lambda p: Path(p).write_bytes(b"png"))
    umask = os.umask(0)
    os.umask(umask)
    assert path.stat().st_mode & 0o777 == 0o666 & ~umask


def _consistent(folder: Path) -> int:
    """The number of modes of a complete run folder (JSON, CSV and log agree), or an assertion error."""
    data = json.loads((folder / "spectrum.json").read_text())
    rows = (folder / "spectrum.csv").read_text().strip().splitlines()
    assert len(rows) - 1 == len(data["modes"])
    assert (folder / "run.log").read_text().strip()
    assert (folder / "modes.vtu").stat().st_size > 0
    return len(data["modes"])


def test_fault_injection_kill_during_run(tmp_path):
    """kill -9 at random moments of a rerun: the folder always holds the old result or the complete new one."""
    old_case = write_case(tmp_path, SPHERE, "old.toml")  # 4 modes
    new_case = write_case(tmp_path, SPHERE.replace("count = 4", "count = 9"), "new.toml")  # 9 modes
    out = tmp_path / "out"
    env = {**os.environ, "PYTHONPATH": str(Path(outputs.__file__).parents[1])}
    command = [sys.executable, "-m", "shellmodes", "run", "--out", str(out), "--quiet"]
    subprocess.run(command + [str(old_case)], check=True, env=env, timeout=120)
    assert _consistent(out) == 4
    rng = random.Random(20261203)
    seen = set()
    for _ in range(5):
        process = subprocess.Popen(command + [str(new_case)], env=env, stderr=subprocess.DEVNULL)
        time.sleep(rng.uniform(0.5, 3.0))
        process.send_signal(signal.SIGKILL)
        process.wait(timeout=30)
        seen.add(_consistent(out))
    assert seen <= {4, 9}
    subprocess.run(command + [str(new_case)], check=True, env=env, timeout=120)
    assert _consistent(out) == 9
    assert sorted(p.name for p in tmp_path.iterdir()) == ["new.toml", "old.toml", "out"]  # leftovers cleared
