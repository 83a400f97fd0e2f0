"""Spectrum slicing with inertia counts (shellmodes.eigen.slicing)."""

from __future__ import annotations

import json
import os

import numpy as np
import pytest
import scipy.sparse as sp

from shellmodes.case.schema import case_from_dict
from shellmodes.eigen.slicing import inertia, sliced_modes
from shellmodes.eigen.solve import group_multiplets, lowest_modes
from shellmodes.errors import SolverError
from shellmodes.fem.discretisation import build_discretisation
from shellmodes.fem.forms import assemble_surface
from shellmodes.pipeline import run_case


def _problem(shape: dict, degree: int, subdivisions: int):
    case = case_from_dict({"surface": shape, "resolution": {"degree": degree, "subdivisions": subdivisions}})
    return assemble_surface(build_discretisation(case).raw, None)


@pytest.fixture(scope="module")
def sphere():
    """Unit sphere, degree 2, 2,562 dofs: coarse, so the default run stays quick."""
    return _problem({"shape": "sphere"}, 2, 3)


def _l_of(lam):
    return np.rint((-1.0 + np.sqrt(1.0 + 4.0 * np.maximum(lam, 0.0))) / 2.0).astype(int)


def _check_sphere(pairs, l_max):
    """Exact multiplicities 2l+1, eigenvalues l(l+1), every slice's count met, no boundary in a multiplet."""
    lam = pairs.lam
    l = _l_of(lam)
    # the unit sphere's eigenvalues l(l+1), each (2l+1)-fold (e.g. Courant and Hilbert, Methods of
    # Mathematical Physics I, ch. VII sec. 5)
    assert np.bincount(l).tolist()[: l_max + 1] == [2 * k + 1 for k in range(l_max + 1)]
    # degree 2 on 2,562 dofs: measured 2.7e-2 at l = 16 (order h^4); 4e-2 still tells neighbouring
    # levels apart (they differ by 2 / l >= 12 % up to l = 16)
    assert np.max(np.abs(lam[1:] - l[1:] * (l[1:] + 1)) / (l[1:] * (l[1:] + 1))) < 4e-2
    for s in pairs.slices:
        assert s.found == s.expected
        below, above = lam[lam < s.upper], lam[lam >= s.upper]
        if len(above):  # the boundary sits in a gap between multiplets: one l below, the next above
            assert _l_of(below[-1:])[0] + 1 == _l_of(above[:1])[0]
    assert pairs.counts[0] == 0 and list(np.diff(pairs.counts)) == [s.found for s in pairs.slices]


#: the coarse mesh splits the l-multiplets (measured: relative spread below 1e-3 up to l = 13);
#: this tolerance groups each one, and is far below the relative gap 2 / l between them
COARSE = 5e-3


def test_sphere_multiplicities_across_slices(sphere):
    pairs = sliced_modes(sphere.K, sphere.M, 196, lower_bound=0.0, scale=sphere.spectral_scale,
                         slice_modes=40, workers=1, multiplet_tolerance=COARSE)
    assert len(pairs.slices) >= 4
    assert len(pairs.lam) == 196  # l <= 13 fills exactly 14^2 modes
    _check_sphere(pairs, 13)
    assert np.max(pairs.residuals) < 1e-9


def test_planted_boundaries_inside_multiplets_are_moved(sphere):
    planted = [12.0, 56.0, 110.0]  # l(l+1) for l = 3, 7, 10: each in the middle of a (2l+1)-fold multiplet
    pairs = sliced_modes(sphere.K, sphere.M, below=160.0, lower_bound=0.0, scale=sphere.spectral_scale,
                         boundaries=planted, workers=1, multiplet_tolerance=COARSE)
    uppers = [s.upper for s in pairs.slices]
    assert [s.planned_upper for s in pairs.slices[:3]] == planted
    for p, u in zip(planted, uppers):
        assert u != p and abs(u - p) < 2 * np.sqrt(p) + 2  # moved, into a neighbouring gap
    _check_sphere(pairs, 12)  # all modes below 160: l <= 12 (12 * 13 = 156 < 160 < 182)
    assert len(pairs.lam) == 13**2


def test_slices_match_single_shift():
    deformed = {"shape": "deformed_sphere",
                "deformation": [{"l": 2, "m": 0, "amplitude": 0.1}, {"l": 3, "m": 1, "amplitude": 0.05}]}
    problem = _problem(deformed, 2, 3)
    scale = problem.spectral_scale
    single = lowest_modes(problem.K, problem.M, 80, lower_bound=0.0, scale=scale, method="lanczos")
    sliced = sliced_modes(problem.K, problem.M, 80, lower_bound=0.0, scale=scale, slice_modes=20, workers=1)
    assert len(sliced.slices) >= 3
    assert len(sliced.lam) == len(single.lam)
    # both are converged to ~1e-12 residuals; 1e-10 relative is the target
    assert np.max(np.abs(sliced.lam - single.lam) / np.maximum(np.abs(single.lam), 1.0)) < 1e-10
    # the same subspace (basis-independent): every principal cosine of U^T M V equals 1
    cosines = np.linalg.svd(single.vectors.T @ (problem.M @ sliced.vectors), compute_uv=False)
    assert np.min(cosines) > 1.0 - 1e-8


def test_two_local_dask_workers_agree_with_serial():
    pytest.importorskip("dask.distributed")
    import shellmodes.eigen.slicing as slicing

    problem = _problem({"shape": "sphere"}, 2, 3)
    args = dict(lower_bound=0.0, scale=problem.spectral_scale, slice_modes=16)
    serial = sliced_modes(problem.K, problem.M, 64, workers=1, **args)
    saved = slicing.PARALLEL_FROM
    slicing.PARALLEL_FROM = 0  # force the cluster for this small problem
    try:
        parallel = sliced_modes(problem.K, problem.M, 64, workers=2, **args)
    finally:
        slicing.PARALLEL_FROM = saved
    assert np.allclose(parallel.lam, serial.lam, rtol=1e-12, atol=0)
    assert [s.found for s in parallel.slices] == [s.expected for s in parallel.slices]
    assert len(parallel.slices) == len(serial.slices) >= 3


def test_inertia_of_linear_elements_on_a_segment():
    # -u'' = lam u on (0, 1), u(0) = u(1) = 0, n linear elements: the generalized eigenvalues are
    # lam_k = (6 / h^2) (1 - cos(k pi h)) / (2 + cos(k pi h)), k = 1..n-1 (common practice: the
    # closed form for linear elements on a uniform mesh, recalled from memory; checked by the count)
    n = 1000
    h = 1.0 / n
    main, off = np.full(n - 1, 2.0), np.full(n - 2, -1.0)
    K = sp.diags([off, main, off], [-1, 0, 1]) / h
    M = sp.diags([off * -1.0, main * 2.0, off * -1.0], [-1, 0, 1]) * h / 6.0
    c = np.cos(np.arange(1, n) * np.pi * h)
    exact = 6.0 / h**2 * (1.0 - c) / (2.0 + c)
    for sigma in (5.0, 100.0, 1e4, 5e5, 2.9e6):
        assert inertia(K, M, sigma) == np.count_nonzero(exact < sigma)


@pytest.mark.parametrize("fault", ["missed", "repeated"])
def test_a_missed_or_repeated_mode_is_caught_by_the_inertia_count(sphere, monkeypatch, fault):
    """The eigen-iteration of the slices above 20 is made to lose (or repeat) the mode nearest its shift:
    the slice's inertia count no longer matches its modes, and the run stops instead of returning them."""
    import shellmodes.eigen.slicing as slicing

    args = dict(below=60.0, lower_bound=0.0, scale=sphere.spectral_scale, boundaries=[15.0], workers=1)
    honest = sliced_modes(sphere.K, sphere.M, **args)  # the same request passes untouched
    assert [s.found for s in honest.slices] == [s.expected for s in honest.slices]
    nearest = slicing._Factor.nearest

    def faulty(self, K, M, k, v0, **options):
        lam, U = nearest(self, K, M, k, v0, **options)
        if self.sigma > 20.0 and "tol" not in options:  # the slice solves, not the boundary searches
            j = int(np.argmin(np.abs(lam - self.sigma)))
            take = np.delete(np.arange(len(lam)), j) if fault == "missed" else np.insert(np.arange(len(lam)), j, j)
            return lam[take], U[:, take]
        return lam, U

    monkeypatch.setattr(slicing._Factor, "nearest", faulty)
    with pytest.raises(SolverError, match="inertia count says"):
        sliced_modes(sphere.K, sphere.M, **args)


def test_case_run_reports_slices(tmp_path):
    from shellmodes.io.outputs import write_outputs

    case = case_from_dict({"surface": {"shape": "sphere"}, "resolution": {"degree": 2, "subdivisions": 3},
                           "units": {"energy": "1", "length": "1"},
                           "modes": {"count": 49, "method": "slices", "slice_modes": 15, "workers": 1},
                           "output": {"vtu": False}})
    spectrum = run_case(case)
    write_outputs(spectrum, tmp_path / "out")
    data = json.loads((tmp_path / "out" / "spectrum.json").read_text())
    slices = data["solver"]["slices"]
    assert data["solver"]["method"] == "slices" and len(slices) >= 3
    assert sum(s["found"] for s in slices) == data["solver"]["inertia_counts"][-1] >= 49
    assert all(s["found"] == s["expected"] for s in slices)
    assert [m["size"] for m in data["multiplets"]] == [1, 3, 5, 7, 9, 11, 13]
    assert "inertia count" in (tmp_path / "out" / "run.log").read_text()
    assert data["solver"]["plan"]["path"] == "slices" and "inertia counts" in data["solver"]["plan"]["reason"]


def test_report_shows_slices_and_statistics(tmp_path):
    pytest.importorskip("matplotlib")
    from shellmodes.io.outputs import write_outputs
    from shellmodes.io.report import write_report

    case = case_from_dict({"surface": {"shape": "sphere"}, "resolution": {"degree": 2, "subdivisions": 3},
                           "units": {"energy": "1", "length": "1"},
                           "modes": {"count": 36, "method": "slices", "slice_modes": 12, "workers": 1},
                           "output": {"vtu": False, "statistics": True}})
    write_outputs(run_case(case), tmp_path / "out")
    assert (tmp_path / "out" / "statistics.png").stat().st_size > 1000
    page = write_report(tmp_path / "out", modes=0).read_text()
    assert "<h2>Slices</h2>" in page and "<h2>Level statistics</h2>" in page
    assert "every slice holds exactly the modes its inertia counts say" in page
    assert page.count("data:image/png") == 2  # the level diagram and the statistics picture


def test_group_boundaries_in_gaps_for_a_below_request(sphere):
    # a `below` inside the computed l = 7 multiplet: the request is completed to the whole multiplet
    first = sliced_modes(sphere.K, sphere.M, below=60.0, lower_bound=0.0, scale=sphere.spectral_scale,
                         workers=1, multiplet_tolerance=COARSE)
    inside = float(np.median(first.lam[49:64]))
    assert first.lam[49] < inside < first.lam[63]
    pairs = sliced_modes(sphere.K, sphere.M, below=inside, lower_bound=0.0, scale=sphere.spectral_scale,
                         workers=1, multiplet_tolerance=COARSE)
    groups = group_multiplets(pairs.lam, COARSE, sphere.spectral_scale)
    assert [len(g) for g in groups] == [2 * l + 1 for l in range(8)]


@pytest.mark.slow
def test_sphere_2000_modes_exact_multiplicities():
    """The first 2,025 modes (l <= 44) of the unit sphere, degree 4 on 40,962 dofs, in 14 slices."""
    sphere = _problem({"shape": "sphere"}, 4, 4)
    # this mesh splits the l = 44 multiplet by less than its error, below 1e-3 (measured by inertia
    # counts, benchmarks/bench_slices.py); 1e-3 groups every multiplet, far below the gaps 2 / l
    pairs = sliced_modes(sphere.K, sphere.M, 2000, lower_bound=0.0, scale=sphere.spectral_scale,
                         multiplet_tolerance=1e-3, workers=2)
    assert len(pairs.lam) == 45**2  # 2,000 completed to the end of the l = 44 multiplet
    assert len(pairs.slices) >= 10
    l = _l_of(pairs.lam)
    assert np.bincount(l).tolist() == [2 * k + 1 for k in range(45)]  # Courant and Hilbert, as above
    # degree 4 on 40,962 dofs: relative error of l = 44 between 1e-4 and 1e-3 (inertia counts, measured)
    assert np.max(np.abs(pairs.lam[1:] - l[1:] * (l[1:] + 1)) / (l[1:] * (l[1:] + 1))) < 1e-3
    for s in pairs.slices:
        assert s.found == s.expected
        above = pairs.lam[pairs.lam >= s.upper]
        if len(above):
            assert _l_of(pairs.lam[pairs.lam < s.upper][-1:])[0] + 1 == _l_of(above[:1])[0]


@pytest.mark.parametrize("modes, output, key", [
    ({"method": "slices", "scheduler": "http://localhost:8786"}, {}, "modes.scheduler"),
    ({"method": "slices", "scheduler": "tcp://localhost:70000"}, {}, "modes.scheduler"),
    ({"method": "slices", "slice_modes": 5}, {}, "modes.slice_modes"),
    ({"method": "slices", "workers": 0}, {}, "modes.workers"),
])
def test_bad_slice_keys_are_one_line_errors(modes, output, key):
    from shellmodes.errors import CaseError

    with pytest.raises(CaseError, match=key.replace(".", r"\.")) as caught:
        case_from_dict({"surface": {"shape": "sphere"}, "modes": modes, "output": output})
    assert "\n" not in str(caught.value)


def test_statistics_of_a_shell_are_refused():
    from shellmodes.errors import CaseError

    with pytest.raises(CaseError, match="output.statistics"):
        case_from_dict({"shell": {"outer": {"shape": "sphere", "radius": 1.0}}, "output": {"statistics": True}})


def test_slices_on_a_scheduler_address():
    """Any running Dask scheduler takes the slices (here one started by the test, two worker processes)."""
    distributed = pytest.importorskip("dask.distributed")
    problem = _problem({"shape": "sphere"}, 2, 3)
    args = dict(lower_bound=0.0, scale=problem.spectral_scale, slice_modes=16)
    serial = sliced_modes(problem.K, problem.M, 64, workers=1, **args)
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=":0",
                                  scheduler_kwargs={"dashboard": False}) as cluster:
        remote = sliced_modes(problem.K, problem.M, 64, scheduler=cluster.scheduler_address, **args)
    assert np.allclose(remote.lam, serial.lam, rtol=1e-12, atol=0)
    assert [s.found for s in remote.slices] == [s.expected for s in remote.slices]
    # solved in the scheduler's worker processes, not in this one (a record names host:pid)
    assert all(not s.worker.endswith(f":{os.getpid()}") for s in remote.slices)
    assert all(s.worker.endswith(f":{os.getpid()}") for s in serial.slices)


def test_the_planner_slices_from_slice_from_modes_on():
    """auto: one shift below limits.SLICE_FROM modes, slices from there on; the reason is recorded."""
    from shellmodes.case.model import energy_scale
    from shellmodes.eigen.planner import plan_solver
    from shellmodes.limits import SLICE_FROM
    from shellmodes.pipeline import build_problem

    def plan(modes):
        case = case_from_dict({"surface": {"shape": "sphere"}, "resolution": {"degree": 2, "subdivisions": 4},
                               "modes": modes})
        return plan_solver(build_problem(case, build_discretisation(case), energy_scale(case)), case.modes)

    assert plan({"count": SLICE_FROM - 1}).path == "shift-invert"
    sliced = plan({"count": SLICE_FROM})
    assert sliced.path == "slices" and f"slices from {SLICE_FROM} on" in sliced.reason
    assert plan({"count": 20, "method": "slices"}).path == "slices"
    assert plan({"count": SLICE_FROM, "method": "lanczos"}).path == "shift-invert"
