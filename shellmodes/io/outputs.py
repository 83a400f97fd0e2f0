"""Writing results: spectrum.json, spectrum.csv, modes.vtu and run.log.

Everything is written into a fresh temporary folder beside the target and
moved into place only when every file is complete, so a failed run leaves
nothing half-written.  meshio's VTU writer drops field data, so each mode's
energy is carried in its point-array name as well as in the tables.
"""

from __future__ import annotations

import csv
import io
import json
import os
import shutil
import tempfile
from pathlib import Path

import numpy as np

__all__ = ["write_outputs", "spectrum_json", "atomic_directory", "mode_field_name", "EXPORTERS", "register"]

EXPORTERS: dict = {}


def register(name):
    """Decorator registering ``writer(spectrum, folder)`` under a file name."""

    def wrap(fn):
        EXPORTERS[name] = fn
        return fn

    return wrap


def mode_field_name(i: int, energy: float) -> str:
    return f"mode{i:04d}_E={energy:.9g}"


def spectrum_json(spectrum) -> dict:
    return {
        "modes": spectrum.modes_table(),
        "multiplets": [m.as_dict() for m in spectrum.multiplets],
        **{k: spectrum.info.get(k) for k in ("units", "mesh", "solver", "versions", "case", "timings",
                                              "warnings")},
        **({"perturbation": spectrum.info["perturbation"]} if "perturbation" in spectrum.info else {}),
    }


@register("spectrum.json")
def _write_json(spectrum, folder: Path):
    (folder / "spectrum.json").write_text(json.dumps(spectrum_json(spectrum), indent=2, default=_plain) + "\n")


@register("spectrum.csv")
def _write_csv(spectrum, folder: Path):
    rows = spectrum.modes_table()
    buf = io.StringIO()
    names = ["index", "energy", "eigenvalue", "multiplet", "l", "residual"]
    names += [k for k in ("dominant_l", "l_weight", "mean_L2", "abs_m") if rows and k in rows[0]]
    names += [k for k in spectrum.mode_columns if k not in names]
    writer = csv.DictWriter(buf, fieldnames=names, lineterminator="\n")
    writer.writeheader()
    for row in rows:
        writer.writerow({**row, "l": "" if row["l"] is None else row["l"]})
    (folder / "spectrum.csv").write_text(buf.getvalue())


@register("modes.vtu")
def _write_vtu(spectrum, folder: Path):
    import meshio

    export = spectrum.export
    if not export:
        return
    point_data = {mode_field_name(i, e): spectrum.vectors[:, i] for i, e in enumerate(spectrum.energies)}
    point_data.update(export.get("point_data", {}))
    mesh = meshio.Mesh(export["points"], export["cells"], point_data=point_data,
                       cell_data=export.get("cell_data", {}))
    # raw binary, not zlib: measured on the unit-sphere demo (10,242 nodes x 100 modes) zlib took
    # 0.22 s of CPU for 8.5 MB against 0.02 s for 12.4 MB, and eigenvector mantissas barely compress
    mesh.write(folder / "modes.vtu", binary=True, compression=None)


def _write_pictures(spectrum, folder: Path):
    """levels.png and one render per multiplet (first ``output.picture_modes``), when the case asks."""
    output = (spectrum.info.get("case") or {}).get("output") or {}
    if not output.get("pictures") or not (folder / "modes.vtu").exists():
        return
    from shellmodes.io.pictures import render_modes, spectrum_picture

    data = spectrum_json(spectrum)
    spectrum_picture(data, folder / "levels.png", title=(spectrum.info.get("case") or {}).get("title") or None)
    chosen = [m.members[0] for m in spectrum.multiplets[: output.get("picture_modes", 4)]]
    render_modes(folder / "modes.vtu", chosen, str(folder / "mode-{index:04d}.png"),
                 unit=spectrum.info["units"]["energy"])


@register("run.log")
def _write_log(spectrum, folder: Path):
    (folder / "run.log").write_text(spectrum.info.get("log", "") + "\n")


def _plain(value):
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist()
    return str(value)


class atomic_directory:
    """Context manager: yields a temporary folder, then moves its files into ``target``.

    The files appear in ``target`` only if the block finishes without error;
    each is moved with an atomic rename.
    """

    def __init__(self, target, stale=()):
        self.target = Path(target)
        #: names to remove from an existing target once the new files are in place
        self.stale = tuple(stale)

    def __enter__(self) -> Path:
        parent = self.target.parent
        # remember which ancestors we create, to remove them again if the block fails
        self.created = []
        missing = parent
        while not missing.exists():
            self.created.append(missing)
            missing = missing.parent
        parent.mkdir(parents=True, exist_ok=True)
        self.tmp = Path(tempfile.mkdtemp(prefix=f".{self.target.name}.", dir=parent))
        # mkdtemp makes the folder private (0700); the finished folder gets ordinary permissions
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(self.tmp, 0o777 & ~umask)
        return self.tmp

    def __exit__(self, kind, value, tb):
        try:
            if kind is None:
                if not self.target.exists():
                    os.replace(self.tmp, self.target)
                    return False
                for item in self.tmp.iterdir():
                    os.replace(item, self.target / item.name)
                for name in self.stale:
                    (self.target / name).unlink(missing_ok=True)
        finally:
            shutil.rmtree(self.tmp, ignore_errors=True)
            if kind is not None:
                for folder in self.created:  # innermost first
                    try:
                        folder.rmdir()
                    except OSError:
                        break
        return False


def write_outputs(spectrum, folder, files=None) -> Path:
    """Write every registered output (or ``files``) for ``spectrum`` into ``folder``."""
    names = list(EXPORTERS) if files is None else list(files)
    unknown = set(names) - set(EXPORTERS)
    if unknown:
        raise ValueError(f"unknown outputs {sorted(unknown)}; allowed: {', '.join(EXPORTERS)}")
    # files an earlier run wrote that this one does not (e.g. modes.vtu with output.vtu = false)
    stale = [n for n in EXPORTERS if n not in names and "." in n]
    with atomic_directory(folder, stale=stale) as tmp:
        for name in names:
            EXPORTERS[name](spectrum, tmp)
        _write_pictures(spectrum, tmp)  # only when the case's [output] asks for pictures
    return Path(folder)
