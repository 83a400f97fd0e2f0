"""Checks of shellmodes.studies.references against sources that do not share its code.

Independent sources used: scipy.special functions evaluated at the returned
roots (residuals), published table values (recalled from memory, marked so),
closed-form limits, brute-force quadrature of area and curvature integrals, and
mode counts on dense grids.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import constants
from scipy.special import elliprg, jn_zeros, jnp_zeros, lpmv, spherical_jn, spherical_kn, spherical_yn

from shellmodes.errors import GeometryError
from shellmodes.studies import references as ref


def gauss_grid(lo0, hi0, lo1, hi1, n=200):
    """Tensor Gauss-Legendre nodes and weights on a rectangle (exponentially accurate if smooth)."""
    x, w = np.polynomial.legendre.leggauss(n)
    u = 0.5 * (hi0 - lo0) * (x + 1) + lo0
    v = 0.5 * (hi1 - lo1) * (x + 1) + lo1
    U, V = np.meshgrid(u, v, indexing="ij")
    W = np.outer(w, w) * 0.25 * (hi0 - lo0) * (hi1 - lo1)
    return U, V, W


def sign_changes(f, lo, hi, n=50_001):
    """Number of sign changes of f on a dense uniform grid of (lo, hi): an independent root count."""
    y = f(np.linspace(lo, hi, n)[1:-1])
    return int(np.count_nonzero(np.sign(y[:-1]) * np.sign(y[1:]) < 0))


# ----------------------------------------------------------------------------- sphere
def test_sphere_eigenvalues_multiplicities_and_radius():
    lam = ref.sphere_eigenvalues(25, radius=2.0)
    expected = np.concatenate([np.full(2 * l + 1, l * (l + 1) / 4.0) for l in range(5)])  # DLMF 14.30.10
    assert lam.shape == expected.shape == (25,)
    assert np.array_equal(lam, expected)  # exact: small integers over 4
    assert ref.sphere_eigenvalues(3).tolist() == [0.0, 2.0, 2.0]  # cut inside the l = 1 triplet
    levels = ref.sphere_levels(3)
    assert len(levels) == 4
    assert levels == [(0, 0, 1), (1, 2, 3), (2, 6, 5), (3, 12, 7)]


@pytest.mark.parametrize("bad", [0, -1, 2.5, True])
def test_counts_are_validated(bad):
    with pytest.raises(ValueError):
        ref.sphere_eigenvalues(bad)
    with pytest.raises(ValueError):
        ref.ball_dirichlet(1, bad)


# ----------------------------------------------------------------------------- caps
def parity_levels(count, rim):
    """Hemisphere spectrum built from scipy's lpmv at x = +-eps, not from the parity formula."""
    values = []
    for l in range(40):
        for m in range(-l, l + 1):
            plus, minus = lpmv(abs(m), l, 1e-3), lpmv(abs(m), l, -1e-3)
            odd = np.isclose(plus, -minus, rtol=1e-9, atol=0)
            if (rim == "dirichlet") == bool(odd):
                values.append(l * (l + 1.0))
        if len(values) >= count:
            return np.array(values[:count])
    raise AssertionError("not enough levels")


@pytest.mark.parametrize("rim", ["dirichlet", "neumann"])
def test_hemisphere_closed_form_matches_parity(rim):
    count = 120
    closed = ref.hemisphere_eigenvalues(count, rim)
    brute = parity_levels(count, rim)
    assert closed.shape == brute.shape == (count,)
    assert np.array_equal(closed, brute)  # both exact integers


@pytest.mark.parametrize("rim", ["dirichlet", "neumann"])
def test_cap_at_half_angle_pi_over_2_is_the_hemisphere(rim):
    count = 150
    lam, nu, m = ref.cap_eigenvalues(np.pi / 2, count, rim, return_labels=True)
    exact = ref.hemisphere_eigenvalues(count, rim)
    assert lam.shape == nu.shape == m.shape == exact.shape == (count,)
    # 1e-11 relative: roots are refined to ~1e-15 in nu; the degree recurrence and the
    # quadrature each lose a few digits (observed 4e-14)
    assert np.allclose(lam, exact, rtol=1e-11, atol=1e-11)
    # the labels carry the parity: l + |m| odd for Dirichlet, even for Neumann
    l = np.rint(nu).astype(int)
    assert np.all((l + np.abs(m)) % 2 == (1 if rim == "dirichlet" else 0))


@pytest.mark.parametrize("theta0", [0.7, 1.3, 2.2])
def test_cap_dirichlet_roots_are_zeros_of_scipy_lpmv(theta0):
    lam, nu, m = ref.cap_eigenvalues(theta0, 30, "dirichlet", return_labels=True)
    assert lam.shape == (30,)
    assert np.all(np.diff(lam) >= 0)
    assert np.all(nu >= np.abs(m))  # Rayleigh bound lambda >= |m|(|m|+1) for Dirichlet caps
    x = np.cos(theta0)
    for degree, order in zip(nu, np.abs(m)):
        # scale: the largest |P_nu'^m| for nu' within one root spacing
        scale = np.max(np.abs(lpmv(order, degree + np.linspace(-1, 1, 21), x)))
        # 1e-10: lpmv (Zhang and Jin's algorithm, independent of ours) is accurate to ~1e-13 here
        assert abs(lpmv(order, degree, x)) < 1e-10 * scale


@pytest.mark.parametrize("theta0", [0.9, 2.0])
def test_cap_neumann_roots_are_stationary_points_of_lpmv(theta0):
    lam, nu, m = ref.cap_eigenvalues(theta0, 20, "neumann", return_labels=True)
    assert lam.shape == (20,)
    assert lam[0] == 0.0 and nu[0] == 0.0 and m[0] == 0  # the zero mode comes first
    assert np.count_nonzero(lam == 0.0) == 1
    h = 1e-3
    for degree, order in zip(nu[1:], np.abs(m[1:])):
        def f(t, degree=degree, order=order):
            return lpmv(order, degree, np.cos(t))
        # five-point central difference: truncation ~ h^4 nu^5 / 30, roundoff ~ 1e-16 / h
        derivative = (f(theta0 - 2 * h) - f(theta0 + 2 * h) + 8 * (f(theta0 + h) - f(theta0 - h))) / (12 * h)
        # derivative scale (nu + 1/2) max |P|; observed residuals below 3e-11 of it
        scale = (degree + 0.5) * np.max(np.abs(f(np.linspace(0.05, theta0, 200))))
        assert abs(derivative) < 1e-9 * scale


def test_cap_dirichlet_misses_no_root_of_lpmv():
    theta0 = 1.3
    lam, nu, m = ref.cap_eigenvalues(theta0, 60, "dirichlet", return_labels=True)
    assert lam.shape == (60,)
    top = nu[-1]
    for order in range(6):
        # lpmv's P_nu^m vanishes identically at integer nu < m, so count only nu > m - 1/2
        # (no Dirichlet root lies below nu = m, asserted in the residual test)
        grid = np.linspace(order - 0.5 if order else 1e-3, top, 20_001)[:-1]
        y = lpmv(order, grid, np.cos(theta0))
        dense = np.count_nonzero(np.sign(y[:-1]) * np.sign(y[1:]) < 0)
        assert np.count_nonzero((m == order) & (nu < top)) == dense


@pytest.mark.parametrize("rim, sign", [("dirichlet", -1), ("neumann", 1)])
def test_cap_counts_follow_two_term_weyl_law(rim, sign):
    # N(lam) ~ A lam / (4 pi) -+ L sqrt(lam) / (4 pi) (Weyl's law with the boundary term,
    # Dirichlet minus, Neumann plus; A, L the cap's area and rim length)
    theta0, count = 1.3, 300
    lam = ref.cap_eigenvalues(theta0, count, rim)
    assert lam.shape == (count,)
    area, rim_length = 2 * np.pi * (1 - np.cos(theta0)), 2 * np.pi * np.sin(theta0)
    weyl = area * lam[-1] / (4 * np.pi) + sign * rim_length * np.sqrt(lam[-1]) / (4 * np.pi)
    # observed |N - weyl| = 0.3 (Dirichlet) and 2.1 (Neumann); 1.5 % of N allows the o(sqrt lam)
    # remainder, while a missed order m would remove tens of values
    assert abs(count - weyl) < 0.015 * count


def test_cap_labels_come_in_cos_sin_pairs():
    lam, nu, m = ref.cap_eigenvalues(1.1, 41, "dirichlet", return_labels=True)
    assert lam.shape == m.shape == (41,)
    for order in np.unique(np.abs(m[m != 0])):
        plus, minus = nu[m == order], nu[m == -order]
        if plus.size == minus.size:
            assert np.array_equal(plus, minus)  # same degree for cos and sin modes
        else:  # only the last pair may be cut
            assert plus.size == minus.size + 1 and plus[-1] == nu[-1]


@pytest.mark.parametrize("rim, zeros", [("dirichlet", jn_zeros), ("neumann", jnp_zeros)])
def test_small_cap_tends_to_the_flat_disc(rim, zeros):
    # lambda theta0^2 -> j_{m,1}^2 (Dirichlet) or j'_{m,1}^2 (Neumann), flat-disc Bessel
    # zeros from scipy.special.jn_zeros / jnp_zeros, for m = 1
    errors = []
    for theta0 in (0.2, 0.1, 0.05):
        lam, nu, m = ref.cap_eigenvalues(theta0, 6, rim, return_labels=True)
        first = lam[m == 1][0]
        errors.append(abs(first * theta0**2 / zeros(1, 1)[0] ** 2 - 1))
    # curvature corrections are O(theta0^2): each halving should divide the error by ~4
    assert errors[0] > 3 * errors[1] > 9 * errors[2]
    assert errors[2] < 2e-3


@pytest.mark.parametrize("rim", ["dirichlet", "neumann"])
def test_cap_with_a_pinhole_tends_to_the_sphere(rim):
    # A hole of angular radius eps at the south pole perturbs the order-m sphere level
    # l = m by O(eps^(2m)) (Y_mm ~ sin^m theta there); Dirichlet levels lie above the sphere's
    # (domain monotonicity).  This exercises the Legendre evaluation near theta = pi, where
    # hypergeometric series fail.  Observed coefficients: 3/2 (m = 1) and 15/4 (m = 2).
    shifts = {1: [], 2: []}
    for eps in (0.04, 0.02, 0.01):
        lam, nu, m = ref.cap_eigenvalues(np.pi - eps, 12, rim, return_labels=True)
        for order in (1, 2):
            shifts[order].append(lam[m == order][0] - order * (order + 1))
    for order, expected_ratio in ((1, 4.0), (2, 16.0)):
        s = np.array(shifts[order])
        if rim == "dirichlet":
            assert np.all(s > 0)
        ratios = s[:-1] / s[1:]
        # 3 %: the next term is O(eps^2) relative (eps^2 = 1.6e-3 at most here)
        assert np.allclose(ratios, expected_ratio, rtol=0.03)


def test_cap_rejects_bad_arguments():
    for bad in (0.0, np.pi, -1.0):
        with pytest.raises(ValueError):
            ref.cap_eigenvalues(bad, 3)
    with pytest.raises(ValueError):
        ref.cap_eigenvalues(1.0, 3, rim="robin")


# ----------------------------------------------------------------------------- areas and curvature
def ellipsoid_area_by_quadrature(a, b, c):
    t, p, w = gauss_grid(0, np.pi, 0, 2 * np.pi)
    s = np.sin(t)
    # |r_theta x r_phi| for r = (a sin t cos p, b sin t sin p, c cos t)
    density = np.sqrt((b * c * s * np.cos(p)) ** 2 + (a * c * s * np.sin(p)) ** 2 + (a * b * np.cos(t)) ** 2)
    return np.sum(w * s * density)


@pytest.mark.parametrize("a, c", [(1.0, 0.3), (2.0, 1.5), (1.0, 2.5), (0.5, 4.0)])
def test_spheroid_area_against_quadrature(a, c):
    # 1e-11: 200 x 200 Gauss-Legendre on a smooth periodic integrand is converged to ~1e-14
    assert ref.spheroid_area(a, c) == pytest.approx(ellipsoid_area_by_quadrature(a, a, c), rel=1e-11)


def test_spheroid_sphere_limit_is_continuous():
    R = 1.7
    for c in (R * (1 - 1e-12), R, R * (1 + 1e-12), R * (1 - 1e-6), R * (1 + 1e-6)):
        # 4 pi R^2 plus a first-order change (8 pi R^2/3) (c - R)/R; 1e-13 relative headroom
        expected = 4 * np.pi * R**2 * (1 + 2 / 3 * (c - R) / R)
        assert ref.spheroid_area(R, c) == pytest.approx(expected, rel=1e-11)


def test_spheroid_area_broadcasts():
    out = ref.spheroid_area(np.array([1.0, 1.0, 1.0]), np.array([0.5, 1.0, 2.0]))
    assert out.shape == (3,)
    assert out[1] == pytest.approx(4 * np.pi, rel=1e-15)


def test_ellipsoid_area_matches_spheroid_quadrature_and_elliprg():
    for a, c in [(1.0, 0.4), (1.0, 3.0)]:
        for axes in [(a, a, c), (a, c, a), (c, a, a)]:  # the equal pair in every position
            assert ref.ellipsoid_area(*axes) == pytest.approx(ref.spheroid_area(a, c), rel=1e-13)
    a, b, c = 3.0, 2.0, 0.7
    assert ref.ellipsoid_area(a, b, c) == pytest.approx(ellipsoid_area_by_quadrature(a, b, c), rel=1e-11)
    # scipy's own R_G (a separate Carlson implementation), DLMF 19.33.1
    direct = 4 * np.pi * a * b * c * elliprg(a**-2, b**-2, c**-2)
    assert ref.ellipsoid_area(a, b, c) == pytest.approx(direct, rel=1e-13)
    assert ref.ellipsoid_area(1.0, 1.0, 1.0) == pytest.approx(4 * np.pi, rel=1e-14)


def test_torus_and_cap_area_against_quadrature():
    R, r = 2.0, 0.6
    u, v, w = gauss_grid(0, 2 * np.pi, 0, 2 * np.pi)
    assert ref.torus_area(R, r) == pytest.approx(np.sum(w * r * (R + r * np.cos(v))), rel=1e-12)
    t, _, w = gauss_grid(0, 1.1, 0, 2 * np.pi)
    assert ref.cap_area(1.5, 1.1) == pytest.approx(np.sum(w * 1.5**2 * np.sin(t)), rel=1e-12)
    assert ref.cap_area(1.0, np.pi) == pytest.approx(4 * np.pi, rel=1e-15)
    with pytest.raises(GeometryError):
        ref.torus_area(1.0, 2.0)


def test_gauss_bonnet_constants_against_integrated_curvature():
    # ellipsoid: K = 1 / (a b c)^2 / (x^2/a^4 + y^2/b^4 + z^2/c^4)^2 (do Carmo, section 3-3)
    a, b, c = 2.0, 1.3, 0.8
    t, p, w = gauss_grid(0, np.pi, 0, 2 * np.pi)
    x, y, z = a * np.sin(t) * np.cos(p), b * np.sin(t) * np.sin(p), c * np.cos(t)
    K = 1 / (a * b * c) ** 2 / (x**2 / a**4 + y**2 / b**4 + z**2 / c**4) ** 2
    s = np.sin(t)
    dA = s * np.sqrt((b * c * s * np.cos(p)) ** 2 + (a * c * s * np.sin(p)) ** 2 + (a * b * np.cos(t)) ** 2)
    assert np.sum(w * K * dA) == pytest.approx(ref.gaussian_curvature_integral(0), rel=1e-9)
    assert ref.gaussian_curvature_integral(0) == pytest.approx(4 * np.pi, rel=1e-15)
    # torus: K dA = cos(v) du dv
    R, r = 2.0, 0.6
    u, v, w = gauss_grid(0, 2 * np.pi, 0, 2 * np.pi)
    K = np.cos(v) / (r * (R + r * np.cos(v)))
    integral = np.sum(w * K * r * (R + r * np.cos(v)))
    assert abs(integral - ref.torus_gaussian_curvature_integral()) < 1e-12  # absolute: the value is 0
    assert ref.gaussian_curvature_integral(2) == pytest.approx(-4 * np.pi, rel=1e-15)


# ----------------------------------------------------------------------------- balls
def test_ball_dirichlet_against_tables_and_residuals():
    # Abramowitz and Stegun Table 10.6 / DLMF 10.21, values recalled from memory
    assert ref.ball_dirichlet(1, 1)[0] == pytest.approx(4.493409457909064, rel=1e-14)
    assert ref.ball_dirichlet(2, 1)[0] == pytest.approx(5.763459196894550, rel=1e-14)
    k0 = ref.ball_dirichlet(0, 6)
    assert k0.shape == (6,)
    assert np.allclose(k0, np.pi * np.arange(1, 7), rtol=1e-14, atol=0)  # j_0 = sin x / x
    k = ref.ball_dirichlet(3, 5, radius=2.0)
    assert k.shape == (5,)
    assert np.max(np.abs(spherical_jn(3, 2.0 * k))) < 1e-14  # |j_l| <= 1: absolute residual


@pytest.mark.parametrize("l", [0, 1, 4, 9])
def test_ball_roots_are_complete(l):
    count = 8
    k = ref.ball_dirichlet(l, count)
    kn = ref.ball_neumann(l, count)
    assert k.shape == kn.shape == (count,)
    # no root is skipped: a dense grid sees exactly the returned number of sign changes
    assert sign_changes(lambda x: spherical_jn(l, x), 0, k[-1] + 0.1) == count
    extra = 1 if l == 0 else 0  # the l = 0 zero mode is not a sign change of j_0'
    assert sign_changes(lambda x: spherical_jn(l, x, derivative=True), 0, kn[-1] + 0.1) == count - extra


def test_ball_neumann_zero_mode_and_values():
    k = ref.ball_neumann(0, 4)
    assert k.shape == (4,)
    assert k[0] == 0.0
    assert np.allclose(k[1:], ref.ball_dirichlet(1, 3), rtol=1e-14)  # j_0' = -j_1 (DLMF 10.51.2)
    # first zero of j_1', 2.081575978 (A&S Table 10.6 family, recalled from memory)
    assert ref.ball_neumann(1, 1)[0] == pytest.approx(2.0815759778, rel=1e-9)
    kn = ref.ball_neumann(2, 4, radius=0.5)
    assert np.max(np.abs(spherical_jn(2, 0.5 * kn, derivative=True))) < 1e-14


# ----------------------------------------------------------------------------- shells
def test_shell_l0_is_n_pi_over_thickness():
    a, b = 0.7, 1.9
    k = ref.shell_dirichlet(0, 7, a, b)
    assert k.shape == (7,)
    # u = r R(r) = sin(k (r - a)): exact, 1e-13 relative for the root finder
    assert np.allclose(k, np.arange(1, 8) * np.pi / (b - a), rtol=1e-13, atol=0)


def cross_residual(l, k, a, b, inner, outer):
    """Determinant of the wall conditions over the product of its two moduli (dimensionless)."""
    da, db = inner == "neumann", outer == "neumann"
    ja, ya = spherical_jn(l, k * a, da), spherical_yn(l, k * a, da)
    jb, yb = spherical_jn(l, k * b, db), spherical_yn(l, k * b, db)
    return (ja * yb - jb * ya) / (np.hypot(ja, ya) * np.hypot(jb, yb))


@pytest.mark.parametrize("inner", ["dirichlet", "neumann"])
@pytest.mark.parametrize("outer", ["dirichlet", "neumann"])
@pytest.mark.parametrize("l", [0, 2, 7])
def test_shell_roots_have_small_residual_and_are_complete(l, inner, outer):
    a, b, count = 0.6, 1.4, 6
    k = ref.shell_mixed(l, count, a, b, inner, outer)
    assert k.shape == (count,)
    zero_mode = l == 0 and inner == outer == "neumann"
    if zero_mode:
        assert k[0] == 0.0
    nonzero = k[1:] if zero_mode else k
    assert np.all(np.diff(k) > 0)
    # 1e-12: the normalised determinant has slope O(1/spacing); roots are refined to 1e-15
    assert np.max(np.abs(cross_residual(l, nonzero, a, b, inner, outer))) < 1e-12
    changes = sign_changes(lambda x: cross_residual(l, x, a, b, inner, outer), 1e-3, k[-1] + 0.05)
    assert changes == nonzero.size


def test_shell_wrappers_and_ball_limit():
    assert np.array_equal(ref.shell_dirichlet(3, 4, 1.0, 2.0), ref.shell_mixed(3, 4, 1.0, 2.0))
    assert np.array_equal(ref.shell_neumann(0, 3, 1.0, 2.0),
                          ref.shell_mixed(0, 3, 1.0, 2.0, "neumann", "neumann"))
    # a tiny hole barely moves l >= 1 modes (y_l weight ~ (k a)^(2l+1)): 1e-8 relative
    assert np.allclose(ref.shell_dirichlet(2, 3, 1e-3, 1.0), ref.ball_dirichlet(2, 3), rtol=1e-8)
    for a, b in [(1.0, 1.0), (2.0, 1.0)]:
        with pytest.raises(GeometryError):
            ref.shell_dirichlet(1, 2, a, b)
    with pytest.raises(ValueError):
        ref.shell_mixed(1, 2, 1.0, 2.0, inner="free")


def test_thin_shell_band_limit():
    # exact for l = 0
    for d in (0.3, 0.05):
        assert ref.shell_dirichlet(0, 1, 1 - d / 2, 1 + d / 2)[0] ** 2 == pytest.approx(
            ref.thin_shell_lowest_band(0, 1.0, d), rel=1e-13)
    # l = 2: observed error 2.3e-2, 5.9e-3, 1.5e-3, 3.7e-4 for d = 0.2, 0.1, 0.05, 0.025,
    # i.e. O(d^2), with the coefficient l(l+1)(1/4 - 3/(2 pi^2)) / R^4 of first-order
    # perturbation theory (derived in thin_shell_lowest_band's docstring)
    l, R = 2, 1.0
    errors = []
    for d in (0.2, 0.1, 0.05, 0.025):
        k = ref.shell_dirichlet(l, 1, R - d / 2, R + d / 2)[0]
        errors.append(k**2 - ref.thin_shell_lowest_band(l, R, d))
        coefficient = l * (l + 1) * (0.25 - 1.5 / np.pi**2) / R**4
        assert errors[-1] / d**2 == pytest.approx(coefficient, rel=0.1)  # next term O(d^2)
    assert all(e > 0 for e in errors)
    assert all(3.8 < errors[i] / errors[i + 1] < 4.2 for i in range(3))  # halving d quarters the error
    assert np.allclose(ref.thin_shell_lowest_band(np.arange(3), 2.0, 0.1),
                       np.pi**2 / 0.01 + np.array([0, 2, 6]) / 4.0, rtol=1e-15)


# ----------------------------------------------------------------------------- finite well
def bdd_residual(l, E, V0, a, m_in, m_out, h=1.0):
    """BenDaniel-Duke mismatch with scipy's spherical_kn, normalised by its two terms."""
    k = np.sqrt(E * m_in / h)
    kappa = np.sqrt((V0 - E) * m_out / h)
    inside = k / m_in * spherical_jn(l, k * a, True) * spherical_kn(l, kappa * a)
    outside = kappa / m_out * spherical_kn(l, kappa * a, True) * spherical_jn(l, k * a)
    return (inside - outside) / (abs(inside) + abs(outside))


def test_finite_well_equal_masses_l0_is_griffiths_odd_condition():
    a, V0, h = 1.3, 40.0, 0.7
    E = ref.finite_spherical_well(0, V0, a, 1.0, 1.0, hbar2_over_2=h)
    z0 = a * np.sqrt(V0 / h)
    # Griffiths (finite square well, odd states): one state per (n - 1/2) pi < z0
    assert E.shape == (int(np.floor(z0 / np.pi + 0.5)),)
    assert E.size == 3  # z0 = 9.83, between 5 pi / 2 and 7 pi / 2
    k, kappa = np.sqrt(E / h), np.sqrt((V0 - E) / h)
    assert np.allclose(-1 / np.tan(k * a), kappa / k, rtol=1e-10)
    assert np.all((E > 0) & (E < V0))


def test_finite_well_deep_limit_is_hard_ball():
    hard = ref.ball_dirichlet(1, 1)[0]
    shifts = []
    for V0 in (1e2, 1e4, 1e6):
        k = np.sqrt(ref.finite_spherical_well(1, V0, 1.0, 1.0, 1.0)[0])
        shifts.append((k / hard - 1) * np.sqrt(V0))
    # penetration shifts k by about -k/(kappa a): scaled shift -> -1 (observed -0.93, -0.990, -0.999)
    assert shifts[-1] == pytest.approx(-1.0, abs=0.01)
    assert abs(shifts[2] + 1) < abs(shifts[1] + 1) < abs(shifts[0] + 1)


def test_finite_well_mass_jump_residual_and_direction():
    energies = {}
    for m_out in (0.3, 1.0, 3.0):
        E = ref.finite_spherical_well(2, 80.0, 1.0, 1.0, m_out)
        assert E.size >= 1
        assert np.max(np.abs(bdd_residual(2, E, 80.0, 1.0, 1.0, m_out))) < 1e-10
        energies[m_out] = E[0]
    # min-max: the kinetic term (hbar^2/2m) |grad psi|^2 falls as mass_out grows, so every
    # level must fall too
    assert energies[0.3] > energies[1.0] > energies[3.0]


def test_finite_well_finds_a_state_just_below_threshold():
    # z0 = pi/2 + 0.02: Griffiths' odd condition has one root with k a just below z0,
    # i.e. E close to V0; the scan must reach the threshold itself to see it
    z0 = np.pi / 2 + 0.02
    E = ref.finite_spherical_well(0, z0**2, 1.0, 1.0, 1.0)
    assert E.shape == (1,)
    assert 0.99 * z0**2 < E[0] < z0**2
    k, kappa = np.sqrt(E[0]), np.sqrt(z0**2 - E[0])
    assert -1 / np.tan(k) == pytest.approx(kappa / k, rel=1e-8)  # kappa is small: looser than 1e-10


def test_finite_well_shallow_binds_nothing():
    # Griffiths: no l = 0 state while z0 < pi/2 (here z0 = 1.5)
    assert ref.finite_spherical_well(0, 2.25, 1.0, 1.0, 1.0).shape == (0,)


# ----------------------------------------------------------------------------- rotor
def test_rotational_constant():
    I = 2.7e-47
    independent = constants.hbar**2 / (2 * I) / (constants.h * constants.c) / 100  # E_1/2 in cm^-1
    assert ref.rotational_constant_cm(I) == pytest.approx(independent, rel=1e-14)
    # H2: B ~ 60.8 cm^-1 with I ~ 4.6e-48 kg m^2 (both recalled from memory; 2 % tolerance)
    assert ref.rotational_constant_cm(4.6e-48) == pytest.approx(60.8, rel=0.02)
    with pytest.raises(ValueError):
        ref.rotational_constant_cm(-1.0)


def test_mean_cos2_against_the_closed_form():
    # <l m| cos^2 theta |l m> = (2 l^2 + 2 l - 2 m^2 - 1) / ((2l - 1)(2l + 3)): recalled from memory (the
    # recurrence x P_l^m = ((l - m + 1) P_{l+1}^m + (l + m) P_{l-1}^m) / (2l + 1), DLMF 14.10.3, applied twice)
    for l in range(7):
        for m in range(l + 1):
            closed = (2 * l * l + 2 * l - 2 * m * m - 1) / ((2 * l - 1) * (2 * l + 3))
            assert abs(ref.mean_cos2(l, m) - closed) < 1e-13


@pytest.mark.parametrize("inner", [0.0, 1.0])
def test_spheroidal_first_order_averages_to_a_uniform_dilation(inner):
    # sum over m of |Y_lm|^2 is (2l+1)/(4 pi) (Unsold; addition theorem DLMF 14.30.9), so the multiplet's mean
    # first-order shift under delta r = b delta cos^2 theta is that of a uniform dilation by delta <cos^2> = delta/3:
    # compare with the exact roots of the sphere of radius b (1 + delta/3); the difference is O(delta^2)
    b, delta = 2.0, 1e-4
    def roots(l, radius):
        return ref.ball_dirichlet(l, 2, radius) if inner == 0.0 else ref.shell_dirichlet(l, 2, inner, radius)

    for l in range(4):
        exact, grown = roots(l, b) ** 2, roots(l, b * (1 + delta / 3)) ** 2
        shifts = [(1 if m == 0 else 2) * (ref.spheroidal_first_order(l, m, 2, b, b * (1 + delta), inner) - exact)
                  for m in range(l + 1)]
        mean = np.sum(shifts, axis=0) / (2 * l + 1)
        # the O(delta^2) term, O(delta) = 1e-4 relative to the shift: measured 5e-5 (ball), 1e-4 (shell)
        assert np.allclose(mean, grown - exact, rtol=1e-3), (l, mean, grown - exact)
