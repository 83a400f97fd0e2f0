"""Benchmark: a deformation sweep solved serially and by local worker processes.

The sweep deforms the unit sphere by r = 1 + a Y_20 + b Y_22 with a from
-0.1 to 0.1 and b from -0.03 to 0.03 together (21 steps by default, the
middle one the exact sphere), 50 lowest modes with degree-4 curved elements
on the level-3 icosphere (10,242 nodes), which docs/MEASURED.md measured at ~3e-7
for the sphere's first 100 eigenvalues; the middle step checks that figure
against l(l+1).

It runs the same sweep twice in fresh folders, with one worker (in this
process) and with ``--workers`` processes, and reports wall times of the
solve phase (until the last step is saved) and of the whole sweep (plus
tracking and the sweep's files, which run in the main process), the
speed-up, and whether both runs give the same tracks and eigenvalues.
Timings depend on what else runs on the machine: the load average is shown.

    python benchmarks/bench_sweep.py [--steps 21] [--modes 50] [--workers 2]
"""

from __future__ import annotations

import os

if __name__ == "__main__":
    # one BLAS thread here too, as in the workers, so that the serial run is the fair baseline: a
    # multi-threaded BLAS on a shared, loaded machine spins and can be many times slower
    for _name in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ.setdefault(_name, "1")

import argparse
import json
import shutil
import tempfile
import time
from pathlib import Path

import numpy as np

from shellmodes.case.schema import case_from_dict
from shellmodes.studies.references import sphere_eigenvalues
from shellmodes.studies.sweep import run_sweep


def sweep_case(steps: int, modes: int, degree: int, subdivisions: int):
    return case_from_dict({
        "title": "sphere to triaxial star, benchmark",
        "surface": {"shape": "deformed_sphere", "radius": 1.0,
                    "deformation": [{"l": 2, "m": 0, "amplitude": 0.0}, {"l": 2, "m": 2, "amplitude": 0.0}]},
        "resolution": {"degree": degree, "subdivisions": subdivisions},
        "modes": {"count": modes},
        "sweep": {"parameters": [
            {"key": "surface.deformation[0].amplitude", "start": -0.1, "stop": 0.1, "steps": steps},
            {"key": "surface.deformation[1].amplitude", "start": -0.03, "stop": 0.03, "steps": steps}]},
    })


def timed_sweep(case, folder: Path, workers: int):
    marks = {}
    t0 = time.perf_counter()

    def progress(done, total):
        if done == total:
            marks["solved"] = time.perf_counter() - t0

    result = run_sweep(case, folder, workers=workers, progress=progress)
    return result, marks["solved"], time.perf_counter() - t0


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--steps", type=int, default=21)
    p.add_argument("--modes", type=int, default=50)
    p.add_argument("--workers", type=int, default=2)
    p.add_argument("--degree", type=int, default=4)
    p.add_argument("--subdivisions", type=int, default=3)
    args = p.parse_args(argv)
    case = sweep_case(args.steps, args.modes, args.degree, args.subdivisions)
    load_before = os.getloadavg()
    tmp = tempfile.mkdtemp(prefix="bench-sweep-")
    serial, serial_solve, serial_total = timed_sweep(case, Path(tmp) / "serial", 1)
    pooled, pooled_solve, pooled_total = timed_sweep(case, Path(tmp) / "pool", args.workers)
    load_after = os.getloadavg()

    # compare by (step, track): inside an exactly degenerate multiplet which eigenvector a track is
    # given (its mode index) depends on round-off, its eigenvalue does not (to the multiplet tolerance)
    by_track_s = {(r["step"], r["track"]): r["eigenvalue"] for r in serial.rows}
    by_track_p = {(r["step"], r["track"]): r["eigenvalue"] for r in pooled.rows}
    same_tracks = len(serial.rows) == len(pooled.rows) and by_track_s.keys() == by_track_p.keys()
    lam_s = np.array(list(by_track_s.values()))
    lam_p = np.array([by_track_p[k] for k in by_track_s]) if same_tracks else lam_s * np.nan
    middle = args.steps // 2
    lam_mid = np.array([r["eigenvalue"] for r in serial.rows if r["step"] == middle and r["mode"] > 0])
    exact = sphere_eigenvalues(len(lam_mid) + 1)[1:]
    sphere_error = float(np.max(np.abs(lam_mid - exact) / exact))
    modes = sorted({sum(1 for r in serial.rows if r["step"] == s.index) for s in serial.steps})
    per_step = {name: float(np.mean([json.loads((folder / "steps" / s.folder_name / "spectrum.json").read_text())
                                     ["timings"]["total"] for s in result.steps]))
                for name, folder, result in (("serial", Path(tmp) / "serial", serial),
                                             ("pool", Path(tmp) / "pool", pooled))}

    print(f"sweep: {args.steps} steps, {modes} modes per step, degree {args.degree}, "
          f"icosphere level {args.subdivisions}, {os.cpu_count()} cores")
    print(f"load average before {load_before[0]:.2f}, after {load_after[0]:.2f} (other work on the machine "
          "makes these timings noisy)")
    print(f"{'':>14} {'solve phase [s]':>16} {'whole sweep [s]':>16}")
    print(f"{'1 worker':>14} {serial_solve:>16.1f} {serial_total:>16.1f}")
    print(f"{f'{args.workers} workers':>14} {pooled_solve:>16.1f} {pooled_total:>16.1f}")
    print(f"{'speed-up':>14} {serial_solve / pooled_solve:>16.2f} {serial_total / pooled_total:>16.2f}")
    print(f"mean time of one step inside its worker: {per_step['serial']:.2f} s alone, {per_step['pool']:.2f} s "
          f"with {args.workers} workers (equal on idle cores; larger when the cores are shared)")
    shutil.rmtree(tmp, ignore_errors=True)
    print(f"BLAS threads in this process: {os.environ.get('OPENBLAS_NUM_THREADS', 'library default')}")
    print(f"same tracks at every step: {same_tracks}; max relative eigenvalue difference serial/parallel: "
          f"{float(np.nanmax(np.abs(lam_p - lam_s) / np.maximum(np.abs(lam_s), 1.0))):.1e}")
    print(f"tracks: {len(serial.tracks)}; sphere step {middle}: max relative error of "
          f"{len(lam_mid)} nonzero eigenvalues against l(l+1): {sphere_error:.2e}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
