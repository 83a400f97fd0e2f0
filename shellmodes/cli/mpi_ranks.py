"""Running ``shellmodes run`` on MPI ranks: ``--ranks N`` on one machine, or under ``mpiexec``.

- ``shellmodes run CASE --ranks N`` starts ``mpiexec -n N`` with this same
  Python and command, relays rank 0's output, and turns the launcher's own
  multi-line reports (a rank killed, a rank that failed) into one line;
- under any MPI launcher with more than one rank (``mpiexec -n N python -m
  shellmodes run CASE`` in a cluster job script) rank 0 runs the case and
  writes every file, the other ranks only serve the distributed solves
  (:mod:`shellmodes.eigen.backends.slepc_mpi`) and print nothing.

The command ``run`` (:mod:`shellmodes.cli.run`) calls this module; it returns
exit statuses and writes nothing but relayed output and the one-line report
of a run that ended abnormally.
"""

from __future__ import annotations

import logging
import os
import re
import shutil
import signal
import subprocess
import sys
import threading
import warnings

from shellmodes.eigen.mpi import launched_rank, launched_size, require
from shellmodes.errors import CaseError, SolverError

__all__ = ["run_on_ranks", "one_process_only", "mpiexec_command", "relay_stderr"]

#: Open MPI's report of a rank that died ("... process rank 1 with PID 0 on node vm exited on signal 9 (Killed).")
_SIGNALLED = re.compile(r"rank (\d+) with PID \d+ on node (\S+) exited on signal (\d+) \(([^)]*)\)")
_EXITED = re.compile(r"rank (\d+) with PID \d+ on node (\S+) exited .*?with status (\d+)", re.S)
_RULE = re.compile(r"^-{20,}\s*$")


def run_on_ranks(args, run_here, err) -> int:
    """Exit status of ``run_here()`` run as this process's MPI role, or of the ``--ranks`` launch.

    ``err`` is the command line's error stream (relayed output and the one-line reports go there).
    """
    ranks = getattr(args, "ranks", None)
    if ranks is not None and ranks < 1:
        raise CaseError(f"--ranks {ranks}: give a whole number of MPI ranks, at least 1")
    if launched_size() > 1:
        return _as_rank(run_here, err)
    if ranks is not None and ranks > 1:
        return _launch(args, ranks, err)
    return run_here()


def one_process_only(command: str) -> None:
    """Refuse a command other than ``run`` under an MPI launcher with more than one rank.

    Rank 0 raises the one-line error; the other ranks end with status 2 silently.
    """
    if launched_size() <= 1:
        return
    if launched_rank() != 0:
        raise SystemExit(2)
    raise CaseError(f"'shellmodes {command}' runs in one process; of the commands only 'run' uses MPI ranks "
                    f"(started here with {launched_size()}): start it without mpiexec")


def _as_rank(run_here, err) -> int:
    from shellmodes.eigen.backends.slepc_mpi import serve
    from shellmodes.eigen.mpi import session

    if launched_rank() != 0:  # a helper: no output of any kind
        logging.disable(logging.CRITICAL)
        warnings.simplefilter("ignore")
    with session() as leader:
        if leader is None:
            try:
                serve()
            except Exception as exc:  # a failed helper must end the whole job, not leave the others waiting
                from mpi4py import MPI

                print(f"shellmodes: rank {MPI.COMM_WORLD.Get_rank()}: internal error: {type(exc).__name__}: {exc}",
                      file=err, flush=True)
                MPI.COMM_WORLD.Abort(1)
            return 0
        # the launcher ends every rank with SIGTERM when one fails: unwind, so no half-written folder stays
        signal.signal(signal.SIGTERM, _terminated)
        try:
            return run_here()
        except BaseException as exc:
            if leader.busy:  # the helpers wait inside a solve: only ending the job releases them
                print(f"shellmodes: error: rank 0 failed during the distributed solve ({type(exc).__name__}: "
                      f"{exc}); every rank was stopped and no output was written", file=err, flush=True)
                leader.comm.Abort(1)
            raise


def _terminated(signum, frame):
    raise SystemExit(128 + signum)


def _open_mpi() -> bool:
    try:
        text = subprocess.run(["mpiexec", "--version"], capture_output=True, text=True, timeout=30).stdout
    except (OSError, subprocess.SubprocessError):
        return False
    return "Open MPI" in text or "OpenRTE" in text


def mpiexec_command(args, ranks: int) -> list[str]:
    """The mpiexec command line that runs this ``shellmodes run`` on ``ranks`` ranks here."""
    command = ["mpiexec", "-n", str(ranks)]
    if _open_mpi():
        if ranks > (os.cpu_count() or 1):
            command.append("--oversubscribe")  # more ranks than cores: allowed, but each rank gets less
        if hasattr(os, "geteuid") and os.geteuid() == 0:
            command.append("--allow-run-as-root")  # containers and CI machines run as root
    command += [sys.executable, "-m", "shellmodes"] + (["--verbose"] if getattr(args, "verbose", False) else [])
    command += ["run", str(args.case)]
    if args.out:
        command += ["--out", str(args.out)]
    command += [flag for flag, on in (("--quiet", args.quiet), ("--report", args.report)) if on]
    return command


def relay_stderr(stream, out) -> dict:
    """Copy the ranks' error output to ``out`` without the launcher's framed reports; what those said.

    Returns ``{"rank", "node", "how"}`` of the first rank the launcher saw die
    (or an empty dict), and ``"own_error"`` when a rank printed its own
    ``shellmodes:`` error line.
    """
    seen: dict = {}
    framed = False
    block: list[str] = []
    for line in stream:
        if _RULE.match(line):
            if framed:
                text = " ".join(block)
                hit = _SIGNALLED.search(text)
                if hit and "rank" not in seen:
                    seen.update(rank=int(hit.group(1)), node=hit.group(2),
                                how=f"signal {hit.group(3)}, {hit.group(4).lower()}")
                hit = _EXITED.search(text)
                if hit and "rank" not in seen:
                    seen.update(rank=int(hit.group(1)), node=hit.group(2), how=f"exit status {hit.group(3)}")
                block = []
            framed = not framed
            continue
        if framed:
            block.append(line.strip())
            continue
        if line.startswith("shellmodes:"):
            seen["own_error"] = True
        out.write(line)
        out.flush()
    return seen


def _launch(args, ranks: int, err) -> int:
    require()
    if shutil.which("mpiexec") is None:
        raise SolverError("--ranks needs the MPI launcher mpiexec on PATH (run scripts/setup-mpi.sh, or use the "
                          "environment it made)")
    env = dict(os.environ)
    # one BLAS/OpenMP thread per rank: the ranks already use the cores
    env.update(OMP_NUM_THREADS="1", OPENBLAS_NUM_THREADS="1", MKL_NUM_THREADS="1")
    # a rank waiting for another yields its core instead of spinning, as advised for machines shared with
    # other work (common practice); measured here at load 12 on 2 cores: 21.4 s against 23.7 s, within noise
    env.setdefault("OMPI_MCA_mpi_yield_when_idle", "1")
    process = subprocess.Popen(mpiexec_command(args, ranks), stderr=subprocess.PIPE, text=True, env=env)
    seen: dict = {}
    relay = threading.Thread(target=lambda: seen.update(relay_stderr(process.stderr, err)), daemon=True)
    relay.start()
    try:
        status = process.wait()
    except KeyboardInterrupt:
        process.send_signal(signal.SIGINT)
        process.wait()
        raise
    relay.join()
    if status == 0 or seen.get("own_error"):
        return status
    if "rank" in seen:
        where = f"MPI rank {seen['rank']} (on {seen['node']}) ended with {seen['how']}"
    else:
        where = f"the MPI run ended with status {status}"
    print(f"shellmodes: error: {where} before the run finished; every rank was stopped and no output was written",
          file=err)
    return 1
