"""The distributed solver (modes.method = "mpi") on 1 against 2 ranks for a large deformed prism shell.

Run by hand inside the MPI environment (scripts/setup-mpi.sh), one size at a time:

    . .venv-mpi/bin/activate
    python benchmarks/bench_mpi.py --subdivisions 7 --layers 7 --ranks 1,2

The shell lies between the unit sphere and an ellipsoidal outer wall (2, 2, 2.4) (not separable, so the
full matrices are assembled and solved), on layered P1 x Q1 prisms: ``10 4^s + 2`` surface nodes times
``layers + 1`` radial nodes, the two walls held at zero.  Every rank count runs the whole command
``shellmodes run CASE --ranks N`` in a subprocess (start-up, assembly and output files included), and
each run's spectrum.json gives the time and the peak memory of every rank (``solver.per_rank``).  The
baseline is the 1-rank run of the same invocation; the eigenvalues of every run are compared with it.
The load average is recorded before and after.  JSON goes to bench-out/bench_mpi-<s>-<layers>.json.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent

CASE = """# benchmark: a deformed shell on P1 x Q1 prisms
[shell]
inner = {{ shape = "sphere", radius = 1.0 }}
outer = {{ shape = "ellipsoid", axes = [2.0, 2.0, 2.4] }}
cells = "prisms"
layers = {layers}
radial_degree = 1

[units]
length = "1"
energy = "1"

[resolution]
degree = 1
subdivisions = {subdivisions}

[modes]
count = {count}
method = "mpi"

[output]
vtu = false
"""


def _load() -> float:
    return os.getloadavg()[0]


def run(ranks: int, case: Path, out: Path) -> dict:
    env = dict(os.environ, OMP_NUM_THREADS="1", OPENBLAS_NUM_THREADS="1")
    t0 = time.perf_counter()
    done = subprocess.run([sys.executable, "-m", "shellmodes", "-v", "run", str(case), "--ranks", str(ranks),
                           "--out", str(out), "--quiet"], capture_output=True, text=True, env=env)
    wall = time.perf_counter() - t0
    if done.returncode != 0:
        raise SystemExit(f"{ranks} ranks failed ({done.returncode}):\n{done.stderr[-3000:]}")
    data = json.loads((out / "spectrum.json").read_text())
    solver, timings = data["solver"], data["timings"]
    log = (out / "run.log").read_text()
    share = next((line for line in log.splitlines() if "rows sent" in line or "own copy" in line), "")
    return {"ranks": ranks, "wall": wall, "timings": timings, "solver": {k: v for k, v in solver.items()},
            "free_dofs": data["mesh"]["free_dofs"], "lam": [m["eigenvalue"] for m in data["modes"]],
            "max_residual": solver["max_residual"], "share_line": share}


def main(argv=None) -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--subdivisions", type=int, default=7)
    p.add_argument("--layers", type=int, default=7)
    p.add_argument("--count", type=int, default=50)
    p.add_argument("--ranks", default="1,2")
    args = p.parse_args(argv)
    rank_counts = [int(r) for r in args.ranks.split(",")]
    load_before = _load()
    results = []
    with tempfile.TemporaryDirectory(prefix="bench-mpi-") as tmp:
        case = Path(tmp) / "shell.toml"
        case.write_text(CASE.format(layers=args.layers, subdivisions=args.subdivisions, count=args.count))
        for ranks in rank_counts:
            results.append(run(ranks, case, Path(tmp) / f"out-{ranks}"))
            r = results[-1]
            print(f"{ranks} rank(s): {r['free_dofs']} unknowns, wall {r['wall']:.1f} s, eigensolve "
                  f"{r['timings']['eigensolve']:.1f} s, assembly {r['timings']['assembly']:.1f} s, "
                  f"{r['solver']['inner_solver']}, max residual {r['max_residual']:.1e}", flush=True)
            for rec in r["solver"]["per_rank"]:
                print(f"    rank {rec['rank']}: {rec['rows']} rows, solve {rec['solve_seconds']:.1f} s, set-up and "
                      f"factor {rec['factor_seconds']:.1f} s, peak {rec['peak_bytes'] / 2**30:.2f} GiB, MUMPS "
                      f"{(rec['mumps_mbytes'] or 0) / 1024:.2f} GiB", flush=True)
            print(f"    {r['share_line']}", flush=True)
    base = results[0]
    for r in results[1:]:
        diff = np.max(np.abs(np.array(r["lam"]) - np.array(base["lam"])) / np.maximum(np.abs(base["lam"]), 1.0))
        peak = max(x["peak_bytes"] for x in r["solver"]["per_rank"]) / base["solver"]["per_rank"][0]["peak_bytes"]
        print(f"{r['ranks']} against {base['ranks']} rank(s): wall x{r['wall'] / base['wall']:.2f}, eigensolve "
              f"x{r['timings']['eigensolve'] / base['timings']['eigensolve']:.2f}, largest rank's peak memory "
              f"x{peak:.2f}, eigenvalues agree to {diff:.1e}")
    load_after = _load()
    print(f"load average {load_before:.1f} before, {load_after:.1f} after")
    out = ROOT / "bench-out"
    out.mkdir(exist_ok=True)
    for r in results:
        r.pop("lam")
    (out / f"bench_mpi-{args.subdivisions}-{args.layers}.json").write_text(json.dumps(
        {"subdivisions": args.subdivisions, "layers": args.layers, "count": args.count, "results": results,
         "load_before": load_before, "load_after": load_after}, indent=2))


if __name__ == "__main__":
    main()
