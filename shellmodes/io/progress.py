"""Progress of long work, through one channel that the command line connects to a terminal.

Library code never prints.  It names what it is doing and how far it has got through three calls,
which do nothing (beyond a ``logging`` debug line) unless a caller has installed a
:class:`Reporter` with :func:`reporting`:

- :func:`stage` -- the stage now running ("assembling", "solving: lobpcg-spherical"),
- :func:`task` -- a context manager for counted work (refinements, checks, sweep steps,
  thicknesses, solver iterations), whose :meth:`Task.advance` moves it on,
- :func:`note` -- a one-line message the user should see even without ``-v`` (a request the
  program changed, such as ``modes.count`` raised to finish a multiplet).

The reporter lives in a :class:`contextvars.ContextVar`, so threads and sweep workers that did not
install one stay silent.  ``shellmodes.cli.progress`` provides the terminal reporter (tqdm bars on
a terminal, nothing with carriage returns elsewhere).

Examples
--------
>>> seen = []
>>> class Collect(Reporter):
...     def note(self, text):
...         seen.append(text)
>>> with reporting(Collect()):
...     note("modes.count raised from 24 to 25")
>>> seen
['modes.count raised from 24 to 25']
>>> note("nobody listens")  # no reporter installed: nothing happens
"""

from __future__ import annotations

import contextlib
import logging
from collections.abc import Iterator
from contextvars import ContextVar

__all__ = ["Reporter", "Task", "reporting", "stage", "task", "note", "note_count_raised", "current"]

log = logging.getLogger(__name__)


class Task:
    """A counted piece of work in progress (see :func:`task`).

    Attributes
    ----------
    what : str
        What is counted, e.g. ``"refinements"``.
    total : int or None
        How many there will be, None when unknown in advance.
    unit : str
        The unit of one step, e.g. ``"solve"``.
    done : int
        Steps finished so far.
    """

    def __init__(self, reporter: Reporter, what: str, total: int | None, unit: str) -> None:
        self.reporter, self.what, self.total, self.unit, self.done = reporter, what, total, unit, 0

    def advance(self, steps: int = 1, **status) -> None:
        """Count ``steps`` more steps as finished; ``status`` (short key = value pairs) is shown beside."""
        self.done += steps
        self.reporter.advanced(self, steps, status)


class Reporter:
    """Receives progress; this base class drops everything (logging it at debug level).

    Subclasses override :meth:`stage`, :meth:`started`, :meth:`advanced`, :meth:`finished`
    and :meth:`note`.
    """

    def stage(self, text: str) -> None:
        """The stage now running."""
        log.debug("stage: %s", text)

    def started(self, task: Task) -> None:
        """A counted task began."""
        log.debug("start: %s (%s)", task.what, task.total)

    def advanced(self, task: Task, steps: int, status: dict) -> None:
        """A counted task moved on by ``steps``."""
        log.debug("%s: %d of %s", task.what, task.done, task.total)

    def finished(self, task: Task) -> None:
        """A counted task ended (normally or not)."""

    def note(self, text: str) -> None:
        """A message the user should read."""
        log.info("%s", text)


_SILENT = Reporter()
_CURRENT: ContextVar[Reporter | None] = ContextVar("shellmodes_progress", default=None)


def current() -> Reporter:
    """The reporter installed for this context (a silent one by default)."""
    return _CURRENT.get() or _SILENT


@contextlib.contextmanager
def reporting(reporter: Reporter) -> Iterator[Reporter]:
    """Install ``reporter`` for the code run inside the ``with`` block.

    Parameters
    ----------
    reporter : Reporter
        Where progress goes until the block ends.

    Yields
    ------
    Reporter
        The same reporter.
    """
    token = _CURRENT.set(reporter)
    try:
        yield reporter
    finally:
        _CURRENT.reset(token)


def stage(text: str) -> None:
    """Report the stage now running (one short phrase, no trailing punctuation)."""
    current().stage(text)


def note(text: str) -> None:
    """Tell the user something they should know about this run (one line)."""
    current().note(text)


@contextlib.contextmanager
def task(what: str, total: int | None = None, unit: str = "step") -> Iterator[Task]:
    """A counted piece of work: ``with task("refinements", 3, "solve") as t: ... t.advance()``.

    Parameters
    ----------
    what : str
        What is counted.
    total : int, optional
        How many steps there will be (None: unknown; no time estimate then).
    unit : str
        Name of one step.

    Yields
    ------
    Task
        Call :meth:`Task.advance` as steps finish.
    """
    reporter = current()
    t = Task(reporter, what, total, unit)
    reporter.started(t)
    try:
        yield t
    finally:
        reporter.finished(t)


def note_count_raised(requested: int | None, returned: int, source: str = "") -> None:
    """Say that ``modes.count`` was raised from ``requested`` to ``returned`` to finish the last multiplet.

    Nothing is said when no count was requested (``modes.below``), none was added, or the case is
    the program's own (a source in angle brackets such as ``<check>``, not a user's file).
    """
    if requested is not None and returned > requested and not source.startswith("<"):
        where = f"{source}: " if source else ""
        note(f"{where}modes.count raised from {requested} to {returned} so that the last multiplet is complete "
             "(a multiplet is never cut)")
