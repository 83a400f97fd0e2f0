"""Radial layer boundaries per medium: equal, geometric, explicit, or placed for decaying bound states.

Every medium of a prism shell or ball runs from one wall to the next; its
layers are given as increasing fractions ``0 = f_0 < f_1 < ... < f_n = 1`` of
the medium's thickness (:func:`shellmodes.fem.prisms.prism_shell`).

For a state bound in a well, the wave function decays into a barrier medium
like ``exp(-kappa d)`` with ``kappa^2 = (V_barrier - E) / c`` (``c = m0/m`` the
kinetic coefficient, E and V in eigenvalue units).  :func:`decay_fractions`
puts layers out to where the slowest-decaying level has fallen by a chosen
factor, ``d = ln(1 / factor) / kappa_min``: widths grow geometrically from
``w / kappa_max`` at the interface (the fastest decay, the deepest level) to
``w / kappa_min``, then stay there (w = q / 4 decay lengths for radial degree
q); one layer covers the rest of the medium
out to the wall.  The levels' energies come from :func:`estimate_levels`, a
fine 1-D radial solve of the same media between the walls' mean spheres.
"""

from __future__ import annotations

import numpy as np
import scipy.linalg as sla
from threadpoolctl import threadpool_limits

from shellmodes.errors import GeometryError

__all__ = ["geometric_fractions", "explicit_fractions", "decay_fractions", "estimate_levels", "auto_fractions"]

#: radial degree and layers per half-medium of the 1-D estimate (graded towards both walls, ratio 1.15)
_ESTIMATE_DEGREE, _ESTIMATE_HALF_LAYERS, _ESTIMATE_RATIO = 6, 20, 1.15
#: decay lengths per layer for radial degree q: kappa w = q / 4 (measured on cases/finite-well.toml: q = 8 puts
#: both levels within 3e-7; q = 4: 4e-5 with kappa w = 2, 6e-7 with kappa w = 1)
_DECAY_LENGTHS_PER_DEGREE = 0.25
#: growth of layer widths across a decay zone (from 2 / kappa_max to 2 / kappa_min)
_DECAY_GROWTH = 1.5


def geometric_fractions(n: int, ratio: float) -> np.ndarray:
    """Boundaries of ``n`` layers whose widths grow outward by ``ratio`` (1: equal).

    Examples
    --------
    >>> geometric_fractions(3, 2.0).round(4).tolist()
    [0.0, 0.1429, 0.4286, 1.0]
    """
    if n < 1 or not ratio > 0:
        raise GeometryError(f"need at least one layer and a positive grading ratio, got {n}, {ratio}")
    return _from_widths(float(ratio) ** np.arange(n))


def _from_widths(widths) -> np.ndarray:
    """Boundaries 0..1 from layer widths (the last exactly 1, whatever the rounding of the sum)."""
    f = np.concatenate([[0.0], np.cumsum(widths) / np.sum(widths)])
    f[-1] = 1.0
    return f


def explicit_fractions(inner: list | tuple) -> np.ndarray:
    """Boundaries from the interior ones given (strictly increasing, inside (0, 1))."""
    f = np.concatenate([[0.0], np.asarray(inner, dtype=float).reshape(-1), [1.0]])
    if np.any(np.diff(f) <= 0):
        raise GeometryError(f"layer boundaries {list(inner)} must rise strictly inside (0, 1)")
    return f


def _zone(length: float, kappa_min: float, kappa_max: float, per_layer: float) -> list[float]:
    """Layer widths covering [0, length] from the interface: per_layer/kappa_max growing to per_layer/kappa_min."""
    first, last = per_layer / kappa_max, per_layer / kappa_min
    widths, total, w = [], 0.0, first
    while total + w < length * (1 - 1e-9):
        widths.append(w)
        total += w
        w = min(last, w * _DECAY_GROWTH)
    if widths and length - total < 0.5 * widths[-1]:  # a sliver: widen the last layer instead
        widths[-1] += length - total
    else:
        widths.append(length - total)
    return widths


def decay_fractions(thickness: float, kappa_min: float, kappa_max: float, factor: float, from_inner: bool,
                    from_outer: bool, radial_degree: int = 8) -> np.ndarray:
    """Layers of a barrier medium for states decaying into it from its inner and/or outer wall.

    Each decay zone reaches ``ln(1/factor) / kappa_min`` (capped at the
    thickness, or at half of it when the state enters from both sides); the
    rest of the medium is one layer.  Layers span ``radial_degree / 4`` decay
    lengths (2 for degree 8).

    Examples
    --------
    >>> f = decay_fractions(10.0, 1.0, 4.0, 1e-4, True, False)
    >>> round(float(f[1]) * 10.0, 3), round(float(f[-2]) * 10.0, 3)  # first width 2/4 (degree 8); zone: ln(1e4)
    (0.5, 9.21)
    """
    if not (kappa_max >= kappa_min > 0 and 0 < factor < 1):
        raise GeometryError(f"need 0 < kappa_min <= kappa_max and 0 < factor < 1, got {kappa_min}, {kappa_max}, "
                            f"{factor}")
    sides = int(from_inner) + int(from_outer)
    if sides == 0:
        return np.array([0.0, 1.0])
    reach = min(np.log(1.0 / factor) / kappa_min, thickness / sides)
    zone = _zone(reach, kappa_min, kappa_max, _DECAY_LENGTHS_PER_DEGREE * radial_degree)
    middle = thickness - sides * reach
    widths = (zone if from_inner else []) + ([middle] if middle > 1e-9 * thickness else []) + \
             (zone[::-1] if from_outer else [])
    return _from_widths(widths)


def _both_ends(n_half: int, ratio: float) -> np.ndarray:
    half = geometric_fractions(n_half, ratio) * 0.5
    return np.concatenate([half, 1.0 - half[::-1][1:]])


def estimate_levels(radii, inverse_mass: dict, offsets: dict, count: int, inner_dirichlet: bool,
                    outer_dirichlet: bool, l_max: int = 40) -> np.ndarray:
    """Lowest ``count`` eigenvalues (with their 2l+1 copies) of the media between concentric spheres.

    ``radii`` are the wall radii inside out, ``None`` first for a ball.  The
    radial problems ``(A + l(l+1) B) x = lam C x`` (exact angular part) are
    solved on a fine 1-D mesh graded towards every wall, so that the estimate
    does not depend on the layers the user chose.
    """
    from shellmodes.fem.prisms import kronecker_factors, prism_shell

    media = len(radii) - 1
    fine = [_both_ends(_ESTIMATE_HALF_LAYERS, _ESTIMATE_RATIO)] * media
    disc = prism_shell(list(radii), level=0, layers_per_region=[len(f) - 1 for f in fine], degree=1,
                       radial_degree=_ESTIMATE_DEGREE, fractions=fine)
    _, _, A, B, C = kronecker_factors(disc, inverse_mass, offsets)
    nr = A.shape[0]
    fixed = ({0} if inner_dirichlet and not disc.ball else set()) | ({nr - 1} if outer_dirichlet else set())
    found: list[float] = []
    # one BLAS thread: spinning OpenBLAS threads on shared cores made these small solves 100x slower (measured)
    with threadpool_limits(limits=1):
        for l in range(l_max + 1):
            drop = fixed | ({0} if disc.ball and l > 0 else set())
            f = np.array([i for i in range(nr) if i not in drop])
            top = min(len(f), count) - 1  # no degree contributes more than count radial levels
            values = sla.eigh(A[np.ix_(f, f)] + l * (l + 1) * B[np.ix_(f, f)], C[np.ix_(f, f)], eigvals_only=True,
                              subset_by_index=[0, top])
            found.extend(np.repeat(values, 2 * l + 1).tolist())
            found.sort()
            if len(found) >= count and l > 0 and values[0] > found[count - 1]:
                break  # lam_1 grows with l: no later degree reaches the count-th level
    return np.array(found[:count])


def auto_fractions(radii, inverse_mass: dict, offsets: dict, levels: np.ndarray, factor: float,
                   base: list[np.ndarray], radial_degree: int = 8) -> list[np.ndarray]:
    """Layer boundaries per medium: decay zones in every barrier that some of ``levels`` lie below.

    A medium is a barrier for a level E when its offset exceeds E and a
    neighbouring medium's offset does not; the state enters from that
    neighbour's side.  Other media keep ``base``.
    """
    media = len(radii) - 1
    inner = [0.0 if radii[0] is None else float(radii[0])] + [float(r) for r in radii[1:]]
    out = []
    for i in range(media):
        V, c = offsets.get(i, 0.0), inverse_mass.get(i, 1.0)
        below = levels[levels < V]
        lower_in = i > 0 and bool(np.any(below > offsets.get(i - 1, 0.0)))
        lower_out = i < media - 1 and bool(np.any(below > offsets.get(i + 1, 0.0)))
        floor = min([offsets.get(j, 0.0) for j, side in ((i - 1, lower_in), (i + 1, lower_out)) if side] or [V])
        bound = below[below > floor]  # levels allowed next door and forbidden here: they decay into it
        if len(bound) == 0:
            out.append(base[i])
            continue
        kappa = np.sqrt((V - bound) / c)
        out.append(decay_fractions(inner[i + 1] - inner[i], float(kappa.min()), float(kappa.max()), factor,
                                   lower_in, lower_out, radial_degree))
    return out
