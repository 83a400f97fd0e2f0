"""Pictures of a run: the level diagram and off-screen renders of modes.

Two functions, both reading what ``shellmodes run`` wrote:

- :func:`spectrum_picture` draws the levels of ``spectrum.json`` grouped by
  multiplet; for closed sphere-like surfaces it draws them beside the ladder
  E_l = E0 l(l+1) / R_eq^2 of the sphere of the same area (R_eq^2 = A / 4 pi,
  the labelling rule of :mod:`shellmodes.spectrum.multiplets`), with a thin line from
  each rung to the multiplets that descend from it.
- :func:`render_modes` renders chosen modes of ``modes.vtu`` on the surface,
  or on a cut through the centre for volume meshes (tetra, tetra10), with a
  diverging colour map centred at zero and symmetric limits.

matplotlib and pyvista belong to the optional ``plot`` extra: they are
imported inside the functions, and a missing one raises
:class:`PlotExtraMissing`.  Nothing here prints; VTK's own chatter is turned
off while rendering.
"""

from __future__ import annotations

import os
import re
import tempfile
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from shellmodes.errors import MeshError, ShellmodesError

__all__ = ["PlotExtraMissing", "require_plot_extra", "ordinary_permissions", "LevelDiagram",
           "spectrum_picture", "render_modes", "mode_fields", "sphere_ladder", "DIVERGING_COLOURS",
           "statistics_picture"]

#: our diverging map for mode amplitudes: deep slate blue through warm paper to brick red
DIVERGING_COLOURS = ("#203a5c", "#4f7fae", "#a9c6de", "#f6f2ea", "#e9b28f", "#c0603a", "#6e2414")
#: one colour per parent degree l (cycled), chosen to stay apart in print
LEVEL_COLOURS = ("#3a6ea5", "#c2702f", "#2e8b6f", "#8e4f9e", "#b5443f", "#5b7f2a", "#a8862b", "#4a5a6a")
LADDER_COLOUR = "#9aa3ad"

_FIELD = re.compile(r"^psi_(\d{4,})(?:_re)?$")
# VTK cell types that fill a volume (tetra, voxel, hexahedron, wedge, pyramid,
# quadratic tetra/hexa/wedge/pyramid); everything else is drawn as a surface
_VOLUME_CELLS = frozenset({10, 11, 12, 13, 14, 24, 25, 26, 27, 29, 32, 33})


class PlotExtraMissing(ShellmodesError, ImportError):
    """matplotlib or pyvista (the ``plot`` extra) is not installed."""


def ordinary_permissions(path) -> None:
    """Give a file or folder made private by mkstemp/mkdtemp the permissions the umask allows."""
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(path, (0o777 if Path(path).is_dir() else 0o666) & ~umask)


def require_plot_extra(what: str, source: str | None = None, modules=("matplotlib", "pyvista"),
                       extra: str | None = None) -> None:
    """Refuse up front (before any solving) when a package that ``what`` needs is not installed.

    matplotlib, pyvista and tqdm are ordinary dependencies, so a missing one means a broken
    install; ``extra`` names an optional part (``pip install 'shellmodes[EXTRA]'``) instead.
    """
    import importlib.util

    missing = [m for m in modules if importlib.util.find_spec(m) is None]
    if missing:
        where = f"{source}: " if source else ""
        fix = f"pip install 'shellmodes[{extra}]'" if extra else f"python3 -m pip install {' '.join(missing)} " \
              "(a dependency of shellmodes that is missing here)"
        raise PlotExtraMissing(f"{where}{what} needs {' and '.join(missing)}: {fix}")


def _matplotlib():
    try:
        import matplotlib
    except ImportError:
        raise PlotExtraMissing("pictures need matplotlib, a dependency of shellmodes that is missing here: "
                               "python3 -m pip install matplotlib") from None
    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt

    return matplotlib, plt


def _pyvista():
    try:
        import pyvista
    except ImportError:
        raise PlotExtraMissing("mode renders need pyvista, a dependency of shellmodes that is missing here: "
                               "python3 -m pip install pyvista") from None
    return pyvista


def _write_atomic_png(path: Path, save) -> Path:
    """Call ``save(tmp_path)`` for a temporary .png beside ``path``, then rename it into place."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.stem}.", suffix=".png", dir=path.parent)
    os.close(fd)
    try:
        save(tmp)
        ordinary_permissions(tmp)  # mkstemp makes the file private (0600)
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return path


def _save_figure(plt, fig, path) -> Path:
    """Lay out ``fig``, write it atomically as a PNG at ``path`` on its own background, and close it."""
    fig.tight_layout()
    try:
        return _write_atomic_png(Path(path), lambda tmp: fig.savefig(tmp, format="png",
                                                                       facecolor=fig.get_facecolor()))
    finally:
        plt.close(fig)


@dataclass(frozen=True)
class LevelDiagram:
    """What :func:`spectrum_picture` drew.

    Attributes
    ----------
    path
        The PNG written.
    levels
        One record per drawn bar (one per mode): ``mode``, ``multiplet``,
        ``energy`` and the bar's horizontal extent ``x0``, ``x1``.
    ladder
        ``(l, energy)`` of each sphere rung drawn (empty without a ladder).
    unit
        Energy unit of the vertical axis.
    """

    path: Path
    levels: list = field(default_factory=list)
    ladder: list = field(default_factory=list)
    unit: str = "1"

    def __repr__(self):
        return (f"LevelDiagram({self.path.name}, bars={len(self.levels)}, rungs={len(self.ladder)}, "
                f"unit={self.unit!r})")


def sphere_ladder(spectrum_json: dict) -> list[tuple[int, float]]:
    """Rungs ``(l, E0 l(l+1) / R_eq^2)`` up to one above the highest parent degree, or ``[]``.

    A ladder exists only for closed surfaces whose multiplets carry parent
    degrees and whose mesh records its area (R_eq^2 = area / 4 pi).
    """
    mesh = spectrum_json.get("mesh") or {}
    multiplets = spectrum_json.get("multiplets") or []
    ls = [m.get("l") for m in multiplets if m.get("l") is not None]
    area = mesh.get("area")
    if not (mesh.get("closed") and ls and area):
        return []
    e0 = (spectrum_json.get("units") or {}).get("energy_per_lambda")
    e0 = 1.0 if e0 is None else float(e0)  # dimensionless runs: energies are the eigenvalues
    radius_eq2 = float(area) / (4.0 * np.pi)
    return [(l, e0 * l * (l + 1) / radius_eq2) for l in range(0, max(ls) + 2)]


def spectrum_picture(spectrum_json: dict, path, *, title: str | None = None) -> LevelDiagram:
    """Draw the levels of one run, grouped by multiplet, as a PNG.

    Each multiplet of size n is drawn as n short bars side by side at the
    energies of its modes, centred on one column, coloured by parent degree.
    For closed sphere-like surfaces the sphere's ladder l(l+1)/R_eq^2
    (scaled by E0 to the same energy unit) stands on the left, each rung
    labelled with l and 2l+1, joined by thin lines to its descendants.

    Parameters
    ----------
    spectrum_json
        The parsed ``spectrum.json`` of a run.
    path
        PNG file to write (atomically).
    title
        Figure title (default: the case title).

    Returns
    -------
    LevelDiagram
        What was drawn: one level record per mode, the ladder rungs.

    Raises
    ------
    PlotExtraMissing
        matplotlib is not installed.

    Examples
    --------
    >>> import json, tempfile, pathlib
    >>> data = {"modes": [{"index": 0, "energy": 0.0, "multiplet": 0}],
    ...         "multiplets": [{"index": 0, "energy": 0.0, "size": 1, "l": 0, "modes": [0]}]}
    >>> d = spectrum_picture(data, pathlib.Path(tempfile.mkdtemp()) / "levels.png")
    >>> len(d.levels)
    1
    """
    _, plt = _matplotlib()
    modes = spectrum_json.get("modes") or []
    multiplets = sorted(spectrum_json.get("multiplets") or [], key=lambda m: float(m["energy"]))
    unit = (spectrum_json.get("units") or {}).get("energy") or "1"
    energy_of = {int(m["index"]): float(m["energy"]) for m in modes}
    n_of = {int(m["index"]): m.get("n") for m in modes}
    ladder = sphere_ladder(spectrum_json)
    top = max(energy_of.values(), default=1.0)
    if ladder:
        # the rungs up to the first one above the highest computed level
        above = [k for k, (_, e) in enumerate(ladder) if e > top * (1 + 1e-9)]
        ladder = ladder[:above[0] + 1] if above else ladder
    groups = _level_groups(multiplets, by_degree=bool(ladder))

    bar, gap, space = 0.16, 0.05, 0.22

    def members_of(m):
        return [int(i) for i in m.get("modes", [])] or [int(m["index"])]

    def width(group):
        sizes = [len(members_of(m)) for m in group]
        return sum(n * bar + (n - 1) * gap for n in sizes) + space * (len(sizes) - 1)

    widest = max((width(g) for g in groups), default=bar)
    ladder_right = -widest / 2 - 1.0
    rung_energy = dict(ladder)

    fig, ax = plt.subplots(figsize=(7.2, 5.6), dpi=110)
    fig.patch.set_facecolor("#fbfaf7")
    ax.set_facecolor("#fbfaf7")
    levels = []
    for group in groups:
        x = -width(group) / 2
        for m in group:
            members = members_of(m)
            l = m.get("l")
            colour = LEVEL_COLOURS[(l if l is not None else int(m["index"])) % len(LEVEL_COLOURS)]
            e_m = float(m["energy"])
            if ladder and l in rung_energy and m is group[0]:  # one thin line from each rung
                ax.plot([ladder_right + 0.04, x - 0.03], [rung_energy[l], e_m], color=colour, lw=0.6,
                        alpha=0.6, ls=(0, (3, 2)))
            for i in members:
                e = energy_of.get(i, e_m)
                ax.plot([x, x + bar], [e, e], color=colour, lw=2.6, solid_capstyle="butt")
                levels.append({"mode": i, "multiplet": int(m["index"]), "energy": e, "x0": x, "x1": x + bar})
                x += bar + gap
            x += space - gap
        ax.text(widest / 2 + 0.15, float(np.mean([float(m["energy"]) for m in group])),
                _group_label(group, n_of, members_of), va="center", fontsize=8, color="#3b4652")
    for l, e in ladder:
        ax.plot([ladder_right - 0.8, ladder_right], [e, e], color=LADDER_COLOUR, lw=2.0, solid_capstyle="butt")
        ax.text(ladder_right - 0.85, e, f"l={l} ({2 * l + 1})", ha="right", va="center", fontsize=7,
                color="#5a6470")

    ax.set_ylabel(f"energy [{unit}]" if unit != "1" else "energy (eigenvalue, dimensionless)")
    ax.set_xticks([])
    for side in ("top", "right", "bottom"):
        ax.spines[side].set_visible(False)
    ax.spines["left"].set_color("#7d8792")
    ax.tick_params(colors="#3b4652", labelsize=8)
    ax.set_xlim((ladder_right - 2.0) if ladder else -widest / 2 - 0.5, widest / 2 + 2.2)
    low, high = ax.get_ylim()
    ax.set_ylim(low, high + 0.06 * (high - low))  # headroom: no level on the frame, the headings above it
    y_top = ax.get_ylim()[1]
    if ladder:
        ax.text(ladder_right - 0.4, y_top, "sphere of equal area", ha="center", va="bottom", fontsize=8,
                color="#5a6470")
    ax.text(0.0, y_top, "computed (labels and multiplet sizes at right)", ha="center", va="bottom", fontsize=8,
            color="#5a6470")
    heading = title if title is not None else ((spectrum_json.get("case") or {}).get("title") or "levels")
    ax.set_title(heading, fontsize=10, color="#1d2a3a", pad=16, loc="left")
    out = _save_figure(plt, fig, path)
    return LevelDiagram(path=out, levels=levels, ladder=list(ladder), unit=unit)


def _group_label(group, n_of, members_of) -> str:
    """Text beside a group of multiplets: its (n, l) or l labels and the multiplet sizes, e.g. ``l=2 (2+2+1)``."""
    labels = []
    for m in group:
        l = m.get("l")
        ns = {n_of.get(i) for i in members_of(m)} - {None}
        text = ", ".join(([f"n={ns.pop()}"] if len(ns) == 1 else []) + ([f"l={l}"] if l is not None else []))
        if text and text not in labels:
            labels.append(text)
    sizes = "+".join(str(len(members_of(m))) for m in group)
    return f"{'; '.join(labels)} ({sizes})" if labels else f"({sizes})"


def _level_groups(multiplets, by_degree: bool) -> list[list[dict]]:
    """Multiplets laid side by side: one group per parent degree, else runs of close levels.

    Without parent degrees, neighbours closer than 2% of the energy range
    share a group so nearly coincident levels do not hide each other.
    """
    if not multiplets:
        return []
    if by_degree:
        groups: dict = {}
        for m in multiplets:
            groups.setdefault(m.get("l"), []).append(m)
        return list(groups.values())
    energies = [float(m["energy"]) for m in multiplets]
    close = 0.02 * ((max(energies) - min(energies)) or 1.0)
    out = [[multiplets[0]]]
    for prev, m in zip(multiplets, multiplets[1:]):
        if float(m["energy"]) - float(prev["energy"]) <= close:
            out[-1].append(m)
        else:
            out.append([m])
    return out


def mode_fields(names, energies=None) -> dict[int, tuple[str, str]]:
    """``{mode index: (array name, energy text)}`` for the point arrays ``psi_0007`` (or ``psi_0007_re``).

    ``energies`` is the file's ``energy`` field data (index order), where it has one; the energy
    text is then the energy to 6 significant digits, else empty.
    """
    out = {}
    for name in names:
        match = _FIELD.match(name)
        if match:
            i = int(match.group(1))
            text = f"{float(energies[i]):.6g}" if energies is not None and i < len(energies) else ""
            if i not in out or not name.endswith("_re"):
                out[i] = (name, text)
    return out


def _diverging_map():
    from matplotlib.colors import LinearSegmentedColormap

    return LinearSegmentedColormap.from_list("shellmodes_diverging", DIVERGING_COLOURS, N=256)


def _is_volume(grid) -> bool:
    return bool(set(int(c) for c in np.unique(grid.celltypes)) & _VOLUME_CELLS)


# Linear pieces of the quadratic tetrahedron in VTK/meshio tetra10 order
# (vertices 0-3, then edge nodes 01, 12, 02, 03, 13, 23): four corner tetrahedra
# and the inner octahedron split along the diagonal 02-13 (nodes 6-8).
_TETRA10_PIECES = np.array([[0, 4, 6, 7], [4, 1, 5, 8], [6, 5, 2, 9], [7, 8, 9, 3],
                            [6, 8, 4, 5], [6, 8, 5, 9], [6, 8, 9, 7], [6, 8, 7, 4]])
_VTK_TETRA, _VTK_QUADRATIC_TETRA, _VTK_WEDGE = 10, 24, 13
# Wedges (triangles 0-1-2 and 3-4-5, node i above node i + 3) become three tetrahedra on their own
# nodes, split conformingly by the smallest-index rule of Dompierre, Labbe, Vallet and Camarero
# (Proc. 8th International Meshing Roundtable, 1999): turn the wedge so its smallest global node is
# node 0, then cut the opposite quadrilateral 1-2-5-4 along the diagonal through its smallest node.
_WEDGE_TURNS = np.array([[0, 1, 2, 3, 4, 5], [1, 2, 0, 4, 5, 3], [2, 0, 1, 5, 3, 4],
                         [3, 5, 4, 0, 2, 1], [4, 3, 5, 1, 0, 2], [5, 4, 3, 2, 1, 0]])
_WEDGE_CUTS = (np.array([[0, 1, 2, 5], [0, 1, 5, 4], [0, 4, 5, 3]]),
               np.array([[0, 1, 2, 4], [0, 4, 2, 5], [0, 4, 5, 3]]))


def _wedge_tetrahedra(wedges: np.ndarray) -> np.ndarray:
    turned = np.take_along_axis(wedges, _WEDGE_TURNS[np.argmin(wedges, axis=1)], axis=1)
    through_15 = np.minimum(turned[:, 1], turned[:, 5]) < np.minimum(turned[:, 2], turned[:, 4])
    pieces = np.where(through_15[:, None, None], _WEDGE_CUTS[0][None], _WEDGE_CUTS[1][None])
    return np.take_along_axis(turned, pieces.reshape(len(wedges), 12), axis=1).reshape(-1, 4)


def _linear_volume(pv, grid):
    """The cells of ``grid`` as linear tetrahedra (tetra10 split into 8, wedges into 3, on their own nodes).

    VTK's clip filter cuts quadratic tetrahedra into broken faces and its
    tessellator makes millions of cells; the eight-piece split uses every
    node exactly once and keeps the field's nodal values.
    """
    cells = grid.cells_dict
    tets = [np.asarray(cells[_VTK_TETRA])] if _VTK_TETRA in cells else []
    if _VTK_QUADRATIC_TETRA in cells:
        quad = np.asarray(cells[_VTK_QUADRATIC_TETRA])
        tets.append(quad[:, _TETRA10_PIECES].reshape(-1, 4))
    if _VTK_WEDGE in cells:
        tets.append(_wedge_tetrahedra(np.asarray(cells[_VTK_WEDGE])))
    if not tets:
        raise MeshError("volume renders support tetra, tetra10 and wedge cells only")
    linear = pv.UnstructuredGrid({_VTK_TETRA: np.concatenate(tets)}, np.asarray(grid.points))
    return linear


def render_modes(vtu_path, indices, path_pattern, *, unit: str | None = None,
                 window_size=(640, 560)) -> list[Path]:
    """Render modes of a ``modes.vtu`` off-screen, one PNG each.

    Surfaces are drawn whole (quadratic triangles subdivided by VTK so their
    curved edges and quadratic fields show); volume meshes (tetra, tetra10)
    are cut by the plane x = x_centre and the half x <= x_centre is drawn
    with its cut face towards the camera.  Colours are a diverging map
    centred at zero with symmetric limits +-max|u|; the scalar bar is titled
    with the field (psi), and the mode and its energy (the file's field data)
    stand at the top left.

    Parameters
    ----------
    vtu_path
        A ``modes.vtu`` written by ``shellmodes run``.
    indices
        Mode indices to render.
    path_pattern
        Output path with a ``{index}`` field, e.g. ``"out/mode{index:04d}.png"``.
    unit
        Energy unit for the scalar-bar title (optional).
    window_size
        Pixels (width, height).

    Returns
    -------
    list of Path
        The PNGs written, in the order of ``indices``.

    Raises
    ------
    MeshError
        The file is missing or unreadable, or a mode is not in it.
    PlotExtraMissing
        pyvista or matplotlib is not installed.
    """
    pv = _pyvista()
    _matplotlib()
    vtu_path = Path(vtu_path)
    indices = [int(i) for i in indices]
    if not vtu_path.is_file():
        raise MeshError("no such mode file; run with output.vtu = true to write modes.vtu", str(vtu_path))
    import meshio

    from shellmodes.meshfiles.surface import SurfaceFormat, _read_with_meshio

    # VTK's reader prints its errors to the terminal from C++: a damaged file is found by meshio first
    _read_with_meshio(SurfaceFormat("VTK XML unstructured grid", meshio.vtu.read), str(vtu_path))
    with pv.vtk_verbosity("off"):
        try:
            grid = pv.read(vtu_path)
        except Exception as exc:  # vtk raises assorted types for unreadable files
            raise MeshError(f"cannot read the mode file ({type(exc).__name__}: {exc})".replace("\n", " "),
                            str(vtu_path)) from None
        energies = np.asarray(grid.field_data["energy"]) if "energy" in grid.field_data.keys() else None
        fields = mode_fields(grid.point_data.keys(), energies)
        missing = [i for i in indices if i not in fields]
        if missing:
            raise MeshError(f"mode(s) {missing} not in the file; it holds {len(fields)} modes", str(vtu_path))
        volume = _is_volume(grid)
        base = _linear_volume(pv, grid) if volume else pv.UnstructuredGrid(grid.cells, grid.celltypes,
                                                                            np.asarray(grid.points))
        cmap = _diverging_map()
        written = []
        for i in indices:
            name, energy = fields[i]
            values = np.asarray(grid.point_data[name], dtype=float)
            top = float(np.max(np.abs(values))) if values.size else 0.0
            limit = top if top > 0 else 1.0
            view = base.copy()
            view.point_data["u"] = values
            if volume:
                view = view.clip(normal=(1.0, 0.0, 0.0), origin=grid.center, invert=True, crinkle=False)
            surface = view.extract_surface(nonlinear_subdivision=3, algorithm="dataset_surface")
            # split along sharp edges: the flat cut face and the curved walls are shaded each on its own
            # (one normal shared across the cut's rim made the cut face look faceted)
            surface = surface.compute_normals(split_vertices=volume, feature_angle=40.0,
                                              auto_orient_normals=not volume)
            out = Path(str(path_pattern).format(index=i))
            title = f"mode {i}" + (f"   E = {energy}" if energy else "") + (
                f" {unit}" if energy and unit and unit != "1" else "")
            written.append(_write_atomic_png(out, lambda tmp, s=surface, t=title, c=limit: _shoot(
                pv, s, t, cmap, c, volume, window_size, tmp)))
    return written


def _shoot(pv, surface, title, cmap, limit, volume, window_size, filename):
    plotter = pv.Plotter(off_screen=True, window_size=list(window_size))
    try:
        plotter.set_background("#fbfaf7")
        plotter.add_mesh(surface, scalars="u", cmap=cmap, clim=(-limit, limit), smooth_shading=True,
                         ambient=0.4, diffuse=0.7, specular=0.05, show_scalar_bar=False)
        # the mode and its energy at the top left, the bar titled with the field it shows: nothing overlaps,
        # and the fonts stay readable with the picture shown at ~480 px wide in the report
        plotter.add_text(title, position="upper_left", font_size=15, color="#1d2a3a")
        plotter.add_scalar_bar(title="psi (nodal value)", n_labels=3, fmt="%.2g", color="#1d2a3a", vertical=False,
                               position_x=0.15, position_y=0.03, width=0.7, height=0.1, title_font_size=26,
                               label_font_size=24)
        if volume:
            # look at the cut face: the plane x = centre bounds the kept half x <= centre
            plotter.camera_position = "yz"
            plotter.camera.Azimuth(35.0)
            plotter.camera.Elevation(20.0)
        else:
            plotter.camera_position = "iso"
        plotter.reset_camera()
        plotter.camera.zoom(1.1)
        plotter.screenshot(filename)
    finally:
        plotter.close()


def statistics_picture(stats: dict, path, *, title: str | None = None) -> Path:
    """Level statistics in three panels: the staircase N(lambda) against Weyl's law with its corrections,
    the staircase's fluctuation about it, and the unfolded nearest-neighbour spacing histograms (one per
    symmetry class) against Poisson and the Wigner surmise (:mod:`shellmodes.spectrum.levelstats` computes ``stats``).

    Raises
    ------
    PlotExtraMissing
        matplotlib is not installed.
    """
    from shellmodes.spectrum.levelstats import poisson, wigner

    _, plt = _matplotlib()
    # 9.3 in at 110 dpi: the report's 1,024-pixel column at its natural size, so the small print stays legible
    fig = plt.figure(figsize=(9.3, 7.4), dpi=110)
    grid = fig.add_gridspec(2, 2, height_ratios=[1.0, 1.05])
    left, middle, right = fig.add_subplot(grid[0, 0]), fig.add_subplot(grid[0, 1]), fig.add_subplot(grid[1, :])
    fig.patch.set_facecolor("#fbfaf7")
    w, heat = stats["weyl"], stats["heat_trace"]
    lam, count, weyl = np.asarray(w["lam"]), np.asarray(w["count"]), np.asarray(w["weyl"])
    formula = "A lam/4pi" + (" -/+ L sqrt(lam)/4pi" if stats.get("rim") else "") + " + chi/6"
    left.step(lam, count, where="mid", color=LEVEL_COLOURS[0], lw=1.0, label="computed N(lambda)")
    left.plot(lam, weyl, "--", color="#1d2a3a", lw=1.0, label=f"Weyl: {formula}")
    left.set_xlabel("eigenvalue lambda [1/length^2]")
    left.set_ylabel("N(lambda): modes below lambda")
    left.set_title(f"{stats['modes']} modes; heat trace a = {heat['a']:.4g} (A/4pi = {heat['expected_a']:.4g}),\n"
                   f"c = {heat['c']:.3f} (chi/6 = {heat['expected_c']:.3f})", fontsize=8, loc="left")
    left.legend(fontsize=8, loc="upper left")
    middle.step(lam, count - weyl, where="mid", color=LEVEL_COLOURS[0], lw=0.8)
    middle.axhline(0.0, color="#1d2a3a", lw=0.8, ls="--")
    middle.set_xlabel("eigenvalue lambda [1/length^2]")
    middle.set_ylabel("N(lambda) - Weyl")
    middle.set_title(f"fluctuation about Weyl's law:\nmean {w['mean_deviation']:.3g}, rms {w['rms_deviation']:.3g}",
                     fontsize=8, loc="left")
    s = np.linspace(0, 4, 200)
    for k, (name, summary) in enumerate(stats["spacings"].items()):
        if "density" in summary:
            right.stairs(summary["density"], np.array(summary["edges"]), lw=1.2,
                         color=LEVEL_COLOURS[(k + 1) % len(LEVEL_COLOURS)],
                         label=f"class {name}: {summary['count']} spacings")
    right.plot(s, poisson(s), ":", color="#1d2a3a", label="Poisson exp(-s)")
    right.plot(s, wigner(s), "--", color="#1d2a3a", label="Wigner surmise (pi s/2) exp(-pi s^2/4)")
    right.set_xlabel("unfolded nearest-neighbour spacing s")
    right.set_ylabel("P(s)")
    import textwrap

    # the whole note, wrapped: it says when mixed classes make the histogram meaningless
    right.set_title("\n".join(textwrap.wrap(stats["classes"].get("note", ""), 120)), fontsize=8, loc="left")
    right.legend(fontsize=8)
    for ax in (left, middle, right):
        ax.set_facecolor("#fbfaf7")
        ax.tick_params(labelsize=8)
    if title:
        fig.suptitle(title, fontsize=10)
    return _save_figure(plt, fig, path)
