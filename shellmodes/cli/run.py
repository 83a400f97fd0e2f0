"""``shellmodes run CASE [--out DIR] [--report] [-q] [--ranks N]``: solve one case file and write its outputs.

``--ranks N`` and runs under ``mpiexec`` go through :mod:`shellmodes.cli.mpi_ranks`.
"""

from __future__ import annotations

from pathlib import Path


def default_out(case_path: Path) -> Path:
    """The output folder of a case file: its name without the suffix, beside it."""
    return case_path.with_suffix("") if case_path.suffix else case_path.parent / (case_path.name + "-out")


def add_command(subparsers) -> None:
    r = subparsers.add_parser("run", help="solve one case file")
    r.add_argument("case", help="TOML case file")
    r.add_argument("--out", help="output folder (default: the case file's name beside it)")
    r.add_argument("--report", action="store_true", help="also write report.html with pictures")
    r.add_argument("--ranks", type=int, metavar="N", help="solve on N MPI ranks on this machine (starts mpiexec; "
                   "needs scripts/setup-mpi.sh); under mpiexec the launcher's rank count is used")
    r.set_defaults(func=main)


def main(args) -> int:
    import sys

    from shellmodes.cli.mpi_ranks import run_on_ranks

    return run_on_ranks(args, lambda: run_here(args), sys.stderr)


def run_here(args) -> int:
    """The run in this process (rank 0 of an MPI run, or a run without MPI)."""
    from shellmodes.case.schema import load_case
    from shellmodes.errors import CaseError
    from shellmodes.io.outputs import check_run_output, write_outputs
    from shellmodes.pipeline import run_case

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
        from shellmodes.io.report import write_report

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
