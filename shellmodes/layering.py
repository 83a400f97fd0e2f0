"""Radial layers of a prism shell or ball from its case: counts, grading, explicit boundaries, bound-state decay.

The numerics live in :mod:`shellmodes.volume.grading`; this module reads the
``[shell]`` keys ``layers``, ``grading``, ``layer_boundaries`` and ``decay``.
"""

from __future__ import annotations

import logging
from types import SimpleNamespace

import numpy as np

from .case import Case

__all__ = ["case_fractions"]

log = logging.getLogger(__name__)


def case_fractions(case: Case, functions: list, e0) -> list[np.ndarray] | None:
    """Layer boundaries (fractions 0..1) of every medium, or None for equal layers everywhere.

    ``functions`` are the wall radius functions inside out (``None`` first for
    a ball); ``e0`` the case's energy scale (offsets are in units.energy).
    """
    from .shapes.reference import icosphere
    from .shellrun import _dirichlet_walls, _media
    from .volume.grading import auto_fractions, estimate_levels, explicit_fractions, geometric_fractions

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
    inverse_mass, offsets, _ = _media(case, SimpleNamespace(region_ids=list(range(media))), e0)
    dirichlet = _dirichlet_walls(case)
    count = case.modes.count or 200
    levels = estimate_levels(radii, inverse_mass, offsets, count, "inner" in dirichlet, "outer" in dirichlet)
    if case.modes.below is not None:
        below = case.modes.below / e0 if e0 is not None else case.modes.below
        levels = levels[levels < below]
    q = shell.radial_degree or case.resolution.degree
    out = auto_fractions(radii, inverse_mass, offsets, levels, shell.decay, base, radial_degree=q)
    log.info("automatic layers (decay %g): %s; estimated levels %s", shell.decay,
             [len(f) - 1 for f in out], np.array2string(levels[:8], precision=6))
    return out
