"""Thin-shell comparison: the same geometry as a bare surface and as shells of thickness d.

For hard walls a distance d apart the lowest radial band of a thin shell
approaches pi^2/d^2 + lambda_surface (lambda units; energies times
hbar^2/2m) as d/R -> 0.  The table shows, for each d, the band measured from
its own bottom, E_shell(i) - E_shell(0), beside the surface levels
E_surface(i) - E_surface(0), so users see when the surface model is good
enough; the band bottom itself is printed against hbar^2 pi^2/(2 m d^2).
Measuring from the band bottom also cancels most of the finite-element error
of the stiff radial factor, which grows like (pi/d)^2 times the relative
error.  Walls are the parallel surfaces at normal distance -d/2 and +d/2 (wall
key ``offset``, :mod:`shellmodes.shapes.parallel_wall`): constant thickness, so
the band bottom minus pi^2/d^2 tends to the surface's lowest level *with* the
thin-layer potential V_g = -(H^2 - K) (da Costa, Phys. Rev. A 23, 1982 (1981));
the row ``E(0) - transverse`` (the band bottom minus hbar^2 pi^2/(2 m d^2)) shows it beside the
surface's lowest level.
A surface case with ``fields.curvature_potential`` keeps V_g on the surface
only; the shells get their walls instead.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass

import numpy as np

from shellmodes.case.schema import Case, case_from_dict
from shellmodes.errors import CaseError

__all__ = ["ThinShellComparison", "thin_shell_comparison", "write_comparison"]


@dataclass(frozen=True)
class ThinShellComparison:
    """A surface case beside shells of finite thickness around it.

    Attributes
    ----------
    thickness : tuple of float
        The wall separations d (units.length).
    surface : ndarray
        Surface eigenvalues lambda (1/L^2).
    shell : dict
        d -> eigenvalues of the shell's lowest radial band.
    energy_per_lambda : float or None
        Energy of lambda = 1 in ``energy_unit`` (None: dimensionless).
    exact : dict or None
        d -> the exact band of a spherical shell (spheres only).
    """

    thickness: tuple[float, ...]
    surface: np.ndarray            # surface eigenvalues lambda (1/L^2)
    shell: dict                    # d -> shell eigenvalues lambda of the lowest radial band
    energy_per_lambda: float | None
    energy_unit: str
    exact: dict | None = None      # d -> exact shell band (spheres only, from the Bessel cross products)

    def table(self) -> str:
        """The comparison as a terminal table (energies in the case's unit, levels from their band bottom)."""
        from shellmodes.spectrum.tables import energy_unit

        unit = energy_unit({"energy": self.energy_unit})
        scale = self.energy_per_lambda or 1.0
        lines = [f"levels E(i) - E(0) [{unit}], each measured from the bottom of its own band"]
        head = f"{'mode':>4} {'surface':>16} " + " ".join(
            f"{'d=' + format(d, '.3g'):>14}" for d in self.thickness)
        lines += [head, "-" * len(head)]
        for i, lam in enumerate(self.surface):
            cells = []
            for d in self.thickness:
                values = self.shell[d]
                cells.append(f"{(values[i] - values[0]) * scale:>14.6g}" if i < len(values) else f"{'-':>14}")
            lines.append(f"{i:>4} {(lam - self.surface[0]) * scale:>16.6g} " + " ".join(cells))
        lines.append(f"{'band bottom E(0)':>21} " + " ".join(f"{self.shell[d][0] * scale:>14.6g}"
                                                             for d in self.thickness))
        lines.append(f"{'hbar^2 pi^2/(2 m d^2)':>21} " + " ".join(f"{np.pi**2 / d**2 * scale:>14.6g}"
                                                                  for d in self.thickness))
        lines.append(f"{'E(0) - transverse':>21} " + " ".join(
            f"{(self.shell[d][0] - np.pi**2 / d**2) * scale:>14.6g}" for d in self.thickness)
            + f"   (surface lowest: {self.surface[0] * scale:.6g})")
        lines.append(f"{'max |shell - surface|':>21} " + " ".join(
            f"{self.deviation(d) * scale:>14.3g}" for d in self.thickness))
        if self.exact is not None:
            lines.append(f"{'exact shell, same':>21} " + " ".join(
                f"{self.deviation(d, exact=True) * scale:>14.3g}" for d in self.thickness))
            lines.append("(exact: the spherical shell's band from the roots of the Bessel cross products "
                         "j_l y_l - j_l y_l; the gap between the two rows is finite-element error)")
        lines.append("levels are measured from the bottom of their own band; the shell columns approach the "
                     "surface column as d -> 0")
        return "\n".join(lines)

    def deviation(self, d: float, exact: bool = False) -> float:
        """Largest |(E_shell(i) - E_shell(0)) - (E_surface(i) - E_surface(0))| over shared modes, lambda units."""
        shell = self.exact[d] if exact else self.shell[d]
        n = min(len(shell), len(self.surface))
        return float(np.max(np.abs((shell[:n] - shell[0]) - (self.surface[:n] - self.surface[0]))))


#: thinnest shell compared, relative to the surface's size: (pi/d)^2 must leave the angular levels
#: (~1/R^2) about 1e-8 of itself, well above double precision
MIN_RELATIVE_THICKNESS = 1e-4


def _surface_size(surface) -> float:
    """The smallest semi-axis or radius of a closed analytic surface (1 for shapes refused later)."""
    sizes = [getattr(surface, k, None) for k in ("radius", "equatorial_radius", "polar_radius")]
    sizes += list(getattr(surface, "axes", None) or ())
    sizes = [float(v) for v in sizes if v is not None]
    return min(sizes) if sizes else 1.0


def _offset_wall(surface: dict, delta: float, key: str, source: str) -> dict:
    shape = surface["shape"]
    if shape == "sphere":
        radius = surface["radius"] + delta
        wall = {"shape": "sphere", "radius": radius}
    elif shape == "deformed_sphere":
        radius = surface["radius"] + delta
        wall = {"shape": "deformed_sphere", "radius": surface["radius"], "deformation": surface["deformation"],
                "offset": delta}
    elif shape == "ellipsoid":
        radius = min(surface["axes"]) + delta
        wall = {"shape": "ellipsoid", "axes": surface["axes"], "offset": delta}
    elif shape == "spheroid":
        radius = min(surface["equatorial_radius"], surface["polar_radius"]) + delta
        wall = {"shape": "spheroid", "equatorial_radius": surface["equatorial_radius"],
                "polar_radius": surface["polar_radius"], "offset": delta}
    else:
        raise CaseError(f"value {shape!r}: the thin-shell comparison needs a closed shape about the origin; "
                        "allowed: sphere, deformed_sphere, ellipsoid, spheroid", source, "surface.shape")
    if radius <= 0:
        raise CaseError(f"thickness {2 * abs(delta)!r} is too large for this surface (inner wall radius "
                        f"{radius:.3g} <= 0)", source, key)
    return wall


def thin_shell_comparison(case: Case, thickness: Iterable[float], layers: int | None = None,
                          subdivisions: int | None = None, cells: str = "prisms") -> ThinShellComparison:
    """Solve ``case`` (a surface case) and the shells of each thickness around it.

    ``cells = "prisms"`` (the default) puts one layer of radial degree
    max(4, degree) on the surface's own triangle degree and exact wall
    geometry; ``"tetrahedra"`` uses six layers of curved P2 tetrahedra
    (at most degree 2), whose wall-geometry error dominates for d/R <= 0.1.

    Parameters
    ----------
    case : Case
        A ``[surface]`` case of a closed shape about the origin, without a potential.
    thickness : sequence of float
        Wall separations d, in ``units.length``.
    layers : int, optional
        Radial element layers across each shell.
    subdivisions : int, optional
        Refinement of the shells' surface meshes (default: the case's, or 2).
    cells : {"prisms", "tetrahedra"}
        Shell cells.

    Returns
    -------
    ThinShellComparison
        Surface and shell eigenvalues; :meth:`ThinShellComparison.table` is the terminal form.

    Raises
    ------
    CaseError
        Not a surface case, a shape without an inside, non-positive or too large thickness.
    """
    from shellmodes.pipeline import run_case

    if case.surface is None:
        raise CaseError("the thin-shell comparison starts from a [surface] case", case.source, "surface")
    thickness = tuple(float(d) for d in thickness)
    if not thickness or any(not np.isfinite(d) or d <= 0 for d in thickness):
        raise CaseError(f"value {thickness!r}: thicknesses must be positive numbers", case.source, "--thickness")
    from shellmodes.case.schema import LENGTH_RANGE

    size = _surface_size(case.surface)
    for d in thickness:
        if not LENGTH_RANGE[0] <= d <= LENGTH_RANGE[1] or d < MIN_RELATIVE_THICKNESS * size:
            raise CaseError(f"value {d!r}: a thickness must be at least {MIN_RELATIVE_THICKNESS:g} of the surface's "
                            f"size ({size:.4g}) and lie between {LENGTH_RANGE[0]:g} and {LENGTH_RANGE[1]:g}: the "
                            "radial energy (pi/d)^2 of a thinner shell swamps the angular levels in double "
                            "precision", case.source, "--thickness")
    if case.potential is not None:
        raise CaseError("the thin-shell comparison is for free particles; remove [potential]", case.source,
                        "potential")
    if cells not in ("prisms", "tetrahedra"):
        raise CaseError(f"value {cells!r}: allowed cells are prisms, tetrahedra", case.source, "--cells")
    prisms = cells == "prisms"
    if layers is None:
        layers = 1 if prisms else 6
    degree = case.resolution.degree if prisms else min(2, case.resolution.degree)
    data = case.model_dump(mode="json", exclude_none=True)
    surf = data.pop("surface")
    data.pop("sweep", None)
    if "fields" in data:  # the thin-layer potential belongs to the surface; a shell has its walls instead
        data["fields"].pop("curvature_potential", None)

    def shell_case(d, count):
        shell_data = {**data,
                      "shell": {"inner": _offset_wall(surf, -d / 2, "--thickness", case.source),
                                "outer": _offset_wall(surf, +d / 2, "--thickness", case.source),
                                "layers": layers, "cells": cells,
                                **({"radial_degree": max(4, degree)} if prisms else {})},
                      "resolution": {"degree": degree,
                                     "subdivisions": subdivisions if subdivisions is not None
                                     else (case.resolution.subdivisions or 2)},
                      "modes": {**data.get("modes", {}), "count": count}}
        shell_data["modes"].pop("below", None)
        shell_data["modes"].pop("method", None)
        return case_from_dict(shell_data, case.source)

    from shellmodes.eigen.resources import check_resources

    for d in thickness:  # the memory guard for every shell before anything is solved
        check_resources(shell_case(d, case.modes.count or 20), layers_key="--layers")
    from shellmodes.io import progress

    with progress.task("thin-shell solves", 1 + len(thickness), "solve") as bar:
        surface = run_case(case)
        bar.advance(surface="done")
        count = len(surface.eigenvalues)
        shells = {}
        for d in thickness:
            result = run_case(shell_case(d, count))
            shells[d] = result.eigenvalues[:count]
            bar.advance(thickness=f"{d:g}")
    exact = None
    if surf["shape"] == "sphere":
        from shellmodes.studies.references import shell_dirichlet, sphere_eigenvalues

        R = surf["radius"]
        ladder = np.rint(sphere_eigenvalues(count)).astype(int)  # l(l+1), repeated 2l+1 times
        degrees = np.rint((-1 + np.sqrt(1 + 4 * ladder)) / 2).astype(int)
        exact = {d: np.array([float(shell_dirichlet(int(l), 1, R - d / 2, R + d / 2)[0]) ** 2 for l in degrees])
                 for d in thickness}
    return ThinShellComparison(thickness=thickness, surface=surface.eigenvalues, shell=shells,
                               energy_per_lambda=surface.info["units"]["energy_per_lambda"],
                               energy_unit=case.units.energy, exact=exact)


def write_comparison(result: ThinShellComparison, folder) -> None:
    """Write ``thin-shell.json`` and ``thin-shell.csv`` into ``folder`` (all or nothing).

    The CSV has one row per mode: the surface level and each shell's level, all measured from the
    bottom of their own band, in the case's energy unit (eigenvalue units when dimensionless).
    """
    import csv
    import io
    import json

    from shellmodes.io.outputs import atomic_directory
    from shellmodes.spectrum.tables import energy_unit, with_unit

    unit = energy_unit({"energy": result.energy_unit})
    scale = result.energy_per_lambda or 1.0
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(["mode", with_unit("surface", unit), *(with_unit(f"d={d:g}", unit) for d in result.thickness)])
    for i, lam in enumerate(result.surface):
        writer.writerow([i, repr(float((lam - result.surface[0]) * scale)),
                         *("" if i >= len(result.shell[d]) else repr(float((result.shell[d][i] - result.shell[d][0])
                                                                          * scale)) for d in result.thickness)])
    record = {"energy_unit": unit, "levels_from_band_bottom": True,
              "surface": [float(v * scale) for v in result.surface],
              "shells": [{"thickness": d, "energies": [float(v * scale) for v in result.shell[d]],
                          "band_bottom": float(result.shell[d][0] * scale),
                          "flat_slab_bottom": float(np.pi**2 / d**2 * scale),
                          "max_deviation": float(result.deviation(d) * scale),
                          **({"max_deviation_exact_shell": float(result.deviation(d, exact=True) * scale)}
                             if result.exact is not None else {})}
                         for d in result.thickness]}
    with atomic_directory(folder, owned=(r"thin-shell\.(json|csv)",)) as tmp:
        (tmp / "thin-shell.csv").write_text(buf.getvalue())
        (tmp / "thin-shell.json").write_text(json.dumps(record, indent=2) + "\n")
