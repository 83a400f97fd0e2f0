"""Shared checks of the hostile-input tests: a refusal is exit 2, one stderr line, nothing written."""

from __future__ import annotations

from pathlib import Path

from test_bad_input import BASE as SPHERE  # the smallest valid case: 42 degree-1 DOFs, solved densely

__all__ = ["SPHERE", "write_case", "assert_refused"]


def write_case(folder: Path, text: str, name: str = "case.toml") -> Path:
    path = folder / name
    path.write_text(text, encoding="utf-8")
    return path


def assert_refused(result, *names: str, out: Path | None = None) -> str:
    """Exit 2, exactly one stderr line naming every text in ``names``, no traceback, ``out`` not created."""
    assert result.status == 2, (result.status, result.stderr)
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1, result.stderr
    assert lines[0].startswith("shellmodes: error: "), lines[0]
    assert "Traceback" not in result.stderr
    for name in names:
        assert str(name) in lines[0], (name, lines[0])
    if out is not None:
        assert not Path(out).exists(), sorted(p.name for p in Path(out).iterdir())
        hidden = [p.name for p in Path(out).parent.iterdir() if p.name.startswith(f".{Path(out).name}")]
        assert hidden == [], hidden
    return lines[0]
