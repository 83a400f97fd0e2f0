"""Writing results: spectrum.json, spectrum.csv, modes.vtu and run.log.

Everything is written into a fresh temporary folder beside the target and
moved into place only when every file is complete, so a failed run leaves
nothing half-written.

Array names in ``modes.vtu`` are stable: they depend on the mode index only
(:func:`mode_array_names`), so a viewer keeps colouring by ``psi_0003`` while
stepping through a series.  Energies, eigenvalues, residuals, multiplets and
labels travel as VTK field data (one entry per mode, in index order) and in
the sidecar table ``arrays.csv`` (array name -> mode, energy, label, residual);
never in the names.  meshio's VTU writer drops field data, so the ``FieldData``
block is added to its XML by :func:`add_field_data`.
"""

from __future__ import annotations

import csv
import io
import json
import os
import re
import shutil
import tempfile
from collections.abc import Iterable
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from shellmodes.io.pictures import ordinary_permissions

if TYPE_CHECKING:
    from shellmodes.spectrum.multiplets import Spectrum

__all__ = ["write_outputs", "spectrum_json", "atomic_directory", "mode_array_names", "mode_point_data",
           "mode_field_data", "add_field_data", "write_vtu", "MODE_ARRAY", "EXPORTERS", "register",
           "check_writable", "check_run_output", "clear_leftovers", "ordinary_permissions", "RUN_FILES"]

EXPORTERS: dict = {}


def register(name):
    """Decorator registering ``writer(spectrum, folder)`` under a file name."""

    def wrap(fn):
        EXPORTERS[name] = fn
        return fn

    return wrap


#: a real mode's point array, ``psi_0003``; complex modes add ``_re`` / ``_im`` (see mode_array_names)
MODE_ARRAY = re.compile(r"^psi_(\d{4,})(_re)?$")


def mode_array_names(index: int, complex_: bool = False) -> dict[str, str]:
    """The VTU point-array names of mode ``index``: the one place these names are made.

    Parameters
    ----------
    index
        Mode index (0-based, as in spectrum.json).
    complex_
        True for a complex mode.

    Returns
    -------
    dict
        Real modes: ``{"psi": "psi_0003"}``.  Complex modes: ``{"re": "psi_0003_re",
        "im": "psi_0003_im", "density": "density_0003", "phase": "phase_0003",
        "current": "current_0003"}`` (the current is a 3-vector point array, written when the
        spectrum carries one).

    Examples
    --------
    >>> mode_array_names(3)
    {'psi': 'psi_0003'}
    >>> mode_array_names(12, complex_=True)["density"]
    'density_0012'
    """
    tag = f"{int(index):04d}"
    if not complex_:
        return {"psi": f"psi_{tag}"}
    return {"re": f"psi_{tag}_re", "im": f"psi_{tag}_im", "density": f"density_{tag}", "phase": f"phase_{tag}",
            "current": f"current_{tag}"}


def mode_point_data(vectors, currents=None) -> dict[str, np.ndarray]:
    """Point arrays of every mode, named by :func:`mode_array_names`.

    ``vectors`` (N, n) real or complex nodal values; complex modes give real and imaginary
    parts, the density |psi|^2 and the phase arg(psi) in (-pi, pi].  ``currents`` (N, 3, n), where
    given, are written as the 3-vector arrays ``current_NNNN``.
    """
    vectors = np.asarray(vectors)
    is_complex = np.iscomplexobj(vectors)
    out = {}
    for i in range(vectors.shape[1]):
        names, u = mode_array_names(i, is_complex), vectors[:, i]
        if is_complex:
            out[names["re"]] = np.ascontiguousarray(u.real)
            out[names["im"]] = np.ascontiguousarray(u.imag)
            out[names["density"]] = np.abs(u) ** 2
            out[names["phase"]] = np.angle(u)
        else:
            out[names["psi"]] = np.ascontiguousarray(u, dtype=float)
        if currents is not None:
            out[mode_array_names(i, True)["current"]] = np.ascontiguousarray(np.asarray(currents)[:, :, i],
                                                                             dtype=float)
    return out


def mode_field_data(spectrum) -> dict[str, np.ndarray]:
    """Per-mode field data for the VTU: one entry per mode in index order (l, n = -1 where unlabelled).

    Numbers only: meshio (which reads these files back for sweeps) refuses VTK string arrays, so
    the text labels and the energy unit are in arrays.csv.
    """
    rows = spectrum.modes_table()
    out = {
        "mode": np.array([r["index"] for r in rows], dtype=np.int64),
        "energy": np.array([r["energy"] for r in rows], dtype=float),
        "eigenvalue": np.array([r["eigenvalue"] for r in rows], dtype=float),
        "residual": np.array([r["residual"] for r in rows], dtype=float),
        "multiplet": np.array([r["multiplet"] for r in rows], dtype=np.int64),
        "l": np.array([-1 if r["l"] is None else int(r["l"]) for r in rows], dtype=np.int64),
    }
    if "n" in spectrum.mode_columns:
        out["n"] = np.array([-1 if v is None else int(v) for v in spectrum.mode_columns["n"]], dtype=np.int64)
    return out


def _mode_label(row) -> str:
    parts = [f"n={row['n']}"] if row.get("n") is not None else []
    if row.get("l") is not None:
        parts.append(f"l={row['l']}")
    return " ".join(parts) or "-"


def _xml_array(name: str, values) -> str:
    from xml.sax.saxutils import quoteattr

    values = np.asarray(values)
    kind = "Int64" if values.dtype.kind in "iub" else "Float64"
    text = " ".join(repr(int(v)) if kind == "Int64" else repr(float(v)) for v in values.ravel())
    return (f'<DataArray type="{kind}" Name={quoteattr(name)} NumberOfTuples="{len(values)}" format="ascii">'
            f"{text}</DataArray>")


def add_field_data(path, field_data: dict) -> None:
    """Insert a VTK ``FieldData`` block of ascii numeric arrays into a VTU file (after ``<UnstructuredGrid>``)."""
    field_data = {k: v for k, v in field_data.items() if np.size(v)}  # VTK readers refuse empty ascii arrays
    if not field_data:
        return
    path = Path(path)
    data = path.read_bytes()
    anchor = b"<UnstructuredGrid>"
    at = data.find(anchor)
    if at < 0:
        raise ValueError(f"{path}: no <UnstructuredGrid> element to hold field data")
    block = "<FieldData>" + "".join(_xml_array(k, v) for k, v in field_data.items()) + "</FieldData>"
    at += len(anchor)
    path.write_bytes(data[:at] + block.encode("utf-8") + data[at:])


def write_vtu(path, points, cells, point_data=None, cell_data=None, field_data=None) -> Path:
    """One VTU file through meshio (raw binary), with ``field_data`` added as VTK field data."""
    import meshio

    mesh = meshio.Mesh(points, cells, point_data=point_data or {}, cell_data=cell_data or {})
    # raw binary, not zlib: measured on the unit-sphere demo (10,242 nodes x 100 modes) zlib took
    # 0.22 s of CPU for 8.5 MB against 0.02 s for 12.4 MB, and eigenvector mantissas barely compress
    mesh.write(path, binary=True, compression=None)
    add_field_data(path, field_data or {})
    return Path(path)


def spectrum_json(spectrum) -> dict:
    return {
        "modes": spectrum.modes_table(),
        "multiplets": [m.as_dict() for m in spectrum.multiplets],
        **{k: spectrum.info.get(k) for k in ("units", "mesh", "solver", "versions", "case", "timings",
                                              "warnings")},
        **{k: spectrum.info[k] for k in ("perturbation", "statistics") if k in spectrum.info},
    }


@register("spectrum.json")
def _write_json(spectrum, folder: Path):
    (folder / "spectrum.json").write_text(json.dumps(spectrum_json(spectrum), indent=2, default=_plain) + "\n")


@register("spectrum.csv")
def _write_csv(spectrum, folder: Path):
    from shellmodes.spectrum.tables import csv_headings, csv_row

    rows = spectrum.modes_table()
    buf = io.StringIO()
    # the six contract columns first; label_rule (which rule gave l) only where some mode has an l
    names = ["index", "energy", "eigenvalue", "multiplet", "l", "residual"]
    names += ["label_rule"] if any(row["l"] is not None for row in rows) else []
    names += [k for k in ("dominant_l", "l_weight", "mean_L2", "abs_m") if rows and k in rows[0]]
    names += [k for k in spectrum.mode_columns if k not in names]
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(csv_headings(names, spectrum.info.get("units", {})))
    writer.writerows(csv_row(row, names) for row in rows)
    (folder / "spectrum.csv").write_text(buf.getvalue())


@register("modes.vtu")
def _write_vtu(spectrum, folder: Path):
    """Every mode as point arrays with stable names; per-mode records as field data and in arrays.csv.

    ``spectrum.export`` may carry ``currents`` ((N, 3, n) vector point fields, one per mode).
    """
    export = spectrum.export
    if not export:
        return
    point_data = mode_point_data(spectrum.vectors, export.get("currents"))
    point_data.update(export.get("point_data", {}))
    write_vtu(folder / "modes.vtu", export["points"], export["cells"], point_data=point_data,
              cell_data=export.get("cell_data", {}), field_data=mode_field_data(spectrum))


@register("arrays.csv")
def _write_array_table(spectrum, folder: Path) -> None:
    """arrays.csv: which point array of modes.vtu holds which mode, with its energy, label and residual."""
    if not (folder / "modes.vtu").exists():  # written after modes.vtu (registration order), only beside it
        return
    is_complex = np.iscomplexobj(spectrum.vectors)
    from shellmodes.spectrum.tables import csv_headings

    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(["arrays", "mode", *csv_headings(["energy", "eigenvalue"], spectrum.info.get("units") or {}),
                     "multiplet", "label", "residual"])
    for row in spectrum.modes_table():
        names = mode_array_names(row["index"], is_complex)
        writer.writerow([" ".join(names.values()) if is_complex else names["psi"], row["index"],
                         repr(row["energy"]), repr(row["eigenvalue"]), row["multiplet"], _mode_label(row),
                         f"{row['residual']:.3e}"])
    (folder / "arrays.csv").write_text(buf.getvalue())


def _write_pictures(spectrum, folder: Path):
    """levels.png and one render per multiplet (first ``output.picture_multiplets``), when the case asks."""
    output = (spectrum.info.get("case") or {}).get("output") or {}
    if not output.get("pictures") or not (folder / "modes.vtu").exists():
        return
    from shellmodes.io.pictures import render_modes, spectrum_picture

    data = spectrum_json(spectrum)
    spectrum_picture(data, folder / "levels.png", title=(spectrum.info.get("case") or {}).get("title") or None)
    chosen = [m.members[0] for m in spectrum.multiplets[: output.get("picture_multiplets", 4)]]
    render_modes(folder / "modes.vtu", chosen, str(folder / "mode-{index:04d}.png"),
                 unit=spectrum.info["units"]["energy"])


def _write_statistics(spectrum, folder: Path):
    """statistics.png when the run computed level statistics (``output.statistics``)."""
    if "statistics" in spectrum.info:
        from shellmodes.io.pictures import statistics_picture

        statistics_picture(spectrum.info["statistics"], folder / "statistics.png",
                           title=(spectrum.info.get("case") or {}).get("title") or None)


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
    if case.output.statistics:
        from shellmodes.io.pictures import require_plot_extra

        require_plot_extra("output.statistics", case.source, modules=("matplotlib",))


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
RUN_FILES = (r"spectrum\.json", r"spectrum\.csv", r"modes\.vtu", r"arrays\.csv", r"run\.log",
             r"report\.html", r"levels\.png", r"statistics\.png",
             r"mode-\d+\.png", r"report-.*\.png")


def write_outputs(spectrum: Spectrum, folder: str | Path, files: Iterable[str] | None = None) -> Path:
    """Write every registered output (or ``files``) for ``spectrum`` into ``folder``.

    Parameters
    ----------
    spectrum : Spectrum
        A solved spectrum (:func:`shellmodes.run_case`).
    folder : str or Path
        The run folder; created if missing.  Files appear all at once or not at all.
    files : iterable of str, optional
        Names of the outputs to write (default: every registered one, see :data:`EXPORTERS`).

    Returns
    -------
    Path
        ``folder``.

    Raises
    ------
    ValueError
        An unknown output name.
    """
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
        _write_statistics(spectrum, tmp)  # only when the case's [output] asks for statistics
    return Path(folder)
