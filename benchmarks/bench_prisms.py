"""Hard-wall spherical shell 1 < r < 2 on layered prisms: the two speed targets of the shell issue.

Studies (each point in its own child process; peak memory is the child's
high-water mark, times are wall-clock inside the child, Python start-up and
imports included in ``wall``):

- ``target``: the first 50 modes to a max relative error <= 1e-6 in under 60 s.
  Prism points on the separable path (concentric spheres), the same prisms
  solved as an assembled 3-D pencil (``modes.method = "block"``: CHOLMOD
  shift-invert on K, M), and the P2-tetrahedron baseline (the best point of
  ``bench_shell.py ladder`` inside 60 s), all in the same run.  Errors are
  against the roots of j_l(ka) y_l(kb) - j_l(kb) y_l(ka) (scipy.special,
  :func:`shellmodes.studies.references.shell_dirichlet`), each (2l+1)-fold.
- ``million``: a shell with more than 1,000,000 free DOFs, 50 modes, on the
  separable path: time, peak memory, error; and the only factorization that
  path makes (the surface pencil K_s + M_s) with CHOLMOD and with scipy's
  ``splu`` (default ordering, COLAMD) on the same matrix.

Usage:
    python benchmarks/bench_prisms.py target [--repeat 3]
    python benchmarks/bench_prisms.py million [--level 4 --radial-degree 9 --layers 3]
    python benchmarks/bench_prisms.py deformed [--level 5 --layers 13]
- ``deformed``: the outer wall an ellipsoid (2, 2, 2.4): a fine P4 x Q8 reference, a P2 x Q2
  run with more than 1,000,000 free DOFs (path ``lobpcg-spherical``), and CHOLMOD against splu
  on one assembled deformed prism matrix.

Results: a table on stdout and bench-out/bench_prisms-<study>.json.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
COUNT = 50


def _exact(count: int):
    import numpy as np

    from shellmodes.studies.references import shell_dirichlet

    values = [float(k) ** 2 for l in range(14) for k in shell_dirichlet(l, 3, 1.0, 2.0) for _ in range(2 * l + 1)]
    return np.sort(values)[:count]


ELLIPSOID = {"shape": "ellipsoid", "axes": [2.0, 2.0, 2.4]}


def _case(point: dict) -> dict:
    outer = ELLIPSOID if point.get("deformed") else {"shape": "sphere", "radius": 2.0}
    shell = {"inner": {"shape": "sphere", "radius": 1.0}, "outer": outer,
             "layers": point["layers"], "cells": point.get("cells", "prisms")}
    if shell["cells"] == "prisms":
        shell["radial_degree"] = point["radial_degree"]
    return {"shell": shell, "resolution": {"degree": point["degree"], "subdivisions": point["level"]},
            "modes": {"count": COUNT, "method": point.get("method", "auto")}, "output": {"vtu": False}}


def child(point: dict) -> dict:
    """Solve one point and report time, memory and error (runs in a fresh process)."""
    import resource
    import warnings

    import numpy as np

    t0 = time.perf_counter()
    from shellmodes.case.schema import case_from_dict
    from shellmodes.pipeline import run_case

    t_import = time.perf_counter() - t0
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        spectrum = run_case(case_from_dict(_case(point), "<bench>"))
    lam = np.asarray(spectrum.eigenvalues[:COUNT])
    mesh, solver = spectrum.info["mesh"], spectrum.info["solver"]
    if point.get("deformed"):  # no closed form: the caller compares with a finer run
        error = float("nan")
    else:
        exact = _exact(COUNT)
        error = float(np.max(np.abs(lam - exact) / exact))
    return {**point, "dofs": mesh["dofs"], "free": mesh["free_dofs"], "path": spectrum.info["solver"]["plan"]["path"],
            "method": solver["method"], "error": error, "lowest": [float(v) for v in lam],
            "max_residual": solver["max_residual"], "returned": solver["returned"],
            "timings": spectrum.info["timings"], "solve": spectrum.info["timings"]["total"], "import": t_import,
            "peak_gib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20}


def _factor_both(A, solves: int) -> dict:
    """Factorization time, mean solve time and residual of CHOLMOD and of splu (default ordering) on A."""
    import numpy as np

    from shellmodes.eigen.backends import get_backend

    b = np.ones(A.shape[0])
    row = {}
    for name in ("cholmod", "splu"):
        t0 = time.perf_counter()
        solve = get_backend(name)[1](A)
        row[f"{name}_factor"] = time.perf_counter() - t0
        t0 = time.perf_counter()
        for _ in range(solves):
            x = solve(b)
        row[f"{name}_solve"] = (time.perf_counter() - t0) / solves
        row[f"{name}_residual"] = float(np.linalg.norm(A @ x - b) / np.linalg.norm(b))
        del solve
    return row


def assembled_factor_child(payload: dict) -> dict:
    """CHOLMOD and splu (default ordering) on K - shift M of an assembled deformed prism shell."""
    import resource

    import numpy as np

    from shellmodes.case.model import wall_function
    from shellmodes.case.schema import Wall
    from shellmodes.fem.assemble import restricted
    from shellmodes.fem.prisms import assemble_prisms, prism_shell

    outer = wall_function(Wall(**ELLIPSOID))
    disc = prism_shell([1.0, outer], payload["level"], payload["layers"], degree=payload["degree"],
                       radial_degree=payload["radial_degree"])
    K, M = assemble_prisms(disc, {0: 1.0})
    mask = np.ones(disc.ndofs, dtype=bool)
    mask[disc.wall_dofs("inner")] = mask[disc.wall_dofs("outer")] = False
    free = np.flatnonzero(mask)
    A = (restricted(K, free) + 0.25 * restricted(M, free)).tocsc()
    row = {**payload, "free": int(A.shape[0]), "nnz": int(A.nnz), **_factor_both(A, solves=1)}
    row["splu_over_cholmod_factor"] = row["splu_factor"] / row["cholmod_factor"]
    row["peak_gib"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20
    return row


def factor_child(level: int, degree: int) -> dict:
    """CHOLMOD and splu (default ordering) on the separable path's one matrix, K_s + M_s."""
    import resource

    from shellmodes.fem.prisms import kronecker_factors, prism_shell

    disc = prism_shell([1.0, 2.0], level, 1, degree=degree, radial_degree=1)
    Ks, Ms = kronecker_factors(disc, {0: 1.0})[:2]
    A = (Ks + Ms).tocsc()
    row = {"level": level, "degree": degree, "surface_dofs": int(A.shape[0]), "nnz": int(A.nnz),
           **_factor_both(A, solves=20)}
    row["peak_gib"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20
    return row


def _run(kind: str, payload: dict, timeout: float) -> dict:
    t0 = time.perf_counter()
    load = os.getloadavg()[0]
    try:
        out = subprocess.run([sys.executable, __file__, kind, json.dumps(payload)], capture_output=True, text=True,
                             timeout=timeout, env={**os.environ, "OMP_NUM_THREADS": "1"})
    except subprocess.TimeoutExpired:
        return {**payload, "failed": f"timeout after {timeout:.0f} s", "load_before": load}
    if out.returncode != 0:
        return {**payload, "failed": out.stderr.strip().splitlines()[-1:] or ["?"], "load_before": load}
    row = json.loads(out.stdout.strip().splitlines()[-1])
    row.update(wall=time.perf_counter() - t0, load_before=load)
    return row


def _fmt(row: dict) -> str:
    if "failed" in row:
        return f"{row}"
    name = (f"{row.get('cells', 'prisms')[:5]} L{row['level']} P{row['degree']}"
            + (f"xQ{row['radial_degree']}" if row.get("cells", "prisms") == "prisms" else "") + f"/{row['layers']}")
    return (f"{name:<22} {row['method']:<10} {row['free']:>9} free  err {row['error']:.2e}"
            f"  res {row['max_residual']:.1e}  solve {row['solve']:7.2f} s  wall {row['wall']:7.2f} s"
            f"  peak {row['peak_gib']:.2f} GiB"
            f"  (load {row['load_before']:.1f})")


def _write(name: str, data) -> Path:
    out = HERE.parent / "bench-out"
    out.mkdir(exist_ok=True)
    path = out / f"bench_prisms-{name}.json"
    path.write_text(json.dumps(data, indent=1))
    return path


def _median(values):
    values = sorted(values)
    return values[len(values) // 2]


def target(args) -> int:
    points = [
        {"name": "prisms-separable", "level": 3, "degree": 4, "radial_degree": 8, "layers": 1},  # the 1e-6 point
        {"name": "prisms-separable-coarse", "level": 2, "degree": 4, "radial_degree": 8, "layers": 1},
        {"name": "prisms-assembled", "level": 3, "degree": 4, "radial_degree": 8, "layers": 1, "method": "block"},
        {"name": "tetra-baseline", "cells": "tetrahedra", "level": 3, "degree": 2, "layers": 4},  # P2 tetrahedra
    ]
    rows = []
    for rep in range(args.repeat):
        for point in points:
            if rep and point.get("method") == "block" and not args.repeat_assembled:
                continue
            row = _run("child", point, args.timeout)
            row["repeat"] = rep
            rows.append(row)
            print(_fmt(row), flush=True)
    summary = []
    for point in points:
        same = [r for r in rows if r.get("name") == point["name"] and "failed" not in r]
        if same:
            summary.append({**point, "free": same[0]["free"], "error": same[0]["error"],
                            "median_wall": _median([r["wall"] for r in same]),
                            "median_solve": _median([r["solve"] for r in same]),
                            "walls": [round(r["wall"], 2) for r in same],
                            "peak_gib": max(r["peak_gib"] for r in same)})
    base = next((s for s in summary if s["name"] == "tetra-baseline"), None)
    for s in summary:
        if base:
            s["wall_ratio_to_tetra_baseline"] = s["median_wall"] / base["median_wall"]
            s["error_ratio_to_tetra_baseline"] = s["error"] / base["error"]
        print(f"{s['name']:<24} {s['free']:>7} free  error {s['error']:.2e}  median wall {s['median_wall']:.2f} s "
              f"{s['walls']}  peak {s['peak_gib']:.2f} GiB"
              + (f"  wall / baseline {s['wall_ratio_to_tetra_baseline']:.3f}" if base else ""))
    print(f"wrote {_write('target', {'rows': rows, 'summary': summary, 'cpus': os.cpu_count()})}")
    return 0


def million(args) -> int:
    point = {"level": args.level, "degree": 4, "radial_degree": args.radial_degree, "layers": args.layers}
    row = _run("child", point, args.timeout)
    print(_fmt(row), flush=True)
    factor = _run("factor", {"level": args.level, "degree": 4}, args.timeout)
    if "failed" not in factor:
        factor["splu_over_cholmod_factor"] = factor["splu_factor"] / factor["cholmod_factor"]
        factor["splu_over_cholmod_solve"] = factor["splu_solve"] / factor["cholmod_solve"]
    print(json.dumps(factor))
    print(f"wrote {_write('million', {'run': row, 'factor': factor, 'cpus': os.cpu_count()})}")
    return 0


def deformed(args) -> int:
    """An ellipsoidal outer wall (2, 2, 2.4): a fine reference, the 1M-DOF run, and splu against CHOLMOD."""
    reference = _run("child", {"name": "reference", "deformed": True, "level": 3, "degree": 4,
                               "radial_degree": 8, "layers": 1}, args.timeout)
    print(_fmt(reference), flush=True)
    big = _run("child", {"name": "million", "deformed": True, "level": args.level, "degree": 2,
                         "radial_degree": 2, "layers": args.layers}, args.timeout)
    if "failed" not in big and "failed" not in reference:
        ref, got = reference["lowest"], big["lowest"]
        n = min(len(ref), len(got), COUNT)
        big["difference_to_reference"] = max(abs(a - b) / abs(a) for a, b in zip(ref[:n], got[:n]))
    print(_fmt(big), flush=True)
    factor = _run("assembled-factor", {"level": 2, "degree": 4, "radial_degree": 8, "layers": 1}, args.timeout)
    print(json.dumps(factor))
    print(f"wrote {_write('deformed', {'reference': reference, 'run': big, 'factor': factor})}")
    return 0


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    sub = parser.add_subparsers(dest="study", required=True)
    p = sub.add_parser("target")
    p.add_argument("--repeat", type=int, default=3)
    p.add_argument("--repeat-assembled", action="store_true", help="repeat the slow assembled point too")
    p.add_argument("--timeout", type=float, default=900.0)
    p = sub.add_parser("million")
    p.add_argument("--level", type=int, default=4)
    p.add_argument("--radial-degree", type=int, default=9)
    p.add_argument("--layers", type=int, default=3)
    p.add_argument("--timeout", type=float, default=3600.0)
    p = sub.add_parser("deformed")
    p.add_argument("--level", type=int, default=5)
    p.add_argument("--layers", type=int, default=13)
    p.add_argument("--timeout", type=float, default=3600.0)
    for kind in ("child", "factor", "assembled-factor"):
        sub.add_parser(kind).add_argument("payload")
    args = parser.parse_args(argv)
    if args.study == "child":
        print(json.dumps(child(json.loads(args.payload))))
        return 0
    if args.study == "factor":
        payload = json.loads(args.payload)
        print(json.dumps(factor_child(payload["level"], payload["degree"])))
        return 0
    if args.study == "assembled-factor":
        print(json.dumps(assembled_factor_child(json.loads(args.payload))))
        return 0
    return {"target": target, "million": million, "deformed": deformed}[args.study](args)


if __name__ == "__main__":
    sys.exit(main())
