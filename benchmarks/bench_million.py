"""A million-unknown surface problem, 100 modes, within 16 GiB and 300 s.

The unit sphere with degree-2 curved elements on a frequency-158 geodesic
mesh (998,562 unknowns; see ``_problems.py``), solved through the public
path :func:`shellmodes.eigen.solve.lowest_modes` with ``method="auto"`` (which
picks the blocked iteration at this size).  The whole run (mesh, assembly,
factorization, eigen-iteration, checks) is timed; peak memory is the
process high-water mark (VmHWM).  Every eigenvalue is checked against the
exact l(l+1).  ``--method lanczos`` runs the ARPACK path on the same problem
for the ratio; run both in one session, since the machine is shared.

Usage: python benchmarks/bench_million.py [--dofs 1000000] [--method auto] [--count 100] [--backend auto]
Results: a table on stdout and bench-out/bench_million-<method>-<backend>.json.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

TIME_LIMIT = 300.0  # s, for the whole run
MEMORY_LIMIT = 16.0  # GiB


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--dofs", type=int, default=1_000_000)
    parser.add_argument("--degree", type=int, default=2)
    parser.add_argument("--count", type=int, default=100)
    parser.add_argument("--method", default="auto", choices=["auto", "lanczos", "block"])
    parser.add_argument("--backend", default="auto", help="factorization back-end (shellmodes.eigen.backends)")
    parser.add_argument("--out", default=str(HERE.parent / "bench-out"))
    args = parser.parse_args(argv)

    from _problems import max_relative_error, peak_memory_gib, sphere_ladder, sphere_problem

    from shellmodes.eigen.solve import lowest_modes

    load = os.getloadavg()
    t0 = time.perf_counter()
    cpu0 = time.process_time()
    problem, build = sphere_problem(args.dofs, args.degree)
    t_build = time.perf_counter() - t0
    peak_build = peak_memory_gib()
    pairs = lowest_modes(problem.K, problem.M, args.count, scale=problem.spectral_scale, method=args.method,
                         backend=args.backend)
    total = time.perf_counter() - t0
    cpu = time.process_time() - cpu0
    peak = peak_memory_gib()
    lam = pairs.lam
    exact = sphere_ladder(len(lam))
    # beyond the count the last multiplet may be incomplete in exact terms; check the first `count`
    errors = np.abs(lam[1:args.count] - exact[1:args.count]) / exact[1:args.count]
    result = {"dofs": int(problem.ndofs), "degree": args.degree, "count": args.count, "returned": int(len(lam)),
              "method": pairs.method, "backend": pairs.backend, "build": build, "build_total": t_build,
              "eigensolve": pairs.timings["eigensolve"], "solver_timings": pairs.timings, "total": total, "cpu": cpu,
              "peak_gib": peak, "peak_build_gib": peak_build, "max_error": max_relative_error(lam, args.count),
              "error_by_l": {int(l): float(np.max(errors[(np.floor(np.sqrt(np.arange(1, args.count))) == l)]))
                             for l in range(1, int(np.sqrt(args.count - 1)) + 1)},
              "max_residual": float(np.max(pairs.residuals)), "orthogonality": pairs.orthogonality,
              "load_before": load, "load_after": os.getloadavg(),
              "within_time": bool(total <= TIME_LIMIT), "within_memory": bool(peak <= MEMORY_LIMIT),
              "env": {k: v for k, v in os.environ.items() if "THREADS" in k}}
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    path = out / f"bench_million-{pairs.method}-{pairs.backend}.json"
    path.write_text(json.dumps(result, indent=2))
    print(f"{result['dofs']} dofs, degree {args.degree}, {result['returned']} modes ({args.count} asked), "
          f"{pairs.method} / {pairs.backend}")
    print(f"  mesh + assembly {t_build:.1f} s, eigen-solve {result['eigensolve']:.1f} s "
          f"(factorization {pairs.timings.get('factorization', float('nan')):.1f} s), total {total:.1f} s "
          f"(CPU {cpu:.1f} s) "
          f"[limit {TIME_LIMIT:.0f} s: {'ok' if result['within_time'] else 'EXCEEDED'}]")
    print(f"  peak memory {peak:.2f} GiB (after mesh + assembly {peak_build:.2f} GiB) [limit {MEMORY_LIMIT:.0f} GiB: "
          f"{'ok' if result['within_memory'] else 'EXCEEDED'}]")
    print(f"  max relative error vs l(l+1) {result['max_error']:.2e}, max residual {result['max_residual']:.1e}, "
          f"M-orthogonality error {pairs.orthogonality:.1e}")
    if "block" in pairs.timings:
        s = pairs.timings["block"]
        print(f"  block: {s['iterations']} iterations, {s['solves']} solves in {s['time_solve']:.1f} s, "
              f"Gram-Schmidt {s['time_orthogonalise']:.1f} s, {s['restarts']} restarts {s['time_restart']:.1f} s")
    print(f"  load average {load[0]:.1f} before, {result['load_after'][0]:.1f} after; wrote {path}")
    return 0 if result["within_time"] and result["within_memory"] else 1


if __name__ == "__main__":
    sys.exit(main())
