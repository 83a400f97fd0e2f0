"""Thousands of modes by spectrum slicing (shellmodes.eigen.slicing), run by hand.

The surface r = 1 + 0.1 Y_20 + 0.05 Y_31 with the project's real orthonormal harmonics
(shellmodes/harmonics.py: Y_31 proportional to cos(phi)), degree 4 elements.

    OPENBLAS_NUM_THREADS=1 python benchmarks/bench_slices.py --count 2000 --subdivisions 4,5 --repeats 3

* accuracy: the same count on two refinements; the finer run's error is estimated by Richardson,
  |lam_fine - lam_coarse| / (2^p - 1), with the order p observed on the unit sphere at the top
  multiplet l on the same two meshes.  The sphere's error there is found exactly from inertia
  counts alone: discrete eigenvalues lie above the exact l(l+1) (min-max), so the largest
  error of the multiplet is the smallest d with N(l(l+1)(1 + d)) = (l+1)^2 (bisection on d);
* time: the finest refinement with 1 worker (slices in this process) and with 2 local Dask
  worker processes, medians of ``--repeats``, the ratio taken within this run;
* every slice's inertia count against the modes found;
* ``--threshold``: single shift (Lanczos) against slices for a few counts, to place ``SLICE_FROM``.

Writes bench-out/slices.json.
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import time
from pathlib import Path

import numpy as np
from threadpoolctl import threadpool_limits

from shellmodes.case.schema import case_from_dict
from shellmodes.eigen.slicing import inertia, sliced_modes
from shellmodes.eigen.solve import lowest_modes
from shellmodes.fem.discretisation import build_discretisation
from shellmodes.fem.forms import assemble_surface

SHAPE = {"shape": "deformed_sphere",
         "deformation": [{"l": 2, "m": 0, "amplitude": 0.1}, {"l": 3, "m": 1, "amplitude": 0.05}]}


def load() -> str:
    return "load average " + ", ".join(f"{x:.2f}" for x in os.getloadavg())


def problem(subdivisions: int, degree: int):
    case = case_from_dict({"surface": SHAPE, "resolution": {"degree": degree, "subdivisions": subdivisions}})
    return assemble_surface(build_discretisation(case).raw, None)


def sphere_error(subdivisions: int, degree: int, l: int) -> float:
    """Largest relative error of the unit sphere's l-multiplet, from inertia counts (bisection in log d)."""
    case = case_from_dict({"surface": {"shape": "sphere"}, "resolution": {"degree": degree,
                                                                          "subdivisions": subdivisions}})
    p = assemble_surface(build_discretisation(case).raw, None)
    exact = l * (l + 1.0)
    lo, hi = -12.0, -1.0  # log10 d
    if inertia(p.K, p.M, exact * (1 + 10**hi)) < (l + 1) ** 2:
        return float("inf")
    for _ in range(14):
        mid = 0.5 * (lo + hi)
        if inertia(p.K, p.M, exact * (1 + 10**mid)) >= (l + 1) ** 2:
            hi = mid
        else:
            lo = mid
    return 10**hi


def timed_slices(p, count, workers, slice_modes):
    t0, c0 = time.perf_counter(), time.process_time()
    with threadpool_limits(limits=1):
        pairs = sliced_modes(p.K, p.M, count, lower_bound=p.lower_bound, scale=p.spectral_scale,
                             slice_modes=slice_modes, workers=workers)
    cpu = time.process_time() - c0  # this process only: the whole work when workers = 1
    slices = pairs.slices
    busy = {}
    for s in slices:  # CPU per worker process: how evenly the work was spread
        busy[s.worker] = busy.get(s.worker, 0.0) + s.cpu_seconds
    print(f"  cpu time of this process {cpu:.1f} s; slices: wall {sum(s.seconds for s in slices):.1f} s, "
          f"cpu {sum(s.cpu_seconds for s in slices):.1f} s; boundaries: wall "
          f"{sum(s.boundary_seconds for s in slices):.1f} s, cpu {sum(s.boundary_cpu_seconds for s in slices):.1f} s; "
          f"slice cpu per worker {', '.join(f'{v:.1f}' for v in busy.values())} s",
          flush=True)
    return time.perf_counter() - t0, pairs


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--count", type=int, default=2000)
    ap.add_argument("--subdivisions", default="4,5")
    ap.add_argument("--degree", type=int, default=4)
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--slice-modes", type=int, default=150)
    ap.add_argument("--workers", default="1,2")
    ap.add_argument("--threshold", default="", help="counts for single shift against slices, e.g. 100,200,400")
    args = ap.parse_args()
    out = {"shape": SHAPE, "degree": args.degree, "count": args.count, "load_before": load(), "runs": []}
    print(out["load_before"])
    subs = [int(s) for s in args.subdivisions.split(",")]
    lams = {}
    for sub in subs:
        p = problem(sub, args.degree)
        n = p.K.shape[0]
        finest = sub == subs[-1]
        for workers in ([int(w) for w in args.workers.split(",")] if finest else [1]):
            times = []
            for _ in range(args.repeats if finest else 1):
                seconds, pairs = timed_slices(p, args.count, workers, args.slice_modes)
                times.append(seconds)
                ok = all(s.found == s.expected for s in pairs.slices)
                print(f"sub {sub} ({n} dofs) workers {workers}: {seconds:.1f} s, {len(pairs.lam)} modes in "
                      f"{len(pairs.slices)} slices, counts match: {ok}, max residual "
                      f"{np.max(pairs.residuals):.1e}, {load()}", flush=True)
            lams[sub] = pairs.lam
            out["runs"].append({"subdivisions": sub, "dofs": n, "workers": workers, "seconds": times,
                                "median": statistics.median(times), "modes": len(pairs.lam),
                                "slices": [s.as_dict() for s in pairs.slices], "counts_match": ok,
                                "max_residual": float(np.max(pairs.residuals)), "load": load()})
        del p
    fine = [r for r in out["runs"] if r["subdivisions"] == subs[-1]]
    if len(fine) > 1:
        ratio = fine[0]["median"] / fine[-1]["median"]
        out["speedup"] = ratio
        print(f"speed-up {fine[-1]['workers']} workers over {fine[0]['workers']}: {ratio:.2f}")
    if len(subs) > 1:
        a, b = lams[subs[-2]], lams[subs[-1]]
        m = min(len(a), len(b), args.count)
        rel = np.abs(a[1:m] - b[1:m]) / np.abs(b[1:m])
        l_top = int(np.sqrt(args.count)) - 1
        errors = [sphere_error(sub, args.degree, l_top) for sub in subs[-2:]]
        p_order = float(np.log2(errors[0] / errors[1]))
        out["sphere"] = {"l": l_top, "errors": errors, "order": p_order}
        print(f"unit sphere, l = {l_top}: relative errors {errors[0]:.2e} -> {errors[1]:.2e}, order {p_order:.2f}")
        estimate = rel / (2**p_order - 1)
        out["richardson"] = {"order": p_order, "max_change": float(rel.max()),
                             "max_error_estimate": float(estimate.max()),
                             "worst_mode": int(np.argmax(estimate)) + 1}
        print(f"coarse vs fine, first {m} modes: max relative change {rel.max():.2e}, "
              f"Richardson error of the fine run {estimate.max():.2e} (order {p_order:.2f})")
    for count in [int(c) for c in args.threshold.split(",") if c]:
        p = problem(subs[0], args.degree)
        t0, c0 = time.perf_counter(), time.process_time()
        with threadpool_limits(limits=1):
            single = lowest_modes(p.K, p.M, count, lower_bound=p.lower_bound, scale=p.spectral_scale,
                                  method="lanczos")
        t_single = time.perf_counter() - t0
        print(f"  single shift: cpu time {time.process_time() - c0:.1f} s", flush=True)
        t_sliced, sliced = timed_slices(p, count, 1, args.slice_modes)
        diff = float(np.max(np.abs(single.lam - sliced.lam[: len(single.lam)]) / np.maximum(single.lam, 1.0)))
        print(f"threshold, {count} modes on {p.K.shape[0]} dofs: single shift {t_single:.1f} s, slices "
              f"{t_sliced:.1f} s (1 worker), ratio {t_single / t_sliced:.2f}, max relative difference {diff:.1e}, "
              f"{load()}", flush=True)
        out.setdefault("threshold", []).append({"count": count, "dofs": p.K.shape[0], "single": t_single,
                                                "slices": t_sliced, "difference": diff, "load": load()})
    out["load_after"] = load()
    Path("bench-out").mkdir(exist_ok=True)
    Path("bench-out/slices.json").write_text(json.dumps(out, indent=1))
    print(out["load_after"])


if __name__ == "__main__":
    main()
