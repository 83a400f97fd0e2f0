"""The terminal end of :mod:`shellmodes.io.progress`: tqdm bars on a terminal, plain lines elsewhere.

On a terminal (stderr is a TTY) every counted task gets a bar with its count, rate and time
estimate, and the running stage is shown on the innermost bar (or on a status line of its own).
Elsewhere (a log file, a pipe, a test) nothing with carriage returns is written: notes come out as
plain ``note: ...`` lines, and with ``-v`` stages and finished steps as plain lines too.
``-q`` silences everything except errors and warnings.
"""

from __future__ import annotations

import sys
import time

from shellmodes.io.progress import Reporter, Task

__all__ = ["TerminalReporter", "make_reporter", "PLAIN_REPEAT_SECONDS"]

#: without a terminal, a stage that repeats (an iteration count) is written at most this often with -v
PLAIN_REPEAT_SECONDS = 5.0


def _status_text(status: dict) -> str:
    return ", ".join(f"{k} {v}" for k, v in status.items())


class TerminalReporter(Reporter):
    """Progress on ``stream`` (stderr by default).

    Parameters
    ----------
    quiet : bool
        Print nothing (``-q``).
    verbose : bool
        Plain lines for every stage and finished step when there are no bars (``-v``).
    bars : bool or None
        Draw tqdm bars; None decides from whether ``stream`` is a terminal.
    stream
        Where to write (stderr by default).
    """

    def __init__(self, quiet: bool = False, verbose: bool = False, bars: bool | None = None, stream=None) -> None:
        self.stream = stream if stream is not None else sys.stderr
        self.quiet, self.verbose = quiet, verbose
        isatty = getattr(self.stream, "isatty", lambda: False)()
        self.bars = (isatty if bars is None else bars) and not quiet
        self._open: list[tuple[Task, object]] = []  # (task, tqdm bar or None), innermost last
        self._status = None  # a status line while no task is open
        self._stage = ""
        self._noted: set[str] = set()
        self._last_kind, self._last_time = "", 0.0
        self._t0 = time.perf_counter()

    # -- plain output -------------------------------------------------------------------------
    def _line(self, text: str) -> None:
        if self.bars:
            from tqdm import tqdm

            tqdm.write(text, file=self.stream)
        else:
            self.stream.write(text + "\n")
            self.stream.flush()

    # -- Reporter ------------------------------------------------------------------------------
    def stage(self, text: str) -> None:
        super().stage(text)
        self._stage = text
        if self.quiet:
            return
        if not self.bars:
            # plain lines: a repeating stage (solver iterations) at most every few seconds
            kind, now = text.split(":")[0].rstrip("0123456789 "), time.perf_counter()
            if self.verbose and (kind != self._last_kind or now - self._last_time >= PLAIN_REPEAT_SECONDS):
                self._last_kind, self._last_time = kind, now
                self._line(f"[{now - self._t0:7.1f} s] {text}")
            return
        if self._open:
            bar = self._open[-1][1]
            bar.set_postfix_str(text, refresh=True)
        else:
            from tqdm import tqdm

            if self._status is None:
                self._status = tqdm(total=None, file=self.stream, leave=False, bar_format="{desc} [{elapsed}]",
                                    dynamic_ncols=True)
            self._status.set_description_str(text, refresh=True)

    def started(self, task: Task) -> None:
        super().started(task)
        bar = None
        if self.bars:
            from tqdm import tqdm

            if self._status is not None:
                self._status.close()
                self._status = None
            bar = tqdm(total=task.total, desc=task.what, unit=task.unit, file=self.stream, leave=False,
                       dynamic_ncols=True, position=len(self._open))
        self._open.append((task, bar))

    def advanced(self, task: Task, steps: int, status: dict) -> None:
        super().advanced(task, steps, status)
        bar = next((b for t, b in self._open if t is task), None)
        if bar is not None:
            if bar.total != task.total:  # the count became known after the task began
                bar.total = task.total
            if status:
                bar.set_postfix_str(_status_text(status), refresh=False)
            bar.update(steps)
        elif self.verbose and not self.quiet:
            of = f" of {task.total}" if task.total is not None else ""
            extra = f" ({_status_text(status)})" if status else ""
            self._line(f"[{time.perf_counter() - self._t0:7.1f} s] {task.what}: {task.done}{of} done{extra}")

    def finished(self, task: Task) -> None:
        super().finished(task)
        for i, (t, bar) in enumerate(self._open):
            if t is task:
                if bar is not None:
                    bar.close()
                del self._open[i]
                break

    def note(self, text: str) -> None:
        super().note(text)
        if not self.quiet and text not in self._noted:  # a study repeating the same run says it once
            self._noted.add(text)
            self._line(f"note: {text}")

    def close(self) -> None:
        """Remove every bar still drawn (at the end of a command, or on an error)."""
        for _, bar in reversed(self._open):
            if bar is not None:
                bar.close()
        self._open.clear()
        if self._status is not None:
            self._status.close()
            self._status = None


def make_reporter(args) -> TerminalReporter:
    """The reporter for parsed command-line ``args`` (their ``quiet`` and ``verbose`` flags)."""
    return TerminalReporter(quiet=bool(getattr(args, "quiet", False)), verbose=bool(getattr(args, "verbose", False)))
