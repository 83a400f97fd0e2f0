"""The validation set behind `shellmodes check`: every check runs and passes."""

import pytest

from shellmodes.cli import main
from shellmodes.studies.checks import CHECKS, format_table, run_checks

QUICK = ("area of", "rigid rotor", "electron on", "hemisphere", "cap of 120", "core/shell dot on prisms")


def test_every_check_names_a_source_and_tolerance():
    assert len(CHECKS) >= 18
    for name, (_fn, source, tolerance) in CHECKS.items():
        assert source and tolerance >= 0, name


@pytest.mark.parametrize("fragment", QUICK)
def test_quick_checks_pass(fragment):
    results = run_checks(fragment)
    assert results, fragment
    assert all(r.passed for r in results), format_table(results)


def test_check_command_table_and_exit_status(capsys):
    assert main(["check", "--only", "area of the unit sphere"]) == 0
    out = capsys.readouterr().out
    assert "pass" in out and "1 passed, 0 failed" in out


@pytest.mark.slow
def test_whole_validation_set_passes():
    results = run_checks()
    assert len(results) == len(CHECKS)
    assert all(r.passed for r in results), format_table(results)
