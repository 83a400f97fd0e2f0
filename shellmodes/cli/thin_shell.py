"""``shellmodes thin-shell CASE --thickness D1,D2``: a surface case beside shells of finite thickness."""

from __future__ import annotations


def add_command(subparsers) -> None:
    p = subparsers.add_parser("thin-shell", help="compare a surface case with shells of finite thickness")
    p.add_argument("case", help="TOML case file with a [surface] table")
    p.add_argument("--thickness", required=True, help="comma-separated wall separations d, in units.length")
    p.add_argument("--layers", type=int, default=None, help="radial element layers across each shell "
                   "(default 1 for prisms, 6 for tetrahedra)")
    p.add_argument("--cells", choices=["prisms", "tetrahedra"], default="prisms",
                   help="shell cells: layered prisms with exact walls (default) or curved P2 tetrahedra")
    p.add_argument("--out", help="output folder for thin-shell.json and thin-shell.csv (default: the case "
                   "file's name + '-thin-shell' beside it)")
    p.set_defaults(func=main)


def main(args) -> int:
    from pathlib import Path

    from shellmodes.case.schema import load_case
    from shellmodes.cli.run import default_out
    from shellmodes.errors import CaseError
    from shellmodes.io.outputs import check_writable
    from shellmodes.studies.thin_shell import thin_shell_comparison, write_comparison

    case = load_case(args.case)
    out = Path(args.out) if args.out else default_out(Path(args.case)).with_name(
        default_out(Path(args.case)).name + "-thin-shell")
    check_writable(out, case.source)
    try:
        values = [float(v) for v in args.thickness.split(",") if v.strip()]
    except ValueError:
        raise CaseError(f"value {args.thickness!r}: give comma-separated numbers", args.case, "--thickness") from None
    result = thin_shell_comparison(case, values, layers=args.layers, cells=args.cells)
    write_comparison(result, out)
    if not args.quiet:
        print(result.table())
        print(f"wrote {out}/")
    return 0
