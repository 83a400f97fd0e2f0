"""The files of a whole sweep: sweep.csv, sweep.json, levels.png and series.pvd.

``series.pvd`` is a VTK collection in the open PVD XML format: one
``DataSet`` per step pointing at ``series/step-XXXX.vtu``, its ``timestep``
the value of the first swept key rounded to 12 significant digits of the
largest value it takes (or the
step index when those values are not strictly monotonic, since a viewer
orders data sets by timestep), so that a viewer's time control scrubs
through the deformation.  Each step's file holds one point array per tracked
level with the same name at every step (``track_02``, :func:`track_array_name`;
NaN where the track does not exist at that step), its state's sign (inside a
degenerate multiplet: the multiplet's basis) made consistent from step to
step (:class:`TrackStates`), and as field data the step index, the value of
every swept key (under the key's name), and per track its energy, mode index
and parent l (NaN or -1 where absent).

``levels.png`` draws energy against the first swept key (its readable name,
:func:`axis_name`), a second swept key on the top axis, one line per track,
coloured by the track's parent l with the palette below (our own choice:
ten well-separated hues, repeating after l = 9; unlabelled tracks grey), the
tracks of one parent told apart by line style and marker, the legend outside
the axes.

Each file is written complete in a temporary folder and renamed into place.
"""

from __future__ import annotations

import csv
import io
import json
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np

from shellmodes.case.units import without_noise
from shellmodes.io.outputs import atomic_directory

__all__ = ["write_sweep_files", "LEVEL_COLOURS", "colour_of", "SWEEP_FIELDS", "TrackStates", "track_array_name",
           "TRACK_STATES", "axis_name"]

#: colours of parent degrees l = 0, 1, 2, ... (cycled); chosen for this project
LEVEL_COLOURS = ("#1b1b1b", "#c0392b", "#2471a3", "#229954", "#d68910", "#7d3c98", "#17a589", "#a04000",
                 "#d4ac0d", "#5d6d7e")
UNLABELLED = "#b3b6b7"
#: columns of sweep.csv after the swept keys
SWEEP_FIELDS = ("track", "mode", "energy", "eigenvalue", "parent_l", "overlap", "residual")


#: hidden folder of the sweep where the collector keeps each step's track states until series.pvd is written
TRACK_STATES = ".track-states"


def track_array_name(track: int) -> str:
    """The point-array name of a tracked level in the series files: ``track_02``."""
    return f"track_{int(track):02d}"


class TrackStates:
    """Each step's track states on disk (``.track-states/step-XXXX.npz``), turned to follow the previous step.

    Inside a degenerate multiplet a track has no state of its own (any basis of the multiplet is one),
    so the written states are the basis of the multiplet's span closest to the same tracks' states at
    the previous step: B Q with B the tracker's states of the multiplet and Q the orthogonal polar
    factor of B^T P (orthogonal Procrustes; P the previous states, nodal inner product, the steps
    numbering nodes alike).  For a single level this is the sign that makes its overlap with the
    previous state positive.  A track's first state is signed so its largest value is positive.
    """

    def __init__(self, folder, create: bool = True):
        self.folder = Path(folder) / TRACK_STATES
        if create:
            self.folder.mkdir(parents=True, exist_ok=True)
        self.last: dict = {}

    def add(self, step: int, ids, states, multiplet_of: dict | None = None) -> None:
        """Save the states (N, k) of tracks ``ids``; ``multiplet_of[track]`` groups them by multiplet."""
        from scipy.linalg import svd

        states = np.array(states, dtype=float, copy=True)
        ids = [int(t) for t in ids]
        groups: dict = {}
        for k, track in enumerate(ids):
            groups.setdefault((multiplet_of or {}).get(track, ("alone", k)), []).append(k)
        for members in groups.values():
            known = [k for k in members if ids[k] in self.last and self.last[ids[k]].shape == states[:, k].shape]
            fresh = [k for k in members if k not in known]
            if known:
                B = states[:, members]
                P = np.column_stack([self.last[ids[k]] for k in known])
                W, _, Vt = svd(B.T @ P)  # (m, m), (p, p)
                Q = np.hstack([W[:, :len(known)] @ Vt, W[:, len(known):]])
                turned = B @ Q
                states[:, known + fresh] = turned
            for k in fresh:
                u = states[:, k]
                if u[np.argmax(np.abs(u))] < 0:
                    states[:, k] = -u
        self.last = {track: states[:, k].copy() for k, track in enumerate(ids)}
        tmp = self.folder / f".step-{step:04d}.npz"
        with open(tmp, "wb") as f:
            np.savez(f, ids=np.asarray(ids, dtype=np.int64), states=states)
        tmp.replace(self.folder / f"step-{step:04d}.npz")

    def load(self, step: int):
        path = self.folder / f"step-{step:04d}.npz"
        if not path.is_file():
            return None
        with np.load(path) as data:
            return data["ids"], data["states"]


def colour_of(l) -> str:
    return UNLABELLED if l is None else LEVEL_COLOURS[int(l) % len(LEVEL_COLOURS)]


def _timesteps(result) -> tuple[list[float], str]:
    if not result.steps:
        return [], "step"
    raw = [s.values[0][1] for s in result.steps]
    values = [without_noise(v, raw) for v in raw]
    d = np.diff(values)
    if len(values) == 1 or np.all(d > 0) or np.all(d < 0):
        return values, result.keys[0]
    return [float(s.index) for s in result.steps], "step"


def _csv_text(result) -> str:
    buf = io.StringIO()
    fields = ["step", *result.keys, *SWEEP_FIELDS]
    writer = csv.DictWriter(buf, fieldnames=fields, lineterminator="\n")
    writer.writeheader()
    for row in result.rows:
        writer.writerow({k: "" if row[k] is None else row[k] for k in fields})
    return buf.getvalue()


def _units(result) -> dict:
    if not result.steps:
        return {}
    path = result.folder / "steps" / result.steps[0].folder_name / "spectrum.json"
    return json.loads(path.read_text()).get("units", {})


def _json_data(result, case) -> dict:
    return {
        "title": case.title,
        "parameters": [{"key": p.key, "values": list(p.resolved())} for p in case.sweep.parameters],
        "steps": [{"step": s.index, "folder": f"steps/{s.folder_name}", "values": dict(s.values)}
                  for s in result.steps],
        "tracks": result.tracks,
        "rows": result.rows,
        "units": _units(result),
        "tracking": {"method": "assignment of states to multiplet subspaces by squared cosines of principal "
                               "angles in the next step's consistent mass matrix",
                     "overlap": "squared cosine between a track's state at the previous step and the multiplet "
                                "it entered (empty where the track starts)"},
        "complete": result.stopped is None,
        "stopped": result.stopped,
        "solved": list(result.solved),
        "reused": list(result.reused),
    }


def _collection_text(result, written) -> str:
    root = ET.Element("VTKFile", type="Collection", version="0.1", byte_order="LittleEndian")
    collection = ET.SubElement(root, "Collection")
    times, _ = _timesteps(result)
    _, axis = _timesteps(result)
    root.insert(0, ET.Comment(f" timestep: {axis}; swept keys per step are field data of each file: "
                              f"{', '.join(result.keys)} "))
    for step, t in zip(result.steps, times):
        if step.index in written:
            ET.SubElement(collection, "DataSet", timestep=repr(float(t)), group="", part="0",
                          file=f"series/{step.folder_name}.vtu")
    ET.indent(root)
    return '<?xml version="1.0"?>\n' + ET.tostring(root, encoding="unicode") + "\n"


def _write_series(result, folder: Path) -> set:
    """series/step-XXXX.vtu for every tracked step: one array per track, same names at every step."""
    import meshio

    from shellmodes.io.outputs import write_vtu

    states = TrackStates(result.folder, create=False)
    tracks = [t["track"] for t in result.tracks]
    by_step: dict = {}
    for row in result.rows:
        by_step.setdefault(row["step"], {})[row["track"]] = row
    written = set()
    series = {key: [dict(s.values)[key] for s in result.steps] for key in result.keys}
    (folder / "series").mkdir()
    for step in result.steps:
        loaded = states.load(step.index)
        if loaded is None:
            continue
        ids, vectors = loaded
        mesh = meshio.read(result.folder / "steps" / step.folder_name / "modes.vtu")
        column = {int(t): k for k, t in enumerate(ids)}
        point_data = {}
        for t in tracks:
            point_data[track_array_name(t)] = vectors[:, column[t]] if t in column else \
                np.full(len(mesh.points), np.nan)
        rows = by_step.get(step.index, {})
        field_data = {"step": np.array([step.index]),
                      **{key: np.array([without_noise(v, series[key])]) for key, v in step.values},
                      "track_energy": np.array([rows[t]["energy"] if t in rows else np.nan for t in tracks]),
                      "track_mode": np.array([rows[t]["mode"] if t in rows else -1 for t in tracks]),
                      "track_parent_l": np.array([-1 if t["parent_l"] is None else t["parent_l"]
                                                  for t in result.tracks])}
        cell_data = {k: v for k, v in mesh.cell_data.items() if k == "region"}
        write_vtu(folder / "series" / f"{step.folder_name}.vtu", mesh.points, mesh.cells, point_data=point_data,
                  cell_data=cell_data, field_data=field_data)
        written.add(step.index)
    return written


#: line styles that tell apart the tracks of one parent l (same colour)
TRACK_STYLES = ("-", "--", ":", "-.", (0, (5, 1, 1, 1, 1, 1)), (0, (1, 2)), (0, (8, 2)))
TRACK_MARKERS = ("o", "s", "^", "v", "D", "P", "X")
#: keys whose values are lengths (shown with the case's length unit)
_LENGTH_KEYS = {"radius", "major_radius", "minor_radius", "equatorial_radius", "polar_radius", "axes", "thickness"}


def axis_name(key: str, case: dict) -> str:
    """A readable axis name for a swept key, e.g. ``surface.deformation[0].amplitude`` ->
    ``amplitude of the (l=2, m=0) deformation``; lengths carry the case's length unit.

    ``case`` is the case record (``Case.model_dump(mode="json")``, as in spectrum.json).
    """
    import re

    parts = re.findall(r"([A-Za-z_]+)(?:\[(\d+)\])?", key)
    name = parts[-1][0].replace("_", " ") if parts else key
    data = case if isinstance(case, dict) else {}
    where, context = data, []
    for word, index in parts[:-1]:
        where = where.get(word) if isinstance(where, dict) else None
        if index and isinstance(where, list) and int(index) < len(where):
            where = where[int(index)]
            item = where if isinstance(where, dict) else {}
            lm = ", ".join(f"{k}={item[k]}" for k in ("l", "m") if k in item)
            context.append(f"the ({lm}) {word.rstrip('s')}" if lm else f"{word.rstrip('s')} {int(index) + 1}")
        elif word not in ("surface", "shell", "modes", "resolution", "particle"):
            context.append(word.replace("_", " "))
    text = name + (f" of {' '.join(context)}" if context else "")
    unit = (data.get("units") or {}).get("length")
    if parts and parts[-1][0] in _LENGTH_KEYS and unit and unit != "1":
        text += f" [{unit}]"
    return text


def _plot_levels(result, case, path: Path) -> None:
    # the Agg canvas is attached to this figure only: no global backend switch leaks out
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    times, xkey = _timesteps(result)
    x_of = {s.index: t for s, t in zip(result.steps, times)}
    unit = _units(result).get("energy", "1")
    record = case.model_dump(mode="json")
    fig = Figure(figsize=(7.0, 5.0), dpi=120, layout="constrained")
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    per_parent: dict = {}
    many = len(result.tracks) > 24  # beyond that a legend per track would not fit: one per parent
    for track in result.tracks:
        pts = sorted((x_of[r["step"]], r["energy"]) for r in result.rows if r["track"] == track["track"])
        if not pts:
            continue
        l = track["parent_l"]
        k = per_parent.setdefault(l, 0)
        per_parent[l] += 1
        label = ("unlabelled" if l is None else f"l = {l}") if many else \
            f"{'unlabelled' if l is None else f'l = {l}'} · track {track['track']}"
        if many and k:
            label = None
        xs, ys = zip(*pts)
        ax.plot(xs, ys, color=colour_of(l), lw=1.3, ls=TRACK_STYLES[k % len(TRACK_STYLES)],
                marker=TRACK_MARKERS[k % len(TRACK_MARKERS)], ms=3.0, label=label)
    ax.set_xlabel("step" if xkey == "step" else axis_name(xkey, record), fontsize=10)
    ax.set_ylabel("energy" if unit == "1" else f"energy [{unit}]", fontsize=10)
    ax.tick_params(labelsize=9)
    ax.set_title(case.title or "levels along the sweep", fontsize=11)
    ax.grid(True, color="#e5e7e9", lw=0.6)
    others = [k for k in result.keys if k != xkey]
    if others and result.steps:
        # the second swept key on a top axis, its values at the steps' positions
        second = others[0]
        top = ax.secondary_xaxis("top")
        shown = result.steps if len(result.steps) <= 6 else result.steps[:: max(1, len(result.steps) // 5)]
        second_series = [dict(t.values)[second] for t in result.steps]
        top.set_xticks([x_of[s.index] for s in shown],
                       labels=[f"{without_noise(dict(s.values)[second], second_series):.4g}" for s in shown],
                       fontsize=8)
        top.set_xlabel(axis_name(second, record) + (f"  (also swept: {', '.join(others[1:])})" if others[1:] else ""),
                       fontsize=9)
    if per_parent:
        handles, labels = ax.get_legend_handles_labels()
        order = sorted(range(len(labels)), key=lambda i: (labels[i].startswith("unlabelled"), len(labels[i]),
                                                          labels[i]))
        # outside the axes, on the right: the legend never covers a level
        fig.legend([handles[i] for i in order], [labels[i] for i in order], title="parent · track",
                   fontsize=7, title_fontsize=8, loc="outside right upper")
    fig.savefig(path, format="png")


def write_sweep_files(result, case) -> Path:
    """Write sweep.csv, sweep.json, levels.png and series.pvd of ``result`` into ``result.folder``."""
    with atomic_directory(result.folder, stale=(TRACK_STATES,)) as tmp:
        (tmp / "sweep.csv").write_text(_csv_text(result))
        (tmp / "sweep.json").write_text(json.dumps(_json_data(result, case), indent=2) + "\n")
        written = _write_series(result, tmp)
        (tmp / "series.pvd").write_text(_collection_text(result, written))
        _plot_levels(result, case, tmp / "levels.png")
    return result.folder
