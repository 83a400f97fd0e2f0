"""Command line: ``shellmodes run | check | converge | sweep | report | thin-shell | schema | keys``.

The only package that prints or sets exit codes: 0 success, 2 bad input (one
line on stderr, no traceback), 1 internal failure.  One module per command,
each with ``add_command(subparsers)``; library modules are imported only when a
command runs, so ``shellmodes --help`` starts fast.
"""

from __future__ import annotations

import argparse
import errno
import importlib
import logging
import sys
import warnings

from shellmodes.cli.run import default_out
from shellmodes.errors import ShellmodesError

__all__ = ["main", "default_out", "COMMANDS"]

#: the command modules of this package, in the order ``--help`` lists them
COMMANDS = ("run", "check", "converge", "sweep", "report", "thin_shell", "keys")


def _common_options() -> argparse.ArgumentParser:
    """``-q`` and ``-v``, accepted before the command and after it (defaults suppressed, so either place counts)."""
    common = argparse.ArgumentParser(add_help=False)
    common.add_argument("-v", "--verbose", action="store_true", default=argparse.SUPPRESS,
                        help="say what runs (stages, steps, solver details) on stderr")
    common.add_argument("-q", "--quiet", action="store_true", default=argparse.SUPPRESS,
                        help="no progress and nothing printed on success (errors and warnings still are)")
    return common


class _Commands:
    """The sub-parser action, handing every command the common options."""

    def __init__(self, action, common) -> None:
        self.action, self.common = action, common

    def add_parser(self, name, **kwargs):
        kwargs["parents"] = [*kwargs.get("parents", []), self.common]
        return self.action.add_parser(name, **kwargs)


def _parser() -> argparse.ArgumentParser:
    from shellmodes._version import __version__

    common = _common_options()
    p = argparse.ArgumentParser(prog="shellmodes", parents=[common],
                                description="Quantum states of a particle on curved surfaces and in 3-D shells "
                                            "and balls, by curved high-order finite elements.")
    p.add_argument("--version", action="version", version=f"shellmodes {__version__}")
    sub = _Commands(p.add_subparsers(dest="command", required=True, metavar="COMMAND"), common)
    for name in COMMANDS:
        importlib.import_module(f"{__name__}.{name}").add_command(sub)
    return p


#: the terminal reporter of the running command (warnings are written through it, so bars stay whole)
_REPORTER = []


#: renamed-key warnings held back until the command succeeds (an error stays one line on its own)
_RENAMED: list[str] = []


def _show_warning(message, category, filename, lineno, file=None, line=None):
    from shellmodes.errors import RenamedKeyWarning

    text = f"warning: {message}"
    if issubclass(category, RenamedKeyWarning):
        if text not in _RENAMED:
            _RENAMED.append(text)
        return
    _print_warning(text)


def _print_warning(text: str) -> None:
    if _REPORTER and _REPORTER[-1].bars:
        _REPORTER[-1]._line(text)
    else:
        print(text, file=sys.stderr)


def _logging(verbose: bool) -> None:
    """Our own INFO lines with ``-v``; other libraries' loggers stay at WARNING (no third-party floods)."""
    logging.basicConfig(level=logging.WARNING, format="%(message)s")
    # libraries that set their own loggers below WARNING when imported (dask's distributed says INFO)
    # are put back, whatever was imported before this command ran
    for name, logger in list(logging.root.manager.loggerDict.items()):
        if (isinstance(logger, logging.Logger) and name.split(".")[0] != "shellmodes"
                and logger.level != logging.NOTSET and logger.level < logging.WARNING):
            logger.setLevel(logging.WARNING)
    logging.getLogger("shellmodes").setLevel(logging.INFO if verbose else logging.WARNING)


def main(argv=None) -> int:
    args = _parser().parse_args(argv)
    args.verbose = getattr(args, "verbose", False)
    args.quiet = getattr(args, "quiet", False)
    _logging(args.verbose)
    warnings.showwarning = _show_warning
    from shellmodes.cli.progress import make_reporter
    from shellmodes.io.progress import reporting

    reporter = make_reporter(args)
    _REPORTER.append(reporter)
    try:
        if args.command != "run":  # under mpiexec every rank would run the whole command and write
            from shellmodes.cli.mpi_ranks import one_process_only

            one_process_only(args.command)
        with reporting(reporter):
            status = args.func(args)
        for text in _RENAMED:  # the command worked: now say which names to update
            _print_warning(text)
        return status
    except ShellmodesError as exc:
        print(f"shellmodes: error: {exc}", file=sys.stderr)
        return 2
    except BrokenPipeError:  # output piped into a pager or head that closed early
        return 0
    except OSError as exc:
        if exc.errno not in _STORAGE_ERRORS:
            return _internal(exc, args)
        print(f"shellmodes: error: cannot write {exc.filename or 'the results'}: {exc.strerror}; free space or "
              "choose another --out (the previous result is intact)", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("shellmodes: interrupted; no file was left half-written (finished sweep steps are kept)",
              file=sys.stderr)
        return 130
    except Exception as exc:  # an internal failure, not the user's input
        return _internal(exc, args)
    finally:
        reporter.close()
        _REPORTER.remove(reporter)
        _RENAMED.clear()


#: errors of the storage, not of the program: disk full, file-size limit, quota, read-only file system
_STORAGE_ERRORS = {errno.ENOSPC, errno.EFBIG, errno.EDQUOT, errno.EROFS}


def _internal(exc, args) -> int:
    print(f"shellmodes: internal error: {type(exc).__name__}: {exc} (please report this)", file=sys.stderr)
    if args.verbose:
        raise exc
    return 1


if __name__ == "__main__":
    sys.exit(main())
