"""Issue 11, items 1-2: the memory guard refuses before any mesh or matrix is built.

Each refused case would, without the guard, allocate tens or hundreds of GiB.  So that a
regression fails fast instead of taking the machine, the builders are replaced by ones that
raise: a case that reaches them is reported by the CLI as an internal error (exit 1), which the
assertions catch.  The limit is fixed through SHELLMODES_MEMORY_LIMIT so the tests do not depend
on the machine's free memory.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp
from hostile import SPHERE, assert_refused, write_case

from shellmodes.case.schema import case_from_dict
from shellmodes.eigen import resources
from shellmodes.eigen.solve import lowest_modes
from shellmodes.errors import CaseError, SolverError


@pytest.fixture
def no_building(monkeypatch):
    """Meshes and volume discretisations may not be built; the limit is 8 GiB."""
    from shellmodes import pipeline

    def refuse(*args, **kwargs):
        raise AssertionError("a mesh was built for a case the memory guard should have refused")

    monkeypatch.setattr(pipeline, "build_discretisation", refuse)
    monkeypatch.setenv(resources.ENV_LIMIT, "8GiB")


SHELL = """\
[shell]
inner = {{ shape = "sphere", radius = 1.0 }}
outer = {{ shape = "{outer}", {wall} }}
cells = "{cells}"
layers = {layers}

[resolution]
degree = {degree}
subdivisions = {subdivisions}

[modes]
count = 10
"""

HUGE = [  # (case text, key blamed, value named): issue 11 item 1 and 2
    (SPHERE.replace("degree = 1", "degree = 4").replace("subdivisions = 1", "subdivisions = 9"),
     "resolution.subdivisions", "9"),  # 42 million DOFs
    (SHELL.format(outer="sphere", wall="radius = 2.0", cells="tetrahedra", layers=40, degree=2, subdivisions=7),
     "resolution.subdivisions", "7"),
    (SHELL.format(outer="sphere", wall="radius = 2.0", cells="prisms", layers=100000000, degree=2, subdivisions=2),
     "shell.layers", "100000000"),  # separable path
    (SHELL.format(outer="ellipsoid", wall="axes = [2.0, 2.1, 2.2]", cells="prisms", layers=100000000, degree=2,
                  subdivisions=2), "shell.layers", "100000000"),  # assembled prisms
    (SPHERE.replace("degree = 1", "degree = 2").replace("subdivisions = 1", "subdivisions = 5")
     .replace("count = 4", "count = 20000"), "modes.count", "20000"),  # dense-size Krylov basis on 41k DOFs
    (SPHERE.replace("degree = 1", "degree = 2").replace("subdivisions = 1", "subdivisions = 6")
     .replace("count = 4", "count = 100000"), "modes.count", "100000"),
]


@pytest.mark.parametrize("text, key, value", HUGE, ids=["deg4-sub9", "tets-sub7-40layers", "prisms-1e8-layers",
                                                        "deformed-prisms-1e8-layers", "count-20000",
                                                        "count-100000"])
def test_beyond_memory_is_refused_up_front(tmp_path, run_cli, no_building, text, key, value):
    case = write_case(tmp_path, text)
    out = tmp_path / "out"
    result = run_cli("run", case, "--out", out)
    line = assert_refused(result, case, key, value, "GiB", out=out)
    assert "SHELLMODES_MEMORY_LIMIT" in line


def test_ordinary_case_passes_the_guard(tmp_path, run_cli, monkeypatch):
    """The guard lets a normal case run under a modest limit (so the refusals above are not blanket ones)."""
    monkeypatch.setenv(resources.ENV_LIMIT, "2GiB")
    case = write_case(tmp_path, SPHERE)
    result = run_cli("run", case, "--out", tmp_path / "out", "--quiet")
    assert result.status == 0, result.stderr


def test_case_key_and_environment_set_the_limit(tmp_path, run_cli, monkeypatch):
    monkeypatch.delenv(resources.ENV_LIMIT, raising=False)
    text = SPHERE.replace("subdivisions = 1", "subdivisions = 3") + "\n[limits]\nmemory_gib = 0.01\n"
    case = write_case(tmp_path, text)
    assert_refused(run_cli("run", case, "--out", tmp_path / "out"), "limits.memory_gib", out=tmp_path / "out")
    monkeypatch.setenv(resources.ENV_LIMIT, "10MiB")
    case = write_case(tmp_path, SPHERE.replace("subdivisions = 1", "subdivisions = 3"))
    assert_refused(run_cli("run", case, "--out", tmp_path / "out"), resources.ENV_LIMIT, out=tmp_path / "out")


def test_unreadable_limit_in_the_environment_is_bad_input(tmp_path, run_cli, monkeypatch):
    monkeypatch.setenv(resources.ENV_LIMIT, "lots")
    case = write_case(tmp_path, SPHERE)
    assert_refused(run_cli("run", case, "--out", tmp_path / "out"), resources.ENV_LIMIT, "'lots'",
                   out=tmp_path / "out")


@pytest.mark.parametrize("text, value", [("8", 8 * 2**30), ("512MiB", 512 * 2**20), ("2 GB", 2e9),
                                         ("1.5TiB", 1.5 * 2**40)])
def test_memory_sizes(text, value):
    assert resources.parse_memory(text) == value


@pytest.mark.parametrize("text", ["", "-1", "0", "8 parsecs", "inf", "nan"])
def test_bad_memory_sizes(text):
    with pytest.raises(ValueError):
        resources.parse_memory(text)


def test_thin_shell_layers_are_guarded(tmp_path, run_cli, no_building, monkeypatch):
    """``thin-shell --layers 100000000`` is refused before even the surface is solved."""
    from shellmodes import pipeline as run

    monkeypatch.setattr(run, "run_case", lambda case: (_ for _ in ()).throw(AssertionError("solved")))
    case = write_case(tmp_path, SPHERE)
    result = run_cli("thin-shell", case, "--thickness", "0.1", "--layers", "100000000")
    assert_refused(result, case, "--layers", "100000000")


def test_energy_window_beyond_the_discretisation_is_refused(tmp_path, run_cli, no_building):
    """modes.below = 1e300 asks for every mode: refused (Weyl's law puts ~1e299 modes below it)."""
    case = write_case(tmp_path, SPHERE.replace("count = 4", "below = 1e300"))
    assert_refused(run_cli("run", case, "--out", tmp_path / "out"), "modes.below", "1e+300", out=tmp_path / "out")


def test_huge_multiplet_tolerance_is_refused(tmp_path, run_cli):
    case = write_case(tmp_path, SPHERE + "multiplet_tolerance = 1e6\n")
    assert_refused(run_cli("run", case, "--out", tmp_path / "out"), "modes.multiplet_tolerance",
                   out=tmp_path / "out")


def test_multiplet_growth_is_capped():
    """Eigenvalues 1, 1.001, 1.002, ...: within any 5 % tolerance they chain into one 'multiplet' that
    would grow to the whole matrix; the iteration stops with the key to change instead."""
    n = 3000
    K = sp.diags(1.0 + 1e-3 * np.arange(n)).tocsr()
    M = sp.identity(n, format="csr")
    with pytest.raises(SolverError, match="multiplet_tolerance") as info:
        lowest_modes(K, M, count=5, multiplet_tolerance=0.05, backend="splu", method="lanczos")
    assert info.value.key == "modes.multiplet_tolerance"


def test_energy_window_growth_is_capped(monkeypatch):
    """An energy window above the whole spectrum doubles the Krylov size; it stops at the memory limit."""
    monkeypatch.setenv(resources.ENV_LIMIT, "1MiB")
    n = 5000
    K = sp.diags(1.0 + np.arange(n, dtype=float)).tocsr()
    M = sp.identity(n, format="csr")
    with pytest.raises(SolverError, match="modes.below") as info:
        lowest_modes(K, M, below=1e9, backend="splu", method="lanczos")
    assert info.value.key == "modes.below"


def test_estimate_counts_unknowns_exactly_for_the_sphere():
    """P2 on the level-3 icosphere: V + E = 642 + 1920 = 2562 (V = 10 4^3 + 2, E = 30 4^3: common practice)."""
    case = case_from_dict({"surface": {"shape": "sphere"}, "resolution": {"degree": 2, "subdivisions": 3}})
    assert resources.estimate_case(case).unknowns == 2562


def test_bad_limit_key_is_refused():
    with pytest.raises(CaseError, match="limits.memory_gib"):
        case_from_dict({"surface": {"shape": "sphere"}, "limits": {"memory_gib": -1}})
