"""Sparse Cholesky back-ends side by side on the same matrices: factor, solves, memory.

Matrices (built once, saved in bench-out/ and loaded by every child):

- ``sphere``: K + s M of the unit sphere with degree-2 curved elements on a
  geodesic mesh of about ``--sphere-dofs`` unknowns (``_problems.py``), the
  shifted operator of the surface eigen-solve (s = 4 pi / area = 1);
- ``prisms``: K + M/4 on the free unknowns of an assembled prism shell
  between the unit sphere and an ellipsoid (2, 2, 2.4), P2 triangles x Q2
  radial elements (the deformed-shell pencil of ``bench_prisms.py``).

Every (matrix, back-end) pair runs in a fresh child process, rounds
interleaved, BLAS/OpenMP threads fixed by ``--threads`` for every library.
A child loads the matrix, then measures: the factorization, one solve with
1 right-hand side (best of 3) and one with 12, the relative residual of the
12-column solve, and the memory the factorization added (VmHWM after minus
VmRSS before; PARDISO's own peak from iparm(15)-(17) beside it).  Ratios are
against ``cholmod`` (the cholespy wheel) on the same matrix in the same run.

Usage:
    python benchmarks/bench_factor.py [--sphere-dofs 250000] [--prism-level 4 --prism-layers 3]
                                      [--backends cholmod,cholmod-system,pardiso,splu] [--repeat 3]
                                      [--threads 1] [--timeout 900]
Results: a table on stdout and bench-out/bench_factor-<tag>.json.
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
OUT = HERE.parent / "bench-out"
ELLIPSOID = {"shape": "ellipsoid", "axes": [2.0, 2.0, 2.4]}
THREAD_VARIABLES = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")


def _status(key: str) -> float:
    """A VmXXX line of /proc/self/status in GiB."""
    with open("/proc/self/status") as f:
        for line in f:
            if line.startswith(key + ":"):
                return int(line.split()[1]) / 2**20
    return float("nan")


def build_sphere(dofs: int) -> Path:
    import scipy.sparse as sp
    from _problems import sphere_problem

    path = OUT / f"factor-sphere-{dofs}.npz"
    if not path.exists():
        problem, _ = sphere_problem(dofs, 2)
        sp.save_npz(path, (problem.K + problem.spectral_scale * problem.M).tocsc())
    return path


def build_prisms(level: int, layers: int) -> Path:
    import numpy as np
    import scipy.sparse as sp

    path = OUT / f"factor-prisms-{level}-{layers}.npz"
    if not path.exists():
        from shellmodes.case.model import wall_function
        from shellmodes.case.schema import Wall
        from shellmodes.fem.assemble import restricted
        from shellmodes.fem.prisms import assemble_prisms, prism_shell

        disc = prism_shell([1.0, wall_function(Wall(**ELLIPSOID))], level, layers, degree=2, radial_degree=2)
        K, M = assemble_prisms(disc, {0: 1.0})
        mask = np.ones(disc.ndofs, dtype=bool)
        mask[disc.wall_dofs("inner")] = mask[disc.wall_dofs("outer")] = False
        free = np.flatnonzero(mask)
        sp.save_npz(path, (restricted(K, free) + 0.25 * restricted(M, free)).tocsc())
    return path


def child(payload: dict) -> dict:
    """Factor and solve one saved matrix with one back-end; times in s, memory in GiB."""
    import numpy as np
    import scipy.sparse as sp

    from shellmodes.eigen.backends import get_backend

    A = sp.load_npz(payload["matrix"]).tocsc()
    rng = np.random.default_rng(1)
    B = rng.standard_normal((A.shape[0], 12))
    b = np.ascontiguousarray(B[:, 0])
    name, factorize = get_backend(payload["backend"])
    rss = _status("VmRSS")
    t0 = time.perf_counter()
    solve = factorize(A)
    row = {"factor": time.perf_counter() - t0}
    one = []
    for _ in range(3):
        t0 = time.perf_counter()
        x = solve(b)
        one.append(time.perf_counter() - t0)
    row["solve_1"] = min(one)
    t0 = time.perf_counter()
    X = solve(B)
    row["solve_12"] = time.perf_counter() - t0
    row["residual"] = float(np.linalg.norm(A @ X - B) / np.linalg.norm(B))
    row["residual_1"] = float(np.linalg.norm(A @ x - b) / np.linalg.norm(b))
    row["memory"] = _status("VmHWM") - rss
    handle = getattr(solve, "handle", None)
    if hasattr(handle, "peak_kib"):
        row["pardiso_peak"] = handle.peak_kib / 2**20
        row["factor_nnz"] = handle.factor_nnz
    return {"n": int(A.shape[0]), "nnz": int(A.nnz), "backend": name, **row}


def _run_child(payload: dict, threads: int, timeout: float) -> dict:
    env = dict(os.environ)
    env.update({k: str(threads) for k in THREAD_VARIABLES})
    try:
        out = subprocess.run([sys.executable, __file__, "--child", json.dumps(payload)], capture_output=True,
                             text=True, env=env, timeout=timeout)
    except subprocess.TimeoutExpired:
        return {"error": f"timeout {timeout:.0f} s"}
    if out.returncode:
        return {"error": (out.stderr.strip().splitlines() or ["?"])[-1]}
    return json.loads(out.stdout.strip().splitlines()[-1])


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--child", help=argparse.SUPPRESS)
    parser.add_argument("--sphere-dofs", type=int, default=250_000, help="0: skip the sphere matrix")
    parser.add_argument("--prism-level", type=int, default=4, help="0: skip the prism matrix")
    parser.add_argument("--prism-layers", type=int, default=3)
    parser.add_argument("--backends", default="cholmod,cholmod-system,pardiso,splu")
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--threads", type=int, default=1)
    parser.add_argument("--timeout", type=float, default=900.0)
    parser.add_argument("--tag", default="")
    args = parser.parse_args(argv)
    if args.child:
        print(json.dumps(child(json.loads(args.child))))
        return 0

    from shellmodes.eigen.backends import available_backends

    OUT.mkdir(exist_ok=True)
    matrices = {}
    if args.sphere_dofs:
        matrices[f"sphere P2 {args.sphere_dofs}"] = build_sphere(args.sphere_dofs)
    if args.prism_level:
        matrices[f"prisms P2xQ2 level {args.prism_level}/{args.prism_layers}"] = build_prisms(args.prism_level,
                                                                                             args.prism_layers)
    installed = set(available_backends())
    backends = [b for b in args.backends.split(",") if b in installed]
    skipped = [b for b in args.backends.split(",") if b not in installed]
    load = [os.getloadavg()]
    rows: dict = {m: {b: [] for b in backends} for m in matrices}
    for _ in range(args.repeat):
        for label, path in matrices.items():
            for backend in backends:
                row = _run_child({"matrix": str(path), "backend": backend}, args.threads, args.timeout)
                rows[label][backend].append(row)
                load.append(os.getloadavg())
                print(f"  {label:32s} {backend:15s} " + (row.get("error") or
                      f"factor {row['factor']:.3f} s, solve 1: {row['solve_1']:.4f} s, "
                      f"12: {row['solve_12']:.4f} s, +{row['memory']:.2f} GiB"), flush=True)

    def median(label, backend, key):
        values = [r[key] for r in rows[label][backend] if key in r]
        return statistics.median(values) if values else float("nan")

    print(f"\nthreads {args.threads}; load average (1 min) {min(x[0] for x in load):.1f}-{max(x[0] for x in load):.1f}"
          + (f"; not installed: {', '.join(skipped)}" if skipped else ""))
    summary = {}
    for label in matrices:
        first = next((r for b in backends for r in rows[label][b] if "n" in r), {})
        print(f"\n{label}: n = {first.get('n')}, nnz = {first.get('nnz')}; medians of {args.repeat}, "
              "ratios against cholmod (cholespy)")
        print(f"{'back-end':15s} {'factor s':>9s} {'solve1 s':>9s} {'solve12 s':>9s} {'+GiB':>6s} "
              f"{'fac/ref':>7s} {'s1/ref':>7s} {'s12/ref':>7s} {'residual':>9s}")
        summary[label] = {}
        for backend in backends:
            med = {k: median(label, backend, k) for k in ("factor", "solve_1", "solve_12", "memory", "residual")}
            ref = {k: median(label, "cholmod", k) for k in ("factor", "solve_1", "solve_12")}
            ratio = {k: med[k] / ref[k] if ref[k] == ref[k] else float("nan") for k in ref}
            summary[label][backend] = {**med, "ratio": ratio}
            print(f"{backend:15s} {med['factor']:9.3f} {med['solve_1']:9.4f} {med['solve_12']:9.4f} "
                  f"{med['memory']:6.2f} {ratio['factor']:7.2f} {ratio['solve_1']:7.2f} {ratio['solve_12']:7.2f} "
                  f"{med['residual']:9.1e}")
    path = OUT / f"bench_factor{args.tag}.json"
    path.write_text(json.dumps({"threads": args.threads, "load": load, "rows": rows, "summary": summary,
                                "skipped": skipped}, indent=1))
    print(f"\nwrote {path}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
