"""report.html for the folders of ``shellmodes sweep`` and ``shellmodes converge``.

A sweep folder (``sweep.json``, ``levels.png``) gets the level picture, the
swept keys, a table of tracks and one of steps; a convergence folder
(``convergence.json``) gets the study's refinements and per-group estimates.
Both use the page, tables and caution of :mod:`shellmodes.io.report`.
"""

from __future__ import annotations

import json
from pathlib import Path

from shellmodes.errors import CaseError
from shellmodes.io.report import (
    _card,
    _e,
    _img,
    _num,
    _study_section,
    _table,
    _write_text_atomic,
    case_section,
    page_html,
)

__all__ = ["study_kind", "write_study_report", "sweep_html", "convergence_html"]


def study_kind(folder) -> str | None:
    """``"sweep"`` or ``"convergence"`` for a study folder, else None."""
    folder = Path(folder)
    if (folder / "sweep.json").is_file():
        return "sweep"
    if (folder / "convergence.json").is_file():
        return "convergence"
    return None


def _read(path: Path) -> dict:
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise CaseError(f"cannot read ({type(exc).__name__}: {exc}); run the study again to rewrite it",
                        str(path)) from None
    if not isinstance(data, dict):
        raise CaseError("not a shellmodes study (top level is not an object)", str(path))
    return data


def sweep_html(folder: Path, data: dict) -> str:
    """The page of a sweep folder."""
    from shellmodes.case.units import without_noise
    from shellmodes.studies.sweep_files import axis_name

    steps, tracks, rows = data.get("steps") or [], data.get("tracks") or [], data.get("rows") or []
    unit = (data.get("units") or {}).get("energy") or "1"
    record, version = {}, ""
    if steps:
        first = folder / steps[0].get("folder", "") / "spectrum.json"
        if first.is_file():
            spectrum = _read(first)
            record = spectrum.get("case") or {}
            version = (spectrum.get("versions") or {}).get("shellmodes", "")
    keys = [p["key"] for p in data.get("parameters") or []]
    named = [(axis_name(k, record), k) for k in keys]
    title = data.get("title") or folder.name
    facts = [("steps", _num(len(steps))), ("tracked levels", _num(len(tracks))),
             ("complete", "yes" if data.get("complete") else _e(f"no: {data.get('stopped')}"))]
    for (name, key), p in zip(named, data.get("parameters") or []):
        values = ", ".join(f"{without_noise(v, p['values']):.6g}" for v in p["values"])
        facts.append((_e(name), _e(f"{key}: {values}")))
    body = [f'<header class="run"><h1>{_e(title)}</h1><p>sweep over {_e(", ".join(n for n, _ in named))} · '
            f"energies in {_e(unit)}</p><p>sweep folder {_e(folder)}</p></header>",
            f'<h2>Summary</h2><div class="cards">{_card("Sweep", facts)}</div>']
    levels = folder / "levels.png"
    if levels.is_file():
        body.append(f"<h2>Levels</h2><figure>{_img(levels.read_bytes(), 'levels along the sweep')}<figcaption>"
                    "Each line is one tracked level, followed by the overlap of its state with the next step's "
                    "multiplets; colour = parent l, line style = track.</figcaption></figure>")
    energy = {(r["step"], r["track"]): r["energy"] for r in rows}
    track_rows = []
    for t in tracks:
        a, b = t.get("first_step"), t.get("last_step")
        track_rows.append([_num(t.get("track")), _num(t.get("parent_l")), _num(a), _num(b),
                           _num(energy.get((a, t.get("track"))), 8), _num(energy.get((b, t.get("track"))), 8)])
    body.append("<h2>Tracks</h2>" + '<div class="scroll">' + _table(
        ["track", "parent l", "first step", "last step", f"energy there [{unit}]", f"energy at last step [{unit}]"],
        track_rows) + "</div>")
    series = {k: [(s.get("values") or {}).get(k, 0.0) for s in steps] for k in keys}
    step_rows = [[_num(s.get("step")),
                  *[_num(without_noise((s.get("values") or {}).get(k), series[k]), 8) for k in keys],
                  _e(s.get("folder", ""))] for s in steps]
    body.append("<h2>Steps</h2>" + '<div class="scroll">' + _table(["step", *keys, "folder"], step_rows,
                                                                     text_columns=(len(keys) + 1,)) + "</div>")
    if record:
        body.append(case_section(record, "Case (as solved at step 0; the swept keys change along the steps)"))
    return page_html(title, body, version)


def convergence_html(folder: Path, data: dict) -> str:
    """The page of a convergence folder."""
    title = ((data.get("case") or {}).get("title")) or folder.name
    body = [f'<header class="run"><h1>{_e(title)}</h1><p>convergence study</p><p>folder {_e(folder)}</p></header>',
            "<h2>Error estimates</h2>" + _study_section(folder / "convergence.json", data)]
    if data.get("case"):
        body.append(case_section(data["case"]))
    return page_html(title, body, (data.get("versions") or {}).get("shellmodes", ""))


def write_study_report(folder, kind: str) -> Path:
    """Write ``report.html`` into a sweep or convergence folder and return its path."""
    folder = Path(folder)
    if kind == "sweep":
        page = sweep_html(folder, _read(folder / "sweep.json"))
    else:
        data = _read(folder / "convergence.json")
        try:
            page = convergence_html(folder, data)
        except (KeyError, TypeError, ValueError, AttributeError):
            raise CaseError("not the layout 'shellmodes converge' writes; run the study again to rewrite it",
                            str(folder / "convergence.json")) from None
    try:
        return _write_text_atomic(folder / "report.html", page)
    except OSError as exc:
        raise CaseError(f"cannot write report.html ({exc.strerror or exc})", str(folder)) from None
