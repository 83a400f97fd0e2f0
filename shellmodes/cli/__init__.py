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


def _parser() -> argparse.ArgumentParser:
    from shellmodes._version import __version__

    p = argparse.ArgumentParser(prog="shellmodes", description="Eigenmodes of particles on curved surfaces.")
    p.add_argument("--version", action="version", version=f"shellmodes {__version__}")
    p.add_argument("-v", "--verbose", action="store_true", help="log progress")
    sub = p.add_subparsers(dest="command", required=True)
    for name in COMMANDS:
        importlib.import_module(f"{__name__}.{name}").add_command(sub)
    return p


def _show_warning(message, category, filename, lineno, file=None, line=None):
    print(f"warning: {message}", file=sys.stderr)


def main(argv=None) -> int:
    args = _parser().parse_args(argv)
    logging.basicConfig(level=logging.INFO if args.verbose else logging.WARNING, format="%(message)s")
    warnings.showwarning = _show_warning
    try:
        if args.command != "run":  # under mpiexec every rank would run the whole command and write
            from shellmodes.cli.mpi_ranks import one_process_only

            one_process_only(args.command)
        return args.func(args)
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


#: errors of the storage, not of the program: disk full, file-size limit, quota, read-only file system
_STORAGE_ERRORS = {errno.ENOSPC, errno.EFBIG, errno.EDQUOT, errno.EROFS}


def _internal(exc, args) -> int:
    print(f"shellmodes: internal error: {type(exc).__name__}: {exc} (please report this)", file=sys.stderr)
    if args.verbose:
        raise exc
    return 1


if __name__ == "__main__":
    sys.exit(main())
