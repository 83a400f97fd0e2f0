"""Command line: ``shellmodes run | check | schema | keys``.

Only this module prints or sets exit codes: 0 success, 2 bad input (one
line on stderr, no traceback), 1 internal failure.
"""

from __future__ import annotations

import argparse
import errno
import importlib
import importlib.util
import json
import logging
import sys
import warnings
from pathlib import Path

from .errors import ShellmodesError

__all__ = ["main", "default_out"]

#: modules that add a sub-command: each defines ``add_command(subparsers)``,
#: which creates its parser and sets ``func`` to a function(args) -> exit code
_PLUGIN_COMMANDS = ("convergence", "sweep", "report", "bridge")


def default_out(case_path: Path) -> Path:
    """The output folder of a case file: its name without the suffix, beside it."""
    return case_path.with_suffix("") if case_path.suffix else case_path.parent / (case_path.name + "-out")


def _cmd_run(args) -> int:
    from .case import load_case
    from .errors import CaseError
    from .outputs import check_run_output, write_outputs
    from .run import run_case

    case_path = Path(args.case)
    case = load_case(case_path)
    out = Path(args.out) if args.out else default_out(case_path)
    if out.exists() and not out.is_dir():
        raise CaseError(f"--out {str(out)!r} is an existing file; give a folder", str(case_path))
    check_run_output(case, out, args.report)  # writable, extras present: before any solving
    spectrum = run_case(case)
    files = None if case.output.vtu else ["spectrum.json", "spectrum.csv", "run.log"]
    write_outputs(spectrum, out, files)
    if args.report:
        from .report import write_report

        write_report(out)
    if not args.quiet:
        info = spectrum.info
        mesh = info["mesh"]
        print(f"{case.title or case_path.name}: degree {mesh['degree']}, {mesh['dofs']} dofs, "
              f"{len(spectrum.eigenvalues)} modes, {info['solver']['backend']}, "
              f"{info['timings']['total']:.2f} s")
        print(spectrum.summary())
        print(f"wrote {out}/" + (" (with report.html)" if args.report else ""))
    return 0


def _cmd_check(args) -> int:
    from .checks import format_table, run_checks

    results = run_checks(args.only)
    print(format_table(results))
    return 0 if all(r.passed for r in results) else 1


def _cmd_schema(args) -> int:
    from .case import case_schema

    print(json.dumps(case_schema(), indent=2))
    return 0


def _cmd_keys(args) -> int:
    from .docs import case_keys_markdown

    print(case_keys_markdown())
    return 0


def _parser() -> argparse.ArgumentParser:
    from ._version import __version__

    p = argparse.ArgumentParser(prog="shellmodes", description="Eigenmodes of particles on curved surfaces.")
    p.add_argument("--version", action="version", version=f"shellmodes {__version__}")
    p.add_argument("-v", "--verbose", action="store_true", help="log progress")
    sub = p.add_subparsers(dest="command", required=True)
    r = sub.add_parser("run", help="solve one case file")
    r.add_argument("case", help="TOML case file")
    r.add_argument("--out", help="output folder (default: the case file's name beside it)")
    r.add_argument("-q", "--quiet", action="store_true", help="print nothing on success")
    r.add_argument("--report", action="store_true", help="also write report.html (needs the plot extra)")
    r.set_defaults(func=_cmd_run)
    c = sub.add_parser("check", help="run the built-in validation set against exact results")
    c.add_argument("--only", help="run only checks whose name contains this text")
    c.set_defaults(func=_cmd_check)
    s = sub.add_parser("schema", help="print the case-file JSON Schema")
    s.set_defaults(func=_cmd_schema)
    k = sub.add_parser("keys", help="print every case-file key with its meaning (Markdown)")
    k.set_defaults(func=_cmd_keys)
    for module in _PLUGIN_COMMANDS:
        if importlib.util.find_spec(f"shellmodes.{module}") is None:
            continue
        mod = importlib.import_module(f"shellmodes.{module}")
        mod.add_command(sub)
    return p


def _show_warning(message, category, filename, lineno, file=None, line=None):
    print(f"warning: {message}", file=sys.stderr)


def main(argv=None) -> int:
    args = _parser().parse_args(argv)
    logging.basicConfig(level=logging.INFO if args.verbose else logging.WARNING, format="%(message)s")
    warnings.showwarning = _show_warning
    try:
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
