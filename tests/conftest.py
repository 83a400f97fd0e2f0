"""Fixtures shared by the CLI, output and case tests.

Every fixture builds fresh objects per test (pytest's default function
scope); none hands out anything a test could mutate for another.
"""

from __future__ import annotations

import logging
import subprocess
import sys
import warnings
from dataclasses import dataclass

import pytest

from shellmodes.cli import main


@dataclass(frozen=True)
class CliResult:
    status: int
    stdout: str
    stderr: str


@pytest.fixture
def run_cli(capsys, monkeypatch):
    """Call ``shellmodes.cli.main(argv)`` in-process; return status and captured text.

    ``main`` installs its own ``warnings.showwarning`` and configures the root
    logger; both are put back after the test so no setting leaks into the
    next one.
    """
    monkeypatch.setattr(warnings, "showwarning", warnings.showwarning)
    root = logging.getLogger()
    monkeypatch.setattr(root, "handlers", list(root.handlers))
    monkeypatch.setattr(root, "level", root.level)
    ours = logging.getLogger("shellmodes")
    monkeypatch.setattr(ours, "level", ours.level)

    def call(*argv) -> CliResult:
        capsys.readouterr()  # drop anything printed before this call
        status = main([str(a) for a in argv])
        captured = capsys.readouterr()
        return CliResult(status, captured.out, captured.err)

    return call


@pytest.fixture
def run_module():
    """Run ``python -m shellmodes.cli argv`` in a fresh interpreter (the real process exit path)."""

    def call(*argv, cwd=None) -> CliResult:
        done = subprocess.run([sys.executable, "-m", "shellmodes.cli", *map(str, argv)], cwd=cwd,
                              capture_output=True, text=True, timeout=120)
        return CliResult(done.returncode, done.stdout, done.stderr)

    return call
