"""The thin-layer (confinement) potential of a particle squeezed onto a surface.

A particle confined to a thin layer around a surface feels, besides the
Laplace-Beltrami kinetic energy, the geometric potential

    V_g = -(hbar^2 / 2m) (H^2 - K) = -(hbar^2 / 8m) (k1 - k2)^2

(da Costa, Phys. Rev. A 23, 1982 (1981)), H = (k1 + k2)/2 the mean and
K = k1 k2 the Gaussian curvature.  It is never positive and vanishes where the
surface is umbilic (everywhere on a sphere).  In lambda units (energies over
E0 = hbar^2 / (2 m L^2), lengths in L) it is v_g = -(H^2 - K), whatever the
mass.

Curvatures come from the exact shape where there is one:
- sphere and cap: k1 = k2 = 1/R, so v_g = 0;
- ellipsoid and spheroid: the implicit surface F = sum x_i^2/a_i^2 - 1 with its
  exact gradient g and Hessian Hs: K = g^T adj(Hs) g / |g|^4 and
  2H |g|^3 = g^T Hs g - |g|^2 tr(Hs) (Goldman, Computer Aided Geometric
  Design 22, 632 (2005), equations for implicit surfaces);
- torus: k1 = 1/r around the tube, k2 = cos v / (R + r cos v), so
  k1 - k2 = R / (r (R + r cos v)) in closed form;
- star: the same implicit formulas for F = |x| - R f(x/|x|), gradient and
  Hessian by fourth-order central differences (step 1e-3 of the radius:
  truncation near 1e-12, rounding near 1e-10 relative);
- mesh files: the snap shape's exact curvature when a snap target is given,
  otherwise the curved geometry's own (:func:`shellmodes.curvature.curvatures`,
  elementwise from the Gauss map of the degree-k geometry; its pointwise
  error falls as O(h^(k-1)), and the eigenvalues converge faster because the
  errors average out: see tests/test_thin_layer.py for the observed orders).
"""

from __future__ import annotations

import numpy as np

__all__ = ["shape_curvatures", "thin_layer_lambda", "thin_layer_at_quadrature", "thin_layer_at_nodes",
           "implicit_curvatures"]


def implicit_curvatures(grad: np.ndarray, hess: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Mean H (sign of the gradient's side) and Gaussian K of level sets from gradients (N, 3), Hessians (N, 3, 3)."""
    gnorm2 = np.einsum("ni,ni->n", grad, grad)
    gnorm = np.sqrt(gnorm2)
    adj = np.empty_like(hess)  # adjugate (cofactor transpose) of each symmetric Hessian
    for i in range(3):
        for j in range(3):
            r = [k for k in range(3) if k != j]
            c = [k for k in range(3) if k != i]
            minor = hess[:, r][:, :, c]
            adj[:, i, j] = (-1) ** (i + j) * (minor[:, 0, 0] * minor[:, 1, 1] - minor[:, 0, 1] * minor[:, 1, 0])
    K = np.einsum("ni,nij,nj->n", grad, adj, grad) / gnorm2**2
    H = (np.einsum("ni,nij,nj->n", grad, hess, grad) - gnorm2 * np.trace(hess, axis1=1, axis2=2)) / (2 * gnorm**3)
    return -H, K


def _finite_difference(F, points: np.ndarray, step: float):
    """Gradient and Hessian of a scalar field F((N, 3)) -> (N,) by fourth-order central differences."""
    n = len(points)
    eye = np.eye(3) * step
    grad = np.empty((n, 3))
    hess = np.empty((n, 3, 3))
    f0 = F(points)
    for i in range(3):
        e = eye[i]
        fp1, fm1, fp2, fm2 = F(points + e), F(points - e), F(points + 2 * e), F(points - 2 * e)
        grad[:, i] = (8 * (fp1 - fm1) - (fp2 - fm2)) / (12 * step)
        hess[:, i, i] = (-fp2 + 16 * fp1 - 30 * f0 + 16 * fm1 - fm2) / (12 * step**2)
        for j in range(i + 1, 3):
            f = eye[j]

            def mixed(a, b, e=e, f=f):
                return F(points + a * e + b * f)

            # Richardson on the 4-point cross difference: (16 S(h) - S(2h)) / (48 h^2)
            value = (16 * (mixed(1, 1) - mixed(1, -1) - mixed(-1, 1) + mixed(-1, -1))
                     - (mixed(2, 2) - mixed(2, -2) - mixed(-2, 2) + mixed(-2, -2))) / (48 * step**2)
            hess[:, i, j] = hess[:, j, i] = value
    return grad, hess


def shape_curvatures(shape, points: np.ndarray):
    """(H, K) of an analytic shape at points on (or snapped onto) it, or None for an unsnapped mesh file."""
    name = shape.name
    if name == "mesh":
        if shape.snap_shape is None:
            return None
        return shape_curvatures(shape.snap_shape, points)
    points = shape.snap(np.asarray(points, dtype=float))
    n = len(points)
    if name in ("sphere", "cap"):
        return np.full(n, 1.0 / shape.radius), np.full(n, 1.0 / shape.radius**2)
    if name in ("ellipsoid", "spheroid"):
        a2 = shape.axes**2
        grad = 2 * points / a2
        hess = np.broadcast_to(np.diag(2 / a2), (n, 3, 3)).copy()
        return implicit_curvatures(grad, hess)
    if name == "torus":
        rho = np.hypot(points[:, 0], points[:, 1])
        k1 = np.full(n, 1.0 / shape.r)
        k2 = (rho - shape.R) / (shape.r * rho)  # cos v / (R + r cos v)
        return 0.5 * (k1 + k2), k1 * k2
    if name == "deformed_sphere":
        from shellmodes.harmonics import angles

        def F(x):
            r = np.linalg.norm(x, axis=1)
            theta, phi = angles(x)
            return r - shape.radius * shape.factor(theta, phi)

        grad, hess = _finite_difference(F, points, 1e-3 * shape.radius)
        return implicit_curvatures(grad, hess)
    raise ValueError(f"no curvature for shape {name!r}")


def thin_layer_lambda(H: np.ndarray, K: np.ndarray) -> np.ndarray:
    """v_g = -(H^2 - K) in 1/L^2 (lambda units), clipped at 0 from above (H^2 >= K up to rounding)."""
    return np.minimum(-(H**2 - K), 0.0)


def thin_layer_at_quadrature(shape, surface) -> np.ndarray:
    """v_g at the quadrature points of ``surface``, (Nel, Nqp)."""
    basis = surface.basis
    x = np.asarray(basis.global_coordinates())  # (3, Nel, Nqp)
    flat = x.reshape(3, -1).T
    found = shape_curvatures(shape, flat)
    if found is None:
        from shellmodes.fem.curvature import curvatures

        K, H, _ = curvatures(surface)
        return thin_layer_lambda(np.asarray(H), np.asarray(K))
    H, K = found
    return thin_layer_lambda(H, K).reshape(x.shape[1:])


def thin_layer_at_nodes(shape, surface, values_qp: np.ndarray) -> np.ndarray:
    """v_g at the surface's nodes: exact where the shape has curvature, else the L2 projection of quadrature values."""
    found = shape_curvatures(shape, surface.nodes)
    if found is not None:
        return thin_layer_lambda(*found)
    import scipy.sparse.linalg as sla
    import skfem

    from shellmodes.fem.forms import mass, potential_form

    load = skfem.asm(potential_form, surface.basis, pot=values_qp) @ np.ones(surface.basis.N)
    return sla.spsolve(skfem.asm(mass, surface.basis).tocsc(), load)


def case_thin_layer(case, shape, surface) -> np.ndarray | None:
    """v_g at the quadrature points when the case asks for the thin-layer potential, else None."""
    if case.fields is None or not case.fields.curvature_potential:
        return None
    return thin_layer_at_quadrature(shape, surface)


def record_thin_layer(spectrum, case, shape, surface, values_qp: np.ndarray, e0) -> None:
    """Add the thin-layer potential's range to the run's tables and log, and its nodal values to the VTU export."""
    scale = e0 if e0 is not None else 1.0
    unit = case.units.energy
    source = "curved geometry (Gauss map)" if shape_curvatures(shape, surface.nodes[:1]) is None else "exact shape"
    low, high = float(np.min(values_qp)) * scale, float(np.max(values_qp)) * scale
    spectrum.info["thin_layer"] = {"min": low, "max": high, "unit": unit, "curvature": source,
                                   "definition": "V_g = -(hbar^2/2m)(H^2 - K), da Costa, Phys. Rev. A 23, 1982 (1981)"}
    text = f"thin-layer potential: min {low:.6g}, max {high:.6g} {unit} (curvature from the {source})"
    spectrum.info["log"] = spectrum.info["log"] + "\n" + text
    spectrum.info.setdefault("summary_notes", []).append(text)
    if spectrum.export:
        nodal = thin_layer_at_nodes(shape, surface, values_qp) * scale
        spectrum.export.setdefault("point_data", {})[f"thin_layer_potential_{unit}"] = nodal
