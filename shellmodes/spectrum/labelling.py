"""Labellers: parent labels and angular content of solved modes, one per family of discretisation.

A labeller takes the problem, the plan and the solved modes and returns
:class:`Labels`: the multiplets (with parent l and, where analysed, the
basis-independent content of each multiplet's subspace), per-mode columns
for the tables (``n``, ``dominant_l``, ``l_weight``, ...), per-mode angular
content, and which rule gave the labels.  Labellers register by name; each
discretisation names its own (:attr:`shellmodes.fem.discretisation.Discretisation.labeller`).

``surface``
    Closed sphere-like surfaces: the parent l of a multiplet is the nearest l
    of lam R_eq^2 with R_eq^2 = area / 4 pi; per-mode and per-multiplet
    angular content by least squares on the radial map (:mod:`shellmodes.spectrum.angular`).
``field``
    Complex modes in a magnetic field or flux (any discretisation): <L_z>, the
    parent field-free multiplet by overlap, paramagnetic and diamagnetic parts
    (:mod:`shellmodes.spectrum.fields`).
``volume``
    Shells and balls: (n, l) exact on the separable path, by overlap with the
    mean-radius spherical shell's modes on the LOBPCG path for deformed prisms,
    and otherwise from the angular content with radial factors
    (:func:`shellmodes.volume.radial_angular_labels`).
"""

from __future__ import annotations

import warnings
from collections.abc import Callable
from dataclasses import dataclass, field, replace

import numpy as np

from shellmodes.errors import DoubtfulResultWarning
from shellmodes.spectrum.multiplets import Multiplet, build_multiplets

__all__ = ["Labels", "LABELLERS", "register_labeller", "label_modes"]


@dataclass(frozen=True, eq=False)
class Labels:
    multiplets: list[Multiplet]
    columns: dict = field(default_factory=dict)
    angular: object | None = None
    rule: str | None = None
    #: extra records for spectrum.json (e.g. ``perturbation`` rows of star-shaped surfaces)
    info: dict = field(default_factory=dict)
    #: warnings about the labelled modes (already issued as DoubtfulResultWarning)
    messages: list = field(default_factory=list)


#: name -> function(problem, plan, solved, scale, tolerance) -> Labels
LABELLERS: dict[str, Callable] = {}


def register_labeller(name: str):
    def wrap(function):
        LABELLERS[name] = function
        return function

    return wrap


def label_modes(problem, plan, solved, scale, tolerance: float) -> Labels:
    """Labels of solved modes by the labeller the discretisation names (``scale``: the case's EnergyScale);
    complex modes in a magnetic field by the ``field`` labeller (:mod:`shellmodes.spectrum.fields`)."""
    name = "field" if problem.complex else problem.disc.labeller
    return LABELLERS[name](problem, plan, solved, scale, tolerance)


@register_labeller("field")
def _field(problem, plan, solved, scale, tolerance) -> Labels:
    from shellmodes.spectrum.fields import field_labels

    multiplets, columns, rule, info = field_labels(problem, plan, solved, scale, tolerance)
    return Labels(multiplets, columns, rule=rule, info=info)


#: a subspace's dominant degree names the parent l when its weight is at least this (unambiguous)
DOMINANT_WEIGHT = 0.5


@register_labeller("surface")
def _surface(problem, plan, solved, scale, tolerance) -> Labels:
    from shellmodes.spectrum.angular import angular_content, harmonic_projector, multiplet_content
    from shellmodes.spectrum.perturbation import perturbation_rows

    disc, lam, vectors = problem.disc, solved.pairs.lam, solved.vectors
    shape = disc.shape
    sphere_like = shape.closed and shape.sphere_like
    radius_eq2 = problem.operators.extra["area"] / (4 * np.pi) if sphere_like else None
    multiplets = build_multiplets(lam, scale.energies(lam), tolerance, plan.scale, radius_eq2)
    multiplets = [m if m.l is None else m.with_parent("nearest-l") for m in multiplets]
    rows = perturbation_rows(shape, lam, multiplets, scale.factor)
    info = {"perturbation": rows} if rows else {}
    columns, rule = {}, None
    multiplets, columns = _abs_m(problem, vectors, multiplets)
    if columns:
        rule = M_RULE
        if sphere_like:
            from shellmodes.spectrum.azimuthal import continuation_parents

            parents = continuation_parents([m.abs_m for m in multiplets])
            multiplets = [m if l is None else m.with_parent("continuation", l) for m, l in zip(multiplets, parents)]
    if not sphere_like or vectors.shape[1] == 0:
        return Labels(multiplets, columns, info=info, rule=rule)
    top = max((m.l for m in multiplets if m.l is not None), default=0)
    # (l_max + 1)^2 harmonics must stay well below the number of nodes to be resolved
    resolvable = int(np.sqrt(disc.ndofs / 8.0)) - 1
    l_max = max(0, min(top + 3, resolvable))
    axisymmetric = shape.name in ("sphere", "spheroid") or (
        shape.name == "deformed_sphere" and all(m == 0 for _, m, _ in shape.deformation))
    M = problem.operators.M
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # l_max is chosen within the resolvable range above
        projector = harmonic_projector(disc.nodes, M, l_max, center=shape.center)
        per_mode = angular_content(disc.nodes, vectors, M, l_max, axisymmetric=axisymmetric, projector=projector)
        content = multiplet_content(disc.nodes, vectors, M, [m.members for m in multiplets], l_max,
                                    projector=projector)
    labelled = [_parent(m.with_content(row), l_max) for m, row in zip(multiplets, content, strict=True)]
    text = ("parent l: on surfaces of revolution the sphere level each |m| class connects to (continuation), "
            "else the dominant degree of each multiplet's subspace where its weight is >= 1/2 "
            "(dominant-weight), else the nearest l(l+1) to lambda R_eq^2 (nearest-l)")
    return Labels(labelled, columns, angular=per_mode, rule=text if rule is None else f"{text}; {rule}", info=info)


def _parent(multiplet, l_max: int):
    """The dominant-weight parent where it is unambiguous and not at the edge of the fitted degrees."""
    w, l = multiplet.subspace_weight, multiplet.subspace_l
    if multiplet.label_rule == "continuation":
        return multiplet
    if w is not None and w >= DOMINANT_WEIGHT and l is not None and l < l_max:
        return multiplet.with_parent("dominant-weight", l)
    return multiplet


def _abs_m(problem, vectors, multiplets):
    """Multiplets with their |m| content and the per-mode ``abs_m`` column, where the problem is symmetric about z.

    The geometry's symmetry comes from the discretisation (its azimuthal matrix, None where it
    is not symmetric); a potential that depends on phi breaks the symmetry and gives no |m|.
    """
    from shellmodes.spectrum.azimuthal import multiplet_abs_m, potential_axisymmetric

    if vectors.shape[1] == 0 or not potential_axisymmetric(problem.potential, problem.disc.nodes):
        return multiplets, {}
    Q = problem.disc.azimuthal_matrix()
    if Q is None:
        return multiplets, {}
    values = multiplet_abs_m(Q, vectors, [m.members for m in multiplets])
    column = np.full(vectors.shape[1], -1, dtype=int)
    out = []
    for m, ms in zip(multiplets, values, strict=True):
        column[list(m.members)] = ms  # the subspace's sorted |m| over its members (basis-invariant as a set)
        out.append(replace(m, abs_m=tuple(int(v) for v in ms)))
    return out, {"abs_m": [int(v) for v in column]}


#: the rule text for |m| labels (tables and spectrum.json)
M_RULE = "|m|: eigenvalues of -d2/dphi2 on each multiplet's subspace"


@register_labeller("volume")
def _volume(problem, plan, solved, scale, tolerance) -> Labels:
    labels = _volume_labels(problem, plan, solved, scale, tolerance)
    if problem.disc.kind != "prisms":
        return labels
    from shellmodes.fem.layering import coarse_barrier_warnings

    messages = coarse_barrier_warnings(problem.disc.raw, solved.pairs.lam, problem.media.inverse_mass,
                                       problem.media.offsets)
    for message in messages:
        warnings.warn(message, DoubtfulResultWarning, stacklevel=3)
    return replace(labels, messages=messages)


def _volume_labels(problem, plan, solved, scale, tolerance) -> Labels:
    """(n, l) labels, with |m| per multiplet where every wall is symmetric about z."""
    labels = _volume_nl(problem, plan, solved, scale, tolerance)
    multiplets, columns = _abs_m(problem, solved.vectors, labels.multiplets)
    if not columns:
        return labels
    rule = M_RULE if labels.rule is None else f"{labels.rule}; {M_RULE}"
    return replace(labels, multiplets=multiplets, columns={**labels.columns, **columns}, rule=rule)


def _volume_nl(problem, plan, solved, scale, tolerance) -> Labels:
    lam = solved.pairs.lam
    energies = scale.energies(lam)
    given = solved.labels
    if "n" in given:  # exact (separable) or by overlap with a spherical reference (deformed prisms)
        n, l, weight, rule = given["n"], given["l"], given["weight"], given["rule"]
        columns = {"n": [int(v) for v in n], "dominant_l": [int(v) for v in l],
                   "l_weight": [float(v) for v in weight]}
        tag = "separable" if plan.path == "separable" else "overlap"
        return Labels(_tagged(build_multiplets(lam, energies, tolerance, plan.scale, mode_l=l), tag), columns,
                      rule=rule)
    fitted = _fitted(problem, solved.vectors)
    if fitted is None:
        return Labels(build_multiplets(lam, energies, tolerance, plan.scale))
    columns = {"n": [int(v) for v in fitted.n], "dominant_l": [int(v) for v in fitted.l],
               "l_weight": [float(fitted.content[i, fitted.l[i]]) for i in range(len(lam))]}
    symmetric = problem.symmetric
    rule = "(n, l) from angular content" + ("" if symmetric else " (parent labels, deformed)")
    return Labels(_tagged(build_multiplets(lam, energies, tolerance, plan.scale, mode_l=fitted.l), "angular-fit"),
                  columns, rule=rule)


def _tagged(multiplets, rule: str):
    return [m if m.l is None else m.with_parent(rule) for m in multiplets]


def _fitted(problem, vectors):
    """(n, l) per mode from the angular content with radial factors, or None when it cannot be fitted."""
    from shellmodes.spectrum.radial_labels import radial_angular_labels

    if vectors.shape[1] == 0:
        return None
    radial_degree = 6
    # (l_max + 1)^2 (radial_degree + 1) fitting functions must stay below 1/8 of the nodes to be resolved,
    # and the count of modes bounds the degrees present (l <= sqrt(count) for a ladder of 2l+1 multiplets)
    resolvable = int(np.sqrt(problem.disc.ndofs / (8.0 * (radial_degree + 1)))) - 1
    l_max = max(1, min(12, resolvable, int(np.sqrt(vectors.shape[1])) + 2))
    try:
        return radial_angular_labels(problem.disc.nodes, vectors, problem.operators.M, l_max,
                                     radial_degree=radial_degree)
    except (ValueError, np.linalg.LinAlgError):
        return None
