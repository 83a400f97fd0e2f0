"""``shellmodes sweep CASE``: solve a case at every step of its [sweep] table and follow the levels."""

from __future__ import annotations

from pathlib import Path


def add_command(subparsers) -> None:
    """Register ``shellmodes sweep CASE [--out DIR] [--workers N] [--scheduler ADDR] [-q] [-v]``."""
    p = subparsers.add_parser("sweep", help="solve a case at every step of its [sweep] table and follow the levels")
    p.add_argument("case", help="TOML case file with a [sweep] table")
    p.add_argument("--out", help="output folder (default: the case file's name beside it); finished steps "
                   "in it are reused")
    p.add_argument("--workers", type=int, help="local worker processes (default: sweep.workers)")
    p.add_argument("--scheduler", help="address tcp://host:port of a running Dask scheduler (default: "
                   "sweep.scheduler)")
    p.set_defaults(func=main)


def main(args) -> int:
    from shellmodes.case.schema import load_case
    from shellmodes.cli.run import default_out
    from shellmodes.studies.sweep import run_sweep

    case_path = Path(args.case)
    case = load_case(case_path)
    from shellmodes.eigen.extras import check_extras

    check_extras(case)  # a scheduler without dask is refused before any step starts
    out = Path(args.out) if args.out else default_out(case_path)
    from shellmodes.io.progress import task

    with task("sweep steps", None, "step") as bar:
        def progress(done, total):
            bar.total = total
            if done > bar.done:
                bar.advance(done - bar.done)

        result = run_sweep(case, out, workers=args.workers, scheduler=args.scheduler, progress=progress)
    if not args.quiet:
        print(f"{case.title or case_path.name}: {len(result.steps)} steps ({len(result.solved)} solved, "
              f"{len(result.reused)} reused), {len(result.tracks)} tracks")
        print(f"wrote {out}/ (sweep.csv, sweep.json, levels.png, series.pvd, steps/)")
    return 0
