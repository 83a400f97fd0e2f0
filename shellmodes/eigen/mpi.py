"""MPI ranks of a run: whether the MPI stack is here, which rank this process is, the leader's session.

A run under an MPI launcher with more than one rank is a *leader-and-helpers*
run: rank 0 runs the whole pipeline inside :func:`session`; the other ranks
wait in :func:`shellmodes.eigen.backends.slepc_mpi.serve` and take part only
in distributed solves.  When the session opens, every rank reports the memory
it may use and the smallest share is kept (:attr:`Session.budget`): the
planner checks its per-rank estimates against it before anything is
allocated.

This module imports mpi4py, petsc4py and slepc4py only when a session opens
or the distributed solver runs; :func:`available` and the launcher variables
work without them.  The distributed solver itself is
:mod:`shellmodes.eigen.backends.slepc_mpi`.
"""

from __future__ import annotations

import importlib.util
import os
import time
from contextlib import contextmanager

from shellmodes.errors import SolverError

__all__ = ["available", "require", "modules", "launched_size", "launched_rank", "Session", "session",
           "active_session", "per_rank_budget", "wake_helpers", "next_job", "INSTALL_HINT", "IDLE_POLL"]

INSTALL_HINT = ("the MPI solver needs petsc4py, slepc4py and mpi4py (PETSc built with MUMPS): run "
                "scripts/setup-mpi.sh from the source tree (Debian/Ubuntu: apt-get install python3-slepc4py "
                "python3-mpi4py mpi-default-bin) and use the environment it makes")

#: environment variables by which MPI launchers announce the number of ranks and a process's rank
#: (Open MPI; MPICH/Hydra and Slurm's PMI; PMIx launchers)
_SIZE_VARIABLES = ("OMPI_COMM_WORLD_SIZE", "PMI_SIZE", "PMIX_SIZE")
_RANK_VARIABLES = ("OMPI_COMM_WORLD_RANK", "PMI_RANK", "PMIX_RANK")

#: tag of the leader's messages that start a solve or end the session
WAKE_TAG = 10
#: how often an idle helper looks for the leader's next message [s]
IDLE_POLL = 0.02


def available() -> bool:
    """Whether petsc4py, slepc4py and mpi4py can be imported here."""
    return all(importlib.util.find_spec(m) is not None for m in ("petsc4py", "slepc4py", "mpi4py"))


def require() -> None:
    """Raise :class:`SolverError` with what to install when the MPI solver is missing."""
    if not available():
        raise SolverError(INSTALL_HINT)


def modules():
    """``(MPI, PETSc, SLEPc)``; :class:`SolverError` saying what to install when missing."""
    require()
    from mpi4py import MPI  # initialises MPI first, so PETSc uses the same world
    from petsc4py import PETSc
    from slepc4py import SLEPc

    return MPI, PETSc, SLEPc


def _from_environment(names) -> int | None:
    for name in names:
        value = os.environ.get(name)
        if value is not None and value.strip().isdigit():
            return int(value)
    return None


def launched_size() -> int:
    """Ranks this process was started with by an MPI launcher (1 when started without one)."""
    return _from_environment(_SIZE_VARIABLES) or 1


def launched_rank() -> int:
    """This process's rank as its MPI launcher announced it (0 when started without one)."""
    return _from_environment(_RANK_VARIABLES) or 0


def per_rank_budget(comm) -> int:
    """Collective: the bytes each rank may use, the smallest over all ranks.

    A rank's share is half of what its node may give (``SHELLMODES_MEMORY_LIMIT`` where set,
    else the node's available memory; half, as the serial planner keeps for the factor),
    divided among the ranks on that node.
    """
    from shellmodes.eigen.resources import memory_limit

    MPI, _, _ = modules()
    local = comm.Split_type(MPI.COMM_TYPE_SHARED)
    mine = int(memory_limit()[0]) // 2 // local.Get_size()
    local.Free()
    return int(comm.allreduce(mine, op=MPI.MIN))


class Session:
    """Rank 0's side of a leader-and-helpers run."""

    def __init__(self, comm, budget: int):
        self.comm = comm
        #: bytes each rank may use (the smallest share over all ranks, measured when the session opened)
        self.budget = budget
        #: True between the first and the last message of a solve: a failure there must end the job
        self.busy = False

    @property
    def size(self) -> int:
        return self.comm.Get_size()


_ACTIVE: list[Session] = []


def active_session() -> Session | None:
    """The leader's session while :func:`session` is open on rank 0, else None."""
    return _ACTIVE[-1] if _ACTIVE else None


@contextmanager
def session():
    """On rank 0: a leader :class:`Session` (helpers are released when it closes); on the others: None.

    Collective on entry (every rank reports its memory).  The helpers must
    call :func:`~shellmodes.eigen.backends.slepc_mpi.serve` when given None.
    """
    MPI, _, _ = modules()
    comm = MPI.COMM_WORLD
    budget = per_rank_budget(comm)
    if comm.Get_rank() != 0:
        yield None
        return
    leader = Session(comm, budget)
    _ACTIVE.append(leader)
    try:
        yield leader
    finally:
        _ACTIVE.pop()
        wake_helpers(comm, None)  # release the helpers


def wake_helpers(comm, message) -> None:
    """Rank 0 sends every helper the next job (None ends their loop)."""
    for r in range(1, comm.Get_size()):
        comm.send(message, dest=r, tag=WAKE_TAG)


def next_job(comm):
    """A helper's wait for the leader's next message, by sleeping between probes.

    A blocking receive would spin (MPI libraries poll for speed): measured here, a helper spinning
    in a broadcast while rank 0 assembled made the assembly 3.7x slower on 2 cores.
    """
    while not comm.Iprobe(source=0, tag=WAKE_TAG):
        time.sleep(IDLE_POLL)
    return comm.recv(source=0, tag=WAKE_TAG)
