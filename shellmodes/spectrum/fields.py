"""Labels and records of modes under fields: the ``field`` labeller and the run's field records.

Complex modes (a magnetic field or flux line) get per-mode columns:
``paramagnetic`` = <i C> and ``diamagnetic`` = <|a|^2> (energy units; their sum
with the field-free energy is the level), ``mean_Lz`` about the field axis where
the domain is a body of revolution about it, and the parent multiplet of the
field-free problem on the same mesh that holds most of the mode's weight
(``parent_multiplet``, ``parent_weight``, ``parent_energy``, and ``parent_l`` on
closed sphere-like surfaces).  Every quantity is an expectation value or a
subspace weight, so none depends on the basis chosen inside a degenerate level.
"""

from __future__ import annotations

import hashlib
from collections import OrderedDict

import numpy as np

from shellmodes.eigen.solve import group_multiplets, lowest_modes
from shellmodes.harmonics import parent_degree
from shellmodes.spectrum.multiplets import build_multiplets

__all__ = ["record_fields", "field_columns", "field_labels", "zero_field_modes"]

MODE_LABELS = ("parent_multiplet/parent_l by overlap with the field-free modes of the same mesh; paramagnetic = "
               "<i C>, diamagnetic = <|a|^2> (energy units); mean_Lz about the field axis where the domain is a "
               "body of revolution about it")


#: field-free reference solves kept for reuse: a sweep over a field strength or a flux solves the same
#: field-free problem at every step (measured: it was a third of a field step's solve, benchmarks/README.md)
_ZERO_FIELD: OrderedDict = OrderedDict()
_ZERO_FIELD_KEEP = 2


def _fingerprint(*matrices) -> str:
    digest = hashlib.blake2b(digest_size=16)
    for A in matrices:
        A = A.tocsr()
        digest.update(np.asarray(A.shape, dtype=np.int64).tobytes())
        for part in (A.indptr, A.indices, A.data):
            digest.update(np.ascontiguousarray(part).tobytes())
    return digest.hexdigest()


def zero_field_modes(problem, count: int, plan, tolerance: float):
    """Field-free modes of the same mesh and walls (real), enough to hold every parent multiplet of ``count``.

    The last few solves are kept, keyed by the bytes of the field-free K and M (so only an identical
    problem reuses them): every step of a field sweep needs the same field-free modes.
    """
    operators = problem.operators
    # the field-free K as assembled (Re(K) - D would differ in its last bits from one field to the next)
    K0 = problem.space.restrict(operators.extra["field_free"])
    n = K0.shape[0]
    wanted = max(1, min(n - 2, count + 8))
    key = (_fingerprint(K0, problem.M), plan.lower_bound, plan.scale, tolerance)
    if key in _ZERO_FIELD and len(_ZERO_FIELD[key].lam) >= wanted:  # more reference modes than needed: harmless
        _ZERO_FIELD.move_to_end(key)
        return _ZERO_FIELD[key]
    from threadpoolctl import threadpool_limits

    wanted = max(1, min(n - 2, count + 8 + count // 8))  # room for the count to grow along a sweep
    with threadpool_limits(limits=1):  # as in eigen/planner.solve_plan: spinning BLAS threads cost 4-6x here
        found = lowest_modes(K0, problem.M, count=wanted, lower_bound=plan.lower_bound, scale=plan.scale,
                             multiplet_tolerance=tolerance, residual_limit=1.0)
    _ZERO_FIELD[key] = found
    while len(_ZERO_FIELD) > _ZERO_FIELD_KEEP:
        _ZERO_FIELD.popitem(last=False)
    return found


def _symmetric_axis(problem) -> bool:
    disc, terms = problem.disc, problem.terms
    if terms.b and terms.flux and not np.allclose(abs(terms.axis_vector[2]), 1.0):
        return False  # field and flux line not parallel: no common axis
    if disc.kind == "surface":
        from shellmodes.fem.magnetic import axisymmetric_about

        return axisymmetric_about(disc.shape, terms.axis_vector)
    return terms.spherical_walls


def field_columns(problem, vectors, zero, scale, tolerance, radius_eq2=None) -> dict:
    """Per-mode columns of complex ``vectors`` on every dof (see the module docstring)."""
    extra, unit = problem.operators.extra, scale.factor
    U = vectors
    C, D = extra["paramagnetic"], extra["diamagnetic"]
    columns = {"paramagnetic": (np.real(np.einsum("im,im->m", U.conj(), 1j * (C @ U))) * unit).tolist(),
               "diamagnetic": (np.real(np.einsum("im,im->m", U.conj(), D @ U)) * unit).tolist()}
    if _symmetric_axis(problem):
        from shellmodes.fem.magnetic import lz_matrix

        Lz = lz_matrix(problem.disc.raw.basis, problem.terms.axis_vector, problem.disc.kind == "surface")
        columns["mean_Lz"] = np.real(np.einsum("im,im->m", U.conj(), Lz @ U)).tolist()
    if zero is not None and U.shape[1] and len(zero.lam):
        M = problem.operators.M
        overlap = np.abs(problem.expand(zero.vectors).T @ (M @ U)) ** 2  # (n0, n)
        groups = group_multiplets(zero.lam, tolerance, problem.disc.spectral_scale(problem.operators))
        weights = np.array([overlap[g].sum(axis=0) for g in groups])  # (groups, n)
        best = np.argmax(weights, axis=0)
        columns["parent_multiplet"] = [int(b) for b in best]
        columns["parent_weight"] = [float(weights[b, i]) for i, b in enumerate(best)]
        columns["parent_energy"] = [float(np.mean(zero.lam[groups[b]]) * unit) for b in best]
        if radius_eq2 is not None:
            columns["parent_l"] = [int(parent_degree(np.mean(zero.lam[groups[b]]) * radius_eq2)) for b in best]
    return columns


def field_labels(problem, plan, solved, scale, tolerance) -> tuple:
    """(multiplets, per-mode columns, rule, info) of complex modes (the ``field`` labeller's content)."""
    lam = solved.pairs.lam
    orbital = solved.labels.get("orbital_mode")
    count = len(set(orbital)) if orbital is not None else len(lam)
    zero = zero_field_modes(problem, count, plan, tolerance) if len(lam) else None
    radius_eq2 = None
    if problem.disc.kind == "surface" and problem.disc.shape.closed and problem.disc.shape.sphere_like:
        radius_eq2 = problem.operators.extra["area"] / (4 * np.pi)
    columns = field_columns(problem, solved.vectors, zero, scale, tolerance, radius_eq2)
    for key in ("m_s", "orbital_mode"):
        if key in solved.labels:
            columns[key] = solved.labels[key]
    if "spin_shift" in solved.labels:
        columns["spin_energy"] = [v * scale.factor for v in solved.labels["spin_shift"]]
    # the field splits the (2l+1)-fold levels: multiplets carry no parent l (the per-mode parent_l says it)
    multiplets = build_multiplets(lam, scale.energies(lam), tolerance, plan.scale)
    info = {"fields": {**problem.terms.record, "axisymmetric_about_field": _symmetric_axis(problem),
                       "mode_labels": MODE_LABELS}}
    return multiplets, columns, "field: " + MODE_LABELS, info


def record_fields(spectrum, case) -> None:
    """The run's field records: thin-layer range (tables, log, summary, a nodal VTU field) and the field line."""
    problem = spectrum.problem
    terms = problem.terms
    notes = []
    unit = case.units.energy
    factor = 1.0 if spectrum.info["units"]["energy_per_lambda"] is None else spectrum.info["units"]["energy_per_lambda"]
    values = problem.operators.extra.get("thin_layer")
    if values is not None:
        from shellmodes.fem.thin_layer import shape_curvatures, thin_layer_at_nodes

        disc = problem.disc
        exact = shape_curvatures(disc.shape, disc.nodes[:1]) is not None
        source = "exact shape" if exact else "curved geometry (Gauss map)"
        low, high = float(np.min(values)) * factor, float(np.max(values)) * factor
        spectrum.info["thin_layer"] = {
            "min": low, "max": high, "unit": unit, "curvature": source,
            "definition": "V_g = -(hbar^2/2m)(H^2 - K), da Costa, Phys. Rev. A 23, 1982 (1981)"}
        notes.append(f"thin-layer potential: min {low:.6g}, max {high:.6g} {unit} (curvature from the {source})")
        if spectrum.export:
            nodal = thin_layer_at_nodes(disc.shape, disc.raw, values) * factor
            spectrum.export.setdefault("point_data", {})[f"thin_layer_potential_{unit}"] = nodal
    record = terms.record or {}
    parts = [f"{name} {value:.6g}" for name, value in (
        ("B [T]", record.get("magnetic", {}).get("tesla")),
        ("flux [h/e]", record.get("flux_line", {}).get("flux_quanta_h_over_e"))) if value is not None]
    if parts:
        notes.append("magnetic: " + ", ".join(parts) + "; complex modes; labels by overlap with the field-free modes")
        spectrum.info.setdefault("fields", record)
    if notes:
        spectrum.info["log"] = "\n".join([spectrum.info["log"], *notes])
        spectrum.info.setdefault("summary_notes", []).extend(notes)
