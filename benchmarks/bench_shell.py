"""Hard-wall spherical shell 1 < r < 2: accuracy, time and memory of the first 50 modes.

Three studies, each point in its own child process (peak memory is the
child's high-water mark, VmHWM):

- ``ladder``: P1 and P2 curved tetrahedra with the icosphere level of the
  directions and the radial layers refined together, (level, layers) =
  (L, 2^(L-1)), CHOLMOD through :func:`shellmodes.eigen.solve.lowest_modes`.  The
  max relative error of the first 50 eigenvalues against the exact values
  (:func:`shellmodes.studies.references.shell_dirichlet`, lambda = k^2, each
  (2l+1)-fold), wall times (mesh, assembly, factorization, eigen-solve) and
  peak memory; fits of log error and log time against log DOFs give the time
  to reach 1e-4 and 1e-6 (extrapolated beyond the largest point, and said so).
- ``compare``: the same matrices (the mesh is deterministic) solved with
  scipy's ``splu`` (default ordering) and CHOLMOD through ``lowest_modes``,
  and with LOBPCG + AMG (:func:`shellmodes.eigen.backends.lobpcg_amg.lobpcg_lowest`),
  interleaved in one run; ratios are against CHOLMOD measured in the same run.
- ``large``: one P2 point near a million DOFs (CHOLMOD, ``method="auto"``)
  under a hard timeout and a memory guard (the parent kills the child when
  its VmRSS passes ``--memory-guard`` GiB or the machine's MemAvailable falls
  below 1 GiB; RLIMIT_AS in the child is a backstop), with
  :func:`~shellmodes.eigen.backends.lobpcg_amg.choose_eigen_path`'s verdict and
  factor estimate beside the measured peak.

Usage:
    python benchmarks/bench_shell.py ladder [--repeat 3] [--p1-levels 2,3,4,5] [--p2-levels 1,2,3,4]
    python benchmarks/bench_shell.py compare [--points 1:4,1:5,2:3] [--repeat 2]
    python benchmarks/bench_shell.py large [--level 5 --layers 13] [--timeout 1500] [--memory-guard 18]
Results: a table on stdout and bench-out/bench_shell-<study>.json (rewritten after every point).
Timings are shared-machine wall times; the load average before each point is recorded.
"""

from __future__ import annotations

import argparse
import gc
import json
import os
import resource
import subprocess
import sys
import threading
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from _problems import peak_memory_gib  # noqa: E402

COUNT = 50
INNER, OUTER = 1.0, 2.0
TOLERANCES = (1e-4, 1e-6)
TARGET_SECONDS = 60.0


def exact_eigenvalues(count: int = COUNT, l_max: int = 8, radial: int = 3) -> np.ndarray:
    """The lowest ``count`` lambda = k^2 of the hard-wall shell, with multiplicity 2l+1.

    Built from l = 0..l_max and n = 1..radial; refuses when a value left out
    (l = l_max + 1 or n = radial + 1) could belong among the first ``count``.
    """
    from shellmodes.studies.references import shell_dirichlet

    values = []
    for l in range(l_max + 1):
        k = shell_dirichlet(l, radial, INNER, OUTER)
        values += [float(v) ** 2 for v in k for _ in range(2 * l + 1)]
    values = np.sort(values)[:count]
    left_out = min(float(shell_dirichlet(l_max + 1, 1, INNER, OUTER)[0]) ** 2,
                   min(float(shell_dirichlet(l, radial + 1, INNER, OUTER)[-1]) ** 2 for l in range(l_max + 1)))
    if len(values) < count or left_out <= values[-1]:
        raise ValueError(f"l <= {l_max}, n <= {radial} do not cover the first {count} modes")
    return values


def _status_gib(pid: int, key: str) -> float:
    try:
        with open(f"/proc/{pid}/status") as f:
            for line in f:
                if line.startswith(key + ":"):
                    return int(line.split()[1]) / 2**20
    except OSError:
        pass
    return 0.0


def _available_gib() -> float:
    with open("/proc/meminfo") as f:
        for line in f:
            if line.startswith("MemAvailable:"):
                return int(line.split()[1]) / 2**20
    return float("inf")


def build(degree: int, level: int, layers: int):
    """Restricted (K, M) of the hard-wall shell, the free nodes and build timings."""
    from shellmodes.fem.assemble import assemble_volume, free_dofs, restricted
    from shellmodes.fem.shellmesh import shell_mesh
    from shellmodes.fem.tetrahedra import discretise

    t0 = time.perf_counter()
    disc = discretise(shell_mesh([INNER, OUTER], level=level, layers_per_region=layers), degree)
    t1 = time.perf_counter()
    K, M = assemble_volume(disc, 1.0)
    free = free_dofs(disc, ["inner", "outer"])
    Kf, Mf = restricted(K, free), restricted(M, free)
    t2 = time.perf_counter()
    return Kf, Mf, disc.nodes[free], {"dofs": int(disc.ndofs), "free": int(len(free)), "h": disc.h,
                                      "mesh": t1 - t0, "assembly": t2 - t1}


def _phase(text: str, t0: float) -> None:
    """Progress on stderr, so that a killed child still says how far it got."""
    print(f"[{time.perf_counter() - t0:8.1f} s, VmHWM {peak_memory_gib():.2f} GiB] {text}", file=sys.stderr,
          flush=True)


def point(degree: int, level: int, layers: int, solver: str, estimate: bool, memory_limit: float | None,
          estimate_only: bool = False) -> dict:
    """One child-process measurement; ``solver`` is cholmod, splu or lobpcg."""
    if memory_limit:
        limit = int(memory_limit * 2**30)
        resource.setrlimit(resource.RLIMIT_AS, (limit, limit))
    from shellmodes.eigen.backends import get_backend
    from shellmodes.eigen.backends.lobpcg_amg import choose_eigen_path, lobpcg_lowest
    from shellmodes.eigen.solve import lowest_modes

    t_start = time.perf_counter()
    K, M, points, row = build(degree, level, layers)
    row.update(degree=degree, level=level, layers=layers, solver=solver)
    _phase(f"built {row['free']} free of {row['dofs']} DOFs", t_start)
    scale = 1.0 / OUTER**2  # as run_shell: the shift is -1/R^2, below the spectrum (lambda_1 = pi^2)
    sigma = -scale
    if estimate:
        t0 = time.perf_counter()
        path, est = choose_eigen_path((K - sigma * M).tocsr(), COUNT, points)
        row.update(path=path, estimate_gib=est.bytes / 2**30, estimate_nnz=est.nnz,
                   estimate_seconds=time.perf_counter() - t0)
        _phase(f"choose_eigen_path: {path}, factor estimate {est.bytes / 2**30:.2f} GiB ({est.nnz:.3g} entries)",
               t_start)
        if estimate_only:
            return {**row, "peak_gib": peak_memory_gib(), "wall": time.perf_counter() - t_start}
    t_solve = time.perf_counter()
    if solver == "lobpcg":
        lam, U = lobpcg_lowest(K, M, COUNT, shift=sigma)
        R = K @ U - (M @ U) * lam
        residual = float(np.max(np.linalg.norm(R, axis=0) / (np.abs(lam) * np.linalg.norm(M @ U, axis=0))))
        row.update(method="lobpcg", backend="amg")
    else:
        if row["free"] < 200_000:
            # lowest_modes' Lanczos path does not time its factorization: time one here and drop it
            t0 = time.perf_counter()
            solve = get_backend(solver)[1]((K - sigma * M).tocsc())
            row["factorization"] = time.perf_counter() - t0
            _phase(f"separate factorization {row['factorization']:.1f} s", t_start)
            del solve
            gc.collect()
            t_solve = time.perf_counter()
        _phase(f"lowest_modes({solver}, method=auto)", t_start)
        pairs = lowest_modes(K, M, COUNT, lower_bound=0.0, scale=scale, backend=solver, method="auto")
        lam, residual = pairs.lam, float(np.max(pairs.residuals))
        row.update(method=pairs.method, backend=pairs.backend)
        if "factorization" in pairs.timings:
            row["factorization"] = pairs.timings["factorization"]
    row["eigensolve"] = time.perf_counter() - t_solve  # includes the solver's own factorization
    exact = exact_eigenvalues()
    lam = np.sort(lam)[:COUNT]
    row.update(returned=int(len(lam)), max_residual=residual,
               error=float(np.max(np.abs(lam - exact) / exact)),
               lowest=[float(v) for v in lam[:4]],
               total=row["mesh"] + row["assembly"] + row["eigensolve"],
               wall=time.perf_counter() - t_start, peak_gib=peak_memory_gib())
    return row


def run_child(degree, level, layers, solver, *, estimate=False, timeout=900.0, guard_gib=None,
              estimate_only=False) -> dict:
    """Run :func:`point` in a child; kill it on timeout, VmRSS above ``guard_gib`` or low MemAvailable."""
    cmd = [sys.executable, __file__, "child", str(degree), str(level), str(layers), solver]
    if estimate:
        cmd.append("--estimate")
    if estimate_only:
        cmd.append("--estimate-only")
    if guard_gib:
        cmd += ["--address-limit", str(guard_gib + 6.0)]  # address space runs ahead of RSS (threads, arenas)
    load = os.getloadavg()
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    why: list[str] = []
    seen = {"rss": 0.0}

    def watch():
        t0 = time.perf_counter()
        while proc.poll() is None:
            rss = _status_gib(proc.pid, "VmRSS")
            seen["rss"] = max(seen["rss"], rss)
            if time.perf_counter() - t0 > timeout:
                why.append(f"timeout after {timeout:.0f} s")
            elif guard_gib and rss > guard_gib:
                why.append(f"VmRSS {rss:.1f} GiB passed the guard {guard_gib} GiB")
            elif _available_gib() < 1.0:
                why.append(f"machine MemAvailable below 1 GiB (child VmRSS {rss:.1f} GiB)")
            if why:
                proc.kill()
                return
            time.sleep(0.5)

    watcher = threading.Thread(target=watch, daemon=True)
    watcher.start()
    out, err = proc.communicate()
    watcher.join()
    base = {"degree": degree, "level": level, "layers": layers, "solver": solver, "load_before": load[0],
            "max_rss_seen_gib": seen["rss"], "threads": {k: v for k, v in os.environ.items() if "THREADS" in k}}
    if why or proc.returncode:
        return {**base, "failed": why[0] if why else err.strip().splitlines()[-1] if err.strip() else
                f"exit {proc.returncode}", "stderr_tail": err[-1500:]}
    return {**json.loads(out.strip().splitlines()[-1]), **base}


def _fmt(row: dict) -> str:
    head = f"P{row['degree']} L{row['level']}/{row['layers']:<2} {row['solver']:>7}"
    if "failed" in row:
        return f"{head}  FAILED: {row['failed']}"
    fac = row.get("factorization")
    return (f"{head} {row['free']:>9} dofs  err {row['error']:.2e}  asm {row['assembly']:6.1f}  "
            f"fac {'-' if fac is None else f'{fac:6.1f}'}  eig {row['eigensolve']:7.1f}  total {row['total']:7.1f} s"
            f"  {row['peak_gib']:5.2f} GiB  {row['method']}  res {row['max_residual']:.0e}  "
            f"(load {row['load_before']:.1f})")


def _write(path: Path, data: dict) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_suffix(".tmp")
    tmp.write_text(json.dumps(data, indent=2))
    tmp.replace(path)


def _fit(x, y) -> tuple[float, float]:
    """Slope and intercept of log y against log x."""
    slope, intercept = np.polyfit(np.log(x), np.log(y), 1)
    return float(slope), float(intercept)


def summarise(rows: list[dict]) -> list[dict]:
    """Per degree: error and time fits (finest two sizes) and the time to each tolerance."""
    out = []
    for degree in sorted({r["degree"] for r in rows}):
        done = [r for r in rows if r["degree"] == degree and "failed" not in r]
        sizes = sorted({r["free"] for r in done})
        if len(sizes) < 2:
            continue
        med = {n: {key: float(np.median([r[key] for r in done if r["free"] == n])) for key in ("error", "total")}
               for n in sizes}
        spread = {n: [min(r["total"] for r in done if r["free"] == n), max(r["total"] for r in done if r["free"] == n)]
                  for n in sizes}
        # the finest two sizes: the local rates (the error is not yet asymptotic at coarse sizes, and the
        # factorization's share of the time grows with size)
        use = sizes[-2:]
        e_slope, e_icpt = _fit(use, [med[n]["error"] for n in use])
        t_slope, t_icpt = _fit(use, [med[n]["total"] for n in use])
        entry = {"degree": degree, "sizes": sizes, "median": {str(n): med[n] for n in sizes},
                 "total_spread": {str(n): spread[n] for n in sizes}, "fitted_on": use,
                 "error_slope": e_slope, "time_slope": t_slope, "to_tolerance": {}}
        for tol in TOLERANCES:
            reached = [n for n in sizes if med[n]["error"] <= tol]
            if reached:
                n = reached[0]
                entry["to_tolerance"][str(tol)] = {"dofs": n, "seconds": med[n]["total"], "measured": True}
            else:
                n = float(np.exp((np.log(tol) - e_icpt) / e_slope))
                entry["to_tolerance"][str(tol)] = {"dofs": n, "seconds": float(np.exp(t_icpt) * n**t_slope),
                                                   "measured": False}
        out.append(entry)
    return out


def _print_summary(summary: list[dict]) -> None:
    for s in summary:
        print(f"P{s['degree']}: error ~ N^{s['error_slope']:.2f}, time ~ N^{s['time_slope']:.2f} "
              f"(fitted on {s['fitted_on']})")
        for tol, t in s["to_tolerance"].items():
            how = "measured" if t["measured"] else "extrapolated"
            print(f"   {float(tol):.0e}: {t['dofs']:.3g} DOFs, {t['seconds']:.3g} s ({how})")


def ladder(args) -> int:
    path = Path(args.out) / "bench_shell-ladder.json"
    if args.summarise:
        data = json.loads(path.read_text())
        data["summary"] = summarise(data["rows"])
        _print_summary(data["summary"])
        _write(path, data)
        return 0
    rows: list[dict] = []
    chain = [(1, int(L)) for L in args.p1_levels.split(",")] + [(2, int(L)) for L in args.p2_levels.split(",")]
    for degree, level in chain:
        layers = 2 ** (level - 1)
        repeats = args.repeat if (degree, level) not in {(1, 5), (2, 4)} else args.large_repeat
        for _ in range(repeats):
            row = run_child(degree, level, layers, "cholmod", estimate=args.estimate, timeout=args.timeout)
            rows.append(row)
            print(_fmt(row), flush=True)
            _write(path, {"rows": rows, "cpus": os.cpu_count()})
        if any("failed" in r for r in rows if r["degree"] == degree and r["level"] == level):
            continue
    summary = summarise(rows)
    _print_summary(summary)
    _write(path, {"rows": rows, "summary": summary, "cpus": os.cpu_count(), "target_seconds": TARGET_SECONDS})
    print(f"wrote {path}")
    return 0


def compare(args) -> int:
    rows: list[dict] = []
    path = Path(args.out) / f"bench_shell-compare{args.tag}.json"
    solvers = args.solvers.split(",")
    for spec in args.points.split(","):
        degree, level, *rest = (int(v) for v in spec.split(":"))
        layers = rest[0] if rest else 2 ** (level - 1)
        for _ in range(args.repeat):
            for solver in solvers:  # interleaved, so load drifts hit every solver alike
                row = run_child(degree, level, layers, solver, timeout=args.timeout)
                rows.append(row)
                print(_fmt(row), flush=True)
                _write(path, {"rows": rows, "cpus": os.cpu_count()})
    ratios = []
    for degree, level, layers in sorted({(r["degree"], r["level"], r["layers"]) for r in rows}):
        same = [r for r in rows if (r["degree"], r["level"], r["layers"]) == (degree, level, layers)
                and "failed" not in r]
        base = [r["eigensolve"] for r in same if r["solver"] == "cholmod"]
        if not base:
            continue
        for solver in solvers:
            times = [r["eigensolve"] for r in same if r["solver"] == solver]
            if times and solver != "cholmod":
                entry = {"degree": degree, "level": level, "layers": layers, "free": same[0]["free"], "solver": solver,
                         "eigensolve": times, "cholmod": base, "ratio_to_cholmod": float(np.median(times) /
                                                                                         np.median(base)),
                         "peak_gib": [r["peak_gib"] for r in same if r["solver"] == solver],
                         "cholmod_peak_gib": [r["peak_gib"] for r in same if r["solver"] == "cholmod"]}
                ratios.append(entry)
                print(f"P{degree} L{level}/{layers} {entry['free']} dofs: {solver} / cholmod eigen-solve time = "
                      f"{entry['ratio_to_cholmod']:.2f} ({times} vs {base})")
    _write(path, {"rows": rows, "ratios": ratios, "cpus": os.cpu_count()})
    print(f"wrote {path}")
    return 0


def large(args) -> int:
    path = Path(args.out) / "bench_shell-large.json"
    row = run_child(2, args.level, args.layers, args.solver, estimate=True, timeout=args.timeout,
                    guard_gib=args.memory_guard, estimate_only=args.estimate_only)
    row.update(timeout=args.timeout, memory_guard_gib=args.memory_guard)
    if args.estimate_only:
        path = path.with_name(f"bench_shell-estimate-L{args.level}-{args.layers}.json")
        print(f"{row.get('free')} free DOFs: {row.get('path')}, factor estimate {row.get('estimate_gib', 0):.2f} GiB, "
              f"build + estimate peak {row.get('peak_gib', 0):.2f} GiB")
    else:
        path = path.with_name(f"bench_shell-large-L{args.level}-{args.layers}-{args.solver}.json")
        print(_fmt(row), flush=True)
    if "failed" not in row and not args.estimate_only:
        print(f"path {row['path']}: estimated factor {row['estimate_gib']:.2f} GiB, measured peak "
              f"{row['peak_gib']:.2f} GiB")
    _write(path, row)
    print(f"wrote {path}")
    return 0


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", default=str(HERE.parent / "bench-out"))
    sub = parser.add_subparsers(dest="study", required=True)
    p = sub.add_parser("ladder")
    p.add_argument("--p1-levels", default="2,3,4,5")
    p.add_argument("--p2-levels", default="1,2,3,4")
    p.add_argument("--repeat", type=int, default=3)
    p.add_argument("--large-repeat", type=int, default=1, help="repeats of P1 level 5 and P2 level 4")
    p.add_argument("--estimate", action="store_true", help="also run choose_eigen_path (not in the times)")
    p.add_argument("--timeout", type=float, default=900.0)
    p.add_argument("--summarise", action="store_true", help="refit the rows of an earlier run, run nothing")
    p = sub.add_parser("compare")
    p.add_argument("--points", default="1:4,2:3", help="degree:level[:layers] (layers 2^(level-1) if omitted)")
    p.add_argument("--solvers", default="cholmod,splu,lobpcg")
    p.add_argument("--tag", default="", help="suffix of the JSON file name")
    p.add_argument("--repeat", type=int, default=2)
    p.add_argument("--timeout", type=float, default=900.0)
    p = sub.add_parser("large")
    p.add_argument("--level", type=int, default=5)
    p.add_argument("--layers", type=int, default=13)
    p.add_argument("--timeout", type=float, default=1500.0)
    p.add_argument("--memory-guard", type=float, default=18.0, help="GiB of VmRSS at which the child is killed")
    p.add_argument("--estimate-only", action="store_true", help="build and run choose_eigen_path only")
    p.add_argument("--solver", choices=["cholmod", "splu", "lobpcg"], default="cholmod")
    p = sub.add_parser("child")  # one measurement, JSON on stdout
    p.add_argument("degree", type=int)
    p.add_argument("level", type=int)
    p.add_argument("layers", type=int)
    p.add_argument("solver", choices=["cholmod", "splu", "lobpcg"])
    p.add_argument("--estimate", action="store_true")
    p.add_argument("--address-limit", type=float)
    p.add_argument("--estimate-only", action="store_true")
    args = parser.parse_args(argv)
    if args.study == "child":
        print(json.dumps(point(args.degree, args.level, args.layers, args.solver, args.estimate,
                               args.address_limit, args.estimate_only)))
        return 0
    return {"ladder": ladder, "compare": compare, "large": large}[args.study](args)


if __name__ == "__main__":
    sys.exit(main())
