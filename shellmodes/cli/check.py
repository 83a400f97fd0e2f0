"""``shellmodes check [--only TEXT]``: the validation set against exact and published results."""

from __future__ import annotations


def add_command(subparsers) -> None:
    c = subparsers.add_parser("check", help="run the built-in validation set against exact results")
    c.add_argument("--only", help="run only checks whose name contains this text")
    c.set_defaults(func=main)


def main(args) -> int:
    from shellmodes.studies.checks import format_table, run_checks

    results = run_checks(args.only)
    print(format_table(results))
    return 0 if all(r.passed for r in results) else 1
