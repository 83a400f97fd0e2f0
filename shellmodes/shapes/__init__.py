"""Registry of surface shapes.

A shape turns a refinement setting into a flat reference triangulation plus
an exact map onto the true surface (see :mod:`shellmodes.shapes.base`).
Each shape module registers itself with :func:`register`; ``SHAPES`` maps a
case-file ``shape`` name to its class, so an unknown name fails with the
list of valid ones.
"""

from __future__ import annotations

from shellmodes.shapes import analytic, cap, imported, torus  # noqa: F401  (modules register their shapes)
from shellmodes.shapes.base import SHAPES, Shape, register

__all__ = ["SHAPES", "Shape", "register", "make_shape"]


def make_shape(name: str, **parameters) -> Shape:
    """Instantiate the registered shape ``name`` with its parameters.

    Parameters
    ----------
    name : str
        A registered shape (:data:`SHAPES`): sphere, ellipsoid, spheroid, deformed_sphere, torus, cap, mesh.
    **parameters
        The shape's keys as in the case file (e.g. ``radius``).

    Returns
    -------
    Shape
        The shape's exact map.

    Raises
    ------
    ValueError
        An unknown shape name.

    Examples
    --------
    >>> make_shape("sphere", radius=2.0).exact_area()  # 4 pi R^2
    50.26548245743669
    """
    try:
        cls = SHAPES[name]
    except KeyError:
        raise ValueError(f"unknown shape {name!r}; allowed: {', '.join(sorted(SHAPES))}") from None
    return cls(**parameters)
