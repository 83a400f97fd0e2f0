"""The files of a whole sweep: sweep.csv, sweep.json, levels.png and series.pvd.

``series.pvd`` is a VTK collection in ParaView's open PVD XML format: one
``DataSet`` per step pointing at ``steps/step-XXXX/modes.vtu``, its
``timestep`` the value of the first swept key (or the step index when those
values are not strictly monotonic, since a viewer orders data sets by
timestep), so that a viewer's time control scrubs through the deformation.

``levels.png`` draws energy against the first swept key, one line per track,
coloured by the track's parent l with the palette below (our own choice:
ten well-separated hues, repeating after l = 9; unlabelled tracks grey).

Each file is written complete in a temporary folder and renamed into place.
"""

from __future__ import annotations

import csv
import io
import json
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np

from shellmodes.io.outputs import atomic_directory

__all__ = ["write_sweep_files", "LEVEL_COLOURS", "colour_of", "SWEEP_FIELDS"]

#: colours of parent degrees l = 0, 1, 2, ... (cycled); chosen for this project
LEVEL_COLOURS = ("#1b1b1b", "#c0392b", "#2471a3", "#229954", "#d68910", "#7d3c98", "#17a589", "#a04000",
                 "#d4ac0d", "#5d6d7e")
UNLABELLED = "#b3b6b7"
#: columns of sweep.csv after the swept keys
SWEEP_FIELDS = ("track", "mode", "energy", "eigenvalue", "parent_l", "overlap", "residual")


def colour_of(l) -> str:
    return UNLABELLED if l is None else LEVEL_COLOURS[int(l) % len(LEVEL_COLOURS)]


def _timesteps(result) -> tuple[list[float], str]:
    if not result.steps:
        return [], "step"
    values = [s.values[0][1] for s in result.steps]
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


def _collection_text(result) -> str:
    root = ET.Element("VTKFile", type="Collection", version="0.1", byte_order="LittleEndian")
    collection = ET.SubElement(root, "Collection")
    times, _ = _timesteps(result)
    for step, t in zip(result.steps, times):
        ET.SubElement(collection, "DataSet", timestep=repr(float(t)), group="", part="0",
                      file=f"steps/{step.folder_name}/modes.vtu")
    ET.indent(root)
    return '<?xml version="1.0"?>\n' + ET.tostring(root, encoding="unicode") + "\n"


def _plot_levels(result, case, path: Path) -> None:
    # the Agg canvas is attached to this figure only: no global backend switch leaks out
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    times, xlabel = _timesteps(result)
    x_of = {s.index: t for s, t in zip(result.steps, times)}
    unit = _units(result).get("energy", "1")
    fig = Figure(figsize=(7.0, 5.0), dpi=120)
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    seen = set()
    for track in result.tracks:
        pts = sorted((x_of[r["step"]], r["energy"]) for r in result.rows if r["track"] == track["track"])
        l = track["parent_l"]
        label = None if l in seen else ("unlabelled" if l is None else f"l = {l}")
        seen.add(l)
        xs, ys = zip(*pts)
        ax.plot(xs, ys, color=colour_of(l), lw=1.3, marker="o", ms=2.5, label=label)
    ax.set_xlabel(xlabel)
    ax.set_ylabel("energy" if unit == "1" else f"energy [{unit}]")
    ax.set_title(case.title or "levels along the sweep", fontsize=10)
    ax.grid(True, color="#e5e7e9", lw=0.6)
    if seen:
        handles, labels = ax.get_legend_handles_labels()
        order = sorted(range(len(labels)), key=lambda i: (labels[i] == "unlabelled", len(labels[i]), labels[i]))
        ax.legend([handles[i] for i in order], [labels[i] for i in order], title="parent", fontsize=8,
                  loc="best")
    fig.tight_layout()
    fig.savefig(path, format="png")


def write_sweep_files(result, case) -> Path:
    """Write sweep.csv, sweep.json, levels.png and series.pvd of ``result`` into ``result.folder``."""
    with atomic_directory(result.folder) as tmp:
        (tmp / "sweep.csv").write_text(_csv_text(result))
        (tmp / "sweep.json").write_text(json.dumps(_json_data(result, case), indent=2) + "\n")
        (tmp / "series.pvd").write_text(_collection_text(result))
        _plot_levels(result, case, tmp / "levels.png")
    return result.folder
