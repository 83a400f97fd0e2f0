"""Old names of case-file keys and values, still accepted with a one-line warning.

Names changed so that they say what they are:

- ``shape = "star"`` is ``shape = "deformed_sphere"`` (a sphere whose radius is harmonically
  deformed, r = R (1 + sum a_lm Y_lm)), for surfaces, snap targets and shell walls;
- ``output.picture_modes`` is ``output.picture_multiplets`` (it counts multiplets, one mode
  rendered from each);
- ``shell.regions`` is ``shell.media`` (the materials; ``shell.layers`` is the mesh).

:func:`upgrade` rewrites the parsed tables before validation and warns once per old name with a
:class:`~shellmodes.errors.RenamedKeyWarning` naming the file, the key and the new name.

Examples
--------
>>> import warnings
>>> with warnings.catch_warnings(record=True) as caught:
...     warnings.simplefilter("always")
...     data = upgrade({"surface": {"shape": "star", "radius": 2.0}}, "case.toml")
>>> data["surface"]["shape"], len(caught)
('deformed_sphere', 1)
"""

from __future__ import annotations

import warnings

from shellmodes.errors import RenamedKeyWarning

__all__ = ["upgrade", "warn_renamed", "key_as_written", "OLD_SHAPES", "OLD_KEYS"]

#: old shape value -> new
OLD_SHAPES = {"star": "deformed_sphere"}
#: (table, old key) -> new key
OLD_KEYS = {("output", "picture_modes"): "picture_multiplets", ("shell", "regions"): "media"}


def _message(source: str, key: str, old: str, new: str) -> str:
    return f"{source}: {key} {old} is now called {new} (the old name still works; please update the file)"


def warn_renamed(messages) -> None:
    """Issue the :class:`RenamedKeyWarning` of each message (after the case has validated)."""
    for text in messages:
        warnings.warn(text, RenamedKeyWarning, stacklevel=3)


def _shapes(value, key: str, source: str, notes: list):
    """``value`` with every old ``shape`` renamed, searched through nested tables and arrays."""
    if isinstance(value, dict):
        out = {}
        for k, v in value.items():
            path = f"{key}.{k}" if key else str(k)
            if k == "shape" and isinstance(v, str) and v in OLD_SHAPES:
                notes.append(_message(source, path, f"= {v!r}", f"{OLD_SHAPES[v]!r}"))
                v = OLD_SHAPES[v]
            out[k] = _shapes(v, path, source, notes)
        return out
    if isinstance(value, (list, tuple)):
        return type(value)(_shapes(v, f"{key}[{i}]", source, notes) for i, v in enumerate(value))
    return value


def upgrade(data: dict, source: str = "<case>", notes: list | None = None) -> dict:
    """The case tables ``data`` with old names replaced by the current ones (warning for each).

    Parameters
    ----------
    data : dict
        Parsed TOML tables.
    source : str
        The case file, named in the warnings.
    notes : list, optional
        Collect the messages here instead of warning now (:func:`warn_renamed` issues them later,
        so a case that fails validation gets its one error line and nothing else).

    Returns
    -------
    dict
        A new dict; ``data`` is not changed.  A key given under both its old and its new name is
        left for validation to refuse.
    """
    if not isinstance(data, dict):
        return data
    found: list = []
    data = _shapes(data, "", source, found)
    for (table, old), new in OLD_KEYS.items():
        section = data.get(table)
        if isinstance(section, dict) and old in section and new not in section:
            found.append(_message(source, f"{table}.{old}", "", f"{table}.{new}"))
            section = dict(section)
            section[new] = section.pop(old)
            data[table] = section
    if notes is None:
        warn_renamed(found)
    else:
        notes.extend(found)
    return data


def key_as_written(key: str | None, data: dict) -> str | None:
    """A dotted case key in the words of the file: ``shell.media[0]`` stays ``shell.regions[0]`` there.

    Used for validation errors, so the one error line names the key the user can find in the file.
    """
    if not key or not isinstance(data, dict):
        return key
    for (table, old), new in OLD_KEYS.items():
        section = data.get(table)
        prefix = f"{table}.{new}"
        if isinstance(section, dict) and old in section and new not in section and (
                key == prefix or key.startswith((prefix + ".", prefix + "["))):
            return f"{table}.{old}" + key[len(prefix):]
    return key
