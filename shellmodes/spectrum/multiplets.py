"""A solved spectrum: energies, residuals, multiplets and parent-l labels.

Multiplets are runs of eigenvalues whose neighbours differ by at most the
relative ``multiplet_tolerance``.  On closed genus-0 surfaces each multiplet
is labelled with the parent degree l of the sphere of the same area
(R_eq = sqrt(A / 4 pi)): l is the integer nearest to the root of
l(l+1) = lam R_eq^2, and its expected size is 2l + 1.  A multiplet whose size
differs from 2l+1 shows how the sphere's degeneracy is split.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from shellmodes.eigen.solve import group_multiplets
from shellmodes.harmonics import parent_degree

__all__ = ["Multiplet", "Spectrum", "parent_degree", "build_multiplets"]


@dataclass(frozen=True)
class Multiplet:
    """One multiplet: a run of modes whose eigenvalues lie within ``modes.multiplet_tolerance``.

    Attributes
    ----------
    index : int
        Position in the spectrum, from 0.
    members : tuple of int
        Mode indices.
    eigenvalue, energy : float
        Mean eigenvalue (1/L^2) and mean energy (case unit).
    size : int
        Number of modes.
    l, expected_size : int or None
        Parent degree of the sphere and its 2l+1 (None where no parent is defined, e.g. a torus).
    spread, relative_spread : float
        max - min energy, absolute (case unit) and relative to |mean|.
    subspace_l, subspace_weight, subspace_mean_L2 : float or None
        Basis-independent angular content of the multiplet's subspace, where analysed.
    """

    index: int
    members: tuple[int, ...]
    eigenvalue: float
    energy: float
    size: int
    l: int | None
    expected_size: int | None
    spread: float  # max - min energy, in the energy unit
    relative_spread: float
    #: angular content of the multiplet's whole subspace (basis-independent), where analysed:
    #: dominant degree, its weight and <L^2>/hbar^2 (see :func:`shellmodes.spectrum.angular.multiplet_content`)
    subspace_l: int | None = None
    subspace_weight: float | None = None
    subspace_mean_L2: float | None = None
    #: which rule gave ``l``: "dominant-weight" (the subspace's dominant degree, weight >= 1/2),
    #: "nearest-l" (nearest l(l+1) to lambda R_eq^2), "separable", "overlap", "angular-fit"; None: no l
    label_rule: str | None = None
    #: shapes symmetric about z (surfaces, shells, balls): the sorted |m| of the subspace (-1 unresolved),
    #: see spectrum/azimuthal
    abs_m: tuple[int, ...] | None = None

    def as_dict(self) -> dict:
        return {"index": self.index, "energy": self.energy, "eigenvalue": self.eigenvalue, "size": self.size,
                "l": self.l, "expected_size": self.expected_size, "spread": self.spread,
                "relative_spread": self.relative_spread, "subspace_l": self.subspace_l,
                "subspace_weight": self.subspace_weight, "subspace_mean_L2": self.subspace_mean_L2,
                "label_rule": self.label_rule, "abs_m": None if self.abs_m is None else list(self.abs_m),
                "modes": list(self.members)}

    def with_content(self, row: dict) -> Multiplet:
        """This multiplet with the subspace content of one row of
        :func:`~shellmodes.spectrum.angular.multiplet_content`."""
        return replace(self, subspace_l=int(row["l"]), subspace_weight=float(row["purity"]),
                       subspace_mean_L2=float(row["mean_L2"]))

    def with_parent(self, rule: str, l: int | None = None) -> Multiplet:
        """This multiplet with its parent l set by ``rule`` (l unchanged when None)."""
        l = self.l if l is None else int(l)
        return replace(self, l=l, label_rule=rule, expected_size=None if l is None else 2 * l + 1)


def build_multiplets(lam, energy, tolerance, scale, radius_eq2=None, mode_l=None) -> list[Multiplet]:
    """Group modes into :class:`Multiplet` records.

    The parent degree l of a multiplet comes from ``radius_eq2`` (nearest l of
    lam R_eq^2, surfaces) or from per-mode labels ``mode_l`` (the most common
    label among its members, shells); with neither it is None.
    """
    out = []
    for i, members in enumerate(group_multiplets(lam, tolerance, scale)):
        lam_m = float(np.mean(lam[members]))
        e = energy[members]
        l = None
        if radius_eq2 is not None:
            l = int(parent_degree(lam_m * radius_eq2))
        elif mode_l is not None:
            values, counts = np.unique(np.asarray(mode_l)[members], return_counts=True)
            l = int(values[np.argmax(counts)])
        spread = float(np.max(e) - np.min(e))
        mean = float(np.mean(e))
        out.append(Multiplet(index=i, members=tuple(int(m) for m in members), eigenvalue=lam_m, energy=mean,
                             size=len(members), l=l, expected_size=None if l is None else 2 * l + 1,
                             spread=spread, relative_spread=spread / abs(mean) if mean else 0.0))
    return out


@dataclass(frozen=True, eq=False)
class Spectrum:
    """The result of one solve, with everything needed to report and export it.

    Attributes
    ----------
    eigenvalues
        lam in 1/L^2 (L the case's length unit), ascending.
    energies
        E = E0 lam in the case's energy unit.
    residuals
        Relative residuals ||K u - lam M u|| / (max(|lam|, |sigma|) ||M u||).
    vectors
        (Ndofs, n) M-orthonormal nodal values on the whole mesh (zero on a hard rim).
    nodes
        (Ndofs, 3) positions of the degrees of freedom.
    multiplets
        :class:`Multiplet` records.
    info
        Units, mesh, solver, timings and versions, as written to spectrum.json.
    """

    eigenvalues: np.ndarray
    energies: np.ndarray
    residuals: np.ndarray
    vectors: np.ndarray
    nodes: np.ndarray
    multiplets: list[Multiplet]
    info: dict = field(default_factory=dict)
    export: dict = field(default_factory=dict, repr=False)
    angular: object | None = field(default=None, repr=False)
    #: extra per-mode columns for the tables (e.g. radial order n of shell modes)
    mode_columns: dict = field(default_factory=dict, repr=False)
    #: the solved problem (discretisation, media, operators) and the solver plan, for studies
    #: that need the mass matrix or the mesh again (None for spectra read back from files)
    problem: object | None = field(default=None, repr=False)
    plan: object | None = field(default=None, repr=False)

    def mass_matrix(self):
        """The mass matrix on every dof (the M inner product of :attr:`vectors`), or None if unknown."""
        if self.problem is None:
            return None
        if "operators" in vars(self.problem):  # assembled already
            return self.problem.operators.M
        return self.problem.disc.mass_matrix()

    @property
    def mode_multiplet(self) -> np.ndarray:
        out = np.zeros(len(self.eigenvalues), dtype=int)
        for m in self.multiplets:
            out[list(m.members)] = m.index
        return out

    @property
    def mode_l(self) -> list:
        labels = [None] * len(self.eigenvalues)
        for m in self.multiplets:
            for i in m.members:
                labels[i] = m.l
        return labels

    def modes_table(self) -> list[dict]:
        """One record per mode; with angular content also the dominant l, its weight and <L^2>."""
        mult, ls = self.mode_multiplet, self.mode_l
        rules = [None] * len(self.eigenvalues)
        for m in self.multiplets:
            for i in m.members:
                rules[i] = m.label_rule
        rows = [{"index": i, "energy": float(self.energies[i]), "eigenvalue": float(self.eigenvalues[i]),
                 "multiplet": int(mult[i]), "l": ls[i], "label_rule": rules[i], "residual": float(self.residuals[i])}
                for i in range(len(self.eigenvalues))]
        a = self.angular
        if a is not None:
            for i, row in enumerate(rows):
                row["dominant_l"] = int(a.dominant_l[i])
                row["l_weight"] = float(a.dominant_weight[i])
                row["mean_L2"] = float(a.mean_L2[i])
                if a.abs_m is not None:
                    row["abs_m"] = int(a.abs_m[i])
        for name, values in self.mode_columns.items():
            for row, value in zip(rows, values):
                row[name] = value.item() if hasattr(value, "item") else value
        return rows

    def summary(self, max_rows: int = 40) -> str:
        """A compact terminal table, one row per multiplet (:func:`shellmodes.spectrum.tables.multiplet_table`)."""
        from shellmodes.spectrum.tables import energy_unit, multiplet_table

        unit = energy_unit(self.info.get("units", {}))
        lines = [multiplet_table(self, max_rows)]
        rows = self.info.get("perturbation") or []
        if rows:
            lines.append("")
            lines.append(f"splitting of each parent l [{unit}]: finite elements (FE) vs first-order "
                         "perturbation theory")
            lines.append(f"{'l':>4} {'FE':>14} {'1st order':>14} {'ratio':>8} {'max |FE - 1st|':>16}")
            for r in rows:
                ratio = "-" if r["ratio"] is None else f"{r['ratio']:.4f}"
                lines.append(f"{r['l']:>4} {r['fe_splitting']:>14.6g} {r['first_order_splitting']:>14.6g} "
                             f"{ratio:>8} {r['max_difference']:>16.3g}")
        lines += self.info.get("summary_notes", [])  # e.g. the fields and the thin-layer potential's range
        return "\n".join(lines)

    def __repr__(self):
        low = ", ".join(f"{v:.6g}" for v in self.eigenvalues[:4])
        mesh = self.info.get("mesh", {})
        worst = f"{np.max(self.residuals):.1e}" if len(self.residuals) else "n/a"
        return (f"Spectrum(modes={len(self.eigenvalues)}, multiplets={len(self.multiplets)}, "
                f"lambda=[{low}, ...], max_residual={worst}, "
                f"dofs={mesh.get('dofs')}, degree={mesh.get('degree')}, h={mesh.get('h', float('nan')):.3g})")
