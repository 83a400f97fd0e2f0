"""A self-contained HTML report of one run, and the ``shellmodes report`` command.

:func:`write_report` reads what ``shellmodes run`` wrote into a folder
(``spectrum.json``, ``modes.vtu``) and writes ``report.html`` beside it: the
case as TOML, the mesh, solver and timing summary, warnings, the level
diagram, renders of the first few multiplets, the multiplet and mode tables
with residuals and, where they exist, error estimates (a sibling
``*-convergence/convergence.json`` of the same case, or the validation set
of :mod:`shellmodes.studies.checks` when asked).  Pictures are embedded as base64
PNG, so the file needs nothing else: no loose files, no network.  The file
is written to a temporary name and renamed into place.
"""

from __future__ import annotations

import base64
import datetime
import html
import json
import math
import os
import tempfile
from pathlib import Path

from shellmodes.errors import CaseError
from shellmodes.limits import DEFAULT_RENDERS

__all__ = ["write_report", "load_run", "report_html", "find_convergence", "case_toml", "applicable_case",
           "case_section", "page_html", "SAFETY_NOTE"]

SAFETY_NOTE = ("These numbers are results of a model, not measurements. The model is a particle obeying "
               "(hbar^2/2m)(-Delta) psi + V psi = E psi in the stated geometry: for electrons and holes in a "
               "nanostructure that is the single-band effective-mass approximation (one parabolic band, envelope "
               "functions, a mass and band offset per medium), which leaves out strain, band mixing, "
               "non-parabolicity, many-body, excitonic and temperature effects; hard walls are idealised "
               "infinite barriers, where a real interface has a finite barrier that the state leaks into. "
               "The finite-element error is estimated only where a convergence study was run (its error bars "
               "bound the numerical error, not that of the model). Where these numbers inform devices or procedures "
               "on which health or safety depends (lasers, detectors, medical or radiation equipment), confirm "
               "them by measurement and defer to licensed professional practice.")


# ---------------------------------------------------------------------------
# reading a run folder


def load_run(folder) -> dict:
    """The parsed ``spectrum.json`` of a run folder.

    Raises
    ------
    CaseError
        The folder or its ``spectrum.json`` is missing, unreadable, not JSON
        or not a shellmodes spectrum (one-line message naming the path).
    """
    folder = Path(folder)
    if not folder.exists():
        raise CaseError("no such run folder; give a folder written by 'shellmodes run'", str(folder))
    if not folder.is_dir():
        raise CaseError("not a folder; give the folder written by 'shellmodes run'", str(folder))
    path = folder / "spectrum.json"
    if not path.is_file():
        raise CaseError("no spectrum.json, sweep.json or convergence.json here; give a folder written by "
                        "'shellmodes run', 'shellmodes sweep' or 'shellmodes converge'", str(folder))
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise CaseError(f"cannot read ({type(exc).__name__}: {exc})", str(path)) from None
    try:
        data = json.loads(text)
    except json.JSONDecodeError as exc:
        raise CaseError(f"not valid JSON ({exc.msg} at line {exc.lineno}, column {exc.colno}); "
                        "run the case again to rewrite it", str(path)) from None
    if not isinstance(data, dict):
        raise CaseError(f"not a shellmodes spectrum (top level is a {type(data).__name__}, not an object)",
                        str(path))
    for key in ("modes", "multiplets"):
        if not isinstance(data.get(key), list):
            raise CaseError(f"not a shellmodes spectrum (no {key!r} list)", str(path))
    for table, fields in _RECORD_FIELDS.items():
        for row in data[table]:
            bad = [name for name, kinds in fields.items()
                   if not isinstance(row, dict) or not _has_kind(row.get(name, _ABSENT), kinds)]
            if bad:
                raise CaseError(f"malformed {table[:-1]} record {str(row)[:60]!r}: field {bad[0]!r} must be "
                                f"{' or '.join(k.__name__ for k in fields[bad[0]] if k is not type(None))}"
                                f"{' (or absent)' if type(None) in fields[bad[0]] else ''}; run the case again "
                                "to rewrite it", str(path))
    return data


_ABSENT = None
_NUMBER = (int, float)
#: the fields report reads from spectrum.json and their types (None: may be absent or null)
_RECORD_FIELDS = {
    "modes": {"index": (int,), "energy": _NUMBER, "eigenvalue": (*_NUMBER, type(None)),
              "multiplet": (int, type(None)), "l": (int, type(None)), "residual": (*_NUMBER, type(None)),
              "dominant_l": (int, type(None)), "l_weight": (*_NUMBER, type(None)),
              "mean_L2": (*_NUMBER, type(None)), "abs_m": (*_NUMBER, type(None))},
    "multiplets": {"index": (int,), "energy": _NUMBER, "size": (int, type(None)), "l": (int, type(None)),
                   "expected_size": (int, type(None)), "spread": (*_NUMBER, type(None)),
                   "modes": (list, type(None))},
}


def _has_kind(value, kinds) -> bool:
    return isinstance(value, kinds) and not isinstance(value, bool)


def find_convergence(folder, spectrum_json: dict | None = None) -> Path | None:
    """A ``*-convergence/convergence.json`` beside ``folder`` that belongs to the same case, or None.

    ``<name>-convergence`` for a run folder ``<name>`` is taken first; any
    other ``*-convergence`` sibling only if its JSON names the same case
    title, so a neighbour's study is never shown as this run's error bars.
    """
    folder = Path(folder).resolve()
    own = folder.parent / f"{folder.name}-convergence" / "convergence.json"
    if own.is_file():
        return own
    title = ((spectrum_json or {}).get("case") or {}).get("title")
    if not title:
        return None
    for candidate in sorted(folder.parent.glob("*-convergence/convergence.json")):
        try:
            data = json.loads(candidate.read_text(encoding="utf-8"))
        except (OSError, UnicodeDecodeError, json.JSONDecodeError):
            continue
        case = data.get("case") if isinstance(data, dict) else None
        if isinstance(case, dict) and case.get("title") == title:
            return candidate
    return None


# ---------------------------------------------------------------------------
# the case as TOML


def _toml_value(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)
    if isinstance(value, str):
        return json.dumps(value, ensure_ascii=False)  # a JSON string is a valid TOML basic string
    if isinstance(value, dict):
        items = [f"{_toml_key(k)} = {_toml_value(v)}" for k, v in value.items() if v is not None]
        return "{ " + ", ".join(items) + " }" if items else "{}"
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_toml_value(v) for v in value if v is not None) + "]"
    return json.dumps(str(value))


def _toml_key(key) -> str:
    key = str(key)
    return key if key and all(c.isalnum() or c in "-_" for c in key) else json.dumps(key)


#: case keys that apply only when another key is set: (table, key) -> test on the table
_APPLIES = {
    ("particle", "mass_unit"): lambda t: t.get("mass") is not None,
    ("particle", "effective_mass"): lambda t: t.get("mass") is not None,
    ("particle", "inertia_unit"): lambda t: t.get("moment_of_inertia") is not None,
    ("output", "picture_multiplets"): lambda t: bool(t.get("pictures")),
    ("output", "picture_modes"): lambda t: bool(t.get("pictures")),  # the old name, in older run folders
    **{("modes", key): lambda t: _sliced(t) for key in ("slice_modes", "workers", "scheduler")},
}


def _sliced(modes: dict) -> bool:
    """Whether a [modes] table asks for spectrum slicing (as the planner decides for surfaces)."""
    from shellmodes.limits import SLICE_FROM

    count = modes.get("count")
    return modes.get("method") == "slices" or (modes.get("method", "auto") == "auto" and isinstance(count, int)
                                                and count >= SLICE_FROM)


def applicable_case(case: dict) -> dict:
    """The case record without keys that do not apply to it (an inertia unit on an electron case) or empty tables.

    Examples
    --------
    >>> applicable_case({"particle": {"mass": 1.0, "mass_unit": "electron", "inertia_unit": "amu angstrom2"},
    ...                  "limits": {}})
    {'particle': {'mass': 1.0, 'mass_unit': 'electron'}}
    """
    out = {}
    for name, value in case.items():
        if isinstance(value, dict):
            value = {k: v for k, v in value.items() if _APPLIES.get((name, k), lambda t: True)(value)}
            if not any(v is not None for v in value.values()):
                continue
        out[name] = value
    return out


def case_toml(case: dict) -> str:
    """The case record of ``spectrum.json`` as TOML text (unset keys, i.e. ``None``, left out).

    Examples
    --------
    >>> print(case_toml({"title": "a", "surface": {"shape": "sphere", "radius": 1.0, "rim": None}}))
    title = "a"
    <BLANKLINE>
    [surface]
    shape = "sphere"
    radius = 1.0
    """
    lines = [f"{_toml_key(k)} = {_toml_value(v)}" for k, v in case.items()
             if v is not None and not isinstance(v, dict)]

    def table(name, data):
        out = [f"[{name}]"]
        out += [f"{_toml_key(k)} = {_toml_value(v)}" for k, v in data.items()
                if v is not None and not isinstance(v, dict)]
        for k, v in data.items():
            if isinstance(v, dict):
                out += ["", *table(f"{name}.{_toml_key(k)}", v)]
        return out

    for key, value in case.items():
        if isinstance(value, dict):
            lines += ["", *table(_toml_key(key), value)]
    return "\n".join(lines).lstrip("\n")


# ---------------------------------------------------------------------------
# HTML pieces

_CSS = """
:root { --ink: #1d2a3a; --soft: #5a6470; --line: #d9d4c9; --paper: #fbfaf7; --card: #ffffff;
        --accent: #2e6f8e; --warm: #b4582f; --ok: #2e7d5b; }
* { box-sizing: border-box; }
body { margin: 0; background: var(--paper); color: var(--ink);
       font: 15px/1.45 "Iowan Old Style", "Palatino Linotype", Georgia, serif; }
main { max-width: 1080px; margin: 0 auto; padding: 28px 28px 12px; }
header.run { border-left: 6px solid var(--accent); padding: 4px 0 4px 16px; margin-bottom: 22px; }
header.run h1 { margin: 0 0 4px; font-size: 26px; font-weight: 600; }
header.run p { margin: 0; color: var(--soft); font-family: system-ui, sans-serif; font-size: 13px; }
h2 { font-size: 18px; margin: 30px 0 10px; padding-bottom: 4px; border-bottom: 1px solid var(--line); }
.cards { display: grid; grid-template-columns: repeat(auto-fit, minmax(320px, 1fr)); gap: 12px; }
.card { background: var(--card); border: 1px solid var(--line); border-radius: 6px; padding: 10px 14px; }
.card h3 { margin: 0 0 6px; font: 600 12px system-ui, sans-serif; letter-spacing: .08em;
           text-transform: uppercase; color: var(--accent); }
dl { margin: 0; display: grid; grid-template-columns: minmax(110px, max-content) 1fr; gap: 2px 12px;
     font: 13px system-ui, sans-serif; }
dt { color: var(--soft); } dd { margin: 0; font-variant-numeric: tabular-nums; word-break: break-word; }
table { border-collapse: collapse; width: 100%; font: 13px system-ui, sans-serif;
        font-variant-numeric: tabular-nums; background: var(--card); }
th, td { padding: 3px 7px; border-bottom: 1px solid #ece8df; text-align: right; white-space: nowrap; }
th { background: #f1ede4; color: var(--ink); font-weight: 600; position: sticky; top: 0; white-space: normal;
     vertical-align: bottom; }
td.text, th.text { text-align: left; white-space: normal; }
tr.split td:first-child { box-shadow: inset 3px 0 0 var(--warm); }
.tag { display: inline-block; font-size: 11px; padding: 0 6px; border-radius: 8px; margin-left: 4px;
       background: #f4e1d5; color: var(--warm); }
.tag.pass { background: #dcefe5; color: var(--ok); }
td.doubt { color: var(--warm); font-weight: 600; }
.scroll { max-height: 460px; overflow: auto; border: 1px solid var(--line); border-radius: 6px; }
figure { margin: 0; } figure img { max-width: 100%; border: 1px solid var(--line); border-radius: 6px;
                                   background: var(--card); }
figcaption { font: 12px system-ui, sans-serif; color: var(--soft); margin-top: 4px; }
.gallery { display: grid; grid-template-columns: repeat(auto-fill, minmax(420px, 1fr)); gap: 14px; }
.notes { background: #fbf1e9; border: 1px solid #efd3c0; border-radius: 6px; padding: 8px 14px; }
.notes li { margin: 3px 0; font: 13px system-ui, sans-serif; }
.quiet { color: var(--soft); font: 13px system-ui, sans-serif; }
pre.case { background: var(--card); border: 1px solid var(--line); border-radius: 6px; padding: 10px 14px;
           font: 12.5px/1.5 ui-monospace, "DejaVu Sans Mono", monospace; overflow-x: auto; }
footer { max-width: 1080px; margin: 24px auto 30px; padding: 12px 28px 0; border-top: 1px solid var(--line);
         font: 12px system-ui, sans-serif; color: var(--soft); }
footer .safety { color: var(--ink); font-weight: 500; }
"""


def _e(value) -> str:
    return html.escape(str(value), quote=True)


def _num(value, digits: int = 10) -> str:
    if value is None:
        return "–"
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return _e(value)
    if isinstance(value, int):
        return f"{value:,}".replace(",", "\u2009")
    return f"{value:.{digits}g}"


def _sci(value) -> str:
    return "–" if value is None else f"{float(value):.1e}"


def _dl(pairs) -> str:
    rows = "".join(f"<dt>{_e(k)}</dt><dd>{v}</dd>" for k, v in pairs)
    return f"<dl>{rows}</dl>"


def _card(title: str, pairs) -> str:
    return f'<div class="card"><h3>{_e(title)}</h3>{_dl(pairs)}</div>'


def _table(head, rows, text_columns=(), row_classes=None) -> str:
    """An HTML table; ``head`` and cells are already-escaped HTML, except header labels (escaped here)."""
    cls = lambda k: ' class="text"' if k in text_columns else ""  # noqa: E731
    head_html = "".join(f"<th{cls(k)}>{_e(h)}</th>" for k, h in enumerate(head))
    body = []
    for r, row in enumerate(rows):
        extra = f' class="{row_classes[r]}"' if row_classes and row_classes[r] else ""
        cells = "".join(f"<td{cls(k)}>{c}</td>" if not c.startswith("<td") else c for k, c in enumerate(row))
        body.append(f"<tr{extra}>{cells}</tr>")
    return f"<table><thead><tr>{head_html}</tr></thead><tbody>{''.join(body)}</tbody></table>"


def _img(png: bytes, alt: str) -> str:
    return f'<img alt="{_e(alt)}" src="data:image/png;base64,{base64.b64encode(png).decode("ascii")}">'


def _member_span(members) -> str:
    if not members:
        return "–"
    members = sorted(int(m) for m in members)
    if members == list(range(members[0], members[-1] + 1)):
        return str(members[0]) if len(members) == 1 else f"{members[0]}–{members[-1]}"
    return ", ".join(map(str, members))


def _summary(data: dict) -> str:
    mesh, solver = data.get("mesh") or {}, data.get("solver") or {}
    timings, units = data.get("timings") or {}, data.get("units") or {}
    shape = mesh.get("shape") or {}
    shape_text = ", ".join(f"{k} {json.dumps(v, separators=(',', ':'))}" for k, v in shape.items()
                           if k != "shape") if isinstance(shape, dict) else ""
    shape_name = shape.get("shape") if isinstance(shape, dict) else shape
    mesh_pairs = [("shape", _e(f"{shape_name or '–'}" + (f" ({shape_text})" if shape_text else "")))]
    for key, label in (("degree", "element degree"), ("geometry_degree", "geometry degree"),
                       ("elements", "elements"), ("dofs", "degrees of freedom"), ("free_dofs", "free"),
                       ("h", "mesh size h"), ("area", "area"), ("exact_area", "exact area"),
                       ("volume", "volume"), ("closed", "closed"), ("rim", "rim")):
        if key in mesh and mesh[key] is not None:
            mesh_pairs.append((label, _num(mesh[key])))
    solver_pairs = [(label, _num(solver[key]) if key != "max_residual" else _sci(solver[key]))
                    for key, label in (("backend", "back-end"), ("shift", "shift"), ("requested", "requested"),
                                       ("below", "below"), ("returned", "returned"),
                                       ("max_residual", "max residual"),
                                       ("orthogonality_error", "orthogonality error"),
                                       ("multiplet_tolerance", "multiplet tolerance"))
                    if solver.get(key) is not None]
    if solver.get("orthogonality_error") is not None:
        solver_pairs = [(k, _sci(solver["orthogonality_error"]) if k == "orthogonality error" else v)
                        for k, v in solver_pairs]
    time_pairs = [(k, f"{float(v):.3f} s") for k, v in timings.items() if isinstance(v, (int, float))]
    unit_pairs = [(k.replace("_", " "), _num(v)) for k, v in units.items() if v is not None]
    version_pairs = [(k, _e(v)) for k, v in (data.get("versions") or {}).items()]
    cards = [_card("Mesh", mesh_pairs), _card("Solver", solver_pairs), _card("Timings", time_pairs),
             _card("Units", unit_pairs), _card("Versions", version_pairs)]
    definition = solver.get("residual_definition")
    note = f'<p class="quiet">Residual: {_e(definition)}.</p>' if definition else ""
    return f'<div class="cards">{"".join(cards)}</div>{note}'


def _multiplet_table(data: dict) -> str:
    unit = (data.get("units") or {}).get("energy") or "1"
    lam_unit = (data.get("units") or {}).get("eigenvalue") or "1"
    residual = {int(m["index"]): m.get("residual") for m in data["modes"]}
    rows, classes = [], []
    for m in data["multiplets"]:
        members = m.get("modes") or []
        res = [residual.get(int(i)) for i in members if residual.get(int(i)) is not None]
        size, expected = m.get("size"), m.get("expected_size")
        split = expected is not None and size is not None and size != expected
        size_html = _num(size) + (f'<span class="tag">of {_num(expected)}</span>' if split else "")
        rows.append([_num(m["index"]), _num(m.get("energy")), _num(m.get("eigenvalue")), size_html,
                     _num(m.get("l")), _num(expected), _num(m.get("spread"), 3), _sci(m.get("relative_spread")),
                     _sci(max(res)) if res else "–", _e(_member_span(members))])
        classes.append("split" if split else "")
    head = ["#", f"energy [{unit}]", f"λ [{lam_unit}]", "size", "l", "2l+1", f"spread [{unit}]",
            "rel. spread", "max residual", "modes"]
    return f'<div class="scroll">{_table(head, rows, row_classes=classes)}</div>'


def _mode_table(data: dict) -> str:
    unit = (data.get("units") or {}).get("energy") or "1"
    lam_unit = (data.get("units") or {}).get("eigenvalue") or "1"
    limit = (((data.get("case") or {}).get("modes") or {}).get("residual_limit"))
    rows = []
    for m in data["modes"]:
        r = m.get("residual")
        doubt = limit is not None and r is not None and r > limit
        cell = f'<td class="doubt">{_sci(r)}</td>' if doubt else _sci(r)
        rows.append([_num(m["index"]), _num(m.get("energy")), _num(m.get("eigenvalue")), _num(m.get("multiplet")),
                     _num(m.get("l")), cell])
    head = ["mode", f"energy [{unit}]", f"λ [{lam_unit}]", "multiplet", "l", "residual"]
    note = (f'<p class="quiet">Residuals above the case\'s limit {_sci(limit)} are marked.</p>'
            if limit is not None else "")
    return f'<div class="scroll">{_table(head, rows)}</div>{note}'


def _records(data):
    """The first list of records (dicts) in a convergence document, with its key."""
    if isinstance(data, list) and data and all(isinstance(r, dict) for r in data):
        return None, data
    if isinstance(data, dict):
        preferred = ("estimates", "eigenvalues", "modes", "levels", "rows", "results")
        keys = [k for k in preferred if k in data] + [k for k in data if k not in preferred]
        for key in keys:
            value = data[key]
            if isinstance(value, list) and value and all(isinstance(r, dict) for r in value):
                return key, value
    return None, []


def _cell(value) -> str:
    if isinstance(value, float):
        return _sci(value) if value != 0 and (abs(value) < 1e-3 or abs(value) >= 1e7) else _num(value)
    if isinstance(value, (dict, list)):
        return _e(json.dumps(value, separators=(",", ":"))[:80])
    return _num(value)


def _convergence_section(path: Path, run: dict | None = None) -> str:
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        return f'<p class="quiet">{_e(path)} could not be read ({_e(type(exc).__name__)}: {_e(exc)}).</p>'
    if isinstance(data, dict) and isinstance(data.get("rows"), list) and isinstance(data.get("refinements"), list):
        try:
            return _study_section(path, data, run)
        except (KeyError, TypeError, ValueError, AttributeError):
            pass  # not the layout of shellmodes.studies.convergence after all: show it generically
    key, records = _records(data)
    scalars = ([(k, _cell(v)) for k, v in data.items() if not isinstance(v, (dict, list)) and v is not None]
               if isinstance(data, dict) else [])
    parts = [f'<p class="quiet">From {_e(path)}' + (f" (<code>{_e(key)}</code>)" if key else "") + ".</p>"]
    if scalars:
        parts.append(f'<div class="cards"><div class="card"><h3>Study</h3>{_dl(scalars)}</div></div>')
    if records:
        columns = []
        for r in records:
            columns += [k for k in r if k not in columns]
        rows = [[_cell(r.get(c)) for c in columns] for r in records]
        parts.append(f'<div class="scroll">{_table(columns, rows)}</div>')
    else:
        parts.append('<p class="quiet">No table of estimates in the file.</p>')
    return "".join(parts)


def _run_values(study: dict, run: dict | None) -> dict | None:
    """This run's energy of each study row, when the run's mesh is one of the study's refinements.

    The run must have the same number of degrees of freedom as a refinement
    and agree with that refinement's group means to 1e-9 (relative), so its
    mode numbering is the study's; otherwise None.
    """
    if not run:
        return None
    dofs = (run.get("mesh") or {}).get("dofs")
    level = [k for k, r in enumerate(study["refinements"]) if r.get("dofs") == dofs]
    if not level:
        return None
    k = level[0]
    e0 = (run.get("units") or {}).get("energy_per_lambda")
    e0 = 1.0 if e0 is None else float(e0)
    energy = {int(m["index"]): float(m["energy"]) for m in run["modes"]}
    out = {}
    for row in study["rows"]:
        members = [int(i) for i in row.get("modes") or []]
        values = row.get("eigenvalues") or []
        if not members or any(i not in energy for i in members) or len(values) <= k:
            return None
        mine = sum(energy[i] for i in members) / len(members)
        theirs = float(values[k]) * e0
        if abs(mine - theirs) > 1e-9 * max(abs(theirs), max(abs(e) for e in energy.values()) or 1.0):
            return None
        out[int(row["index"])] = mine
    return out


def _study_section(path: Path, data: dict, run: dict | None = None) -> str:
    """The ``convergence.json`` of :mod:`shellmodes.studies.convergence`: refinements and per-group estimates."""
    unit = (data.get("units") or {}).get("energy") or "1"
    bounds = data.get("order_range")
    facts = [("case", _e(data.get("source", "–"))), ("element degree", _num(data.get("degree"))),
             ("geometry degree", _num(data.get("geometry_degree"))),
             ("expected order", _num(data.get("expected_order"), 3)),
             ("order range", _e(f"{bounds[0]:.3g} to {bounds[1]:.3g}") if bounds else "–")]
    if data.get("tolerance") is not None:
        reached = data.get("reached")
        facts += [("tolerance", _sci(data["tolerance"])),
                  ("reached at", _num(reached) if reached is not None else "not reached")]
    refinements = _table(["subdivisions", "h", "dofs", "modes", "time"],
                         [[_num(r.get("subdivisions")), _num(r.get("h"), 4), _num(r.get("dofs")),
                           _num(r.get("modes")), f"{float(r.get('seconds', 0.0)):.2f} s"]
                          for r in data["refinements"]])
    mine = _run_values(data, run)
    rows = []
    for r in data["rows"]:
        ok = r.get("asymptotic")
        extra = []
        if mine is not None:
            extra = [_sci(abs(float(r["energy_extrapolated"]) - mine[int(r["index"])]))]
        rows.append([_num(r["index"]), _e(_member_span(r.get("modes") or [])), _num(r.get("size")),
                     _num(r.get("l")), _num(r.get("energy")), _num(r.get("energy_extrapolated")),
                     _sci(r.get("energy_error")), _sci(r.get("relative_error")), _num(r.get("order"), 3),
                     '<span class="tag pass">yes</span>' if ok else '<span class="tag">no</span>',
                     _num(r.get("tolerance_met_at_subdivisions", r.get("reached_at"))), *extra])
    head = ["#", "modes", "size", "l", f"finest [{unit}]", f"extrapolated [{unit}]", f"error [{unit}]",
            "rel. error", "order", "asymptotic", "tolerance met at subdivisions"]
    if mine is not None:
        head.append(f"this run's error [{unit}]")
        whose = ("The last column estimates the error of this run's own levels: |extrapolated − this run|; "
                 "this run's mesh is one of the study's refinements.")
    else:
        whose = ("This run's mesh is not one of the study's refinements: the errors are those of the "
                 "study's finest mesh, not of this run's numbers.")
    warn = "".join(f"<li>{_e(w)}</li>" for w in data.get("warnings") or [])
    return (f'<p class="quiet">From {_e(path)}: each row is a group of modes shared by every refinement; '
            "the error is a bar on the finest mesh's value, Fs |l3 − l2| / (r^p − 1) (Roache's grid convergence "
            "index: Fs 1.25 where the observed order is verified, 3 where it is not and the row is flagged). "
            f"{_e(whose)}</p>"
            f'<div class="cards"><div class="card"><h3>Study</h3>{_dl(facts)}</div>'
            f'<div class="card"><h3>Refinements</h3>{refinements}</div></div>'
            + (f'<ul class="notes">{warn}</ul>' if warn else "")
            + f'<div class="scroll">{_table(head, rows)}</div>')


def _checks_section(results) -> str:
    rows = [[_e(r.name), '<span class="tag pass">pass</span>' if r.passed else '<span class="tag">FAIL</span>',
             _cell(r.value) if math.isfinite(r.value) else "–", _cell(r.reference), _sci(r.error),
             _sci(r.tolerance), f"{r.seconds:.1f} s", _e(r.source)] for r in results]
    passed = sum(r.passed for r in results)
    table = _table(["check", "result", "value", "reference", "error", "tolerance", "time", "source"], rows,
                   text_columns=(0, 1, 7))
    return (f'<p class="quiet">{passed} passed, {len(results) - passed} failed. These checks solve problems with '
            "exact answers through the same code; they vouch for the method, not for this run's mesh, whose "
            f'own error needs a convergence study.</p><div class="scroll">{table}</div>')


def _slices_section(solver: dict) -> str:
    """Per-slice table of a sliced run: interval, shift, inertia count, modes found, residual, time."""
    rows = []
    for r in solver.get("slices") or []:
        rows.append([_e(r.get("index")), f"[{_num(r.get('lower'), 8)}, {_num(r.get('upper'), 8)})",
                     _num(r.get("shift"), 6), _e(r.get("expected")), _e(r.get("found")),
                     _sci(r.get("max_residual")), f"{float(r.get('seconds', 0.0)):.2f} s", _e(r.get("worker", ""))])
    ok = all(r.get("found") == r.get("expected") for r in solver.get("slices") or [])
    note = ("every slice holds exactly the modes its inertia counts say (none missed, none twice)" if ok
            else "a slice's modes differ from its inertia count: modes are missing or repeated")
    return (_table(["slice", "interval (eigenvalue)", "shift", "inertia count", "found", "max residual", "time",
                    "worker"], rows, text_columns=(1, 7)) + f'<p class="quiet">{_e(note)}.</p>')


def _statistics_section(stats: dict, png: bytes | None) -> str:
    """Weyl comparison, heat-trace coefficients and spacing distances of ``output.statistics``."""
    heat, weyl = stats["heat_trace"], stats["weyl"]
    rows = [["A / 4 pi (area)", _num(heat["a"], 6), _num(heat["expected_a"], 6)],
            ["-/+ L / 8 sqrt(pi) (rim)", _num(heat["b"], 6), _num(heat["expected_b"], 6)],
            ["chi / 6 (Euler characteristic)", _num(heat["c"], 6), _num(heat["expected_c"], 6)]]
    parts = [f"<figure>{_img(png, 'level statistics')}<figcaption>Top: the computed counting function "
             "against Weyl's law with its corrections, and its fluctuation about it; bottom: unfolded "
             "nearest-neighbour spacings against Poisson and the Wigner surmise.</figcaption></figure>"
             if png is not None else "",
             "<h3>Heat-trace coefficients</h3>",
             _table(["term", "fitted", "expected"], rows, text_columns=(0,)),
             f'<p class="quiet">{_e(weyl.get("source", ""))}. Mean of N(lambda) minus Weyl\'s N over the '
             f'computed levels: {_num(weyl.get("mean_deviation"), 4)}.</p>',
             "<h3>Spacings</h3>",
             _table(["class", "modes", "spacings", "KS distance to Poisson", "KS distance to Wigner"],
                    [[_e(name), _e(v.get("modes")), _e(v.get("count")), _num(v.get("ks_poisson"), 3),
                      _num(v.get("ks_wigner"), 3)] for name, v in stats["spacings"].items()], text_columns=(0,)),
             f'<p class="quiet">{_e(stats["classes"].get("note", ""))}.</p>']
    return "".join(parts)


def _chosen_modes(data: dict, count: int) -> list[int]:
    """The first mode of each of the first ``count`` multiplets with a nonzero eigenvalue.

    The zero mode of a closed surface or an all-free shell is a constant and
    shows nothing; it is skipped (its level stays in the tables).
    """
    out = []
    lam = [abs(float(m.get("eigenvalue", m["energy"]))) for m in data["multiplets"]]
    tiny = 1e-8 * max(lam, default=0.0)
    for m in sorted(data["multiplets"], key=lambda m: int(m["index"])):
        members = m.get("modes") or []
        if members and abs(float(m.get("eigenvalue", m["energy"]))) > tiny:
            out.append(int(min(members)))
        if len(out) >= count:
            break
    return out


def report_html(data: dict, *, folder: Path | None = None, levels_png: bytes | None = None,
                mode_pngs=(), convergence: Path | None = None, checks=None, notes=(),
                statistics_png: bytes | None = None) -> str:
    """Assemble the report page from a parsed ``spectrum.json`` and ready-made PNG bytes.

    ``mode_pngs`` is a sequence of ``(mode index, multiplet record, png bytes)``;
    ``checks`` a list of :class:`shellmodes.studies.checks.CheckResult` or None.
    Every text from the run is escaped.
    """
    case = data.get("case") or {}
    title = case.get("title") or (folder.name if folder else "shellmodes run")
    units = data.get("units") or {}
    unit = units.get("energy") or "1"
    n_modes, n_mult = len(data["modes"]), len(data["multiplets"])
    mesh = data.get("mesh") or {}
    sub = (f"{n_modes} modes in {n_mult} multiplets · degree {_e(mesh.get('degree', '–'))} · "
           f"{_num(mesh.get('dofs'))} degrees of freedom · energies in {_e(unit)}")
    body = [f'<header class="run"><h1>{_e(title)}</h1><p>{sub}</p>'
            + (f"<p>run folder {_e(folder)}</p>" if folder else "") + "</header>"]
    warnings_ = [str(w) for w in (data.get("warnings") or [])] + [str(n) for n in notes]
    body.append("<h2>Warnings</h2>")
    body.append('<ul class="notes">' + "".join(f"<li>{_e(w)}</li>" for w in warnings_) + "</ul>" if warnings_
                else '<p class="quiet">The run recorded no warnings.</p>')
    body.append("<h2>Summary</h2>" + _summary(data))
    if levels_png is not None:
        ladder = "beside the ladder l(l+1)/R_eq² of the sphere of equal area" if mesh.get("closed") and any(
            m.get("l") is not None for m in data["multiplets"]) else "grouped by multiplet"
        body.append(f"<h2>Levels</h2><figure>{_img(levels_png, 'level diagram')}<figcaption>Computed levels "
                    f"{ladder}; each bar is one mode.</figcaption></figure>")
    body.append("<h2>Multiplets</h2>" + _multiplet_table(data))
    if (data.get("solver") or {}).get("slices"):
        body.append("<h2>Slices</h2>" + _slices_section(data["solver"]))
    if isinstance(data.get("statistics"), dict):
        body.append("<h2>Level statistics</h2>" + _statistics_section(data["statistics"], statistics_png))
    if mode_pngs:
        figures = []
        for index, mult, png in mode_pngs:
            l = mult.get("l")
            caption = (f"mode {index}, multiplet {mult['index']} (size {mult.get('size')}"
                       + (f", l = {l}" if l is not None else "") + f"), E = {_num(mult.get('energy'))} {unit}")
            figures.append(f"<figure>{_img(png, f'mode {index}')}<figcaption>{_e(caption)}</figcaption></figure>")
        body.append("<h2>Modes</h2><p class=\"quiet\">One mode of each of the first multiplets (a constant "
                    "zero mode is left out); colours are symmetric about zero.</p>"
                    + f'<div class="gallery">{"".join(figures)}</div>')
    if convergence is not None or checks is not None:
        body.append("<h2>Error estimates</h2>")
        if convergence is not None:
            body.append("<h3>Convergence study</h3>" + _convergence_section(convergence, data))
        if checks is not None:
            body.append("<h3>Validation set</h3>" + _checks_section(checks))
    body.append("<h2>Mode table</h2>" + _mode_table(data))
    if case:
        body.append(case_section(case))
    return page_html(title, body, (data.get("versions") or {}).get("shellmodes", ""))


def case_section(case: dict, heading: str = "Case") -> str:
    """The case block: the keys that apply, as TOML."""
    return (f'<h2>{_e(heading)}</h2><pre class="case">{_e(case_toml(applicable_case(case)))}</pre>'
            '<p class="quiet">As the run recorded it, defaults filled in; unset keys and keys that do not apply '
            "left out.</p>")


def page_html(title: str, body, version: str = "") -> str:
    """The whole page: head, style, the sections in ``body`` and the footer with the caution."""
    stamp = datetime.datetime.now(datetime.timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
    footer = (f'<footer><p class="safety">{_e(SAFETY_NOTE)}</p>'
              f"<p>Report by shellmodes {_e(version)}, {_e(stamp)}.</p></footer>")
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
            f"<title>{_e(title)} · shellmodes report</title><style>{_CSS}</style></head>"
            f"<body><main>{''.join(body)}</main>{footer}</body></html>\n")


# ---------------------------------------------------------------------------
# writing


def _write_text_atomic(path: Path, text: str) -> Path:
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as f:
            f.write(text)
        os.chmod(tmp, 0o644)
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return path


def write_report(folder, checks=False, *, modes: int = DEFAULT_RENDERS, keep_images: bool = False) -> Path:
    """Write ``report.html`` into a run folder and return its path.

    Parameters
    ----------
    folder
        A folder written by ``shellmodes run`` (needs ``spectrum.json``;
        ``modes.vtu`` for renders).  Sweep and convergence folders:
        :func:`shellmodes.io.report_folders.write_study_report`.
    checks
        True to run the validation set (:func:`shellmodes.studies.checks.run_checks`)
        and include its table; a string runs only the checks whose name
        contains it.
    modes
        How many multiplets to render (one mode each); 0 for none.
    keep_images
        Also leave the PNGs in the folder (``report-levels.png``,
        ``report-mode0007.png``, ...); by default they live only inside the page.

    Raises
    ------
    CaseError
        The folder or its ``spectrum.json`` is missing or corrupt.
    shellmodes.io.pictures.PlotExtraMissing
        matplotlib or pyvista is not installed.
    """
    from shellmodes.io.pictures import render_modes, spectrum_picture, statistics_picture

    folder = Path(folder)
    data = load_run(folder)
    if modes < 0:
        raise CaseError(f"the number of modes to render must be 0 or more, not {modes}", key="modes")
    notes = []
    results = None
    if checks:
        from shellmodes.studies.checks import run_checks

        results = run_checks(checks if isinstance(checks, str) else None)
        if not results:
            notes.append(f"no validation check matches {checks!r}")
    convergence = find_convergence(folder, data)
    unit = (data.get("units") or {}).get("energy")
    by_index = {int(m["index"]): m for m in data["multiplets"]}
    mode_to_mult = {int(i): by_index[int(m["index"])] for m in data["multiplets"] for i in (m.get("modes") or [])}
    with tempfile.TemporaryDirectory(prefix="shellmodes-report-") as scratch:
        where = folder if keep_images else Path(scratch)
        levels = spectrum_picture(data, where / "report-levels.png")
        chosen = _chosen_modes(data, modes)
        vtu = folder / "modes.vtu"
        pictures = []
        if chosen and not vtu.is_file():
            notes.append("no modes.vtu in the run folder (output.vtu = false?): no mode pictures")
        elif chosen:
            paths = render_modes(vtu, chosen, str(where / "report-mode{index:04d}.png"), unit=unit)
            pictures = [(i, mode_to_mult.get(i, {"index": "?"}), p.read_bytes()) for i, p in zip(chosen, paths)]
        statistics_png = None
        if data.get("statistics") is not None:
            try:
                _statistics_section(data["statistics"], None)  # reads every field the page shows
                statistics_png = statistics_picture(data["statistics"], where / "report-statistics.png").read_bytes()
            except (KeyError, TypeError, ValueError, AttributeError, IndexError):
                notes.append("the level statistics in spectrum.json are malformed and are not shown; run the case "
                             "again to rewrite them")
                data = {k: v for k, v in data.items() if k != "statistics"}
        page = report_html(data, folder=folder, levels_png=levels.path.read_bytes(), mode_pngs=pictures,
                           convergence=convergence, checks=results, notes=notes, statistics_png=statistics_png)
    try:
        return _write_text_atomic(folder / "report.html", page)
    except OSError as exc:
        raise CaseError(f"cannot write report.html ({exc.strerror or exc})", str(folder)) from None
