"""``shellmodes converge CASE``: the case at successive refinements, with error bars."""

from __future__ import annotations

from pathlib import Path

from shellmodes.limits import CONVERGE_MAX_SUBDIVISIONS, MAX_SUBDIVISIONS


def add_command(subparsers) -> None:
    c = subparsers.add_parser("converge", help="solve a case at successive refinements, with error bars")
    c.add_argument("case", help="TOML case file")
    c.add_argument("--refinements", type=int, default=3, help="number of refinements (at least 3; default 3)")
    c.add_argument("--tolerance", type=float, help="relative error wanted; refine further until it is met")
    c.add_argument("--max-subdivisions", type=int, default=CONVERGE_MAX_SUBDIVISIONS,
                   help=f"finest refinement allowed (default {CONVERGE_MAX_SUBDIVISIONS}, "
                        f"at most {MAX_SUBDIVISIONS})")
    c.add_argument("--out", help="output folder (default: the case's output folder name + '-convergence')")
    c.set_defaults(func=main)


def main(args) -> int:
    from shellmodes.case.schema import load_case
    from shellmodes.cli.run import default_out
    from shellmodes.studies.convergence import convergence_study, range_text, write_study

    case_path = Path(args.case)
    case = load_case(case_path)
    out = Path(args.out) if args.out else default_out(case_path).with_name(
        default_out(case_path).name + "-convergence")
    from shellmodes.io.progress import task

    planned = args.refinements if args.tolerance is None else None
    with task("refinements", planned, "solve") as bar:
        study = convergence_study(case, refinements=args.refinements, tolerance=args.tolerance,
                                  max_subdivisions=args.max_subdivisions,
                                  progress=lambda s, spectrum: bar.advance(
                                      subdivisions=s, dofs=spectrum.info["mesh"]["dofs"]))
    write_study(study, out)
    if not args.quiet:
        levels = ", ".join(f"{r.subdivisions} ({r.dofs} dofs)" for r in study.refinements)
        print(f"{case.title or case_path.name}: degree {study.degree}, subdivisions {levels}, "
              f"expected order {range_text(study.order_range)}")
        print(study.table())
        if study.tolerance is not None:
            print(f"tolerance {study.tolerance:g}: " + (f"reached at subdivisions {study.reached}"
                                                         if study.reached is not None else "NOT reached"))
        print(f"wrote {out}/")
    return 0
