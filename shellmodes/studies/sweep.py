"""Deformation sweeps: one case solved at every step of its ``[sweep]`` table.

``run_sweep`` turns the base case into one case per step (the swept keys set
together), validates them all before solving anything, solves the steps
that are not already on disk (serially, in local worker processes, or on a
running Dask distributed scheduler), saves each step as it finishes, follows
the levels from step to step (:mod:`shellmodes.studies.sweep_track`; in this process,
in step order, while later steps are still being solved) and writes the
sweep's table, level diagram and VTK collection (:mod:`shellmodes.studies.sweep_files`).

Threads: local worker processes are started (spawned) with the OpenMP and
BLAS thread variables set to 1, so that two workers do not each start a
thread per core.  Workers of a Dask scheduler keep their own settings
(distributed's nanny sets these variables to 1 by default - recalled from
its configuration, check yours).

Layout of the output folder::

    DIR/steps/step-0000/   spectrum.json spectrum.csv modes.vtu run.log step.json
    DIR/sweep.csv  DIR/sweep.json  DIR/levels.png  DIR/series.pvd

A step folder appears complete or not at all (it is written in a hidden
temporary folder and renamed); ``step.json`` records the step's parameter
values and its whole case.  A rerun reuses a step folder whose record
matches the step it would compute and recomputes any other, so an
interrupted sweep loses only the steps that were running.
``modes.vtu`` is always written for a sweep step (whatever ``output.vtu``
says): the tracking reads the eigenvectors back from it.
"""

from __future__ import annotations

import contextlib
import difflib
import json
import logging
import math
import os
import re
import shutil
import warnings
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from shellmodes import errors
from shellmodes.case.schema import Case, case_from_dict
from shellmodes.errors import CaseError, ShellmodesError
from shellmodes.io.outputs import EXPORTERS, MODE_ARRAY, atomic_directory
from shellmodes.limits import PORT_RANGE, SCHEDULER_ADDRESS

__all__ = ["SweepStep", "SweepResult", "SweepStopped", "plan_steps", "run_sweep", "load_step"]

log = logging.getLogger(__name__)

STEP_FILES = ("spectrum.json", "spectrum.csv", "modes.vtu", "run.log")
RECORD = "step.json"
#: thread-count variables of the BLAS/OpenMP libraries numpy and scipy may load;
#: one thread per worker process, so that the processes do not fight for the cores
_THREAD_VARIABLES = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "BLIS_NUM_THREADS",
                     "VECLIB_MAXIMUM_THREADS", "NUMEXPR_NUM_THREADS")
_TOKEN = re.compile(r"([A-Za-z_][A-Za-z0-9_]*)|\[(\d+)\]")


class SweepStopped(CaseError):
    """A step's value is invalid: the steps before it were solved and kept.

    ``result`` is the :class:`SweepResult` of the steps before the invalid one.
    """

    def __init__(self, message, source=None, key=None, result=None):
        super().__init__(message, source, key)
        self.result = result


@dataclass(frozen=True)
class SweepStep:
    """One step: its index, the swept (key, value) pairs and its validated case."""

    index: int
    values: tuple[tuple[str, float], ...]
    case: Case

    @property
    def folder_name(self) -> str:
        return f"step-{self.index:04d}"

    def record(self) -> dict:
        return {"step": self.index, "parameters": [{"key": k, "value": v} for k, v in self.values],
                "case": self.case.model_dump(mode="json")}


@dataclass(frozen=True, eq=False)
class SweepResult:
    """What a sweep produced (the same content as ``sweep.json``).

    Attributes
    ----------
    folder
        The output folder.
    keys
        The swept keys, in the order of the case's ``sweep.parameters``.
    steps
        The :class:`SweepStep` objects that were solved (all of them unless stopped).
    rows
        One dict per (step, mode): step, the keys' values, track, mode, energy,
        eigenvalue, parent_l, overlap, residual.
    tracks
        One dict per track: track, parent_l, first_step, last_step.
    solved, reused
        Step indices computed in this run, and found complete on disk.
    stopped
        Why the sweep stopped early, or None.
    """

    folder: Path
    keys: tuple[str, ...]
    steps: tuple[SweepStep, ...]
    rows: list
    tracks: list
    solved: tuple[int, ...]
    reused: tuple[int, ...]
    stopped: str | None = None

    def track_energies(self, track: int) -> np.ndarray:
        """(steps,) energies of one track, NaN at steps it is absent from."""
        out = np.full(len(self.steps), np.nan)
        position = {s.index: i for i, s in enumerate(self.steps)}
        for row in self.rows:
            if row["track"] == track:
                out[position[row["step"]]] = row["energy"]
        return out

    def __repr__(self):
        return (f"SweepResult(steps={len(self.steps)}, keys={list(self.keys)}, tracks={len(self.tracks)}, "
                f"solved={len(self.solved)}, reused={len(self.reused)}, folder={str(self.folder)!r}"
                + (f", stopped={self.stopped!r}" if self.stopped else "") + ")")


# -- steps -------------------------------------------------------------------------------------------

def _parse_key(key: str) -> list:
    parts, pos = [], 0
    text = key.strip()
    while pos < len(text):
        if text[pos] == "." and parts and pos + 1 < len(text):
            pos += 1
        match = _TOKEN.match(text, pos)
        if match is None:
            return []
        parts.append(match.group(1) if match.group(1) is not None else int(match.group(2)))
        pos = match.end()
    return parts


def _leaves(data, prefix=""):
    """Dotted keys of every number (or unset number) in dumped case data."""
    if isinstance(data, dict):
        for name, value in data.items():
            yield from _leaves(value, f"{prefix}.{name}" if prefix else name)
    elif isinstance(data, list):
        for i, value in enumerate(data):
            yield from _leaves(value, f"{prefix}[{i}]")
    elif data is None or (isinstance(data, (int, float)) and not isinstance(data, bool)):
        yield prefix


def _set(data, path, value):
    target = data
    for part in path[:-1]:
        target = target[part]
    # an integral value fits integer keys (subdivisions, layers) as well as number keys (strict schema)
    target[path[-1]] = int(value) if float(value).is_integer() and abs(value) < 2**53 else value


def _clear_leftovers(steps_dir: Path) -> None:
    """Remove hidden temporary step folders a killed run left behind (never complete, never read).

    One sweep at a time may write into a folder.
    """
    for item in steps_dir.iterdir():
        if item.is_dir() and re.match(r"\.(stale-)?step-\d{4}", item.name):
            shutil.rmtree(item, ignore_errors=True)


def _resolve_keys(case: Case) -> list[tuple[str, list, tuple[float, ...]]]:
    base = case.model_dump(mode="json")
    base.pop("sweep")
    valid = set(_leaves(base))
    out = []
    for i, parameter in enumerate(case.sweep.parameters):
        path = _parse_key(parameter.key)
        canonical = ".".join(str(p) if isinstance(p, str) else f"[{p}]" for p in path).replace(".[", "[")
        if not path or canonical not in valid:
            near = difflib.get_close_matches(parameter.key, sorted(valid), n=1, cutoff=0.4)
            hint = f"; did you mean '{near[0]}'?" if near else ""
            raise CaseError(f"value {parameter.key!r}: not a numeric key of this case{hint} "
                            "(keys are dotted, with [i] for list items, e.g. 'surface.deformation[0].amplitude')",
                            case.source, f"sweep.parameters[{i}].key")
        out.append((canonical, path, parameter.resolved()))
    return out


def plan_steps(case: Case) -> tuple[list[SweepStep], CaseError | None]:
    """Every step's validated case, up to the first invalid one.

    Each step's case is the base case without its ``[sweep]`` table, with the
    swept keys set.  A step is valid when its case validates and its shape
    can be built.

    Returns
    -------
    steps, error
        The valid steps before the first invalid one, and a
        :class:`CaseError` naming that step's key, value and reason (None if
        every step is valid).

    Raises
    ------
    CaseError
        No ``[sweep]`` table, or an unknown swept key (naming
        ``sweep.parameters[i].key`` and the nearest valid key).
    """
    from shellmodes.case.model import build_shape

    if case.sweep is None:
        raise CaseError("the case has no [sweep] table; add sweep.parameters to sweep a key", case.source,
                        "sweep")
    keys = _resolve_keys(case)
    # unset (None) entries are left out, so that an absent table stays absent when the step is
    # validated again; a swept key that was unset is created by _set
    base = case.model_dump(mode="json", exclude_none=True)
    base.pop("sweep")
    steps = []
    for index in range(len(keys[0][2])):
        data = json.loads(json.dumps(base))  # a deep copy of plain data
        values = tuple((key, float(vals[index])) for key, _, vals in keys)
        for (_, path, _), (_, value) in zip(keys, values):
            _set(data, path, value)
        try:
            step_case = case_from_dict(data, case.source)
            if step_case.shell is not None:
                from shellmodes.fem.discretisation import check_walls

                check_walls(step_case)
            else:
                build_shape(step_case)
        except CaseError as exc:
            shown = ", ".join(f"{k} = {v:.10g}" for k, v in values)
            return steps, CaseError(f"step {index} ({shown}) is invalid: {exc.reason}; the sweep stops before "
                                    "it", case.source, values[0][0] if len(values) == 1 else "sweep.parameters")
        steps.append(SweepStep(index=index, values=values, case=step_case))
    return steps, None


# -- step folders ------------------------------------------------------------------------------------

def _reusable(folder: Path, step: SweepStep) -> bool:
    """A finished step folder that parses in full; a damaged one is reported and solved again."""
    if not _is_complete(folder, step):
        return False
    problem = _damage(folder)
    if problem is not None:
        warnings.warn(f"sweep step {step.index}: the saved step in {folder} is damaged ({problem}); "
                      "solving it again", UserWarning, stacklevel=3)
        return False
    return True


def _damage(folder: Path) -> str | None:
    """Why a step folder cannot be read back in full (JSON, CSV rows, every mode in modes.vtu), or None."""
    try:
        spectrum, _, _, _ = load_step(folder)
        rows = (folder / "spectrum.csv").read_text().splitlines()
    except (OSError, ValueError, KeyError, TypeError, ShellmodesError) as exc:
        return f"{type(exc).__name__}: {str(exc).splitlines()[0] if str(exc) else 'unreadable'}"[:200]
    if len(rows) != len(spectrum["modes"]) + 1:
        return f"spectrum.csv has {max(len(rows) - 1, 0)} rows for {len(spectrum['modes'])} modes"
    return None


def _is_complete(folder: Path, step: SweepStep) -> bool:
    if not all((folder / name).is_file() for name in (*STEP_FILES, RECORD)):
        return False
    try:
        record = json.loads((folder / RECORD).read_text())
    except (OSError, ValueError):
        return False
    # JSON keeps every float exactly (shortest repr round-trips), so equality is the test
    return record == json.loads(json.dumps(step.record()))


def _save_step(spectrum, step: SweepStep, steps_dir: Path) -> Path:
    target = steps_dir / step.folder_name
    stale = None
    if target.exists():  # a folder whose record does not match: move it aside, then replace it
        stale = steps_dir / f".stale-{step.folder_name}-{os.getpid()}"
        shutil.rmtree(stale, ignore_errors=True)
        os.replace(target, stale)
    with atomic_directory(target) as tmp:
        for name in STEP_FILES:
            EXPORTERS[name](spectrum, tmp)
        (tmp / RECORD).write_text(json.dumps(step.record(), indent=2) + "\n")  # last: marks completeness
    if stale is not None:
        shutil.rmtree(stale, ignore_errors=True)
    return target


def load_step(folder):
    """Read a saved step: (modes table, multiplet member lists, (N, n) vectors, record).

    The vectors come from the point fields of ``modes.vtu``, named
    ``psi_NNNN`` (:func:`shellmodes.io.outputs.mode_array_names`).
    """
    spectrum, groups, vectors, record, _ = _read_step(folder)
    return spectrum, groups, vectors, record


def _read_step(folder):
    """:func:`load_step` and the step's meshio mesh (points and cells, for the series files)."""
    import meshio

    folder = Path(folder)
    spectrum = json.loads((folder / "spectrum.json").read_text())
    record = json.loads((folder / RECORD).read_text())
    from shellmodes.meshfiles.surface import SurfaceFormat, _read_with_meshio

    try:
        mesh = _read_with_meshio(SurfaceFormat("VTK XML", meshio.vtu.read), str(folder / "modes.vtu"))
    except errors.MeshError as exc:
        raise ShellmodesError(str(exc)) from None
    fields = {}
    for name, values in mesh.point_data.items():
        match = MODE_ARRAY.match(name)
        if match:
            fields[int(match.group(1))] = np.asarray(values, dtype=float).reshape(len(mesh.points))
    modes = spectrum["modes"]
    if sorted(fields) != list(range(len(modes))):
        raise ShellmodesError(f"{folder}: modes.vtu holds modes {sorted(fields)[:5]}..., spectrum.json "
                              f"lists {len(modes)}; delete the folder and rerun the sweep")
    vectors = np.column_stack([fields[i] for i in range(len(modes))]) if modes else np.zeros((len(mesh.points), 0))
    groups = [m["modes"] for m in spectrum["multiplets"]]
    return spectrum, groups, vectors, record, mesh


def _mass_matrix(case: Case):
    """Consistent mass matrix on every node of the case's curved surface or shell (rebuilt from the case).

    Only resumed sweeps need this: a fresh step keeps its mass matrix in the spectrum.
    """
    from shellmodes.fem.discretisation import build_discretisation

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the solve already reported anything doubtful about the mesh
        return build_discretisation(case).mass_matrix()


# -- solving -----------------------------------------------------------------------------------------

def _solve_step(case: Case, index: int, step: SweepStep | None = None, steps_dir: Path | None = None):
    """Worker task: solve one step; warnings come back as (category name, text) pairs.

    With ``step`` and ``steps_dir`` (local workers, which share the disk) the worker also saves
    the step and assembles the mass matrix the tracker needs, and returns ``(None, warnings, M)``:
    that work then runs in parallel instead of in the collecting process.  Remote (Dask) workers
    return the spectrum for the client to save: ``(spectrum, warnings, None)``.
    """
    from shellmodes.pipeline import run_case

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            spectrum = run_case(case)
        except ShellmodesError as exc:
            # a plain message: it must survive pickling back from a worker process
            raise ShellmodesError(f"sweep step {index}: {exc}") from None
        mass = None
        if step is not None and steps_dir is not None:
            _save_step(spectrum, step, steps_dir)
            mass = spectrum.mass_matrix() if index > 0 else None  # kept by the solve: nothing rebuilt
            spectrum = None
    return spectrum, [(w.category.__name__, str(w.message)) for w in caught], mass


@contextlib.contextmanager
def _single_threaded_children():
    """Set the thread variables to 1 while worker processes start (they inherit them), then restore."""
    saved = {name: os.environ.get(name) for name in _THREAD_VARIABLES}
    os.environ.update({name: "1" for name in _THREAD_VARIABLES})
    try:
        yield
    finally:
        for name, value in saved.items():
            if value is None:
                os.environ.pop(name, None)
            else:
                os.environ[name] = value


def _serial(todo):
    for step in todo:
        yield step, _solve_step(step.case, step.index)


def _local_pool(todo, workers, steps_dir):
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor, as_completed

    # spawn, not fork: a fresh interpreter reads the thread variables when it loads the BLAS
    context = multiprocessing.get_context("spawn")
    with _single_threaded_children():
        pool = ProcessPoolExecutor(max_workers=workers, mp_context=context, initializer=_die_with_parent,
                                   initargs=(os.getpid(),))
        futures = {pool.submit(_solve_step, step.case, step.index, step, steps_dir): step for step in todo}
    try:
        for future in as_completed(futures):
            yield futures[future], future.result()
    finally:
        pool.shutdown(wait=True, cancel_futures=True)


def _die_with_parent(parent: int) -> None:
    """Worker initializer: the kernel kills this worker when the sweep process dies (Linux prctl)."""
    import ctypes
    import signal

    try:
        ctypes.CDLL(None, use_errno=True).prctl(1, int(signal.SIGKILL))  # PR_SET_PDEATHSIG
    except (OSError, AttributeError):  # not Linux: workers end when the pool's pipe closes
        pass
    if os.getppid() != parent:  # the parent died before the request took effect
        os._exit(1)




def check_scheduler_address(address: str, source: str | None = None) -> None:
    """Refuse an address that is not ``tcp://host:port`` (before anything is written)."""
    match = SCHEDULER_ADDRESS.fullmatch(str(address).strip())
    if match is None or not PORT_RANGE[0] <= int(match.group(2)) <= PORT_RANGE[1]:
        raise CaseError(f"value {address!r}: a scheduler address is tcp://host:port (port 1-65535); "
                        "tls and other protocols are not supported", source, "sweep.scheduler")


def _lost(address, exc) -> ShellmodesError:
    reason = str(exc).splitlines()[0] if str(exc) else ""
    return ShellmodesError(f"the Dask scheduler at {address!r} failed or was lost ({type(exc).__name__}"
                           f"{': ' + reason[:160] if reason else ''}); every step finished so far is saved "
                           "and is reused when the sweep is run again")


def _scheduler_failure(exc) -> bool:
    """Whether an exception is the scheduler or its connection failing (not a step's own error)."""
    import asyncio
    import concurrent.futures

    return (isinstance(exc, (OSError, TimeoutError, MemoryError, EOFError, asyncio.CancelledError,
                             concurrent.futures.CancelledError))
            or type(exc).__module__.split(".")[0] in ("distributed", "tornado", "msgpack"))


def _dask(todo, address, timeout):
    try:
        from dask.distributed import Client, as_completed
    except ImportError:
        raise ShellmodesError("sweep.scheduler needs dask.distributed (pip install 'shellmodes[sweep]')") from None
    try:
        client = Client(address, timeout=timeout, set_as_default=False)
    except Exception as exc:  # a service that is not a scheduler fails in many ways (MemoryError, TypeError...)
        reason = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise ShellmodesError(f"cannot reach the Dask scheduler at {address!r} within {timeout:g} s ({reason}); "
                              "check the address, or drop sweep.scheduler to use the local cores") from None
    try:
        futures = {client.submit(_solve_step, step.case, step.index, pure=False): step for step in todo}
        with client.as_current():  # as_completed looks for a current client; this one is not the default
            for future in as_completed(list(futures)):
                yield futures[future], future.result()
    except ShellmodesError:
        raise
    except BaseException as exc:
        if isinstance(exc, GeneratorExit) or not _scheduler_failure(exc):
            raise
        raise _lost(address, exc) from None
    finally:
        with contextlib.suppress(Exception):
            client.close(timeout=2)


def _reemit(step: SweepStep, caught):
    for category_name, text in caught:
        category = getattr(errors, category_name, UserWarning)
        if not (isinstance(category, type) and issubclass(category, Warning)):
            category = UserWarning
        warnings.warn(f"sweep step {step.index}: {text}", category, stacklevel=3)


# -- the sweep ---------------------------------------------------------------------------------------

def run_sweep(case: Case, out: str | Path, *, workers: int | None = None, scheduler: str | None = None,
              progress: Callable[[int, int], None] | None = None,
              connect_timeout: float = 5.0, min_overlap: float = 0.5) -> SweepResult:
    """Solve every step of ``case.sweep``, follow the levels, and write the sweep's files into ``out``.

    Parameters
    ----------
    case
        A case with a ``[sweep]`` table.
    out
        Output folder (created; finished steps inside it are reused).
    workers
        Local worker processes (default ``case.sweep.workers``); 1 solves in this process.
    scheduler
        ``"tcp://host:port"`` of a running Dask distributed scheduler (default
        ``case.sweep.scheduler``); when given, ``workers`` is not used.
    progress
        Optional callable ``progress(done, total)`` called as steps finish.
    connect_timeout
        Seconds to wait for the scheduler.
    min_overlap
        Smallest squared cosine that continues a track (:mod:`shellmodes.studies.sweep_track`).

    Returns
    -------
    SweepResult

    Raises
    ------
    CaseError
        No sweep table, or an unknown key.
    SweepStopped
        A step's value is invalid: the steps before it were solved, saved and
        tabulated, then this is raised naming the value and the reason.
    ShellmodesError
        The scheduler cannot be reached (nothing is lost: finished steps stay).

    Examples
    --------
    >>> from shellmodes.case.schema import case_from_dict
    >>> case = case_from_dict({"surface": {"shape": "sphere"}, "modes": {"count": 4},
    ...     "resolution": {"subdivisions": 1}, "sweep": {"parameters": [{"key": "surface.radius",
    ...     "values": [1.0, 2.0]}], "workers": 1}})
    >>> import tempfile; result = run_sweep(case, tempfile.mkdtemp())
    >>> [round(r["eigenvalue"], 1) for r in result.rows if r["mode"] == 1]  # l(l+1)/R^2, coarse mesh
    [2.0, 0.5]
    """
    from shellmodes.io.outputs import check_writable
    from shellmodes.io.pictures import require_plot_extra
    from shellmodes.studies.sweep_files import write_sweep_files

    steps, invalid = plan_steps(case)
    out = Path(out)
    workers = case.sweep.workers if workers is None else int(workers)
    scheduler = case.sweep.scheduler if scheduler is None else scheduler
    if workers < 1:
        raise CaseError(f"value {workers}: need at least one worker", case.source, "sweep.workers")
    # everything that can be refused is refused before --out is touched or a step is solved
    if scheduler:
        check_scheduler_address(scheduler, case.source)
    check_writable(out, case.source)
    require_plot_extra("a sweep's levels.png", case.source, modules=("matplotlib",))
    if invalid is not None and not steps:
        raise SweepStopped(f"{invalid.reason}; no step was solved", invalid.source, invalid.key, None)
    steps_dir = out / "steps"
    steps_dir.mkdir(parents=True, exist_ok=True)
    _clear_leftovers(steps_dir)
    reused = tuple(s.index for s in steps if _reusable(steps_dir / s.folder_name, s))
    todo = [s for s in steps if s.index not in reused]
    log.info("sweep: %d steps, %d on disk, %d to solve", len(steps), len(reused), len(todo))
    done = len(reused)
    collector = _Collector(out, steps, min_overlap)
    collector.advance(reused)
    if progress is not None:
        progress(done, len(steps))
    if todo:
        if scheduler:
            runner = _dask(todo, scheduler, connect_timeout)
        elif workers > 1 and len(todo) > 1:
            runner = _local_pool(todo, min(workers, len(todo)), steps_dir)
        else:
            runner = _serial(todo)
        try:
            for step, (spectrum, caught, mass) in runner:
                _reemit(step, caught)
                if spectrum is not None:
                    _save_step(spectrum, step, steps_dir)
                del spectrum
                if mass is not None:
                    collector.masses[step.index] = mass
                done += 1
                log.info("sweep: step %d saved (%d of %d)", step.index, done, len(steps))
                if progress is not None:
                    progress(done, len(steps))
                collector.advance([step.index])
        finally:
            close = getattr(runner, "close", None)
            if close is not None:
                close()
    stopped = str(invalid) if invalid is not None else None
    result = collector.result(case, tuple(s.index for s in todo), reused, stopped)
    write_sweep_files(result, case)
    if invalid is not None:
        kept = f"steps 0-{len(steps) - 1} are saved in {steps_dir}" if steps else "no step was solved"
        raise SweepStopped(f"{invalid.reason}; {kept}", invalid.source, invalid.key, result)
    return result


class _Collector:
    """Follows the levels step by step, in order, as soon as each step's folder is complete.

    Steps finish out of order in parallel; each one is tracked once all before
    it are, so the tracking overlaps the solving and only one step's vectors
    are held at a time.
    """

    def __init__(self, out: Path, steps, min_overlap: float):
        from shellmodes.studies.sweep_files import TrackStates
        from shellmodes.studies.sweep_track import LevelTracker

        self.out, self.steps = out, list(steps)
        #: each step's track states, signs made consistent, kept on disk for series.pvd
        self.states = TrackStates(out)
        self.tracker = LevelTracker(min_overlap=min_overlap)
        self.rows, self.next, self.ready = [], 0, set()
        #: mass matrices assembled by local workers, by step index (else assembled here when needed)
        self.masses = {}

    def advance(self, finished=()):
        # one BLAS thread: with local workers on every core, the collector's threads would spin
        # against theirs (the workers run single-threaded for the same reason)
        from threadpoolctl import threadpool_limits

        self.ready.update(finished)
        with threadpool_limits(limits=1):
            self._advance()

    def _advance(self):
        from shellmodes.studies.sweep_track import StepModes

        while self.next < len(self.steps) and self.steps[self.next].index in self.ready:
            step = self.steps[self.next]
            spectrum, groups, vectors, _ = load_step(self.out / "steps" / step.folder_name)
            modes = spectrum["modes"]
            M = self.masses.pop(step.index, None)
            if M is None and self.next > 0:
                M = _mass_matrix(step.case)
            triples = self.tracker.add(StepModes(
                vectors=vectors, eigenvalues=np.array([m["eigenvalue"] for m in modes]), groups=groups,
                labels=[m["l"] for m in modes], M=M))
            mode_group = {j: h for h, members in enumerate(groups) for j in members}
            multiplet_of = {track: mode_group[j] for j, track, _ in triples}
            self.states.add(step.index, *self.tracker.states(), multiplet_of)
            for j, track, overlap in triples:
                mode = modes[j]
                self.rows.append({"step": step.index, **dict(step.values), "track": track, "mode": j,
                                  "energy": mode["energy"], "eigenvalue": mode["eigenvalue"],
                                  "parent_l": self.tracker.parent_l[track],
                                  "overlap": None if math.isnan(overlap) else overlap,
                                  "residual": mode["residual"]})
            self.next += 1

    def result(self, case, solved, reused, stopped) -> SweepResult:
        self.advance()
        if self.next != len(self.steps):
            raise RuntimeError(f"sweep step {self.steps[self.next].index} was never saved")
        first, last = {}, {}
        for row in self.rows:
            first.setdefault(row["track"], row["step"])
            last[row["track"]] = row["step"]
        tracks = [{"track": t, "parent_l": label, "first_step": first[t], "last_step": last[t]}
                  for t, label in enumerate(self.tracker.parent_l)]
        keys = tuple(k for k, _ in self.steps[0].values) if self.steps else \
            tuple(p.key for p in case.sweep.parameters)
        return SweepResult(folder=self.out, keys=keys, steps=tuple(self.steps), rows=self.rows, tracks=tracks,
                           solved=solved, reused=reused, stopped=stopped)
