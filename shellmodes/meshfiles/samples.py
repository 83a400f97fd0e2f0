"""Mesh files named in a case: a path relative to the case file, or a sample shipped with shellmodes.

``file = "sample:pebble6.vtu"`` names a mesh in the package's ``samples`` folder, so a bundled
case copied anywhere still finds its mesh; any other value is a path, relative to the case file's
folder unless absolute.

Examples
--------
>>> sample_names()
['pebble.stl', 'pebble6.vtu']
>>> resolve_mesh_file("sample:pebble6.vtu", "/anywhere").name
'pebble6.vtu'
"""

from __future__ import annotations

from importlib import resources
from pathlib import Path

from shellmodes.errors import ProblemError

__all__ = ["SAMPLE_PREFIX", "sample_names", "resolve_mesh_file"]

#: the prefix of a case's mesh-file value that names a shipped sample
SAMPLE_PREFIX = "sample:"


def _samples() -> Path:
    return Path(str(resources.files("shellmodes") / "samples"))


def sample_names() -> list[str]:
    """The sample meshes shipped with shellmodes (file names)."""
    folder = _samples()
    return sorted(p.name for p in folder.iterdir() if p.suffix in (".vtu", ".stl", ".msh", ".vtk", ".obj", ".ply"))


def resolve_mesh_file(value: str, base_dir, key: str = "surface.file") -> Path:
    """The path of the mesh file a case names.

    Parameters
    ----------
    value : str
        The case's ``file`` value: ``"sample:NAME"`` or a path.
    base_dir : path-like
        The case file's folder (relative paths start there).
    key : str
        The case key, named in the error.

    Returns
    -------
    Path
        The file to read (its existence is checked by the reader).

    Raises
    ------
    ProblemError
        A ``sample:`` name that shellmodes does not ship.
    """
    if value.startswith(SAMPLE_PREFIX):
        name = value[len(SAMPLE_PREFIX):]
        names = sample_names()
        if name not in names:
            raise ProblemError(f"value {value!r}: no sample mesh of that name; allowed: "
                               + ", ".join(SAMPLE_PREFIX + n for n in names), key)
        return _samples() / name
    path = Path(value)
    return path if path.is_absolute() else Path(base_dir) / path
