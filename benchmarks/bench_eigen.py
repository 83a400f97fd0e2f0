"""The blocked iteration against shift-invert Lanczos on large sphere problems.

For each size, the same assembled P2 problem (unit sphere, geodesic mesh)
goes through :func:`shellmodes.eigen.solve.lowest_modes` once with
``method="lanczos"`` and once with ``method="block"``, each in its own
process so that peak memory (VmHWM) belongs to one method.  Both use the
same factorization back-end, shift, mode count and multiplet completion;
reported: eigen-solve time (factorization included), process peak memory,
modes returned, largest residual, largest relative error against l(l+1).

Usage: python benchmarks/bench_eigen.py [--sizes 100000,400000,1000000] [--repeat 1] [--count 100]
Results: a table on stdout and bench-out/bench_eigen.json.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))


def one(dofs: int, degree: int, count: int, method: str) -> dict:
    """Assemble and solve one problem (runs inside its own process)."""
    from _problems import max_relative_error, peak_memory_gib, sphere_problem

    from shellmodes.eigen.solve import lowest_modes

    problem, build = sphere_problem(dofs, degree)
    t0 = time.perf_counter()
    pairs = lowest_modes(problem.K, problem.M, count, scale=problem.spectral_scale, method=method)
    elapsed = time.perf_counter() - t0
    return {"dofs": int(problem.ndofs), "degree": degree, "method": pairs.method, "backend": pairs.backend,
            "build": build, "eigensolve": elapsed, "returned": int(len(pairs.lam)),
            "max_residual": float(np.max(pairs.residuals)), "error": max_relative_error(pairs.lam, count),
            "orthogonality": pairs.orthogonality, "timings": pairs.timings, "peak_gib": peak_memory_gib()}


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", default="100000,400000,1000000")
    parser.add_argument("--degree", type=int, default=2)
    parser.add_argument("--count", type=int, default=100)
    parser.add_argument("--repeat", type=int, default=1)
    parser.add_argument("--methods", default="lanczos,block")
    parser.add_argument("--out", default=str(HERE.parent / "bench-out"))
    parser.add_argument("--child", nargs=2, help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.child:
        print(json.dumps(one(int(args.child[0]), args.degree, args.count, args.child[1])))
        return 0
    rows = []
    for size in (int(s) for s in args.sizes.split(",")):
        for _ in range(args.repeat):
            for method in args.methods.split(","):  # alternate, so load drifts hit both alike
                load = os.getloadavg()[0]
                proc = subprocess.run([sys.executable, __file__, "--child", str(size), method, "--degree",
                                       str(args.degree), "--count", str(args.count)],
                                      capture_output=True, text=True)
                if proc.returncode:
                    print(proc.stderr[-3000:], file=sys.stderr)
                    rows.append({"dofs": size, "method": method, "failed": proc.stderr[-500:]})
                    continue
                row = json.loads(proc.stdout.strip().splitlines()[-1])
                row["load_before"] = load
                rows.append(row)
                print(f"{row['dofs']:>9} {row['method']:>8} {row['eigensolve']:8.1f} s  {row['peak_gib']:5.2f} GiB"
                      f"  modes {row['returned']}  residual {row['max_residual']:.1e}  error {row['error']:.2e}"
                      f"  (load {load:.1f})", flush=True)
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    summary = []
    for size in sorted({r["dofs"] for r in rows if "failed" not in r}):
        times = {m: [r["eigensolve"] for r in rows if r.get("dofs") == size and r["method"] == m]
                 for m in ("lanczos", "block")}
        if all(times.values()):
            ratio = np.median(times["lanczos"]) / np.median(times["block"])
            summary.append({"dofs": size, "lanczos": times["lanczos"], "block": times["block"],
                            "lanczos_over_block": float(ratio)})
            print(f"{size:>9} dofs: Lanczos / block time = {ratio:.2f} (Lanczos {times['lanczos']}, "
                  f"block {times['block']})")
    path = out / "bench_eigen.json"
    path.write_text(json.dumps({"rows": rows, "summary": summary, "cpus": os.cpu_count(),
                                "env": {k: v for k, v in os.environ.items() if "THREADS" in k}}, indent=2))
    print(f"wrote {path}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
