"""Issue 11, items 18-22: sweeps that survive kills and corrupt steps, and refuse before writing.

Workers die with the sweep process; every reused step is read back in full first and a damaged
one is solved again, with a warning; missing extras, bad steps and bad scheduler addresses are
refused before --out is touched; a scheduler that is no scheduler, or is lost mid-sweep, gives
one line and keeps the finished steps.
"""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import threading
import time
from pathlib import Path

import pytest
from hostile import SPHERE, assert_refused, write_case

import shellmodes

SWEEP = SPHERE + '\n[sweep]\nworkers = 1\nparameters = [{ key = "surface.radius", values = [1.0, 1.5] }]\n'


@pytest.fixture
def no_solving(monkeypatch):
    from shellmodes import pipeline as run

    monkeypatch.setattr(run, "run_case", lambda case: (_ for _ in ()).throw(AssertionError("solved")))


def _kill_and_wait(sweep) -> list[int]:
    """SIGKILL a sweep process; wait up to 20 s for its children to go; return those children."""
    everyone = _children(sweep.pid)
    sweep.send_signal(signal.SIGKILL)
    sweep.wait(timeout=30)
    deadline = time.monotonic() + 20
    while time.monotonic() < deadline and any(_alive(p) for p in everyone):
        time.sleep(0.2)
    return everyone


def _children(pid: int) -> list[int]:
    found = []
    for entry in Path("/proc").iterdir():
        if entry.name.isdigit():
            try:
                stat = (entry / "stat").read_text()
            except OSError:
                continue
            if int(stat.rsplit(")", 1)[1].split()[1]) == pid:
                found.append(int(entry.name))
    return found


def _alive(pid: int) -> bool:
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except OSError:
        return False
    return state != "Z"


def test_workers_die_with_a_killed_sweep(tmp_path):
    text = SPHERE.replace("subdivisions = 1", "subdivisions = 4").replace("degree = 1", "degree = 2") + (
        '\n[sweep]\nworkers = 2\nparameters = [{ key = "surface.radius", start = 1.0, stop = 2.0, steps = 8 }]\n')
    case = write_case(tmp_path, text)
    env = {**os.environ, "PYTHONPATH": str(Path(shellmodes.__file__).parents[1])}
    sweep = subprocess.Popen([sys.executable, "-m", "shellmodes", "sweep", str(case), "--out", str(tmp_path / "out"),
                              "--quiet"], env=env, stderr=subprocess.DEVNULL)
    workers = []
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline and len(workers) < 2:
        time.sleep(0.2)
        workers = [p for p in _children(sweep.pid) if "spawn_main" in Path(f"/proc/{p}/cmdline").read_text()]
    assert len(workers) >= 2, "the sweep did not start its workers"
    everyone = _kill_and_wait(sweep)
    left = [p for p in everyone if _alive(p)]
    for p in left:  # do not leave them behind even when the test fails
        os.kill(p, signal.SIGKILL)
    assert left == []


def _damage_spectrum(folder):
    path = folder / "spectrum.json"
    path.write_text(path.read_text()[:40])


def _damage_vtu(folder):
    path = folder / "modes.vtu"
    path.write_bytes(path.read_bytes()[:300])


def _empty_csv(folder):
    (folder / "spectrum.csv").write_text("")


@pytest.mark.parametrize("damage", [_damage_spectrum, _damage_vtu, _empty_csv], ids=["json", "vtu", "csv"])
def test_damaged_step_is_solved_again(tmp_path, run_cli, damage):
    case = write_case(tmp_path, SWEEP)
    out = tmp_path / "out"
    assert run_cli("sweep", case, "--out", out, "--quiet").status == 0
    step = sorted((out / "steps").iterdir())[0]
    reference = (out / "sweep.csv").read_text()
    damage(step)
    result = run_cli("sweep", case, "--out", out, "--quiet")
    assert result.status == 0, result.stderr
    assert "damaged" in result.stderr and "solving it again" in result.stderr
    assert "Traceback" not in result.stderr
    assert (out / "sweep.csv").read_text() == reference


def test_missing_plot_extra_is_found_before_solving(tmp_path, run_cli, no_solving, monkeypatch):
    import importlib.util

    real = importlib.util.find_spec
    monkeypatch.setattr(importlib.util, "find_spec", lambda name, *a: None if name == "matplotlib" else real(name, *a))
    case = write_case(tmp_path, SWEEP)
    assert_refused(run_cli("sweep", case, "--out", tmp_path / "out", "--quiet"), "matplotlib",
                   out=tmp_path / "out")


def test_invalid_first_step_writes_nothing(tmp_path, run_cli, no_solving):
    case = write_case(tmp_path, SWEEP.replace("values = [1.0, 1.5]", "values = [-1.0, 1.5]"))
    assert_refused(run_cli("sweep", case, "--out", tmp_path / "out", "--quiet"), "step 0", "no step was solved",
                   out=tmp_path / "out")


@pytest.mark.parametrize("address", ["nonsense", "tls://127.0.0.1:8786", "tcp://127.0.0.1:99999", "tcp://:8786"])
def test_malformed_scheduler_address_is_refused(tmp_path, run_cli, no_solving, address):
    case = write_case(tmp_path, SWEEP)
    assert_refused(run_cli("sweep", case, "--out", tmp_path / "out", "--quiet", "--scheduler", address),
                   "sweep.scheduler", repr(address), out=tmp_path / "out")


def test_a_service_that_is_not_a_scheduler_gives_one_line(tmp_path, run_cli, no_solving):
    """A TCP service that answers with a huge frame length (dask tried to allocate 3 EiB)."""
    server = socket.socket()
    server.bind(("127.0.0.1", 0))
    server.listen(4)
    stop = threading.Event()

    def serve():
        server.settimeout(0.2)
        while not stop.is_set():
            try:
                conn, _ = server.accept()
            except OSError:
                continue
            with conn:
                conn.sendall(b"\xff" * 64)

    thread = threading.Thread(target=serve, daemon=True)
    thread.start()
    try:
        case = write_case(tmp_path, SWEEP)
        address = f"tcp://127.0.0.1:{server.getsockname()[1]}"
        result = run_cli("sweep", case, "--out", tmp_path / "out", "--quiet", "--scheduler", address)
    finally:
        stop.set()
        thread.join()
        server.close()
    line = assert_refused(result, address)
    assert "scheduler" in line


def test_losing_the_scheduler_mid_sweep_keeps_finished_steps(tmp_path, run_cli, monkeypatch):
    """The first step comes back, then the connection closes: one line, the first step saved."""
    import contextlib

    import dask.distributed
    from distributed.comm.core import CommClosedError

    class Future:
        def __init__(self, fn, args):
            self.fn, self.args = fn, args

        def result(self):
            if self.args[1] > 0:
                raise CommClosedError("in <TCP (closed)>: Stream is closed")
            return self.fn(*self.args)

    class Client:
        def __init__(self, *args, **kwargs):
            pass

        def submit(self, fn, *args, pure=True):
            return Future(fn, args)

        def as_current(self):
            return contextlib.nullcontext()

        def close(self, timeout=None):
            pass

    monkeypatch.setattr(dask.distributed, "Client", Client)
    monkeypatch.setattr(dask.distributed, "as_completed", lambda futures: iter(futures))
    case = write_case(tmp_path, SWEEP)
    out = tmp_path / "out"
    result = run_cli("sweep", case, "--out", out, "--quiet", "--scheduler", "tcp://127.0.0.1:8786")
    assert_refused(result, "lost", "saved")
    assert len([p for p in (out / "steps").iterdir() if not p.name.startswith(".")]) == 1


@pytest.mark.slow
def test_fault_injection_kill_and_resume_sweep(tmp_path):
    """kill -9 at random moments, then resume: the result equals an uninterrupted sweep's, nothing is
    left behind (no worker, no hidden folder), and no finished step is lost between kills."""
    import random

    text = SPHERE.replace("subdivisions = 1", "subdivisions = 3") + (
        '\n[sweep]\nworkers = 2\nparameters = [{ key = "surface.radius", start = 1.0, stop = 1.6, steps = 6 }]\n')
    case = write_case(tmp_path, text)
    env = {**os.environ, "PYTHONPATH": str(Path(shellmodes.__file__).parents[1])}

    def command(out):
        return [sys.executable, "-m", "shellmodes", "sweep", str(case), "--out", str(out), "--quiet"]

    subprocess.run(command(tmp_path / "reference"), check=True, env=env, timeout=300)
    out = tmp_path / "out"
    rng = random.Random(20261208)
    finished: set[str] = set()
    for _ in range(3):
        sweep = subprocess.Popen(command(out), env=env, stderr=subprocess.DEVNULL)
        time.sleep(rng.uniform(1.0, 4.0))
        everyone = _kill_and_wait(sweep)
        assert not any(_alive(p) for p in everyone), "a worker outlived the killed sweep"
        steps = out / "steps"
        now = {p.name for p in steps.iterdir() if (p / "step.json").is_file()} if steps.is_dir() else set()
        assert finished <= now, "a finished step was lost"
        finished = now
    subprocess.run(command(out), check=True, env=env, timeout=300)
    assert (out / "sweep.csv").read_text() == (tmp_path / "reference" / "sweep.csv").read_text()
    hidden = [p.name for p in [*out.iterdir(), *(out / "steps").iterdir()] if p.name.startswith(".")]
    assert hidden == []
