"""Store or compare the eigenvalues of every demo case and every ``shellmodes check`` value.

A refactoring must not change results: ``--write`` stores the table (made before the change),
the default compares against it and exits 1 on any relative difference above ``--rtol``
(default 1e-12).  Sweep cases are skipped (their steps are ordinary cases).

    python3 benchmarks/eigenvalue_baseline.py --write     # before
    python3 benchmarks/eigenvalue_baseline.py             # after
"""

from __future__ import annotations

import argparse
import json
import sys
import warnings
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
TABLE = ROOT / "tests" / "data" / "eigenvalue_baseline.json"


def current(only: str | None = None) -> dict:
    from shellmodes import load_case, run_case
    from shellmodes.studies.checks import run_checks

    out = {"cases": {}, "checks": {}}
    for path in sorted((ROOT / "cases").glob("*.toml")):
        if only and only not in path.name:
            continue
        case = load_case(path)
        if getattr(case, "sweep", None) is not None:
            continue
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            out["cases"][path.name] = run_case(case).eigenvalues.tolist()
    if not only:
        for result in run_checks():
            out["checks"][result.name] = {"value": result.value, "error": result.error}
    return out


def _relative(a, b) -> float:
    """Largest |a - b| / |a| (NaN where both are NaN counts as equal).

    A zero eigenvalue (constant mode of a free wall) comes out as round-off of
    order 1e-14 that changes with the factorization's ordering, so values
    below 1e-9 of the largest one are compared relative to the largest.
    """
    a, b = np.atleast_1d(np.asarray(a, dtype=float)), np.atleast_1d(np.asarray(b, dtype=float))
    both_nan = np.isnan(a) & np.isnan(b)
    largest = np.max(np.abs(a), initial=0.0)
    scale = np.where(np.abs(a) < 1e-9 * largest, largest, np.abs(a))
    diff = np.where(both_nan, 0.0, np.abs(a - b) / np.where(scale > 0, scale, 1.0))
    return float(np.max(diff, initial=0.0))


def compare(stored: dict, now: dict, rtol: float) -> list[str]:
    """Eigenvalues and check values relative to ``rtol``; check errors (relative already) absolutely."""
    bad = []
    for name, row in now["checks"].items():
        if name not in stored["checks"]:
            bad.append(f"checks/{name}: not in the stored table")
            continue
        old = stored["checks"][name]
        diff = max(_relative(old["value"], row["value"]),
                   0.0 if np.isnan(old["error"]) and np.isnan(row["error"]) else abs(old["error"] - row["error"]))
        if not diff <= rtol:
            bad.append(f"checks/{name}: difference {diff:.3g} > {rtol:.0e}")
    for group in ("cases",):
        for name, values in now[group].items():
            if name not in stored[group]:
                bad.append(f"{group}/{name}: not in the stored table")
                continue
            a, b = np.atleast_1d(stored[group][name]), np.atleast_1d(values)
            if a.shape != b.shape:
                bad.append(f"{group}/{name}: {a.shape} values stored, {b.shape} now")
                continue
            diff = _relative(a, b)
            if not diff <= rtol:
                bad.append(f"{group}/{name}: largest relative difference {diff:.3g} > {rtol:.0e}")
    return bad


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--write", action="store_true", help="store the current values as the baseline")
    parser.add_argument("--rtol", type=float, default=1e-12)
    parser.add_argument("--only", help="cases whose file name contains this (checks skipped)")
    args = parser.parse_args(argv)
    now = current(args.only)
    if args.write:
        TABLE.parent.mkdir(parents=True, exist_ok=True)
        TABLE.write_text(json.dumps(now, indent=1) + "\n")
        print(f"wrote {TABLE} ({len(now['cases'])} cases, {len(now['checks'])} checks)")
        return 0
    bad = compare(json.loads(TABLE.read_text()), now, args.rtol)
    for line in bad:
        print(line)
    print(f"{len(now['cases'])} cases, {len(now['checks'])} checks compared: "
          f"{'all within' if not bad else str(len(bad)) + ' beyond'} rtol {args.rtol:.0e}")
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main())
