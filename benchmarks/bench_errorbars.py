"""Do ``shellmodes converge`` error bars hold?  Bracketing measured on five shapes.

For the unit sphere, a prolate spheroid (a = 1, c = 1.5), a torus (R = 3, r = 1),
a 120-degree cap with a hard rim and the unit ball with a hard wall (prisms), at
element degrees 1 and 2, one convergence study per shape and degree is run with
four or five refinements; then :func:`shellmodes.studies.convergence.error_bar`
(the rule ``converge`` uses) is applied to every run of three or four
consecutive refinements, and its bar on the finest value of that run is compared
with the true error of that value.

References:
- sphere: l(l+1), multiplicity 2l+1 (DLMF 14.30.10, ``references.sphere_eigenvalues``);
- cap: Ferrers-function roots P_nu^{-m}(cos theta0) = 0 (``references.cap_eigenvalues``);
- ball: squares of the zeros of j_l (DLMF 10.21, ``references.ball_dirichlet``);
- spheroid and torus: no closed form; a high-resolution solve of the same code at
  degree 4, subdivisions 5 (its own error is below 1e-9 relative by its error bar),
  so these two only test the estimator, not the element.

Usage:
    python benchmarks/bench_errorbars.py [sphere spheroid torus cap ball]

Prints a table of bracketing fractions and estimate / true ratios and writes
bench-out/bench_errorbars.json.
"""

from __future__ import annotations

import json
import os
import sys
import time
import warnings
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(ROOT))

from shellmodes.case.schema import case_from_dict  # noqa: E402
from shellmodes.pipeline import run_case  # noqa: E402
from shellmodes.studies import references as ref  # noqa: E402
from shellmodes.studies.convergence import convergence_study, error_bar  # noqa: E402


def _levels(values, l_max: int, count: int) -> np.ndarray:
    return np.sort([float(v) for l in range(l_max + 1) for v in values(l) for _ in range(2 * l + 1)])[:count]


def _surface(shape: dict, count: int):
    def make(subdivisions: int, degree: int):
        return case_from_dict({"surface": shape, "resolution": {"degree": degree, "subdivisions": subdivisions},
                               "modes": {"count": count}}, f"<{shape['shape']}>")
    return make


def _ball(subdivisions: int, degree: int):
    return case_from_dict({"shell": {"outer": {"shape": "sphere", "radius": 1.0}, "layers": 2,
                                     "radial_degree": degree},
                           "resolution": {"degree": degree, "subdivisions": subdivisions},
                           "modes": {"count": 20}}, "<ball>")


#: name -> (case maker, first subdivisions, exact eigenvalues by count or None for a fine reference solve)
SHAPES = {
    "sphere": (_surface({"shape": "sphere"}, 16), 1, ref.sphere_eigenvalues),
    "spheroid": (_surface({"shape": "spheroid", "equatorial_radius": 1.0, "polar_radius": 1.5}, 16), 1, None),
    "torus": (_surface({"shape": "torus", "major_radius": 3.0, "minor_radius": 1.0}, 20), 1, None),
    "cap": (_surface({"shape": "cap", "half_angle": 120.0, "rim": "dirichlet"}, 12), 2,
            lambda n: ref.cap_eigenvalues(np.radians(120.0), n)),
    "ball": (_ball, 2, lambda n: _levels(lambda l: ref.ball_dirichlet(l, 4) ** 2, 6, n)),
}


def measure(name: str, degree: int) -> dict:
    make, start, exact = SHAPES[name]
    refinements = 5 if degree == 1 and name != "ball" else 4
    t0 = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        study = convergence_study(make(start, degree), refinements=refinements)
    seconds = time.perf_counter() - t0
    count = max(max(r.modes) for r in study.rows) + 1
    reference = np.asarray(exact(count + 6) if exact is not None else run_case(make(5, 4)).eigenvalues)
    h = [r.h for r in study.refinements]
    samples = []
    for row in study.rows:
        truth = float(np.mean(reference[list(row.modes)]))
        for used in (3, 4):
            for end in range(used, len(h) + 1):
                values, hh = row.values[end - used:end], h[end - used:end]
                true = abs(values[-1] - truth)
                if true <= 1e-11 * max(1.0, abs(truth)):  # at rounding: no error to bracket
                    continue
                bar = error_bar(values, hh, study.order_range)
                samples.append({"row": row.index, "solves": used, "finest": end - 1 + start,
                                "ratio": bar.error / true, "status": bar.status})
    ratios = np.array([s["ratio"] for s in samples])
    return {"shape": name, "degree": degree, "dofs": [r.dofs for r in study.refinements], "seconds": seconds,
            "samples": samples, "n": len(ratios), "bracketed": float(np.mean(ratios >= 1)),
            "within_10x": float(np.mean(ratios <= 10)), "min_ratio": float(ratios.min()),
            "median_ratio": float(np.median(ratios)), "max_ratio": float(ratios.max()),
            "flagged": int(sum(s["status"] != "asymptotic" for s in samples))}


def main(argv) -> int:
    names = argv or list(SHAPES)
    load = os.getloadavg()
    results = [measure(name, degree) for name in names for degree in (1, 2)]
    print(f"{'shape':<9} {'k':>2} {'samples':>7} {'bracketed':>9} {'<=10x':>6} {'min':>6} {'median':>6} "
          f"{'max':>6} {'flagged':>7} {'study [s]':>9}")
    for r in results:
        print(f"{r['shape']:<9} {r['degree']:>2} {r['n']:>7} {r['bracketed']:>9.3f} {r['within_10x']:>6.3f} "
              f"{r['min_ratio']:>6.2f} {r['median_ratio']:>6.2f} {r['max_ratio']:>6.2f} {r['flagged']:>7} "
              f"{r['seconds']:>9.1f}")
    ratios = np.array([s["ratio"] for r in results for s in r["samples"]])
    print(f"all: {len(ratios)} samples, bracketed {np.mean(ratios >= 1):.3f}, within 10x {np.mean(ratios <= 10):.3f}, "
          f"ratio {ratios.min():.2f}..{ratios.max():.2f}; load average before {load}, after {os.getloadavg()}")
    out = ROOT / "bench-out"
    out.mkdir(exist_ok=True)
    (out / "bench_errorbars.json").write_text(json.dumps({"load": [load, os.getloadavg()], "results": results},
                                                         indent=1) + "\n")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
