"""Closed-form areas of the analytic shapes (what ``Shape.exact_area`` returns).

Kept with the shapes, which use them; :mod:`shellmodes.studies.references` re-exports
them beside the other exact results.
"""

from __future__ import annotations

import numpy as np
from scipy.special import elliprd, elliprf

from shellmodes.errors import GeometryError

__all__ = ["spheroid_area", "ellipsoid_area", "torus_area", "cap_area", "positive_values"]


def positive_values(name: str, value) -> np.ndarray:
    """``value`` as a float array, checked positive and finite (``ValueError`` naming ``name`` otherwise)."""
    value = np.asarray(value, dtype=float)
    if not np.all(np.isfinite(value)) or np.any(value <= 0):
        raise ValueError(f"{name} must be positive and finite, got {value!r}")
    return value


def spheroid_area(a, c):
    """Area of the spheroid x^2/a^2 + y^2/a^2 + z^2/c^2 = 1 (broadcasts over arrays).

    Oblate (c < a), with e^2 = 1 - c^2/a^2:  S = 2 pi a^2 + 2 pi c^2 artanh(e)/e.
    Prolate (c > a), with e^2 = 1 - a^2/c^2: S = 2 pi a^2 + 2 pi a c arcsin(e)/e.
    Both tend to 4 pi a^2 as e -> 0; e^2 is formed as |a - c| (a + c) / max(a, c)^2
    so that nearly spherical shapes lose no digits.

    Parameters
    ----------
    a : float or array_like
        Equatorial semi-axis.
    c : float or array_like
        Polar semi-axis.

    References
    ----------
    DLMF section 19.33 (surface area of ellipsoids; the spheroid is the case
    a = b, where the elliptic integrals reduce to artanh and arcsin).

    Examples
    --------
    >>> bool(np.isclose(spheroid_area(2.0, 2.0), 16 * np.pi))
    True
    """
    a = positive_values("a", a)
    c = positive_values("c", c)
    oblate = a >= c
    e = np.sqrt(np.abs((a - c) * (a + c)) / np.maximum(a, c) ** 2)
    safe_e = np.where(e > 0, e, 1.0)
    ratio = np.where(oblate, np.arctanh(np.minimum(e, 1 - 1e-16)), np.arcsin(e)) / safe_e
    ratio = np.where(e > 1e-8, ratio, 1.0 + e**2 / np.where(oblate, 3.0, 6.0))
    area = 2 * np.pi * a**2 + 2 * np.pi * np.where(oblate, c**2, a * c) * ratio
    return area[()]  # a float for scalar input


def ellipsoid_area(a, b, c):
    """Area of the triaxial ellipsoid x^2/a^2 + y^2/b^2 + z^2/c^2 = 1 (broadcasts).

    S = 4 pi a b c R_G(a^-2, b^-2, c^-2), with Carlson's symmetric integral
    2 R_G(x, y, z) = z R_F(x, y, z) - (x - z)(y - z) R_D(x, y, z)/3 + sqrt(x y / z),
    where z is taken as the middle value so that every term is non-negative.

    References
    ----------
    DLMF section 19.33 (S = 3 V R_G(a^-2, b^-2, c^-2) with V the volume) and
    DLMF 19.21.10 (R_G from R_F and R_D).

    Examples
    --------
    >>> bool(np.isclose(ellipsoid_area(1.0, 1.0, 1.0), 4 * np.pi))
    True
    """
    a, b, c = np.broadcast_arrays(positive_values("a", a), positive_values("b", b), positive_values("c", c))
    # R_G is symmetric; the middle value goes in the third slot so that (x - z)(y - z) <= 0
    x, z, y = np.sort(np.stack([a**-2.0, b**-2.0, c**-2.0]), axis=0)
    rg = 0.5 * (z * elliprf(x, y, z) - (x - z) * (y - z) * elliprd(x, y, z) / 3.0 + np.sqrt(x * y / z))
    return (4 * np.pi * a * b * c * rg)[()]


def torus_area(R, r):
    """Area 4 pi^2 R r of the ring torus with centre-line radius R and tube radius r <= R.

    References
    ----------
    Pappus's centroid theorem: the tube circle of length 2 pi r sweeps a circle
    of length 2 pi R (e.g. do Carmo, Differential Geometry of Curves and
    Surfaces, section 2-8, section number recalled from memory).

    Examples
    --------
    >>> bool(np.isclose(torus_area(2.0, 0.5), 4 * np.pi**2))
    True
    """
    R = positive_values("R", R)
    r = positive_values("r", r)
    if np.any(r > R):
        raise GeometryError(f"tube radius r must not exceed R (self-intersecting torus), got R={R}, r={r}")
    return 4 * np.pi**2 * R * r


def cap_area(R, theta0):
    """Area 2 pi R^2 (1 - cos theta0) = 4 pi R^2 sin^2(theta0/2) of a spherical cap.

    The sine form avoids cancellation for small caps.

    References
    ----------
    Archimedes' hat-box theorem (a spherical zone has the area of the band it
    projects to on the circumscribed cylinder, 2 pi R h with h = R (1 - cos theta0)).

    Examples
    --------
    >>> bool(np.isclose(cap_area(1.0, np.pi), 4 * np.pi))
    True
    """
    R = positive_values("R", R)
    theta0 = np.asarray(theta0, dtype=float)
    if np.any(~np.isfinite(theta0)) or np.any(theta0 < 0) or np.any(theta0 > np.pi):
        raise ValueError(f"theta0 must lie in [0, pi], got {theta0!r}")
    return 4 * np.pi * R**2 * np.sin(0.5 * theta0) ** 2
