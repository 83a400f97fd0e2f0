"""Speed to the first 100 unit-sphere modes: the shellmodes command against a hand-written baseline.

(a) ``shellmodes run cases/unit-sphere.toml`` as a subprocess (wall time
    including start-up and writing the outputs), repeated, median and spread;
    the first 100 eigenvalues read back from spectrum.json must match l(l+1)
    to a relative 1e-6.  A cheaper case (degree 4, 2 subdivisions) gives the
    1e-4 point.
(b) The baseline a practitioner writes by hand: flat P1 triangles on a
    geodesic sphere, cotangent stiffness and P1 mass assembled here with
    numpy and scipy.sparse (nothing from shellmodes but the icosahedron's
    twelve vertices), solved by ``eigsh(K, 100, M, sigma=-0.01,
    which="LM")`` with scipy's default splu.  Each refinement runs in its own
    process, so its peak memory (VmHWM) is its own.  Error and time are
    fitted against DOFs by least squares in log-log, and the baseline's time
    to 1e-4 and 1e-6 is read off the fits, extrapolated beyond the largest
    size run (and said so).

Usage: python benchmarks/bench_sphere.py [--repeat 3] [--levels 2,3,4,5] [--mass consistent]
Results: a table on stdout and bench-out/bench_sphere.json.
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(HERE))

COUNT = 100
SIGMA = -0.01  # "a small negative shift", as a practitioner would pick it
OURS = [  # (label, case text or file, tolerance it must reach)
    ("unit-sphere.toml (P4, 10,242 dofs)", ROOT / "cases" / "unit-sphere.toml", 1e-6),
    ("P4, 2 subdivisions (2,562 dofs)", """title = "unit sphere, 100 modes, coarse"
[surface]
shape = "sphere"
[resolution]
degree = 4
subdivisions = 2
[modes]
count = 100
""", 1e-4),
]


def cotangent_p1(points: np.ndarray, triangles: np.ndarray, lumped: bool):
    """Flat P1 stiffness (cotangent formula) and mass on a triangulated surface.

    K_ij = -(cot alpha_ij + cot beta_ij) / 2 for an edge ij with opposite angles
    alpha, beta, and K_ii = -sum_j K_ij (Pinkall and Polthier, Experiment.
    Math. 2 (1993) 15, eq. 5; Dziuk, Lecture Notes in Math. 1357 (1988) 142).
    Consistent mass: area/12 (1 + delta_ij) per triangle; lumped: area/3 per vertex.
    """
    import scipy.sparse as sp

    n = len(points)
    P = points[triangles]  # (M, 3 corners, 3)
    rows, cols, vals = [], [], []
    for k in range(3):  # angle at corner k is opposite the edge (i, j)
        i, j = (k + 1) % 3, (k + 2) % 3
        a = P[:, i] - P[:, k]
        b = P[:, j] - P[:, k]
        cot = np.einsum("ij,ij->i", a, b) / np.linalg.norm(np.cross(a, b), axis=1)
        rows += [triangles[:, i], triangles[:, j]]
        cols += [triangles[:, j], triangles[:, i]]
        vals += [-0.5 * cot, -0.5 * cot]
    K = sp.csr_matrix((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))), shape=(n, n))
    K = K - sp.diags(np.asarray(K.sum(axis=1)).ravel())
    area = 0.5 * np.linalg.norm(np.cross(P[:, 1] - P[:, 0], P[:, 2] - P[:, 0]), axis=1)
    if lumped:
        M = sp.diags(np.bincount(triangles.ravel(), np.repeat(area / 3.0, 3), minlength=n))
    else:
        local = (np.ones((3, 3)) + np.eye(3)) / 12.0
        r = np.repeat(triangles, 3, axis=1).ravel()
        c = np.tile(triangles, (1, 3)).ravel()
        v = (area[:, None, None] * local[None]).ravel()
        M = sp.csr_matrix((v, (r, c)), shape=(n, n))
    return sp.csr_matrix(K), sp.csr_matrix(M)


def baseline_level(level: int, lumped: bool) -> dict:
    """One refinement of the flat P1 baseline, timed (runs inside its own process)."""
    import scipy.sparse.linalg as sla
    from _problems import geodesic_sphere, max_relative_error, peak_memory_gib

    t0 = time.perf_counter()
    points, triangles = geodesic_sphere(2**level)
    K, M = cotangent_p1(points, triangles, lumped)
    t1 = time.perf_counter()
    lam = sla.eigsh(K, COUNT, M, sigma=SIGMA, which="LM", return_eigenvectors=False)
    t2 = time.perf_counter()
    return {"level": level, "dofs": int(K.shape[0]), "assembly": t1 - t0, "eigsh": t2 - t1,
            "time": t2 - t0, "error": max_relative_error(lam, COUNT), "peak_gib": peak_memory_gib()}


def _run(cmd, env, timeout=3600):
    t = time.perf_counter()
    proc = subprocess.run(cmd, env=env, capture_output=True, text=True, timeout=timeout)
    wall = time.perf_counter() - t
    if proc.returncode != 0:
        raise RuntimeError(f"{' '.join(map(str, cmd))} failed ({proc.returncode}):\n{proc.stderr[-2000:]}")
    return wall, proc.stdout


def ours(label, case, tolerance, repeat, env, work: Path) -> dict:
    """Wall time of the whole ``shellmodes run`` command and the error it reaches."""
    from _problems import max_relative_error

    if isinstance(case, str):
        path = work / "case.toml"
        path.write_text(case)
    else:
        path = case
    exe = shutil.which("shellmodes") or "shellmodes"
    walls, errors, inner = [], [], []
    for i in range(repeat):
        out = work / f"out-{i}"
        wall, _ = _run([exe, "run", str(path), "--out", str(out)], env)
        data = json.loads((out / "spectrum.json").read_text())
        lam = np.array([m["eigenvalue"] for m in data["modes"]])
        walls.append(wall)
        errors.append(max_relative_error(lam, COUNT))
        inner.append(data.get("timings", {}))
        shutil.rmtree(out)
    error = max(errors)
    return {"label": label, "case": str(path) if not isinstance(case, str) else case, "dofs": data["mesh"]["dofs"],
            "degree": data["mesh"]["degree"], "solver": data["solver"], "walls": walls,
            "median": float(np.median(walls)), "min": min(walls), "max": max(walls), "error": error,
            "tolerance": tolerance, "meets_tolerance": bool(error <= tolerance), "inner_timings": inner}


def _fit(x, y):
    """Least-squares line log y = a + b log x; returns (a, b)."""
    b, a = np.polyfit(np.log(x), np.log(y), 1)
    return float(a), float(b)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--levels", default="3,4,5,6", help="geodesic refinements 2^L of the P1 baseline")
    parser.add_argument("--baseline-repeat", type=int, default=3, help="repeats of each baseline level below "
                        "the largest (the largest runs once)")
    parser.add_argument("--mass", choices=["consistent", "lumped"], default="consistent")
    parser.add_argument("--out", default=str(ROOT / "bench-out"))
    parser.add_argument("--baseline-level", type=int, help=argparse.SUPPRESS)  # child process
    args = parser.parse_args(argv)
    if args.baseline_level is not None:
        print(json.dumps(baseline_level(args.baseline_level, args.mass == "lumped")))
        return 0
    env = dict(os.environ)
    out_dir = Path(args.out)
    out_dir.mkdir(parents=True, exist_ok=True)
    stamp = time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime())
    results = {"started": stamp, "machine": {"cpus": os.cpu_count(), "load_before": os.getloadavg()},
               "env": {k: env[k] for k in env if "THREADS" in k}, "count": COUNT}

    with tempfile.TemporaryDirectory() as tmp:
        results["ours"] = [ours(label, case, tol, args.repeat, env, Path(tmp)) for label, case, tol in OURS]

    base = []
    levels = [int(x) for x in args.levels.split(",")]
    for level in levels:
        runs = []
        for _ in range(1 if level == levels[-1] else args.baseline_repeat):
            _, text = _run([sys.executable, __file__, "--baseline-level", str(level), "--mass", args.mass], env)
            runs.append(json.loads(text.strip().splitlines()[-1]))
        times = [r["time"] for r in runs]
        row = dict(runs[0])
        row.update(time=float(np.median(times)), times=times, peak_gib=max(r["peak_gib"] for r in runs))
        base.append(row)
        print(f"baseline level {level}: {row['dofs']} dofs, {row['time']:.2f} s, error {row['error']:.2e}",
              file=sys.stderr, flush=True)
    results["baseline"] = base
    results["machine"]["load_after"] = os.getloadavg()

    # fits over the three finest levels (the asymptotic range: error ~ h^2 ~ 1/N)
    fitted = base[-3:]
    dofs = np.array([r["dofs"] for r in fitted], dtype=float)
    ea, eb = _fit(dofs, [r["error"] for r in fitted])
    ta, tb = _fit(dofs, [r["time"] for r in fitted])
    ma, mb = _fit(dofs, [r["peak_gib"] for r in fitted])
    results["fits"] = {"error": {"log_a": ea, "slope": eb}, "time": {"log_a": ta, "slope": tb},
                       "peak_gib": {"log_a": ma, "slope": mb}, "over_dofs": dofs.tolist()}
    targets = []
    for tol in (1e-4, 1e-6):
        n_needed = float(np.exp((np.log(tol) - ea) / eb))
        t_base = float(np.exp(ta + tb * np.log(n_needed)))
        measured = [r for r in base if r["error"] <= tol]
        if measured:
            t_base, n_needed, how = measured[0]["time"], measured[0]["dofs"], "measured"
        else:
            how = f"extrapolated from {int(dofs[0])}-{int(dofs[-1])} dofs"
        mine = min((o for o in results["ours"] if o["error"] <= tol), key=lambda o: o["median"], default=None)
        targets.append({"tolerance": tol, "baseline_dofs": n_needed, "baseline_time": t_base,
                        "baseline_peak_gib": float(np.exp(ma + mb * np.log(n_needed))), "baseline_how": how,
                        "ours": None if mine is None else mine["label"],
                        "ours_time": None if mine is None else mine["median"],
                        "ratio": None if mine is None else t_base / mine["median"]})
    results["targets"] = targets
    path = out_dir / "bench_sphere.json"
    path.write_text(json.dumps(results, indent=2))

    print(f"first {COUNT} unit-sphere modes; load average {results['machine']['load_before'][0]:.1f} before, "
          f"{results['machine']['load_after'][0]:.1f} after ({os.cpu_count()} cores)")
    print(f"{'method':<44} {'dofs':>10} {'wall median [min-max] s':>26} {'max rel err':>12}")
    for o in results["ours"]:
        spread = f"{o['median']:.2f} [{o['min']:.2f}-{o['max']:.2f}]"
        mark = "ok" if o["meets_tolerance"] else f"FAILS {o['tolerance']:.0e}"
        print(f"{'shellmodes run ' + o['label']:<44} {o['dofs']:>10} {spread:>26} {o['error']:>12.2e} {mark}")
    for r in base:
        spread = f"{r['time']:.2f} [{min(r['times']):.2f}-{max(r['times']):.2f}]"
        print(f"{'flat P1 cotangent + eigsh/splu, L=' + str(r['level']):<44} {r['dofs']:>10} {spread:>26} "
              f"{r['error']:>12.2e} {r['peak_gib']:.2f} GiB")
    print(f"baseline fits over {int(dofs[0])}-{int(dofs[-1])} dofs: error ~ N^{eb:.2f}, time ~ N^{tb:.2f}, "
          f"memory ~ N^{mb:.2f}")
    for t in targets:
        line = (f"to {t['tolerance']:.0e}: baseline {t['baseline_dofs']:.3g} dofs, {t['baseline_time']:.3g} s, "
                f"{t['baseline_peak_gib']:.3g} GiB ({t['baseline_how']})")
        if t["ratio"] is not None:
            line += f"; shellmodes {t['ours_time']:.2f} s: ratio {t['ratio']:.3g}x"
        print(line)
    print(f"wrote {path}")
    ok = all(o["meets_tolerance"] for o in results["ours"])
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
