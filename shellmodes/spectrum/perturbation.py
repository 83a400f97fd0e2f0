r"""First-order splitting of the sphere's multiplets on a star-shaped surface.

The surface is r(theta, phi) = R (1 + eps f(theta, phi)) with
f = sum_lm a_lm Y_lm in the real harmonics of :mod:`shellmodes.harmonics`.
This module owns the exact sphere quadrature, the integrals of products of
three real harmonics, and the degenerate first-order perturbation theory.

Derivation
----------
Write the surface point as X(omega) = r(omega) n(omega), with n the unit
radial vector and omega on the unit sphere S^2.  With d_i a coordinate
derivative on S^2, d_i X = (d_i r) n + r d_i n, and since n . d_i n = 0 the
induced metric is

    g_ij = r^2 ghat_ij + (d_i r)(d_j r) = R^2 (1 + 2 eps f) ghat_ij + O(eps^2),

because (d_i r)(d_j r) = R^2 eps^2 (d_i f)(d_j f).  To first order the metric
is conformal to the round one, g = e^{2w} R^2 ghat with e^{2w} = 1 + 2 eps f.
In two dimensions the Dirichlet integral is conformally invariant
(sqrt(det g) g^ij = sqrt(det ghat) ghat^ij), so Delta_g = e^{-2w} R^-2
Delta_ghat (e.g. Chavel, *Eigenvalues in Riemannian Geometry*, Academic Press
1984, ch. I; Rosenberg, *The Laplacian on a Riemannian Manifold*, CUP 1997,
sect. 1.2 - cited from memory).  The weak form of -Delta_g u = lambda u is

    int_{S^2} grad u . grad v dOmega = lambda R^2 int_{S^2} (1 + 2 eps f) u v dOmega + O(eps^2),

a generalised eigenproblem whose unperturbed eigenspace for degree l is
spanned by Y_lm, m = -l..l, with eigenvalue l(l+1).  Degenerate
Rayleigh-Schroedinger theory (Messiah, *Quantum Mechanics*, vol. II,
ch. XVI sect. 1; Sakurai and Napolitano, *Modern Quantum Mechanics*,
sect. 5.2; chapter numbers recalled from memory) diagonalises the
perturbation inside that space: with
F_mm' = int f Y_lm Y_lm' dOmega and F c = mu c,

    lambda R^2 = l(l+1) / (1 + 2 eps mu) = l(l+1) (1 - 2 eps mu) + O(eps^2).

Checks: a constant f = a Y_00 is a uniform scaling R -> R (1 + eps a Y_00),
for which the exact lambda = l(l+1) / (R^2 (1 + eps a Y_00)^2) has the same
first-order term; a Y_1m term is a rigid translation to first order and
indeed F = 0 (parity: l + 1 + l is odd).

Triple integrals
----------------
F needs int Y_l1m1 Y_l2m2 Y_l3m3 dOmega.  A product of three real harmonics
is, after the phi integral, a polynomial of degree <= l1 + l2 + l3 in
cos(theta), and a trigonometric polynomial of degree <= l1 + l2 + l3 in phi.
Gauss-Legendre with n nodes in cos(theta) is exact to degree 2n - 1, and the
uniform rule with n_phi points exact for trigonometric degree < n_phi
(Abramowitz and Stegun 25.4.29; Davis and Rabinowitz, *Methods of Numerical
Integration*, sect. 2.9 for the periodic trapezoid rule; section numbers
recalled from memory), so
:func:`sphere_quadrature` of total degree L integrates these exactly.  The
tests compare with the Wigner 3j closed form (DLMF 34.3.22 and 34.2.4).
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping

import numpy as np

from shellmodes.harmonics import real_sph_harm

__all__ = ["perturbation_rows",
    "sphere_quadrature",
    "triple_integral",
    "deformation_terms",
    "first_order_matrix",
    "first_order_levels",
    "splitting_table",
]


def sphere_quadrature(degree: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Product rule on the unit sphere exact for polynomials of total ``degree``.

    Gauss-Legendre in cos(theta) with ceil((degree + 1) / 2) nodes times a
    uniform rule in phi with degree + 1 points.

    Returns
    -------
    theta, phi, weights
        Flat arrays; the weights sum to 4 pi.

    Examples
    --------
    >>> theta, phi, w = sphere_quadrature(4)
    >>> bool(abs(w.sum() - 4 * np.pi) < 1e-13)
    True
    """
    if int(degree) != degree or degree < 0:
        raise ValueError(f"degree must be a non-negative integer, got {degree!r}")
    n_theta = int(degree) // 2 + 1
    n_phi = int(degree) + 1
    x, wx = np.polynomial.legendre.leggauss(n_theta)
    phi = 2.0 * np.pi * np.arange(n_phi) / n_phi
    T, P = np.meshgrid(np.arccos(x), phi, indexing="ij")
    W = np.repeat(wx[:, None] * (2.0 * np.pi / n_phi), n_phi, axis=1)
    return T.ravel(), P.ravel(), W.ravel()


def triple_integral(l1: int, m1: int, l2: int, m2: int, l3: int, m3: int) -> float:
    """int over the unit sphere of Y_l1m1 Y_l2m2 Y_l3m3 (real harmonics), by exact quadrature."""
    theta, phi, w = sphere_quadrature(l1 + l2 + l3)
    product = (real_sph_harm(l1, m1, theta, phi) * real_sph_harm(l2, m2, theta, phi)
               * real_sph_harm(l3, m3, theta, phi))
    return float(w @ product)


def deformation_terms(deformation) -> list[tuple[int, int, float]]:
    """Normalise a deformation to a list of (l, m, amplitude).

    Accepts a mapping {(l, m): amplitude} or an iterable of (l, m, amplitude).
    """
    if isinstance(deformation, Mapping):
        items = [(key[0], key[1], value) for key, value in deformation.items()]
    elif isinstance(deformation, Iterable):
        items = [tuple(term) for term in deformation]
    else:
        raise ValueError(f"deformation must be a mapping {{(l, m): a}} or a list of (l, m, a), "
                         f"got {type(deformation).__name__}")
    terms = []
    for item in items:
        if len(item) != 3:
            raise ValueError(f"deformation term {item!r} is not (l, m, amplitude)")
        l, m, a = item
        if int(l) != l or int(m) != m or l < 0 or abs(m) > l:
            raise ValueError(f"deformation term (l={l!r}, m={m!r}) needs integers with 0 <= |m| <= l")
        a = float(a)
        if not np.isfinite(a):
            raise ValueError(f"deformation amplitude for (l={l}, m={m}) must be finite, got {a!r}")
        terms.append((int(l), int(m), a))
    return terms


def first_order_matrix(deformation, l_parent: int) -> np.ndarray:
    """The (2l+1, 2l+1) matrix F_mm' = int f Y_lm Y_lm' dOmega, rows/columns m = -l..l."""
    terms = deformation_terms(deformation)
    if int(l_parent) != l_parent or l_parent < 0:
        raise ValueError(f"l_parent must be a non-negative integer, got {l_parent!r}")
    l = int(l_parent)
    l_f = max((term[0] for term in terms), default=0)
    theta, phi, w = sphere_quadrature(2 * l + l_f)
    f = np.zeros_like(theta)
    for lt, mt, a in terms:
        f += a * real_sph_harm(lt, mt, theta, phi)
    Y = np.column_stack([real_sph_harm(l, m, theta, phi) for m in range(-l, l + 1)])
    F = Y.T @ ((w * f)[:, None] * Y)
    return 0.5 * (F + F.T)


def _check_scale(eps, R):
    if not np.isfinite(eps):
        raise ValueError(f"eps must be finite, got {eps!r}")
    if not (np.isfinite(R) and R > 0):
        raise ValueError(f"R must be a positive length, got {R!r}")


def first_order_levels(deformation: Iterable[tuple[int, int, float]], eps: float, R: float,
                       l_parent: int) -> np.ndarray:
    """First-order approximations of the 2l+1 eigenvalues descending from degree ``l_parent``.

    Parameters
    ----------
    deformation
        f = sum a_lm Y_lm as {(l, m): a} or [(l, m, a), ...] (real harmonics).
    eps
        Deformation strength; the surface is r = R (1 + eps f).
    R
        Mean radius (length unit of the result: lambda in 1/R^2).
    l_parent
        Degree of the sphere multiplet.

    Returns
    -------
    numpy.ndarray
        Sorted (2l+1,) values l(l+1) (1 - 2 eps mu) / R^2, mu the eigenvalues of
        :func:`first_order_matrix` (derivation in the module docstring).

    Examples
    --------
    >>> lam = first_order_levels({(2, 0): 1.0}, 0.01, 1.0, 1)
    >>> [round(float(x), 6) for x in lam]
    [1.989907, 2.005046, 2.005046]
    """
    _check_scale(eps, R)
    l = int(l_parent)
    mu = np.linalg.eigvalsh(first_order_matrix(deformation, l_parent))
    return np.sort(l * (l + 1) * (1.0 - 2.0 * eps * mu) / R**2)


def splitting_table(deformation: Iterable[tuple[int, int, float]], eps: float, R: float, l_max: int,
                    tol: float = 1e-9) -> list[dict]:
    """First-order splitting of every sphere multiplet l = 0..l_max.

    Parameters
    ----------
    deformation, eps, R
        As in :func:`first_order_levels`.
    l_max
        Highest parent degree.
    tol
        Relative tolerance for counting first-order levels as degenerate.

    Returns
    -------
    list of dict
        One row per l: ``l``, ``sphere`` (l(l+1)/R^2), ``levels`` (sorted
        first-order lambdas), ``mu`` (eigenvalues of F, ascending),
        ``states`` ((2l+1, 2l+1) columns of zeroth-order combinations of
        Y_l,-l..Y_l,l, ordered like ``levels``), ``sublevels`` (distinct
        levels) and ``multiplicities``.
    """
    _check_scale(eps, R)
    if int(l_max) != l_max or l_max < 0:
        raise ValueError(f"l_max must be a non-negative integer, got {l_max!r}")
    rows = []
    for l in range(int(l_max) + 1):
        mu, states = np.linalg.eigh(first_order_matrix(deformation, l))
        levels = l * (l + 1) * (1.0 - 2.0 * eps * mu) / R**2
        order = np.argsort(levels, kind="stable")
        levels, states = levels[order], states[:, order]
        scale = max(abs(l * (l + 1) / R**2), 1.0 / R**2)
        breaks = np.flatnonzero(np.diff(levels) > tol * scale) + 1
        clusters = np.split(levels, breaks)
        rows.append({
            "l": l,
            "sphere": l * (l + 1) / R**2,
            "levels": levels,
            "mu": np.sort(mu),
            "states": states,
            "sublevels": np.array([c.mean() for c in clusters]),
            "multiplicities": [len(c) for c in clusters],
        })
    return rows


def perturbation_rows(shape, eigenvalues, multiplets, energy_per_lambda: float = 1.0) -> list[dict]:
    """First-order perturbation theory beside the finite-element splitting, one row per parent l.

    For a star-shaped surface r = R (1 + sum a_lm Y_lm) the modes of parent l
    (those whose multiplets carry label l, when there are exactly 2l+1 of them)
    are compared, sorted, with the 2l+1 first-order levels of
    :func:`first_order_levels` (eps = 1, the amplitudes as given).  ``ratio``
    is the finite-element splitting over the first-order one; it tends to 1 as
    the amplitudes shrink (differences O(a^2)).  Energies are eigenvalues times
    ``energy_per_lambda``; shapes other than deformed stars give no rows.
    """
    if shape.name != "deformed_sphere" or not shape.deformation:
        return []
    e0 = energy_per_lambda
    labels = np.full(len(eigenvalues), -1)
    for m in multiplets:
        labels[list(m.members)] = -1 if m.l is None else m.l
    rows = []
    for l in sorted(set(labels[labels > 0].tolist())):
        members = np.flatnonzero(labels == l)
        if len(members) != 2 * l + 1:
            continue
        fe = np.sort(np.asarray(eigenvalues)[members])
        pt = first_order_levels([tuple(t) for t in shape.deformation], 1.0, shape.radius, l)
        fe_split, pt_split = float(fe[-1] - fe[0]), float(pt[-1] - pt[0])
        rows.append({"l": int(l), "fe_eigenvalues": fe.tolist(), "first_order_eigenvalues": pt.tolist(),
                     "fe_splitting": fe_split * e0, "first_order_splitting": pt_split * e0,
                     "ratio": fe_split / pt_split if pt_split else None,
                     "max_difference": float(np.max(np.abs(fe - pt))) * e0})
    return rows

