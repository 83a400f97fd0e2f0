"""Tables for people: column names with units, exact zeros as 0, CSV cells.

Used by the terminal table of a run (:meth:`shellmodes.spectrum.multiplets.Spectrum.summary`),
``spectrum.csv``, the thin-shell table and the other studies' CSV files, so that every table
names its columns and units the same way.

Examples
--------
>>> energy_unit({"energy": "meV", "length": "nm"})
'meV'
>>> energy_unit({"energy": "1", "length": "1"})
'hbar^2/(2 m L^2)'
>>> csv_cell(True), csv_cell(None), csv_cell(float("nan")), csv_cell(3)
('true', '', '', 3)
>>> clean_zeros([-4.6e-14, 2.0, 6.0]).tolist()
[0.0, 2.0, 6.0]
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["csv_headings", "csv_row", "csv_key", "energy_unit", "eigenvalue_unit", "units_caption", "clean_zeros",
           "csv_cell", "with_unit", "m_text", "multiplet_table", "ZERO_RELATIVE"]

#: values below this fraction of the largest magnitude in their column are rounding noise of an exact
#: zero (a closed surface's constant mode): eigenvalue solvers reach about 1e-13 relative (common practice)
ZERO_RELATIVE = 1e-10


def energy_unit(units: dict) -> str:
    """The energy unit as a physicist writes it; dimensionless runs give ``hbar^2/(2 m L^2)``.

    Parameters
    ----------
    units : dict
        The ``units`` record of a spectrum (``energy``, ``length``).

    Returns
    -------
    str
        ``"meV"``, ``"cm-1"``..., or the unit the dimensionless numbers are measured in.
    """
    unit = units.get("energy", "1")
    return unit if unit != "1" else "hbar^2/(2 m L^2)"


def eigenvalue_unit(units: dict) -> str:
    """The unit of the eigenvalue lambda of -Delta: ``1/nm^2``, or ``1/L^2`` when dimensionless."""
    length = units.get("length", "1")
    return f"1/{length}^2" if length != "1" else "1/L^2"


def units_caption(units: dict) -> str:
    """A line under a table explaining dimensionless units ("" when the units are physical)."""
    if units.get("energy", "1") != "1":
        return ""
    return ("dimensionless run: energies are eigenvalues of -Delta in units of hbar^2/(2 m L^2), "
            "L the case's unit of length (e.g. the radius)")


def with_unit(name: str, unit: str) -> str:
    """A column heading ``name [unit]`` (the CSV and terminal form)."""
    return f"{name} [{unit}]"


def clean_zeros(values, relative: float = ZERO_RELATIVE) -> np.ndarray:
    """``values`` with entries below ``relative`` times the largest magnitude set to exactly 0."""
    values = np.array(values, dtype=float)
    if values.size:
        big = float(np.max(np.abs(values[np.isfinite(values)]), initial=0.0))
        values[np.abs(values) <= relative * big] = 0.0
    return values


def csv_cell(value):
    """One CSV cell: booleans as ``true``/``false``, missing values (None, NaN) empty, others unchanged."""
    if isinstance(value, (bool, np.bool_)):
        return "true" if value else "false"
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return ""
    return value


def _most_common(values):
    values = [v for v in values if v is not None]
    if not values:
        return None
    found, counts = np.unique(values, return_counts=True)
    return int(found[np.argmax(counts)])


def m_text(abs_m) -> str:
    """The |m| values of a multiplet, each once ("?" unresolved): "0", "1", "0,1,2"; "-" when unknown."""
    if abs_m is None:
        return "-"
    return ",".join("?" if v < 0 else str(v) for v in sorted(set(abs_m)))


def multiplet_table(spectrum, max_rows: int = 40) -> str:
    """The terminal table of a run, one row per multiplet.

    Columns: multiplet index, energy and eigenvalue with units, size, the radial order n (shells
    whose modes carry it), the parent degree l and its 2l+1, the relative spread (max - min) / |mean|
    of the multiplet's energies, the largest residual among its modes, and where known the |m|
    values of the multiplet (surfaces of revolution) and the rule that gave its l.

    Parameters
    ----------
    spectrum : Spectrum
        A solved spectrum.
    max_rows : int
        Rows shown; the rest are counted.

    Returns
    -------
    str
        The table, with a units caption for dimensionless runs.
    """
    units = spectrum.info.get("units", {})
    n_mode = spectrum.mode_columns.get("n")
    energies = clean_zeros([m.energy for m in spectrum.multiplets])
    lams = clean_zeros([m.eigenvalue for m in spectrum.multiplets])
    e_head = with_unit("E", energy_unit(units))
    lam_head = with_unit("lambda", eigenvalue_unit(units))
    cols = [("multiplet", 9), (e_head, max(18, len(e_head))), (lam_head, max(16, len(lam_head))), ("size", 5)]
    if n_mode is not None:
        cols.append(("n", 3))
    cols += [("l", 3), ("2l+1", 5), ("rel. spread", 11), ("max residual", 12)]
    axial = any(m.abs_m is not None for m in spectrum.multiplets)
    ruled = any(m.label_rule is not None for m in spectrum.multiplets)
    cols += ([("|m|", 7)] if axial else []) + ([("l rule", 15)] if ruled else [])
    head = " ".join(f"{name:>{width}}" for name, width in cols)
    lines = [head, "-" * len(head)]
    for k, m in enumerate(spectrum.multiplets[:max_rows]):
        res = float(np.max(spectrum.residuals[list(m.members)]))
        cells = [f"{m.index:>9}", f"{energies[k]:>{cols[1][1]}.10g}", f"{lams[k]:>{cols[2][1]}.10g}", f"{m.size:>5}"]
        if n_mode is not None:
            n = _most_common([n_mode[i] for i in m.members])
            cells.append(f"{'-' if n is None else n:>3}")
        cells += [f"{'-' if m.l is None else m.l:>3}", f"{'-' if m.expected_size is None else m.expected_size:>5}",
                  f"{m.relative_spread:>11.2e}", f"{res:>12.1e}"]
        cells += [f"{m_text(m.abs_m):>7}"] if axial else []
        cells += [f"{m.label_rule or '-':>15}"] if ruled else []
        split = m.expected_size is not None and m.size < m.expected_size
        lines.append(" ".join(cells) + ("  split" if split else ""))
    if len(spectrum.multiplets) > max_rows:
        lines.append(f"... {len(spectrum.multiplets) - max_rows} more multiplets in spectrum.csv")
    caption = units_caption(units)
    if caption:
        lines.append(caption)
    return "\n".join(lines)


def csv_headings(names, units: dict) -> list[str]:
    """CSV column headings: ``energy [meV]`` and ``eigenvalue [1/nm^2]`` carry their units, others as named.

    :func:`csv_key` turns a heading back into the field name of ``spectrum.json``.
    """
    with_units = {"energy": energy_unit(units), "eigenvalue": eigenvalue_unit(units)}
    return [with_unit(n, with_units[n]) if n in with_units else n for n in names]


def csv_key(heading: str) -> str:
    """The field name of a CSV heading (the heading without its ``[unit]``)."""
    return heading.split(" [")[0]


def csv_row(row: dict, names) -> list:
    """The cells of one CSV row, in the order of ``names`` (see :func:`csv_cell`)."""
    return [csv_cell(row.get(n)) for n in names]
