"""``shellmodes report FOLDER``: a self-contained report.html for a run, sweep or convergence folder."""

from __future__ import annotations

import argparse

from shellmodes.limits import DEFAULT_RENDERS


def _count(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from None
    if value < 0:
        raise argparse.ArgumentTypeError(f"{value} is negative; give 0 or more")
    return value


def add_command(subparsers) -> None:
    """Add ``shellmodes report RUN_DIR [--modes N] [--checks] [--keep-images]``."""
    p = subparsers.add_parser("report", help="write a self-contained report.html for a run, sweep or converge folder")
    p.add_argument("run_dir", help="a folder written by 'shellmodes run', 'shellmodes sweep' or 'shellmodes converge'")
    p.add_argument("--modes", type=_count, default=DEFAULT_RENDERS,
                   help=f"render one mode of each of the first N multiplets (default {DEFAULT_RENDERS})")
    p.add_argument("--checks", action="store_true", help="run the validation set and include its table")
    p.add_argument("--keep-images", action="store_true", help="also leave the PNGs in the run folder")
    p.set_defaults(func=main)


def main(args) -> int:
    from pathlib import Path

    from shellmodes.io.report_folders import study_kind, write_study_report

    folder = Path(args.run_dir)
    kind = None if (folder / "spectrum.json").exists() else study_kind(folder)
    if kind is not None:  # a sweep or convergence folder
        path = write_study_report(folder, kind)
    else:
        from shellmodes.io.report import write_report

        path = write_report(folder, checks=args.checks, modes=args.modes, keep_images=args.keep_images)
    if not args.quiet:
        print(f"wrote {path}")
    return 0
