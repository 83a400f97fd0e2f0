"""Independent 1-D references for surfaces of revolution about z (torus, spheroid).

On a surface of revolution with profile (rho(t), z(t)) and arc-length factor
g = ds/dt, separation psi = f(t) e^{i m phi} turns the Laplace-Beltrami
problem with a potential v(t) into the profile equation

    -(1 / (rho g)) d/dt (rho / g  df/dt) + (m^2 / rho^2) f + v f = lam f,

which these functions solve by spectral Galerkin methods written from the
profile alone (no finite elements, no curvature code of the package): the
torus with a Fourier basis in the tube angle (periodic), the spheroid with
(1 - x^2)^(m/2) P_k(x), x = cos t, which builds in regularity at the poles.
The curvatures entering the thin-layer potential v_g = -(k1 - k2)^2 / 4
are those of the profile curve and of the parallel circle (Meusnier):
k_meridian = |rho' z'' - z' rho''| / g^3, k_parallel = |z'| / (g rho).
Both solvers converge exponentially in the basis size for these smooth
profiles.
"""

from __future__ import annotations

import numpy as np
import scipy.linalg as la
from numpy.polynomial import legendre

__all__ = ["torus_profile_levels", "spheroid_profile_levels", "torus_shell_levels", "spheroid_shell_levels"]


def torus_profile_levels(R: float, r: float, m: int, count: int, thin_layer: bool = False, modes: int = 48,
                         vector_potential=None):
    """Lowest ``count`` eigenvalues of the torus profile equation for angular number m.

    Tube angle v, rho = R + r cos v, g = r.  ``vector_potential``, if given, is the
    azimuthal a_phi(rho) (lambda units per length) of a field along z: the
    azimuthal kinetic term becomes (m / rho - a_phi)^2.
    """
    n = 4 * modes
    v = 2 * np.pi * np.arange(n) / n
    w = np.full(n, 2 * np.pi / n)  # trapezoid rule: exact for trigonometric polynomials of degree < n
    rho = R + r * np.cos(v)
    k = np.arange(1, modes + 1)
    basis = np.vstack([np.ones(n), np.cos(np.outer(k, v)), np.sin(np.outer(k, v))])
    dbasis = np.vstack([np.zeros(n), -k[:, None] * np.sin(np.outer(k, v)), k[:, None] * np.cos(np.outer(k, v))])
    azimuthal = (m / rho) ** 2 if vector_potential is None else (m / rho - vector_potential(rho)) ** 2
    pot = azimuthal - (R / (r * rho)) ** 2 / 4 if thin_layer else azimuthal
    measure = w * rho * r
    A = (dbasis * measure / r**2) @ dbasis.T + (basis * measure * pot) @ basis.T
    B = (basis * measure) @ basis.T
    return la.eigh(A, B, eigvals_only=True, subset_by_index=[0, count - 1])


def _spheroid_basis(a: float, c: float, m: int, degree: int):
    """Points x = cos t, weights, g, P_k(x), (1 - x^2)^(m/2) P_k and sqrt(1 - x^2) times its x-derivative."""
    x, w = legendre.leggauss(4 * degree + 2 * m + 40)
    s2 = 1 - x**2
    g = np.sqrt(a**2 * x**2 + c**2 * s2)
    eye = np.eye(degree + 1)
    P = np.array([legendre.legval(x, eye[k]) for k in range(degree + 1)])
    dP = np.array([legendre.legval(x, legendre.legder(eye[k])) for k in range(degree + 1)])
    env = s2 ** (m / 2)
    # d/dx [(1-x^2)^(m/2) P] = (1-x^2)^(m/2) P' - m x (1-x^2)^(m/2 - 1) P; times sqrt(1-x^2) to carry (1-x^2)
    return x, w, g, P, P * env, dP * env * np.sqrt(s2) - m * x * P * s2 ** ((m - 1) / 2)


def spheroid_profile_levels(a: float, c: float, m: int, count: int, thin_layer: bool = False, degree: int = 40):
    """Lowest ``count`` eigenvalues of the spheroid profile equation (x^2+y^2)/a^2 + z^2/c^2 = 1.

    Profile rho = a sin t, z = c cos t; with x = cos t the weak form is
    integral [a (1-x^2) f_x h_x / g + (m^2 g / (a (1-x^2)) + a g v) f h] dx
    = lam integral a g f h dx, g = sqrt(a^2 x^2 + c^2 (1 - x^2)).
    """
    m = abs(m)
    x, w, g, P, f, fx_s = _spheroid_basis(a, c, m, degree)
    s2 = 1 - x**2
    stiff = (fx_s * w * a / g) @ fx_s.T
    cent = (P * w * m**2 * g / a * s2 ** (m - 1)) @ P.T if m else 0.0
    pot = 0.0
    if thin_layer:
        k_meridian = a * c / g**3
        k_parallel = c / (a * g)
        vg = -((k_meridian - k_parallel) ** 2) / 4
        pot = (f * w * a * g * vg) @ f.T
    A = stiff + cent + pot
    B = (f * w * a * g) @ f.T
    return la.eigh(A, B, eigvals_only=True, subset_by_index=[0, count - 1])


def torus_shell_levels(R: float, r: float, d: float, m: int, count: int, radial: int = 8, modes: int = 16):
    """Lowest ``count`` eigenvalues of -Delta with hard walls in the torus shell r - d/2 < t < r + d/2, angular
    number m: an independent spectral reference for the thin-layer limit of a torus.

    Coordinates (t, v, phi): x = ((R + t cos v) cos phi, (R + t cos v) sin phi, t sin v), volume element
    t (R + t cos v).  With psi = f(t, v) e^{i m phi} the weak form is
    integral [f_t^2 + f_v^2 / t^2 + m^2 f^2 / (R + t cos v)^2] t (R + t cos v) dt dv; the basis is
    (1 - x^2) P_k(x), x = 2 (t - t0) / d - 1 (k < radial, zero at both walls) times 1, cos(j v), sin(j v)
    (j = 1..modes); Gauss-Legendre in t and the trapezoid rule in v (periodic); both bases converge
    exponentially for these smooth problems.
    """
    phi, dphi, s, wt = _wall_basis(radial, d)
    t = r + s
    nv = 8 * modes + 32
    v = 2 * np.pi * np.arange(nv) / nv
    wv = np.full(nv, 2 * np.pi / nv)
    j = np.arange(1, modes + 1)[:, None]
    psi = np.vstack([np.ones(nv), np.cos(j * v), np.sin(j * v)])
    dpsi = np.vstack([np.zeros(nv), -j * np.sin(j * v), j * np.cos(j * v)])
    rho = R + np.outer(t, np.cos(v))  # (nt, nv)
    weight = np.outer(wt * t, wv) * rho

    A = (_tensor_form(weight, dphi, dphi, psi, psi) + _tensor_form(weight / t[:, None] ** 2, phi, phi, dpsi, dpsi)
         + _tensor_form(weight * m**2 / rho**2, phi, phi, psi, psi))
    B = _tensor_form(weight, phi, phi, psi, psi)
    return la.eigh(0.5 * (A + A.T), 0.5 * (B + B.T), eigvals_only=True, subset_by_index=[0, count - 1])


def _tensor_form(g, a, b, c, e):
    """sum over (p, q) of g(p, q) a_k(p) b_l(p) c_j(q) e_i(q), as a matrix over (k, j) x (l, i)."""
    h = np.einsum("pq,jq,iq->pji", g, c, e)
    out = np.einsum("kp,lp,pji->kjli", a, b, h)
    n = a.shape[0] * c.shape[0]
    return out.reshape(n, n)


def _wall_basis(radial: int, d: float):
    """(1 - y^2) P_k(y) on [-d/2, d/2] (zero at both walls), its derivative, the points and weights."""
    y, w = legendre.leggauss(2 * radial + 24)
    eye = np.eye(radial)
    P = np.array([legendre.legval(y, eye[k]) for k in range(radial)])
    dP = np.array([legendre.legval(y, legendre.legder(eye[k])) for k in range(radial)])
    return (1 - y**2) * P, ((1 - y**2) * dP - 2 * y * P) * (2 / d), y * d / 2, w * d / 2


def spheroid_shell_levels(a: float, c: float, d: float, m: int, count: int, radial: int = 8, degree: int = 30):
    """Lowest ``count`` eigenvalues of -Delta with hard walls at normal distance +-d/2 from the spheroid
    (x^2+y^2)/a^2 + z^2/c^2 = 1, angular number m: the spheroid's thin-layer reference.

    Normal coordinates (s, x = cos t, phi) about the profile rho = a sin t, z = c cos t, with
    g = sqrt(a^2 x^2 + c^2 (1 - x^2)) and the outward normal (c sin t, a cos t) / g: the scale factors are
    h_s = 1, h_t = g + s a c / g^2 (meridian curvature a c / g^3), h_phi = sin t (a + s c / g).  With
    psi = f(s, x) e^{i m phi} the weak form is integral [f_s^2 h_t H + (1 - x^2) f_x^2 H / h_t
    + m^2 f^2 h_t / ((1 - x^2) H)] ds dx over integral f^2 h_t H ds dx, H = a + s c / g; the basis is
    (1 - y^2) P_k(y), y = 2 s / d, times (1 - x^2)^(m/2) P_j(x) as in :func:`spheroid_profile_levels`.
    """
    m = abs(m)
    sigma, dsigma, s, ws = _wall_basis(radial, d)
    x, wx, g, P, e, ex_s = _spheroid_basis(a, c, m, degree)
    s2 = 1 - x**2
    ht = g[None, :] + np.outer(s, a * c / g**2)
    H = a + np.outer(s, c / g)
    w = np.outer(ws, wx)
    A = _tensor_form(w * ht * H, dsigma, dsigma, e, e) + _tensor_form(w * H / ht, sigma, sigma, ex_s, ex_s)
    if m:
        A = A + _tensor_form(w * m**2 * ht / H, sigma, sigma, P * s2 ** ((m - 1) / 2), P * s2 ** ((m - 1) / 2))
    B = _tensor_form(w * ht * H, sigma, sigma, e, e)
    return la.eigh(0.5 * (A + A.T), 0.5 * (B + B.T), eigvals_only=True, subset_by_index=[0, count - 1])
