"""Radial layers of a prism shell or ball from its case: counts, grading, explicit boundaries, bound-state decay.

The numerics live in :mod:`shellmodes.fem.grading`; this module reads the
``[shell]`` keys ``layers``, ``grading``, ``layer_boundaries`` and ``decay``.
"""

from __future__ import annotations

import logging
from types import SimpleNamespace

import numpy as np

from shellmodes.case.schema import Case
from shellmodes.limits import AUTO_LAYER_LEVELS

__all__ = ["case_fractions"]

log = logging.getLogger(__name__)


def case_fractions(case: Case, functions: list, e0) -> list[np.ndarray] | None:
    """Layer boundaries (fractions 0..1) of every medium, or None for equal layers everywhere.

    ``functions`` are the wall radius functions inside out (``None`` first for
    a ball); ``e0`` the case's energy scale (offsets are in units.energy).
    """
    from shellmodes.case.model import EnergyScale, dirichlet_walls
    from shellmodes.case.model import media as case_media
    from shellmodes.fem.grading import auto_fractions, estimate_levels, explicit_fractions, geometric_fractions
    from shellmodes.shapes.reference import icosphere

    shell = case.shell
    media = len(functions) - 1
    if shell.grading is None and shell.layer_boundaries is None and shell.decay is None:
        return None
    layers = [shell.layers] * media if isinstance(shell.layers, int) else list(shell.layers)
    grading = shell.grading if isinstance(shell.grading, tuple) else [shell.grading or 1.0] * media
    given = shell.layer_boundaries or [()] * media
    base = [explicit_fractions(given[i]) if len(given[i]) else geometric_fractions(layers[i], grading[i])
            for i in range(media)]
    if shell.decay is None:
        return base
    directions, _ = icosphere(3)
    radii = [None if f is None else float(np.mean(f(directions))) for f in functions]
    found = case_media(case, SimpleNamespace(region_ids=list(range(media))), EnergyScale(e0, ""))
    inverse_mass, offsets = found.inverse_mass, found.offsets
    dirichlet = dirichlet_walls(case)
    count = case.modes.count or AUTO_LAYER_LEVELS
    levels = estimate_levels(radii, inverse_mass, offsets, count, "inner" in dirichlet, "outer" in dirichlet)
    if case.modes.below is not None:
        below = case.modes.below / e0 if e0 is not None else case.modes.below
        levels = levels[levels < below]
    q = shell.radial_degree or case.resolution.degree
    out = auto_fractions(radii, inverse_mass, offsets, levels, shell.decay, base, radial_degree=q)
    log.info("automatic layers (decay %g): %s; estimated levels %s", shell.decay,
             [len(f) - 1 for f in out], np.array2string(levels[:8], precision=6))
    return out


def coarse_barrier_warnings(disc, lam: np.ndarray, inverse_mass: dict, offsets: dict) -> list[str]:
    """Messages for levels whose decay into a barrier medium its layers cannot follow.

    A level lam below a medium's offset V, and above a neighbour's, decays into
    the medium like exp(-kappa d), kappa^2 = (V - lam) / c.  When the layer next
    to that neighbour spans more than ``max(2, radial_degree / 2)`` decay
    lengths (at least twice what ``shell.decay`` would choose), the level is
    likely too high and a weakly bound one may even be pushed above the
    barrier.  (Measured: 63 decay lengths left a 1s level 29 % high and a 1p
    level unbound; 3.2 at radial degree 8 still gave 2e-7.)
    """
    if not hasattr(disc, "radial_elements") or not len(lam):
        return []
    media = len(disc.wall_values) - 1
    radii = disc.wall_values.mean(axis=1)
    out = []
    for i in range(media):
        V, c = offsets.get(i, 0.0), inverse_mass.get(i, 1.0)
        layers = disc.radial_elements[disc.layer_region == i]
        widths = (disc.tau[layers[:, -1]] - disc.tau[layers[:, 0]]) * (radii[i + 1] - radii[i])
        for j, width in ((i - 1, widths[0]), (i + 1, widths[-1])):
            if not 0 <= j < media:
                continue
            inside = lam[(lam < V) & (lam > offsets.get(j, 0.0))]
            if not len(inside):
                continue
            kappa = float(np.sqrt((V - inside.min()) / c))
            most = max(2.0, disc.radial_degree / 2)
            if kappa * width > most:
                out.append(f"the layer of medium {i} next to medium {j} spans {kappa * width:.3g} decay lengths of "
                           f"a level bound below its offset (at most {most:g} for radial degree "
                           f"{disc.radial_degree}): that level is likely too high, and a weakly bound one may be "
                           "missing; set shell.decay (e.g. 1e-8) or more layers")
                break
    return out
