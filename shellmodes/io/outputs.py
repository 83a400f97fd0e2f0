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
import re
import shutil
import tempfile
from pathlib import Path

import numpy as np

from shellmodes.io.pictures import ordinary_permissions

__all__ = ["write_outputs", "spectrum_json", "atomic_directory", "mode_field_name", "mode_array_names", "EXPORTERS",
           "register", "check_writable", "check_run_output", "clear_leftovers", "ordinary_permissions", "RUN_FILES"]

EXPORTERS: dict = {}


def register(name):
    """Decorator registering ``writer(spectrum, folder)`` under a file name."""

    def wrap(fn):
        EXPORTERS[name] = fn
        return fn

    return wrap


def mode_field_name(i: int, energy: float) -> str:
    return f"mode{i:04d}_E={energy:.9g}"


def mode_array_names(index: int, complex_: bool) -> dict:
    """VTU point-array names of mode ``index`` (4 digits): ``{"psi": "psi_0003"}`` for a real mode;
    ``re``, ``im``, ``density``, ``phase`` and ``current`` (a 3-vector) names for a complex one."""
    tag = f"{index:04d}"
    if not complex_:
        return {"psi": f"psi_{tag}"}
    return {"re": f"psi_{tag}_re", "im": f"psi_{tag}_im", "density": f"density_{tag}", "phase": f"phase_{tag}",
            "current": f"current_{tag}"}


def _complex_point_data(spectrum) -> dict:
    """Real and imaginary parts, density, phase and (surfaces) the probability current of every complex mode."""
    out = {}
    U = spectrum.vectors
    currents = None
    problem = spectrum.problem
    if problem is not None and problem.disc.kind == "surface" and U.shape[1]:
        from shellmodes.eigen.backends import get_backend
        from shellmodes.fem.magnetic import nodal_currents

        currents = nodal_currents(problem.terms, problem.disc.raw, U, factorize=get_backend("auto")[1])
    for i in range(U.shape[1]):
        names, u = mode_array_names(i, True), U[:, i]
        out[names["re"]], out[names["im"]] = np.real(u), np.imag(u)
        out[names["density"]], out[names["phase"]] = np.abs(u) ** 2, np.angle(u)
        if currents is not None:
            out[names["current"]] = currents[i]
    return out


def spectrum_json(spectrum) -> dict:
    return {
        "modes": spectrum.modes_table(),
        "multiplets": [m.as_dict() for m in spectrum.multiplets],
        **{k: spectrum.info.get(k) for k in ("units", "mesh", "solver", "versions", "case", "timings",
                                              "warnings")},
        **{k: spectrum.info[k] for k in ("perturbation", "thin_layer", "fields") if k in spectrum.info},
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
    if np.iscomplexobj(spectrum.vectors):  # magnetic fields: real, imaginary, density, phase, current
        point_data = _complex_point_data(spectrum)
    else:
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
    if np.iscomplexobj(spectrum.vectors):  # density and current arrows (issue 15)
        from shellmodes.io.pictures import render_currents

        render_currents(folder / "modes.vtu", chosen, str(folder / "mode-{index:04d}.png"),
                        lambda i: mode_array_names(i, True), energies=dict(enumerate(spectrum.energies)),
                        unit=spectrum.info["units"]["energy"])
        return
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


def _exchange(a: Path, b: Path) -> bool:
    """Swap two paths in one atomic step (Linux renameat2 RENAME_EXCHANGE); False where unsupported."""
    import ctypes
    import ctypes.util

    try:
        libc = ctypes.CDLL(ctypes.util.find_library("c") or "libc.so.6", use_errno=True)
        renameat2 = libc.renameat2
    except (OSError, AttributeError):
        return False
    at_fdcwd, rename_exchange = -100, 2
    return renameat2(at_fdcwd, os.fsencode(a), at_fdcwd, os.fsencode(b), rename_exchange) == 0


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def clear_leftovers(target) -> list[Path]:
    """Remove hidden temporary siblings of ``target`` that a killed run left (their process is gone)."""
    target = Path(target)
    pattern = re.compile(rf"^\.{re.escape(target.name)}\.(?:tmp|old)-(\d+)-")
    removed = []
    if not target.parent.is_dir():
        return removed
    for item in target.parent.iterdir():
        match = pattern.match(item.name)
        if match and item.is_dir() and not _alive(int(match.group(1))):
            shutil.rmtree(item, ignore_errors=True)
            removed.append(item)
    return removed


def check_writable(target, source: str | None = None, key: str = "--out") -> None:
    """Refuse (before any solving) an output folder that cannot be created or written.

    The nearest existing ancestor must be a folder in which a temporary folder can be made and
    removed again (a read-only file system, /proc or a missing permission fail here).
    """
    from shellmodes.errors import CaseError

    target = Path(target)
    if target.exists() and not target.is_dir():
        raise CaseError(f"value {str(target)!r} is an existing file; give a folder", source, key)
    ancestor = target.parent
    while not ancestor.exists():
        ancestor = ancestor.parent
    if not ancestor.is_dir():
        raise CaseError(f"value {str(target)!r}: {str(ancestor)!r} is a file, so no folder can be made below it",
                        source, key)
    try:
        probe = tempfile.mkdtemp(prefix=f".{target.name}.tmp-{os.getpid()}-", dir=ancestor)
        os.rmdir(probe)
    except OSError as exc:
        raise CaseError(f"value {str(target)!r}: cannot write in {str(ancestor)!r} ({exc.strerror or exc})",
                        source, key) from None


def check_run_output(case, out, report: bool = False) -> None:
    """What ``shellmodes run`` checks before solving: the folder is writable, the plot extra is there if needed."""
    check_writable(out, case.source)
    if report or case.output.pictures:
        from shellmodes.io.pictures import require_plot_extra

        require_plot_extra("--report" if report else "output.pictures", case.source)


class atomic_directory:
    """Context manager: yields a temporary folder beside ``target``, then swaps it in as ``target``.

    The new folder appears whole: written as a hidden sibling, completed with what it keeps of the
    old folder (hard links), and exchanged with the old folder in one atomic rename where the system
    offers one (two renames otherwise), so a reader sees the old result or the new one, never a mix.
    Files of the old folder that the new one does not replace are kept, except ``stale`` names and
    names matching the ``owned`` patterns (files an earlier run wrote that this one did not).
    Hidden temporary folders left by killed runs are removed on the way in.  Nothing appears in
    ``target`` if the block fails.
    """

    def __init__(self, target, stale=(), owned=()):
        self.target = Path(target)
        #: names to remove from an existing target once the new files are in place
        self.stale = tuple(stale)
        #: regular expressions of names the writer owns: an old one the new folder lacks is dropped
        self.owned = tuple(re.compile(p) for p in owned)

    def __enter__(self) -> Path:
        parent = self.target.parent
        # remember which ancestors we create, to remove them again if the block fails
        self.created = []
        missing = parent
        while not missing.exists():
            self.created.append(missing)
            missing = missing.parent
        parent.mkdir(parents=True, exist_ok=True)
        clear_leftovers(self.target)
        self.tmp = Path(tempfile.mkdtemp(prefix=f".{self.target.name}.tmp-{os.getpid()}-", dir=parent))
        ordinary_permissions(self.tmp)  # mkdtemp makes the folder private (0700)
        return self.tmp

    def _carry_over(self) -> None:
        """Hard-link into the new folder what it keeps of the old one."""
        for item in self.target.iterdir():
            name = item.name
            if (self.tmp / name).exists() or name in self.stale or any(p.fullmatch(name) for p in self.owned):
                continue
            if item.is_dir() and not item.is_symlink():
                shutil.copytree(item, self.tmp / name, symlinks=True, copy_function=_link_or_copy)
            else:
                _link_or_copy(item, self.tmp / name)

    def __exit__(self, kind, value, tb):
        old = None
        try:
            if kind is None:
                if not self.target.exists():
                    os.replace(self.tmp, self.target)
                    return False
                self._carry_over()
                if _exchange(self.tmp, self.target):
                    old = self.tmp  # now holds the old folder
                else:
                    old = self.target.with_name(f".{self.target.name}.old-{os.getpid()}-{self.tmp.name[-8:]}")
                    os.replace(self.target, old)
                    os.replace(self.tmp, self.target)
        finally:
            shutil.rmtree(self.tmp, ignore_errors=True)
            if old is not None:
                shutil.rmtree(old, ignore_errors=True)
            if kind is not None:
                for folder in self.created:  # innermost first
                    try:
                        folder.rmdir()
                    except OSError:
                        break
        return False


def _link_or_copy(source, destination):
    try:
        os.link(source, destination, follow_symlinks=False)
    except OSError:
        shutil.copy2(source, destination, follow_symlinks=False)
    return destination


#: names a run writes into its folder (with ``shellmodes report``): an earlier run's copy is dropped
RUN_FILES = (r"spectrum\.json", r"spectrum\.csv", r"modes\.vtu", r"run\.log", r"report\.html", r"levels\.png",
             r"mode-\d+\.png", r"report-.*\.png")


def write_outputs(spectrum, folder, files=None) -> Path:
    """Write every registered output (or ``files``) for ``spectrum`` into ``folder``."""
    names = list(EXPORTERS) if files is None else list(files)
    unknown = set(names) - set(EXPORTERS)
    if unknown:
        raise ValueError(f"unknown outputs {sorted(unknown)}; allowed: {', '.join(EXPORTERS)}")
    # files an earlier run wrote that this one does not (e.g. modes.vtu with output.vtu = false)
    stale = [n for n in EXPORTERS if n not in names and "." in n]
    with atomic_directory(folder, stale=stale, owned=RUN_FILES) as tmp:
        for name in names:
            EXPORTERS[name](spectrum, tmp)
        _write_pictures(spectrum, tmp)  # only when the case's [output] asks for pictures
    return Path(folder)
