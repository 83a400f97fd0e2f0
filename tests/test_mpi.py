"""The eigenproblem on MPI ranks (SLEPc/PETSc, shellmodes.eigen.backends.slepc_mpi) against the serial path.

The reference everywhere is the serial solver on the same assembled matrices
(ARPACK shift-invert Lanczos, eigen.solve.lowest_modes): both find eigenpairs of
one discrete problem, so their eigenvalues agree to the solvers' tolerances
(ARPACK 1e-13, SLEPc 1e-12 on the relative error estimate; eigenvalue
errors of symmetric problems go as the square of the residual), and 1e-10
relative (the issue's figure) is a safe margin.  Eigenvalues are compared
sorted, so no test depends on the basis inside a multiplet.

Tests marked ``mpi`` need petsc4py, slepc4py, mpi4py and mpiexec
(scripts/setup-mpi.sh); they are skipped with that reason elsewhere.  The
last tests check the one-line error without them, and run everywhere.
"""

from __future__ import annotations

import json
import os
import shutil
import signal
import subprocess
import sys
import time
import uuid
from pathlib import Path

import numpy as np
import pytest

from shellmodes.case.schema import case_from_dict
from shellmodes.eigen import mpi
from shellmodes.errors import SolverError
from shellmodes.pipeline import run_case

HAVE_MPI = mpi.available() and shutil.which("mpiexec") is not None
without_mpi = pytest.mark.skipif(not HAVE_MPI, reason="petsc4py, slepc4py, mpi4py or mpiexec missing: run "
                                                      "scripts/setup-mpi.sh and use its environment")

#: agreement of the distributed and serial eigenvalues (see the module docstring)
TOLERANCE = 1e-10

SPHERE = {"surface": {"shape": "sphere"}, "units": {"length": "1", "energy": "1"},
          "resolution": {"degree": 2, "subdivisions": 3}, "modes": {"count": 100}}
# an ellipsoidal outer wall: not separable, so the assembled prism matrices are solved
PRISM_SHELL = {"shell": {"inner": {"shape": "sphere", "radius": 1.0},
                         "outer": {"shape": "ellipsoid", "axes": [2.0, 2.0, 2.4]},
                         "cells": "prisms", "layers": 1, "radial_degree": 3},
               "units": {"length": "1", "energy": "1"},
               "resolution": {"degree": 2, "subdivisions": 2}, "modes": {"count": 30}}
TET_BALL = {"shell": {"outer": {"shape": "sphere", "radius": 1.0}, "layers": 3, "cells": "tetrahedra"},
            "units": {"length": "1", "energy": "1"},
            "resolution": {"degree": 2, "subdivisions": 2}, "modes": {"count": 30}}
CASES = {"sphere": SPHERE, "prism-shell": PRISM_SHELL, "tet-ball": TET_BALL}


def _with_method(data, method):
    return {**data, "modes": {**data["modes"], "method": method}}


def _serial(name):
    return run_case(case_from_dict(_with_method(CASES[name], "lanczos")))


def _assert_same_spectrum(lam, reference):
    lam, reference = np.sort(lam), np.sort(reference)
    assert len(lam) == len(reference)
    scale = np.maximum(np.abs(reference), 1.0)  # the sphere's lam = 0 mode: an absolute 1e-10
    assert np.max(np.abs(lam - reference) / scale) < TOLERANCE


@pytest.mark.mpi
@without_mpi
@pytest.mark.parametrize("name", sorted(CASES))
def test_one_rank_gives_the_serial_spectrum(name):
    reference = _serial(name)
    spectrum = run_case(case_from_dict(_with_method(CASES[name], "mpi")))
    solver = spectrum.info["solver"]
    assert solver["method"] == "mpi" and solver["ranks"] == 1
    assert solver["backend"].startswith("slepc-")
    plan = solver["plan"]  # the planner chose the path and says why, from the per-rank estimate
    assert plan["path"] == "mpi" and plan["backend"] == solver["inner_solver"] == "mumps-cholesky"
    assert "1 MPI ranks" in plan["reason"] and "fits the" in plan["reason"]
    _assert_same_spectrum(spectrum.eigenvalues, reference.eigenvalues)
    assert len(spectrum.residuals) == len(spectrum.eigenvalues)
    assert np.max(spectrum.residuals) < 1e-8  # residual of the serial path's definition
    assert solver["max_residual"] == pytest.approx(float(np.max(spectrum.residuals)))
    assert any(line.startswith("mpi: rank 0:") and "peak memory" in line
               for line in spectrum.info["log"].splitlines())


@pytest.mark.mpi
@without_mpi
def test_an_energy_window_on_one_rank_gives_the_serial_modes():
    # every mode below 25: l = 0..4 of the unit sphere (l(l+1) <= 20 < 25 < 30), whole multiplets
    window = {**SPHERE, "modes": {"below": 25.0}}
    serial = run_case(case_from_dict(_with_method(window, "lanczos")))
    spectrum = run_case(case_from_dict(_with_method(window, "mpi")))
    assert len(serial.eigenvalues) == 25
    _assert_same_spectrum(spectrum.eigenvalues, serial.eigenvalues)


def _clean_env(**extra):
    """This environment without the variables of an MPI process (the test process may be one)."""
    env = {k: v for k, v in os.environ.items() if not k.startswith(("OMPI_COMM", "PMIX_", "PMI_", "OMPI_MCA_orte",
                                                                      "OMPI_MCA_ess", "OMPI_MCA_pmix"))}
    env.update(OMPI_ALLOW_RUN_AS_ROOT="1", OMPI_ALLOW_RUN_AS_ROOT_CONFIRM="1", **extra)
    return env


def _write_case(tmp_path, data, name="case.toml"):
    lines = []

    def value(v):
        if isinstance(v, str):
            return json.dumps(v)
        if isinstance(v, (list, tuple)):
            return "[" + ", ".join(value(x) for x in v) + "]"
        if isinstance(v, dict):
            return "{ " + ", ".join(f"{k} = {value(x)}" for k, x in v.items()) + " }"
        return repr(v)

    for table, keys in data.items():
        lines.append(f"[{table}]")
        lines += [f"{k} = {value(v)}" for k, v in keys.items()]
    path = tmp_path / name
    path.write_text("\n".join(lines) + "\n")
    return path


def _run_ranks(*argv, env=None, timeout=900):  # generous: a machine shared with other work is slow
    return subprocess.run([sys.executable, "-m", "shellmodes", *argv], capture_output=True, text=True,
                          env=env or _clean_env(), timeout=timeout)


@pytest.mark.mpi
@without_mpi
@pytest.mark.parametrize("name", sorted(CASES))
def test_two_ranks_give_the_serial_spectrum_and_only_rank_0_writes(tmp_path, name):
    case = _write_case(tmp_path, CASES[name])
    out = tmp_path / "out"
    done = _run_ranks("run", str(case), "--ranks", "2", "--out", str(out))
    assert done.returncode == 0, done.stderr
    # rank 0's own warnings and notes only (small meshes warn about the angular labels; a count raised to
    # finish a multiplet is noted, once): the launcher's reports are not relayed, and the helpers print nothing
    lines = done.stderr.splitlines()
    assert all(line.startswith(("warning: ", "note: ")) for line in lines), done.stderr
    assert sum(line.startswith("note: ") for line in lines) <= 1, done.stderr
    assert done.stdout.count("wrote ") == 1  # one rank prints
    data = json.loads((out / "spectrum.json").read_text())
    solver = data["solver"]
    assert solver["method"] == "mpi" and solver["ranks"] == 2  # "auto" chose the ranks
    assert solver["plan"]["path"] == "mpi" and "method 'auto' on several ranks" in solver["plan"]["reason"]
    assert [r["rank"] for r in solver["per_rank"]] == [0, 1]
    assert all(r["rows"] > 0 and r["peak_bytes"] > 0 for r in solver["per_rank"])
    lam = np.array([m["eigenvalue"] for m in data["modes"]])
    residuals = np.array([m["residual"] for m in data["modes"]])
    _assert_same_spectrum(lam, _serial(name).eigenvalues)
    assert np.max(residuals) < 1e-8
    log = (out / "run.log").read_text()
    assert "mpi: rank 1:" in log and "peak memory" in log
    assert sorted(p.name for p in tmp_path.iterdir()) == ["case.toml", "out"]  # nothing else written


def _processes_with(token):
    """(pid, rank) of the processes whose environment carries ``token`` and an MPI rank."""
    found = []
    for entry in Path("/proc").iterdir():
        if not entry.name.isdigit():
            continue
        try:
            env = dict(item.split("=", 1) for item in (entry / "environ").read_text().split("\0") if "=" in item)
        except (OSError, ValueError):
            continue
        if env.get("SHELLMODES_TEST_TOKEN") == token and "OMPI_COMM_WORLD_RANK" in env:
            found.append((int(entry.name), int(env["OMPI_COMM_WORLD_RANK"])))
    return found


@pytest.mark.mpi
@pytest.mark.skipif(not HAVE_MPI or not Path("/proc/self/environ").exists(),
                    reason="needs the MPI packages (scripts/setup-mpi.sh), Open MPI and /proc")
@pytest.mark.parametrize("victim", [1, 0])  # a helper, and the leader that holds the problem
def test_a_rank_that_dies_mid_solve_ends_the_run_with_one_line_and_no_output(tmp_path, victim):
    data = {**SPHERE, "resolution": {"degree": 3, "subdivisions": 4}, "modes": {"count": 300}}
    case = _write_case(tmp_path, data)
    out = tmp_path / "out"
    token = uuid.uuid4().hex
    process = subprocess.Popen([sys.executable, "-m", "shellmodes", "-v", "run", str(case), "--ranks", "2",
                                "--out", str(out)], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                               env=_clean_env(SHELLMODES_TEST_TOKEN=token))
    lines = []
    killed = False
    try:
        for line in process.stderr:  # rank 0's log, relayed by the launcher
            lines.append(line)
            if line.startswith("mpi: solving") and not killed:
                victims = [pid for pid, rank in _processes_with(token) if rank == victim]
                assert victims, f"rank {victim} not found"
                os.kill(victims[0], signal.SIGKILL)
                killed = True
        status = process.wait(timeout=120)
    finally:
        if process.poll() is None:
            process.kill()
    assert killed, "".join(lines)
    errors = [line for line in lines if line.startswith("shellmodes:")]
    assert errors == [errors[-1]] and len(errors) == 1, "".join(lines)
    assert f"MPI rank {victim}" in errors[0] and "no output was written" in errors[0]
    assert not any(line.startswith("----") or "mpiexec" in line for line in lines)
    assert status == 1
    assert not out.exists()
    time.sleep(0.5)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["case.toml"]  # no half-written folder either


@pytest.mark.mpi
@without_mpi
def test_without_room_for_a_factor_the_plan_switches_to_preconditioned_cg():
    # a per-rank budget below the estimated factor: CG with algebraic multigrid inside shift-invert
    # (inner relative residual 1e-12, so the eigenvalues still agree closely; 1e-9 allows for the
    # inexact inner solves)
    from shellmodes.eigen.backends import slepc_mpi
    from shellmodes.eigen.solve import lowest_modes

    reference = run_case(case_from_dict(_with_method({**SPHERE, "modes": {"count": 20}}, "lanczos")))
    args = (reference.problem.K, reference.problem.M, 20)
    kw = {"lower_bound": reference.plan.lower_bound, "scale": reference.plan.scale}
    serial = lowest_modes(*args, **kw)
    factor = slepc_mpi.mpi_lowest_modes(*args, **kw)
    assert factor.details["solver"]["inner_solver"] == "mumps-cholesky"
    need = factor.details["solver"]["per_rank_need_bytes"]
    assert need["mumps-cholesky"] > need["cg-gamg"]
    budget = (need["mumps-cholesky"] + need["cg-gamg"]) // 2
    iterative = slepc_mpi.mpi_lowest_modes(*args, **kw, memory_budget=budget)
    assert iterative.details["solver"]["inner_solver"] == "cg-gamg"
    assert "more than the" in iterative.details["solver"]["plan_reason"]
    assert np.max(np.abs(np.sort(iterative.lam) - np.sort(serial.lam)) / np.maximum(serial.lam, 1.0)) < 1e-9
    with pytest.raises(SolverError, match="more ranks or nodes"):
        slepc_mpi.mpi_lowest_modes(*args, **kw, memory_budget=1000)


# ------------------------------------------------------------------------ without the MPI packages (everywhere)

def test_without_the_mpi_packages_asking_for_them_is_a_one_line_error(tmp_path, monkeypatch, run_cli):
    monkeypatch.setattr(mpi, "available", lambda: False)
    case = _write_case(tmp_path, _with_method({**SPHERE, "resolution": {"degree": 1, "subdivisions": 1},
                                               "modes": {"count": 4}}, "mpi"))
    result = run_cli("run", str(case), "--out", str(tmp_path / "out"))
    assert result.status == 2
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and "modes.method" in lines[0] and "case.toml" in lines[0]
    assert "scripts/setup-mpi.sh" in lines[0] and "slepc4py" in lines[0]
    result = run_cli("run", str(_write_case(tmp_path, SPHERE, "plain.toml")), "--ranks", "2",
                     "--out", str(tmp_path / "out"))
    assert result.status == 2
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and "scripts/setup-mpi.sh" in lines[0]
    assert not (tmp_path / "out").exists()


def test_a_rank_count_below_one_is_refused(tmp_path, run_cli):
    result = run_cli("run", str(_write_case(tmp_path, SPHERE)), "--ranks", "0", "--out", str(tmp_path / "out"))
    assert result.status == 2
    assert result.stderr.strip().splitlines() == [result.stderr.strip()] and "--ranks 0" in result.stderr
    assert not (tmp_path / "out").exists()


def test_other_commands_refuse_to_run_on_several_ranks(monkeypatch, run_cli):
    # every rank would run the whole command and write the same files: rank 0 says so, the others are silent
    monkeypatch.setenv("OMPI_COMM_WORLD_SIZE", "2")
    monkeypatch.setenv("OMPI_COMM_WORLD_RANK", "0")
    result = run_cli("keys")
    assert result.status == 2 and result.stdout == ""
    assert result.stderr.strip().splitlines() == [result.stderr.strip()] and "only 'run'" in result.stderr
    monkeypatch.setenv("OMPI_COMM_WORLD_RANK", "1")
    with pytest.raises(SystemExit) as stop:
        run_cli("keys")
    assert stop.value.code == 2


def test_the_launcher_reports_are_folded_into_what_they_say():
    # Open MPI's framed report of a killed rank (the text it printed here when rank 1 got SIGKILL)
    import io

    text = ("warning: kept\n" + "-" * 74 + "\nPrimary job  terminated normally, but 1 process returned\n"
            "a non-zero exit code. Per user-direction, the job has been aborted.\n" + "-" * 74 + "\n" + "-" * 74 +
            "\nmpiexec noticed that process rank 1 with PID 0 on node vm exited on signal 9 (Killed).\n"
            + "-" * 74 + "\n")
    out = io.StringIO()
    from shellmodes.cli.mpi_ranks import relay_stderr

    seen = relay_stderr(io.StringIO(text), out)
    assert out.getvalue() == "warning: kept\n"
    assert seen == {"rank": 1, "node": "vm", "how": "signal 9, killed"}


@pytest.mark.mpi
@without_mpi
def test_a_problem_too_big_for_a_rank_is_refused_by_the_planner_before_any_solve(monkeypatch):
    # the per-rank memory guard: with 1 kB per rank nothing fits, and the case error names the key
    from shellmodes.eigen.backends import slepc_mpi
    from shellmodes.errors import CaseError

    monkeypatch.setattr(slepc_mpi, "per_rank_budget", lambda comm: 1000)
    started = []
    monkeypatch.setattr(slepc_mpi, "_RankSolver", lambda *a, **k: started.append(a))
    with pytest.raises(CaseError, match="more ranks or nodes") as refused:
        run_case(case_from_dict(_with_method(SPHERE, "mpi")))
    assert "modes.count" in str(refused.value)
    assert started == []  # no rank built a matrix or a solver
