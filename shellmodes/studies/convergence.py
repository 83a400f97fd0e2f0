"""Convergence with error bars: one case solved at successive refinements.

:func:`convergence_study` solves a case at subdivisions s0, s0 + 1, ... of its
reference mesh, matches the eigenvalues of the refinements, and for each
matched group reports the observed order of convergence, a Richardson
extrapolation, an error estimate for the finest value and whether the
refinements look asymptotic.  The ``shellmodes converge`` sub-command
(:func:`add_command`) prints the table and writes ``convergence.json`` and
``convergence.csv``.

Matching.  Inside a (near-)degenerate multiplet the order of the modes is
arbitrary, and a multiplet the mesh splits at one refinement may look whole
at another.  Groups are therefore the runs of modes between multiplet
boundaries that every refinement shares; each group is represented by the
mean of its eigenvalues (the trace of the cluster, which converges at the
rate of its members), and modes beyond the shortest refinement's last shared
boundary are dropped.

Estimates.  With lam_j = lam_inf + C h_j^p on the last three refinements
(h from ``spectrum.info['mesh']['h']``), the order p solves
(l1 - l2) / (l2 - l3) = (h1^p - h2^p) / (h2^p - h3^p), which for a constant
ratio h1/h2 = h2/h3 is p = log(|l1 - l2| / |l2 - l3|) / log(h1/h2); then
lam_inf = l3 + (l3 - l2) / ((h2/h3)^p - 1) (Richardson 1911).

Error bars (:func:`error_bar`).  |lam_inf - l3| alone is no bound: orders
observed above the asymptotic one make it too small (measured: it bracketed
the true error for 44 % of levels).  The bar is Roache's grid convergence
index, GCI = Fs |l3 - l2| / (r^p - 1) with r = h2/h3 (Roache, J. Fluids Eng.
116 (1994) 405; *Verification and Validation in Computational Science and
Engineering*, 1998, ch. 5): safety factor Fs = 1.25 where the observed order is
verified, i.e. lies within the window around the expected range and, with four
or more refinements, agrees with the order of the previous three solves
(stable); there p is the observed order capped at the top of the expected
range, so a pre-asymptotic order above it cannot shrink the bar.  An order
above the window (flagged ``order-high``) takes the top expected order, with
Fs = 1.25 when the previous three solves were above it too.  Otherwise Fs = 3
with the lowest expected order (Roache's rule for an unverified order) and the
row is flagged: ``status`` says whether the order was off, unstable or missing.
Measured on the sphere, a spheroid, a torus, a 120-degree cap and a ball at
degrees 1 and 2 (``benchmarks/bench_errorbars.py``, 291 runs of three or four
solves): the bar brackets the true error in every run, within 10x of it in
94.5 % (1.2-1.4x where the order is verified; up to 15x on flagged,
pre-asymptotic coarse meshes).
"""

from __future__ import annotations

import csv
import io
import json
import logging
import math
import time
import warnings
from collections.abc import Callable
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np

from shellmodes.case.model import build_shape, energy_scale
from shellmodes.case.schema import Case, case_from_dict
from shellmodes.errors import CaseError, DoubtfulResultWarning
from shellmodes.limits import CONVERGE_MAX_SUBDIVISIONS, MAX_SUBDIVISIONS
from shellmodes.pipeline import run_case
from shellmodes.spectrum.multiplets import Spectrum

__all__ = ["ConvergenceStudy", "ConvergenceRow", "Refinement", "convergence_study", "expected_order",
           "order_range", "observed_order_three", "extrapolate", "shared_groups", "write_study"]

log = logging.getLogger(__name__)

#: an observed order outside [(1 - w) low, (1 + w) high] of :func:`order_range` is not asymptotic
DEFAULT_ORDER_WINDOW = 0.35
#: successive changes below this (relative) are rounding noise, not discretisation error
_ROUNDING = 1e-11
#: a group with |lam| below this fraction of the largest |lam| is a zero mode
_ZERO = 1e-8
#: Roache's safety factors: three or more solves with a verified order; an unverified order
SAFETY_VERIFIED = 1.25
SAFETY_UNVERIFIED = 3.0
#: with four or more solves, the last two observed orders must agree within this fraction of the
#: lowest expected order for the order to count as stable
ORDER_STABILITY = 0.15


def expected_order(degree: int, geometry_degree: int | None = None, exact_geometry: bool = True) -> float | None:
    """Guaranteed eigenvalue convergence rate of curved degree-k surface elements.

    The discretisation error is O(h^2k) and the geometry error O(h^(g+1)) for
    geometry degree g, O(h^(g+2)) for even g (a superconvergent cancellation);
    the rate is the smaller of the two.  Measured on the unit sphere
    (tests/test_surface.py): 2, 4, 4, 6 for isoparametric k = 1..4 and 6 for
    k = 3 on degree-4 geometry.  Without an exact geometry (an imported mesh
    with no snap target) the limit depends on the mesh: None.

    References
    ----------
    Dziuk 1988; Demlow, SIAM J. Numer. Anal. 47 (2009) 805; Bonito, Demlow and
    Owen, SIAM J. Numer. Anal. 56 (2018).

    Examples
    --------
    >>> [expected_order(k) for k in (1, 2, 3, 4)], expected_order(3, 4)
    ([2.0, 4.0, 4.0, 6.0], 6.0)
    """
    if not exact_geometry:
        return None
    g = degree if geometry_degree is None else geometry_degree
    geometric = g + 1 if g % 2 else g + 2
    return float(min(2 * degree, geometric))


def order_range(degree: int, geometry_degree: int | None = None,
                exact_geometry: bool = True) -> tuple[float, float] | None:
    """Observed orders to expect: from :func:`expected_order` up to 2k.

    The geometry bound is reached on the sphere, but where the geometry error
    is orthogonal to a mode it does not show: the hemisphere was measured at
    7.6-8.0 for k = 4 and a 120-degree cap at ~5 for k = 3, nearer 2k.

    Examples
    --------
    >>> order_range(1), order_range(3)
    ((2.0, 2.0), (4.0, 6.0))
    """
    low = expected_order(degree, geometry_degree, exact_geometry)
    return None if low is None else (low, float(2 * degree))


def observed_order_three(lam, h) -> float:
    """Order p of lam_j = lam_inf + C h_j^p through three values (coarse to fine).

    Returns NaN when the changes do not shrink or change sign (no such p > 0).

    Examples
    --------
    >>> round(observed_order_three([1 + 0.5**2, 1 + 0.25**2, 1 + 0.125**2], [0.5, 0.25, 0.125]), 12)
    2.0
    """
    l1, l2, l3 = (float(v) for v in lam)
    h1, h2, h3 = (float(v) for v in h)
    d12, d23 = l1 - l2, l2 - l3
    if d12 == 0 or d23 == 0 or np.sign(d12) != np.sign(d23) or abs(d23) >= abs(d12):
        return float("nan")
    target = math.log(d12 / d23)

    def mismatch(p):
        return math.log((h1**p - h2**p) / (h2**p - h3**p)) - target

    lo, hi = 1e-3, 40.0
    try:
        if mismatch(lo) * mismatch(hi) < 0:
            from scipy.optimize import brentq

            return float(brentq(mismatch, lo, hi, xtol=1e-12))
    except (OverflowError, ZeroDivisionError, ValueError):
        pass
    return float(target / math.log(h2 / h3))


def shared_groups(boundaries: list[list[int]], lengths: list[int]) -> list[tuple[int, int]]:
    """Runs [start, stop) of modes between multiplet boundaries all refinements share.

    ``boundaries[j]`` holds the first mode index of each multiplet of
    refinement j and ``lengths[j]`` its number of modes.

    Examples
    --------
    >>> shared_groups([[0, 1, 4], [0, 1, 3, 4]], [9, 8])
    [(0, 1), (1, 4)]
    """
    if len(boundaries) != len(lengths):
        raise ValueError(f"{len(boundaries)} boundary lists for {len(lengths)} refinements")
    common = set.intersection(*({*b, n} for b, n in zip(boundaries, lengths)))
    cuts = sorted(c for c in common if c <= min(lengths))
    return list(zip(cuts[:-1], cuts[1:]))


def extrapolate(lam, h, p: float) -> float:
    """Richardson value lam_inf = l3 + (l3 - l2) / ((h2/h3)^p - 1) from the last two of ``lam``.

    Exact when lam_j = lam_inf + C h_j^p.

    References
    ----------
    Richardson, Phil. Trans. R. Soc. A 210 (1911) 307.

    Examples
    --------
    >>> h = [0.4, 0.2]
    >>> round(extrapolate([5 + 0.3 * x**2 for x in h], h, 2.0), 12)
    5.0
    """
    l2, l3 = (float(v) for v in lam[-2:])
    h2, h3 = (float(v) for v in h[-2:])
    return l3 + (l3 - l2) / ((h2 / h3) ** p - 1.0)


@dataclass(frozen=True, eq=False)
class Refinement:
    """One solve of the study (eigenvalues lam in 1/length^2, ascending)."""

    subdivisions: int
    h: float
    dofs: int
    eigenvalues: np.ndarray = field(repr=False)
    seconds: float

    def as_dict(self) -> dict:
        return {"subdivisions": self.subdivisions, "h": self.h, "dofs": self.dofs, "seconds": self.seconds,
                "modes": int(len(self.eigenvalues))}


@dataclass(frozen=True)
class ConvergenceRow:
    """Estimates for one group of modes (a multiplet shared by every refinement).

    ``values`` are the group-mean eigenvalues per refinement (coarse to fine);
    ``error`` estimates |lam_exact - finest|; energies are in the case's unit.
    ``relative_error`` is error / |extrapolated|, or error / (largest |lam|
    of the study) for a zero mode.  ``reached_at`` is the first subdivisions
    whose estimate met the tolerance.
    """

    index: int
    modes: tuple[int, ...]
    l: int | None
    values: tuple[float, ...]
    finest: float
    extrapolated: float
    error: float
    order: float
    asymptotic: bool
    energy: float
    energy_extrapolated: float
    energy_error: float
    relative_error: float
    reached_at: int | None = None
    #: the order observed on the three solves before the last (NaN with three solves)
    previous_order: float = float("nan")
    #: Roache's safety factor in the error bar (1.25 verified order, 3 not)
    safety_factor: float = 1.25
    #: asymptotic, order-off, order-unstable, zero-mode or rounding (see :func:`error_bar`)
    status: str = "asymptotic"

    @property
    def size(self) -> int:
        return len(self.modes)

    def as_dict(self) -> dict:
        return {"index": self.index, "modes": list(self.modes), "size": self.size, "l": self.l,
                "eigenvalues": list(self.values), "eigenvalue": self.finest, "extrapolated": self.extrapolated,
                "error": self.error, "relative_error": _finite(self.relative_error), "order": _finite(self.order),
                "previous_order": _finite(self.previous_order), "safety_factor": self.safety_factor,
                "status": self.status, "asymptotic": self.asymptotic, "energy": self.energy,
                "energy_extrapolated": self.energy_extrapolated, "energy_error": self.energy_error,
                "tolerance_met_at_subdivisions": self.reached_at}


@dataclass(frozen=True, eq=False)
class ConvergenceStudy:
    """A case solved at successive refinements, with per-multiplet error bars.

    Attributes
    ----------
    refinements : tuple of Refinement
        One record per solve (subdivisions, dofs, h).
    rows : tuple of ConvergenceRow
        One row per multiplet: eigenvalues per refinement, observed order, extrapolated value
        and error estimate.
    degree, geometry_degree : int
        Element and geometry degrees; ``expected_order``/``order_range`` the rates they allow.
    tolerance : float or None
        The relative error asked for; ``reached`` is the coarsest subdivisions at which every
        row's estimate met it (None if not reached or no tolerance was asked for).
    energy_unit : str
        Unit of the energy columns; ``energy_per_lambda`` converts eigenvalues.
    """

    source: str
    degree: int
    geometry_degree: int
    expected_order: float | None
    order_range: tuple[float, float] | None
    refinements: tuple[Refinement, ...]
    rows: tuple[ConvergenceRow, ...]
    energy_unit: str
    energy_per_lambda: float | None
    tolerance: float | None = None
    reached: int | None = None
    warnings: tuple[str, ...] = ()
    #: the case as given (its coarsest resolution), for the record and to match run folders
    case: dict = field(default_factory=dict, repr=False)

    @property
    def tolerance_reached(self) -> bool | None:
        return None if self.tolerance is None else self.reached is not None

    @property
    def subdivisions(self) -> tuple[int, ...]:
        return tuple(r.subdivisions for r in self.refinements)

    def as_dict(self) -> dict:
        return {"source": self.source, "degree": self.degree, "geometry_degree": self.geometry_degree,
                "expected_order": self.expected_order,
                "order_range": None if self.order_range is None else list(self.order_range),
                "units": {"energy": self.energy_unit, "energy_per_lambda": self.energy_per_lambda},
                "tolerance": self.tolerance, "tolerance_reached": self.tolerance_reached, "reached": self.reached,
                "refinements": [r.as_dict() for r in self.refinements], "rows": [r.as_dict() for r in self.rows],
                "warnings": list(self.warnings), "case": self.case}

    def error_heading(self) -> str:
        """What the terminal's error column is: the CSV column it matches and its unit."""
        if self.energy_per_lambda is None:
            return "error [eigenvalue, 1/length^2]"
        return f"energy_error [{self.energy_unit}]"

    def table(self, max_rows: int = 40) -> str:
        """A compact terminal table, one line per row; the error column is the CSV's of the same name."""
        unit = self.energy_unit
        err_head = self.error_heading()
        head = (f"{'#':>3} {'size':>4} {'l':>3} {'finest [' + unit + ']':>18} {'extrapolated':>18} "
                f"{err_head:>{max(12, len(err_head))}} {'order':>6} {'Fs':>5} {'status':>14}")
        lines = [head, "-" * len(head)]
        for r in self.rows[:max_rows]:
            order = "-" if math.isnan(r.order) else f"{r.order:.2f}"
            lines.append(f"{r.index:>3} {r.size:>4} {'-' if r.l is None else r.l:>3} {r.energy:>18.10g} "
                         f"{r.energy_extrapolated:>18.10g} {r.energy_error:>{max(12, len(err_head))}.2e} "
                         f"{order:>6} {r.safety_factor:>5.2f} {r.status:>14}")
        if len(self.rows) > max_rows:
            lines.append(f"... {len(self.rows) - max_rows} more rows in convergence.csv")
        lines.append(f"{err_head.split(' [')[0]}: error bar of the finest value, Fs |l3 - l2| / (r^p - 1) "
                     "(Roache's grid convergence index; Fs 1.25 for a verified order, 3 otherwise)")
        return "\n".join(lines)

    def __repr__(self):
        errs = [r.relative_error for r in self.rows]
        orders = [r.order for r in self.rows if math.isfinite(r.order)]
        span = f"{min(orders):.2f}..{max(orders):.2f}" if orders else "-"
        tol = "" if self.tolerance is None else f", tolerance={self.tolerance:g} reached={self.reached}"
        return (f"ConvergenceStudy(degree={self.degree}, subdivisions={list(self.subdivisions)}, "
                f"dofs={[r.dofs for r in self.refinements]}, rows={len(self.rows)}, "
                f"order={span} (expected {range_text(self.order_range)}), "
                f"max_rel_error={max(errs) if errs else float('nan'):.1e}, "
                f"asymptotic={sum(r.asymptotic for r in self.rows)}/{len(self.rows)}{tol})")


def range_text(bounds) -> str:
    if bounds is None:
        return "unknown"
    low, high = bounds
    return f"{low:g}" if low == high else f"{low:g}..{high:g}"


def _finite(x):
    return None if x is None or not math.isfinite(x) else float(x)


def _start_subdivisions(case: Case, shape) -> tuple[int, str]:
    # the same choice as discretisation.discretise makes for a single solve
    from shellmodes.case.model import subdivision_level

    res = case.resolution
    key = ("resolution.edge_length" if res.edge_length is not None else
           "resolution.subdivisions" if res.subdivisions is not None else "resolution")
    return subdivision_level(case, shape), key


def _at_subdivisions(case: Case, subdivisions: int, start: int | None = None) -> Case:
    """The case at ``subdivisions``; a shell's radial layers double with each level above ``start``."""
    data = case.model_dump(mode="json")
    data["resolution"] = {**data["resolution"], "subdivisions": subdivisions, "edge_length": None}
    if data.get("shell") is not None and start is not None and data["shell"].get("file") is None:
        factor = 2 ** (subdivisions - start)
        layers = data["shell"]["layers"]
        data["shell"]["layers"] = layers * factor if isinstance(layers, int) else [n * factor for n in layers]
    return case_from_dict(data, case.source)


def _shell_orders(case: Case):
    """(expected order, range) for a shell: tetrahedra as isoparametric elements of their degree;
    prisms as the lower of the triangle and radial degrees on walls interpolated at the geometry degree."""
    res, shell = case.resolution, case.shell
    if shell.cells == "prisms":
        k = min(res.degree, shell.radial_degree or res.degree)
        return expected_order(k, res.geometry_degree, True), order_range(k, res.geometry_degree, True)
    return expected_order(res.degree, None, True), order_range(res.degree, None, True)


@dataclass(frozen=True)
class Estimate:
    """The estimates of one row: see :func:`error_bar`."""

    extrapolated: float
    error: float
    order: float
    previous_order: float
    safety_factor: float
    status: str

    @property
    def asymptotic(self) -> bool:
        return self.status in ("asymptotic", "zero-mode", "rounding")


def error_bar(lam, h, bounds, window: float = DEFAULT_ORDER_WINDOW, scale: float = 1.0) -> Estimate:
    """Richardson value and grid-convergence-index error bar of the finest of ``lam`` (coarse to fine).

    ``status`` is ``asymptotic`` (order within the window and, with four or
    more values, stable: Fs = 1.25), ``order-high`` (above the window: the bar
    uses the top expected order, Fs = 1.25 when the previous three values were
    above it too, else 3), ``order-off`` (below the window or no order),
    ``order-unstable`` (the last two observed orders differ by more than
    :data:`ORDER_STABILITY` of the lowest expected order), both with
    Fs = 3 at the lowest expected order; ``zero-mode`` or ``rounding`` when
    the changes are at rounding level.

    References
    ----------
    Roache, J. Fluids Eng. 116 (1994) 405 (GCI, Fs = 3 for two grids or an
    unverified order, 1.25 for three or more with a verified order).

    Examples
    --------
    >>> h = [0.4, 0.2, 0.1]
    >>> e = error_bar([2 + x**2 for x in h], h, (2.0, 2.0))
    >>> round(e.extrapolated, 12), round(e.error / 0.01, 12), e.status
    (2.0, 1.25, 'asymptotic')
    """
    lam = [float(v) for v in lam]
    l2, l3 = lam[-2:]
    d23 = l2 - l3
    changes = [abs(a - b) for a, b in zip(lam[-3:-1], lam[-2:])]
    if abs(l3) <= _ZERO * scale or max(changes) <= _ROUNDING * abs(l3):
        # a zero mode (constants are reproduced exactly) or changes at rounding level
        return Estimate(l3, max(changes), float("nan"), float("nan"), 1.0,
                        "zero-mode" if abs(l3) <= _ZERO * scale else "rounding")
    p = observed_order_three(lam[-3:], h[-3:])
    previous = observed_order_three(lam[-4:-1], h[-4:-1]) if len(lam) >= 4 else float("nan")
    low, high = bounds if bounds is not None else (1.0, float("inf"))
    r = float(h[-2]) / float(h[-1])
    if bounds is not None and math.isfinite(p) and p > (1 + window) * high:
        # faster than expected: a bar at the top expected order over-covers a true faster rate;
        # Fs = 1.25 only when the previous three solves were above that order too (stable)
        status = "order-high"
    elif not (math.isfinite(p) and (bounds is None or (1 - window) * low <= p <= (1 + window) * high)):
        status = "order-off"
    elif len(lam) >= 4 and not (math.isfinite(previous) and abs(p - previous) <= ORDER_STABILITY * low):
        status = "order-unstable"
    else:
        status = "asymptotic"
    if status == "asymptotic":
        extrapolated = extrapolate(lam, h, p)
        factor, rate = SAFETY_VERIFIED, min(p, high)
    elif status == "order-high":
        extrapolated = extrapolate(lam, h, high)
        stable = math.isfinite(previous) and previous >= high
        factor, rate = (SAFETY_VERIFIED if stable else SAFETY_UNVERIFIED), high
    else:
        # extrapolate at the theoretical rate; the bar at least the last change
        extrapolated = extrapolate(lam, h, low)
        factor, rate = SAFETY_UNVERIFIED, low
    error = factor * abs(d23) / (r**rate - 1.0)
    if status != "asymptotic":
        error = max(error, abs(d23))
    return Estimate(float(extrapolated), float(error), float(p), float(previous), factor, status)


def _size(lam, scale):
    return abs(lam) if abs(lam) > _ZERO * scale else scale  # zero modes: absolute, on the spectrum's scale


def convergence_study(case: Case, refinements: int = 3, tolerance: float | None = None,
                      max_subdivisions: int = CONVERGE_MAX_SUBDIVISIONS,
                      progress: Callable[[int, Spectrum], None] | None = None,
                      order_window: float = DEFAULT_ORDER_WINDOW) -> ConvergenceStudy:
    """Solve ``case`` at successive refinements and estimate each eigenvalue's error.

    Parameters
    ----------
    case : Case
        The case; its resolution gives the coarsest refinement s0 (an
        ``edge_length`` is converted to subdivisions by the shape).
    refinements : int
        Number of refinements s0, s0 + 1, ... (at least 3: an order needs three).
    tolerance : float, optional
        Relative error wanted: every row asymptotic with estimate <= tolerance
        * |lam| (zero modes: tolerance * the largest |lam|).  Refinement
        continues past ``refinements`` until it is met or ``max_subdivisions``
        is reached; then a :class:`DoubtfulResultWarning` says so and the
        finest estimates are reported.
    max_subdivisions : int
        Finest subdivisions the study may solve (at most 9, the schema's limit).
    progress : callable, optional
        ``progress(subdivisions, spectrum)`` after each solve (the CLI's bar).
    order_window : float
        Relative distance outside :func:`order_range` beyond which an observed
        order marks a row as not asymptotic.

    Returns
    -------
    ConvergenceStudy

    Raises
    ------
    CaseError
        Fewer than 3 refinements, a tolerance <= 0, or more subdivisions
        than allowed.

    References
    ----------
    Richardson, Phil. Trans. R. Soc. A 210 (1911) 307; Roache 1998, ch. 5.

    Examples
    --------
    >>> study = convergence_study(case_from_dict({"surface": {"shape": "sphere"},
    ...     "resolution": {"degree": 1, "subdivisions": 1}, "modes": {"count": 4}}))
    >>> [round(r.order, 1) for r in study.rows[1:]], round(study.rows[1].extrapolated, 3)
    ([2.2], 2.002)
    """
    source = case.source
    if isinstance(refinements, bool) or not isinstance(refinements, int) or refinements < 3:
        raise CaseError(f"value {refinements!r}: need an integer of at least 3 (an order needs three "
                        "solves)", source, "refinements")
    if tolerance is not None and not (math.isfinite(tolerance) and tolerance > 0):
        raise CaseError(f"value {tolerance!r}: need a relative error > 0, e.g. 1e-6", source, "tolerance")
    if not isinstance(max_subdivisions, int) or not 0 <= max_subdivisions <= MAX_SUBDIVISIONS:
        raise CaseError(f"value {max_subdivisions!r}: allowed 0..{MAX_SUBDIVISIONS}", source,
                        "max_subdivisions")
    if case.shell is not None:
        from shellmodes.case.model import shell_level

        shape = None
        s0 = shell_level(case)
        key = "resolution.edge_length" if case.resolution.edge_length is not None else "resolution.subdivisions"
        max_subdivisions = min(max_subdivisions, 8 if case.shell.cells == "prisms" else 7)
    else:
        shape = build_shape(case)
        s0, key = _start_subdivisions(case, shape)
    if s0 + refinements - 1 > max_subdivisions:
        given = case.resolution.edge_length if key == "resolution.edge_length" else s0
        raise CaseError(f"value {given!r}: {refinements} refinements from subdivisions {s0} need "
                        f"{s0 + refinements - 1}, more than the allowed {max_subdivisions}; start coarser or "
                        "ask for fewer refinements", source, key)
    e0, _ = energy_scale(case, shape)
    if shape is None:
        p_expected, bounds = _shell_orders(case)
    else:
        exact = not (shape.name == "mesh" and shape.snap_shape is None)
        p_expected = expected_order(case.resolution.degree, case.resolution.geometry_degree, exact)
        bounds = order_range(case.resolution.degree, case.resolution.geometry_degree, exact)
    done: list[Refinement] = []
    boundaries, labels = [], []
    notes: list[str] = []
    rows: list[ConvergenceRow] = []
    reached = None
    reached_at: dict = {}
    s = s0
    while True:
        t0 = time.perf_counter()
        spectrum = run_case(_at_subdivisions(case, s, s0))
        mesh = spectrum.info["mesh"]
        done.append(Refinement(subdivisions=s, h=float(mesh["h"]), dofs=int(mesh["dofs"]),
                               eigenvalues=np.array(spectrum.eigenvalues, dtype=float),
                               seconds=time.perf_counter() - t0))
        boundaries.append([m.members[0] for m in spectrum.multiplets])
        labels.append({m.members[0]: (m.members[-1] + 1, m.l) for m in spectrum.multiplets})
        log.info("converge: subdivisions %d, %d dofs, h = %.4g", s, mesh["dofs"], mesh["h"])
        if progress is not None:
            progress(s, spectrum)
        del spectrum
        if len(done) >= 3:
            rows = _rows(done, boundaries, labels[-1], p_expected, bounds, order_window, e0)
            if tolerance is not None:
                for r in rows:
                    if r.modes not in reached_at and r.asymptotic and r.relative_error <= tolerance:
                        reached_at[r.modes] = s
                if reached is None and rows and all(r.modes in reached_at for r in rows):
                    reached = s
        if len(done) >= refinements and (tolerance is None or reached is not None or s >= max_subdivisions):
            break
        s += 1
    if tolerance is not None:
        rows = [_with_reached(r, reached_at.get(r.modes)) for r in rows]
        if reached is None:
            missing = sum(1 for r in rows if r.reached_at is None)
            text = (f"{source}: relative tolerance {tolerance:g} not reached by subdivisions {s} "
                    f"(the limit); {missing} of {len(rows)} rows short, reporting the finest estimates")
            notes.append(text)
            warnings.warn(text, DoubtfulResultWarning, stacklevel=2)
    if not rows:
        text = (f"{source}: no multiplet is complete at every refinement, so nothing can be estimated; "
                "ask for more modes (modes.count)")
        notes.append(text)
        warnings.warn(text, DoubtfulResultWarning, stacklevel=2)
    doubtful = [r.index for r in rows if not r.asymptotic]
    if doubtful:
        text = (f"{source}: rows {doubtful} are not in the asymptotic range (order far from "
                f"{range_text(bounds)}, unstable between the last refinements, or changes not shrinking); "
                "their error bars use safety factor 3 at the expected order: start finer or refine further "
                "before trusting them")
        notes.append(text)
        warnings.warn(text, DoubtfulResultWarning, stacklevel=2)
    return ConvergenceStudy(source=source, degree=case.resolution.degree,
                            geometry_degree=case.resolution.geometry_degree or case.resolution.degree,
                            expected_order=p_expected, order_range=bounds, refinements=tuple(done), rows=tuple(rows),
                            energy_unit=case.units.energy, energy_per_lambda=e0, tolerance=tolerance,
                            reached=reached, warnings=tuple(notes), case=case.model_dump(mode="json"))


def _with_reached(row: ConvergenceRow, at) -> ConvergenceRow:
    return replace(row, reached_at=at)


def _rows(done, boundaries, finest_labels, p_expected, bounds, window, e0) -> list[ConvergenceRow]:
    lengths = [len(r.eigenvalues) for r in done]
    groups = shared_groups(boundaries, lengths)
    h = [r.h for r in done]
    means = [[float(np.mean(r.eigenvalues[a:b])) for r in done] for a, b in groups]
    scale = max((abs(m[-1]) for m in means), default=1.0) or 1.0
    factor = 1.0 if e0 is None else e0
    rows = []
    for i, ((a, b), lam) in enumerate(zip(groups, means)):
        est = error_bar(lam, h, bounds, window, scale)
        extrapolated, error, p, asymptotic = est.extrapolated, est.error, est.order, est.asymptotic
        ls = {l for start, (stop, l) in finest_labels.items() if a <= start < b}
        rows.append(ConvergenceRow(index=i, modes=tuple(range(a, b)), l=ls.pop() if len(ls) == 1 else None,
                                   values=tuple(lam), finest=lam[-1], extrapolated=float(extrapolated),
                                   error=float(error), order=float(p), asymptotic=bool(asymptotic),
                                   energy=lam[-1] * factor, energy_extrapolated=float(extrapolated) * factor,
                                   energy_error=float(error) * abs(factor),
                                   relative_error=float(error) / _size(extrapolated, scale),
                                   previous_order=est.previous_order, safety_factor=est.safety_factor,
                                   status=est.status))
    return rows


# ----------------------------------------------------------------------------- files and command line
_CSV_FIELDS = ["index", "size", "l", "eigenvalue", "extrapolated", "error", "relative_error", "order",
               "previous_order", "safety_factor", "status", "asymptotic", "energy", "energy_extrapolated",
               "energy_error", "tolerance_met_at_subdivisions", "modes"]


def write_study(study: ConvergenceStudy, folder) -> Path:
    """Write ``convergence.json`` and ``convergence.csv`` into ``folder`` (all or nothing)."""
    from shellmodes.io.outputs import atomic_directory
    from shellmodes.spectrum.tables import csv_cell

    buf = io.StringIO()
    writer = csv.DictWriter(buf, fieldnames=_CSV_FIELDS, lineterminator="\n")
    writer.writeheader()
    for row in study.rows:
        d = row.as_dict()
        writer.writerow({k: " ".join(map(str, d[k])) if k == "modes" and d[k] is not None else csv_cell(d[k])
                         for k in _CSV_FIELDS})
    with atomic_directory(folder) as tmp:
        (tmp / "convergence.json").write_text(json.dumps(study.as_dict(), indent=2) + "\n")
        (tmp / "convergence.csv").write_text(buf.getvalue())
    return Path(folder)
