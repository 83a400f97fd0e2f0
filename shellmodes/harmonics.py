"""Real spherical harmonics and angle helpers.

Convention (stated once, used everywhere): theta is the polar angle, phi the
azimuth.  Real harmonics are built from scipy's complex ones
``scipy.special.sph_harm_y(l, m, theta, phi)`` (which include the
Condon-Shortley phase) as

    Y_l0  = Y_l^0
    Y_lm  = sqrt(2) (-1)^m Re Y_l^m      for m > 0   (proportional to cos(m phi))
    Y_l-m = sqrt(2) (-1)^m Im Y_l^m      for m > 0   (proportional to sin(m phi))

so that they are orthonormal on the unit sphere and Y_11 is proportional to
+x, Y_1-1 to +y, Y_10 to +z (the factor (-1)^m undoes the Condon-Shortley
phase).  Reference: DLMF 14.30.1 and 14.30.2 for the complex harmonics.
"""

from __future__ import annotations

import numpy as np
from scipy.special import sph_harm_y, sph_legendre_p_all

__all__ = ["angles", "real_sph_harm", "real_sph_harm_basis", "harmonic_labels", "parent_degree"]


def angles(points: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Polar angle theta and azimuth phi of (N, 3) points (about the origin)."""
    points = np.asarray(points, dtype=float)
    r = np.linalg.norm(points, axis=1)
    theta = np.arccos(np.clip(points[:, 2] / np.where(r > 0, r, 1.0), -1.0, 1.0))
    phi = np.arctan2(points[:, 1], points[:, 0])
    return theta, phi


def real_sph_harm(l: int, m: int, theta: np.ndarray, phi: np.ndarray) -> np.ndarray:
    """Real orthonormal spherical harmonic Y_lm (convention in the module docstring).

    Examples
    --------
    >>> import numpy as np
    >>> bool(np.isclose(real_sph_harm(0, 0, np.array([0.3]), np.array([1.0]))[0], 0.5 / np.sqrt(np.pi)))
    True
    """
    if abs(m) > l or l < 0:
        raise ValueError(f"need 0 <= |m| <= l, got l={l}, m={m}")
    if m == 0:
        return np.real(sph_harm_y(l, 0, theta, phi))
    y = sph_harm_y(l, abs(m), theta, phi)
    sign = (-1.0) ** abs(m) * np.sqrt(2.0)
    return sign * (np.real(y) if m > 0 else np.imag(y))


def harmonic_labels(l_max: int) -> list[tuple[int, int]]:
    """(l, m) pairs for l = 0..l_max, m = -l..l, in the column order of the basis."""
    return [(l, m) for l in range(l_max + 1) for m in range(-l, l + 1)]


def real_sph_harm_basis(l_max: int, theta: np.ndarray, phi: np.ndarray) -> np.ndarray:
    """Matrix (N, (l_max+1)^2) of all real harmonics up to ``l_max`` at the given angles.

    All degrees at once: scipy's normalised spherical Legendre functions
    ``sph_legendre_p_all`` (by recurrence; Y_l^m = P_l^m(cos theta) e^{i m phi}
    with the same phase as ``sph_harm_y``) times cos(m phi) and sin(m phi), the
    same values as :func:`real_sph_harm` column by column (a test compares them).
    """
    theta, phi = np.asarray(theta, dtype=float), np.asarray(phi, dtype=float)
    legendre = sph_legendre_p_all(l_max, l_max, theta)[0]  # (l, m wrapped, N)
    Y = np.empty((theta.size, (l_max + 1) ** 2))
    for l in range(l_max + 1):
        Y[:, l * l + l] = legendre[l, 0]
    for m in range(1, l_max + 1):
        factor = (-1.0) ** m * np.sqrt(2.0)
        cos_m, sin_m = factor * np.cos(m * phi), factor * np.sin(m * phi)
        for l in range(m, l_max + 1):
            Y[:, l * l + l + m] = legendre[l, m] * cos_m
            Y[:, l * l + l - m] = legendre[l, m] * sin_m
    return Y


def parent_degree(x: np.ndarray) -> np.ndarray:
    """Nearest integer l >= 0 to the root of l (l + 1) = x."""
    x = np.maximum(np.asarray(x, dtype=float), 0.0)
    return np.rint((-1.0 + np.sqrt(1.0 + 4.0 * x)) / 2.0).astype(int)
