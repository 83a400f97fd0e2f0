"""Levels of a surface of revolution per azimuthal number m, by a 1-D spectral Galerkin solve.

An independent reference for the |m| labels and the levels of axially symmetric
surfaces (no finite elements, no mesh).  A profile (rho(t), z(t)) turned about z
with psi = f(t) e^{i m phi} and arc-length factor g = |(rho', z')| gives the weak form

    integral (f' h' / g^2 + m^2 f h / rho^2) rho g dt = lambda integral f h rho g dt,

the separated Laplace-Beltrami eigenproblem (e.g. Courant and Hilbert, vol. 1,
ch. V; any text on separation of variables).  It is solved on Gauss-Legendre
points in t with a basis that builds in the behaviour of the solution:

- closed profiles meeting the axis at t = 0 and pi (spheroid): sin(t)^|m| P_k(cos t),
  regular at the poles;
- periodic profiles (torus tube angle): 1, cos(k t), sin(k t).

Both converge exponentially in the basis size for these smooth profiles.
"""

from __future__ import annotations

import numpy as np
import scipy.linalg as la
from numpy.polynomial import legendre

__all__ = ["spheroid_levels", "torus_levels", "revolution_levels"]


def revolution_levels(rho, drho, dz, m: int, count: int, periodic: bool, size: int = 48) -> np.ndarray:
    """Lowest ``count`` eigenvalues for azimuthal number m of the profile t -> (rho(t), z(t)).

    ``rho``, ``drho``, ``dz`` are vectorised functions of t; t runs over [0, 2 pi)
    when ``periodic`` (a closed tube) and over [0, pi] otherwise (the profile meets
    the axis at both ends).
    """
    m = abs(int(m))
    if periodic:
        n = 4 * size + 8
        t = 2 * np.pi * np.arange(n) / n
        w = np.full(n, 2 * np.pi / n)  # trapezoid rule: exact for trigonometric polynomials of degree < n
        k = np.arange(1, size + 1)
        f = np.vstack([np.ones(n), np.cos(np.outer(k, t)), np.sin(np.outer(k, t))])
        df = np.vstack([np.zeros(n), -k[:, None] * np.sin(np.outer(k, t)), k[:, None] * np.cos(np.outer(k, t))])
    else:
        x, w = legendre.leggauss(4 * size + 2 * m + 40)
        t = np.pi * (x + 1) / 2
        w = w * np.pi / 2
        c, s = np.cos(t), np.sin(t)
        eye = np.eye(size + 1)
        P = np.array([legendre.legval(c, eye[j]) for j in range(size + 1)])
        dP = np.array([legendre.legval(c, legendre.legder(eye[j])) for j in range(size + 1)])
        f = s**m * P
        df = (m * s ** max(m - 1, 0) * c if m else 0.0) * P - s ** (m + 1) * dP
    r, g = rho(t), np.hypot(drho(t), dz(t))
    measure = w * r * g
    A = (df * measure / g**2) @ df.T
    if m:
        A = A + (f * measure * m**2 / r**2) @ f.T
    B = (f * measure) @ f.T
    return la.eigh(A, B, eigvals_only=True, subset_by_index=[0, count - 1])


def spheroid_levels(a: float, c: float, m: int, count: int, size: int = 48) -> np.ndarray:
    """Spheroid (x^2 + y^2)/a^2 + z^2/c^2 = 1: profile rho = a sin t, z = c cos t."""
    return revolution_levels(lambda t: a * np.sin(t), lambda t: a * np.cos(t), lambda t: -c * np.sin(t),
                             m, count, periodic=False, size=size)


def torus_levels(R: float, r: float, m: int, count: int, size: int = 48) -> np.ndarray:
    """Torus with major radius R and tube radius r: profile rho = R + r cos t, z = r sin t."""
    return revolution_levels(lambda t: R + r * np.cos(t), lambda t: -r * np.sin(t), lambda t: r * np.cos(t),
                             m, count, periodic=True, size=size)
