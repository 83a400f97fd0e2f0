"""Balls, core/shell dots and a finite spherical well: prisms closed at the centre against curved P2 tetrahedra.

Every point is the whole command ``python -m shellmodes run CASE --out DIR -q``
in a fresh process (wall-clock time includes Python start-up, imports and
writing every output file); its errors are computed afterwards from
``spectrum.json``.  The tetrahedron baseline of each study runs in the same
invocation, so the ratios are against a baseline measured under the same load
(``uptime`` is recorded before and after).

Studies and references:

- ``ball``: unit ball, hard wall, first 50 modes against the zeros of j_l; free
  wall, first 50 modes against the zeros of j_l' (scipy.special.spherical_jn with
  a root finder, :func:`shellmodes.studies.references.ball_dirichlet` / ``ball_neumann``;
  Abramowitz and Stegun Table 10.6, DLMF 10.21).
- ``dot``: the core/shell dot of ``cases/core-shell-dot.toml`` (two media, mass jump,
  500 meV band offset, hard outer wall), first 20 levels against the
  BenDaniel-Duke matching roots (:func:`shellmodes.studies.references.core_shell_dot_dirichlet`).
- ``well``: the finite spherical well of ``cases/finite-well.toml``, its 1s and 1p
  levels against the matching of j_l to k_l (:func:`shellmodes.studies.references.finite_spherical_well`),
  with automatic layers, with equal layers of the same count, and on tetrahedra.

Usage:
    python benchmarks/bench_balls.py [ball dot well ...]

Results: a table on stdout and bench-out/bench_balls.json.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(ROOT))

from shellmodes.case.units import kinetic_scale_joule  # noqa: E402
from shellmodes.studies import references as ref  # noqa: E402

BALL = """[shell]
outer = {{ shape = "sphere", radius = 1.0 }}
outer_condition = "{condition}"
layers = {layers}
{cells}
[resolution]
degree = {degree}
subdivisions = {level}
[modes]
count = 50
"""

# two media between a sphere at r = {interface} and a hard wall at r = {outer} (nm, meV)
TWO_MEDIA = """[shell]
interfaces = [{{ shape = "sphere", radius = {interface} }}]
outer = {{ shape = "sphere", radius = {outer} }}
layers = {layers}
{cells}
regions = {regions}
[units]
length = "nm"
energy = "meV"
[particle]
mass = 1.0
effective_mass = {mass}
[resolution]
degree = {degree}
subdivisions = {level}
[modes]
count = {count}
"""
DOT = dict(interface=3.0, outer=6.0, mass=1.0, count=20,
           regions='[{ name = "core", effective_mass = 0.10 }, '
                   '{ name = "shell", effective_mass = 0.25, offset = 500.0 }]')
WELL = dict(interface=5.0, outer=40.0, mass=0.067, count=4,
            regions='[{ name = "well" }, { name = "barrier", offset = 300.0 }]')


def _levels(values, l_max: int, count: int) -> np.ndarray:
    return np.sort([float(v) for l in range(l_max + 1) for v in values(l) for _ in range(2 * l + 1)])[:count]


def _e0(effective_mass: float) -> float:
    """hbar^2 / (2 m nm^2) in meV (scipy.constants through shellmodes.case.units)."""
    from scipy import constants

    return kinetic_scale_joule(effective_mass * constants.m_e, 1e-9) / constants.e * 1e3


def exact(study: str, variant: str) -> np.ndarray:
    if study == "ball":
        roots = ref.ball_dirichlet if variant == "dirichlet" else ref.ball_neumann
        return _levels(lambda l: roots(l, 5) ** 2, 12, 50)
    if study == "dot":
        e0 = _e0(1.0)
        return _levels(lambda l: e0 * ref.core_shell_dot_dirichlet(l, 5, 3.0, 6.0, 0.10, 0.25, 500.0 / e0), 12, 20)
    e0 = _e0(0.067)
    return _levels(lambda l: e0 * ref.finite_spherical_well(l, 300.0 / e0, 5.0, 1.0, 1.0), 2, 4)


POINTS = {
    "ball": [
        ("prisms P4 x Q8, hard", "dirichlet", BALL, dict(layers=2, cells="radial_degree = 8", degree=4, level=3)),
        ("tetrahedra P2, hard", "dirichlet", BALL, dict(layers=6, cells='cells = "tetrahedra"', degree=2, level=2)),
        ("prisms P4 x Q8, free", "neumann", BALL, dict(layers=2, cells="radial_degree = 8", degree=4, level=3)),
        ("tetrahedra P2, free", "neumann", BALL, dict(layers=6, cells='cells = "tetrahedra"', degree=2, level=2)),
    ],
    "dot": [
        ("prisms P4 x Q8", "", TWO_MEDIA, dict(DOT, layers="[2, 2]", cells="radial_degree = 8", degree=4, level=2)),
        ("tetrahedra P2", "", TWO_MEDIA, dict(DOT, layers="[6, 6]", cells='cells = "tetrahedra"', degree=2, level=2)),
    ],
    "well": [
        ("prisms P4 x Q8, decay = 1e-8", "", TWO_MEDIA,
         dict(WELL, layers="[2, 2]", cells="radial_degree = 8\ndecay = 1e-8", degree=4, level=1)),
        ("prisms P4 x Q8, equal layers [2, 6]", "", TWO_MEDIA,
         dict(WELL, layers="[2, 6]", cells="radial_degree = 8", degree=4, level=1)),
        ("prisms P4 x Q4, decay = 1e-8", "", TWO_MEDIA,
         dict(WELL, layers="[2, 2]", cells="radial_degree = 4\ndecay = 1e-8", degree=4, level=1)),
        ("prisms P4 x Q4, equal layers [2, 10]", "", TWO_MEDIA,
         dict(WELL, layers="[2, 10]", cells="radial_degree = 4", degree=4, level=1)),
        ("tetrahedra P2", "", TWO_MEDIA,
         dict(WELL, layers="[4, 8]", cells='cells = "tetrahedra"', degree=2, level=2)),
    ],
}


def run_point(study: str, name: str, variant: str, template: str, keys: dict) -> dict:
    with tempfile.TemporaryDirectory() as tmp:
        case = Path(tmp) / "case.toml"
        case.write_text(template.format(condition=variant or "dirichlet", **keys))
        t0 = time.perf_counter()
        proc = subprocess.run([sys.executable, "-m", "shellmodes", "run", str(case), "--out", str(Path(tmp) / "out"),
                               "-q"], cwd=ROOT, env={**os.environ, "PYTHONPATH": str(ROOT)}, capture_output=True,
                              text=True)
        wall = time.perf_counter() - t0
        if proc.returncode != 0:
            return {"study": study, "point": name, "error": proc.stderr.strip()[-300:], "wall": wall}
        data = json.loads((Path(tmp) / "out" / "spectrum.json").read_text())
    reference = exact(study, variant)
    energies = np.array([m["energy"] for m in data["modes"]])[:len(reference)]
    nonzero = np.abs(reference) > 1e-12
    rel = np.abs(energies - reference)[nonzero] / np.abs(reference[nonzero])
    zero_mode = float(np.max(np.abs(energies[~nonzero]))) if np.any(~nonzero) else 0.0
    return {"study": study, "point": name, "wall": wall, "max_rel_error": float(np.max(rel)),
            "zero_mode": zero_mode, "free_dofs": data["mesh"]["free_dofs"], "path": data["solver"]["plan"]["path"],
            "modes": len(reference), "bound_below_barrier": int(np.sum(energies < 300.0)) if study == "well" else None}


def main(argv):
    studies = argv or list(POINTS)
    load_before = os.getloadavg()
    rows = []
    for study in studies:
        for name, variant, template, keys in POINTS[study]:
            row = run_point(study, name, variant, template, keys)
            rows.append(row)
            if "error" in row:
                print(f"{study:5} {name:40} FAILED {row['error']}")
                continue
            print(f"{study:5} {name:40} {row['free_dofs']:>8} dofs  {row['wall']:6.1f} s  max rel err "
                  f"{row['max_rel_error']:.2e}  ({row['path']})", flush=True)
    for study in studies:  # ratios against the tetrahedron baseline of the same study and run
        base = [r for r in rows if r["study"] == study and r["point"].startswith("tetrahedra") and "wall" in r]
        for r in rows:
            if r["study"] == study and base and "max_rel_error" in r and "max_rel_error" in base[0]:
                match = [b for b in base if b["point"].split(",")[-1] == r["point"].split(",")[-1]] or base
                r["time_ratio_vs_tetrahedra"] = r["wall"] / match[0]["wall"]
                r["error_ratio_vs_tetrahedra"] = r["max_rel_error"] / match[0]["max_rel_error"]
    load_after = os.getloadavg()
    print(f"load average before {load_before}, after {load_after}")
    out = ROOT / "bench-out"
    out.mkdir(exist_ok=True)
    (out / "bench_balls.json").write_text(json.dumps({"rows": rows, "load_before": load_before,
                                                      "load_after": load_after}, indent=1))
    for r in rows:
        if "time_ratio_vs_tetrahedra" in r:
            print(f"{r['study']:5} {r['point']:40} time / tetrahedra {r['time_ratio_vs_tetrahedra']:.3f}, "
                  f"error / tetrahedra {r['error_ratio_vs_tetrahedra']:.2e}")


if __name__ == "__main__":
    main(sys.argv[1:])
