"""Deformation sweeps: steps, resume, parallel runs, level tracking and the sweep's files.

Meshes are coarse (icosphere level 1 or 2, degree 2) and mode counts small
so the whole file stays within a few tens of seconds on two shared cores.
"""

from __future__ import annotations

import json
import socket
import xml.etree.ElementTree as ET

import numpy as np
import pytest

from shellmodes.case.schema import case_from_dict
from shellmodes.errors import CaseError, ShellmodesError
from shellmodes.harmonics import angles, real_sph_harm
from shellmodes.spectrum.perturbation import first_order_matrix
from shellmodes.studies.sweep import SweepStopped, _mass_matrix, load_step, plan_steps, run_sweep
from shellmodes.studies.sweep_track import LevelTracker, StepModes, TrackingWarning

AMPLITUDE = "surface.deformation[0].amplitude"


@pytest.fixture
def write_case(tmp_path):
    """Write TOML text into ``tmp_path/case.toml`` and return the path."""

    def write(text: str):
        path = tmp_path / "case.toml"
        path.write_text(text, encoding="utf-8")
        return path

    return write


def star_case(values, count=9, subdivisions=2, **sweep):
    """A Y_20-deformed star swept in amplitude (fresh data on every call)."""
    return case_from_dict({
        "surface": {"shape": "star", "radius": 1.0, "deformation": [{"l": 2, "m": 0, "amplitude": 0.0}]},
        "resolution": {"degree": 2, "subdivisions": subdivisions},
        "modes": {"count": count},
        "sweep": {"parameters": [{"key": AMPLITUDE, "values": list(values)}], "workers": 1, **sweep},
    })


def sphere_case(radii, **sweep):
    """The unit sphere swept in radius: lam = l(l+1)/R^2, 4 modes, 162 nodes."""
    return case_from_dict({
        "surface": {"shape": "sphere", "radius": 1.0},
        "resolution": {"degree": 2, "subdivisions": 1},
        "modes": {"count": 4},
        "sweep": {"parameters": [{"key": "surface.radius", "values": list(radii)}], "workers": 1, **sweep},
    })


def m_weights(points, M, u, l=2):
    """Weights of |m| = 0..l in the degree-l part of u (real harmonics about z, M inner product)."""
    theta, phi = angles(points)
    c = np.array([real_sph_harm(l, m, theta, phi) @ (M @ u) for m in range(-l, l + 1)])
    w = np.array([c[l] ** 2] + [c[l + m] ** 2 + c[l - m] ** 2 for m in range(1, l + 1)])
    return w / np.sum(w)


# -- tracking through the crossing -------------------------------------------------------------------

@pytest.mark.parametrize("values", [(-0.08, -0.04, 0.0, 0.04, 0.08), (-0.06, -0.02, 0.02, 0.06)],
                         ids=["through-exact-degeneracy", "crossing-between-steps"])
def test_levels_keep_identity_through_the_l2_crossing(tmp_path, values):
    """r = 1 + a Y_20: the l = 2 levels m = 0 and |m| = 2 cross at a = 0 and must pass straight through.

    First-order perturbation theory (shellmodes.spectrum.perturbation, Messiah vol. II
    ch. XVI) gives lam = l(l+1)(1 - 2 a F_mm) with F_mm = int Y_20 Y_2m^2 dOmega,
    i.e. slopes proportional to l(l+1) - 3 m^2 with opposite signs for m = 0
    and |m| = 2.  Identity is checked by the |m| content about z.
    """
    case = star_case(values)
    result = run_sweep(case, tmp_path)
    assert len(result.steps) == len(values)
    l2 = [t["track"] for t in result.tracks if t["parent_l"] == 2]
    assert len(l2) == 5
    assert all(t["first_step"] == 0 and t["last_step"] == len(values) - 1 for t in result.tracks)
    energies = np.array([result.track_energies(t) for t in l2])  # (5, steps)
    assert not np.any(np.isnan(energies))

    # |m| class of each l = 2 track at every step away from a = 0 (where the level is 5-fold and any
    # basis is an eigenbasis): it must be one class, held with weight > 0.9, all through the sweep
    import meshio

    analysed = {}  # step -> (nodes, mass matrix, vectors), read back from the step folders
    for step in result.steps:
        if step.values[0][1] != 0.0:
            folder = tmp_path / "steps" / step.folder_name
            analysed[step.index] = (meshio.read(folder / "modes.vtu").points, _mass_matrix(step.case),
                                    load_step(folder)[2])
    assert len(analysed) == len(values) - (0.0 in values)
    classes = {}
    for track in l2:
        seen = set()
        for index, (points, M, vectors) in analysed.items():
            mode = next(r["mode"] for r in result.rows if r["track"] == track and r["step"] == index)
            w = m_weights(points, M, vectors[:, mode])
            assert w.max() > 0.9, (track, index, w)
            seen.add(int(np.argmax(w)))
        assert len(seen) == 1, f"track {track} changed its |m| class: {seen}"
        classes[track] = seen.pop()
    assert sorted(classes.values()) == [0, 1, 1, 2, 2]

    # the m = 0 state is the highest l = 2 level for a < 0 and the lowest for a > 0: a track that
    # bounced off the crossing (energy order) would stay on top
    m0 = l2.index(next(t for t, c in classes.items() if c == 0))
    assert np.argmax(energies[:, 0]) == m0 and np.argmin(energies[:, -1]) == m0

    # slope through the crossing against first-order theory; the symmetric difference cancels the
    # second order, the a^2 remainder and the (mostly common) discretisation error stay below 3 %
    F = first_order_matrix({(2, 0): 1.0}, 2)
    a = values[-1]
    for track, m in classes.items():
        slope = (energies[l2.index(track), -1] - energies[l2.index(track), 0]) / (2 * a)
        expected = -2.0 * 6.0 * F[2 + m, 2 + m]
        assert slope == pytest.approx(expected, rel=0.03), (m, slope, expected)
    # tracks enter their next multiplet almost whole (step 0.02-0.04 in a)
    overlaps = [r["overlap"] for r in result.rows if r["overlap"] is not None]
    assert len(overlaps) == len(result.rows) - 9 and min(overlaps) > 0.99


def test_a_sweep_starting_at_the_sphere_keeps_every_track(tmp_path):
    """From the exact sphere (5-fold l = 2) into the deformed star: 9 levels in, the same 9 tracks out."""
    result = run_sweep(star_case((0.0, 0.05, 0.1), subdivisions=1), tmp_path)
    assert len(result.rows) == 3 * 9
    assert len(result.tracks) == 9 and all(t["last_step"] == 2 for t in result.tracks)
    overlaps = [r["overlap"] for r in result.rows if r["overlap"] is not None]
    assert len(overlaps) == 2 * 9 and min(overlaps) > 0.95


def test_tracker_follows_permuted_and_rotated_states():
    """Synthetic steps (identity mass matrix): order changes, a degenerate pair is re-based, a state leaves."""
    import scipy.sparse as sp

    rng = np.random.default_rng(7)
    Q, _ = np.linalg.qr(rng.standard_normal((30, 6)))
    M = sp.identity(30, format="csr")
    tracker = LevelTracker(min_overlap=0.5)
    tracker.add(StepModes(vectors=Q[:, :4], eigenvalues=np.array([0.0, 1.0, 2.0, 2.0]),
                          groups=[[0], [1], [2, 3]], labels=[0, 1, 2, 2], M=None))
    c, s = np.cos(0.7), np.sin(0.7)
    pair = Q[:, 2:4] @ np.array([[c, -s], [s, c]])  # the same degenerate level in another basis
    # new order: the old mode 1 is now highest; old mode 0 is gone, a new state Q4 entered
    step_b = np.column_stack([pair[:, 0], pair[:, 1], Q[:, 4], Q[:, 1]])
    triples = tracker.add(StepModes(vectors=step_b, eigenvalues=np.array([2.0, 2.0, 3.0, 3.5]),
                                    groups=[[0, 1], [2], [3]], labels=[2, 2, 3, 1], M=M))
    assert len(triples) == 4
    track_of = {mode: track for mode, track, _ in triples}
    assert track_of[3] == 1  # old mode 1 followed to the top
    assert {track_of[0], track_of[1]} == {2, 3}  # the pair keeps its two tracks
    assert track_of[2] == 4 and tracker.parent_l[4] == 3 and tracker.first_step[4] == 1  # a new track
    overlap = {mode: o for mode, _, o in triples}
    assert overlap[3] == pytest.approx(1.0, abs=1e-12) and np.isnan(overlap[2])
    with pytest.warns(TrackingWarning, match="energy order"):
        tracker.add(StepModes(vectors=np.eye(31)[:, :4], eigenvalues=np.arange(4.0), groups=[[0], [1], [2], [3]],
                              labels=[0, 1, 1, 1], M=None))


def test_tracker_starting_on_a_degenerate_level_adopts_the_split_states():
    """A 3-fold level in an arbitrary basis at the first step, split into singlets at the next.

    The first step's basis carries no identity; the tracks must take the split
    states (degenerate perturbation theory's zeroth-order states), each with
    overlap 1, instead of ending because each old vector is spread over all three.
    """
    import scipy.sparse as sp

    rng = np.random.default_rng(11)
    Q, _ = np.linalg.qr(rng.standard_normal((20, 4)))
    mix, _ = np.linalg.qr(rng.standard_normal((3, 3)))  # a random basis of the degenerate level
    first = np.column_stack([Q[:, 0], Q[:, 1:4] @ mix])
    tracker = LevelTracker(min_overlap=0.5)
    tracker.add(StepModes(vectors=first, eigenvalues=np.array([0.0, 2.0, 2.0, 2.0]), groups=[[0], [1, 2, 3]],
                          labels=[0, 1, 1, 1], M=None))
    triples = tracker.add(StepModes(vectors=Q, eigenvalues=np.array([0.0, 1.9, 2.0, 2.1]),
                                    groups=[[0], [1], [2], [3]], labels=[0, 1, 1, 1],
                                    M=sp.identity(20, format="csr")))
    assert len(triples) == 4 and len(tracker.parent_l) == 4  # no track ended, none was born
    assert all(o == pytest.approx(1.0, abs=1e-10) for _, _, o in triples)
    # and once split they keep their identity when the order of two of them reverses
    again = tracker.add(StepModes(vectors=Q[:, [0, 2, 1, 3]], eigenvalues=np.array([0.0, 1.9, 2.0, 2.1]),
                                  groups=[[0], [1], [2], [3]], labels=[0, 1, 1, 1],
                                  M=sp.identity(20, format="csr")))
    before, after = dict((t, m) for m, t, _ in triples), dict((t, m) for m, t, _ in again)
    assert [after[t] for t in range(4)] == [[0, 2, 1, 3].index(before[t]) for t in range(4)]


# -- validation --------------------------------------------------------------------------------------

def test_unknown_key_names_the_parameter_and_the_nearest_key():
    case = case_from_dict({"surface": {"shape": "star", "deformation": [{"l": 2, "m": 0, "amplitude": 0.1}]},
                           "sweep": {"parameters": [{"key": "surface.radius", "values": [1.0]},
                                                    {"key": "surface.deformaton[0].amplitude",
                                                     "values": [0.2]}]}})
    with pytest.raises(CaseError) as info:
        plan_steps(case)
    assert info.value.key == "sweep.parameters[1].key"
    assert "did you mean 'surface.deformation[0].amplitude'" in str(info.value)
    for bad in ("surface.deformation[1].amplitude", "surface.shape", "sweep.workers", "surface..radius"):
        data = case.model_dump(mode="json", exclude_none=True)
        data["sweep"]["parameters"] = [{"key": bad, "values": [1.0]}]
        with pytest.raises(CaseError, match="not a numeric key") as info:
            plan_steps(case_from_dict(data))
        assert info.value.key == "sweep.parameters[0].key"


def test_a_case_without_a_sweep_table_is_refused(tmp_path):
    case = case_from_dict({"surface": {"shape": "sphere"}})
    with pytest.raises(CaseError, match=r"no \[sweep\] table"):
        run_sweep(case, tmp_path)


def test_steps_set_every_swept_key_and_drop_the_sweep_table():
    case = case_from_dict({"surface": {"shape": "ellipsoid", "axes": [1.0, 1.0, 1.0]},
                           "sweep": {"parameters": [{"key": "surface.axes[2]", "start": 1.0, "stop": 2.0, "steps": 3},
                                                    {"key": "surface.axes[0]", "values": [1.0, 0.9, 0.8]}]}})
    steps, error = plan_steps(case)
    assert error is None and len(steps) == 3
    assert [s.case.surface.axes for s in steps] == [(1.0, 1.0, 1.0), (0.9, 1.0, 1.5), (0.8, 1.0, 2.0)]
    assert all(s.case.sweep is None for s in steps)
    assert case.surface.axes == (1.0, 1.0, 1.0)  # the base case is untouched


def test_invalid_value_stops_the_sweep_before_it_and_keeps_the_finished_steps(tmp_path, run_cli, write_case):
    """Amplitude 4 makes 1 + a Y_20 negative at the equator (Y_20(pi/2) = -sqrt(5/4pi)/2 = -0.315)."""
    case = star_case((0.05, 0.1, 4.0, 0.15), count=4, subdivisions=1)
    with pytest.raises(SweepStopped) as info:
        run_sweep(case, tmp_path / "api")
    message = str(info.value)
    assert "\n" not in message and info.value.key == AMPLITUDE
    assert "step 2" in message and "= 4" in message and "0.05" in message  # the value and the reason
    assert sorted(p.name for p in (tmp_path / "api" / "steps").iterdir()) == ["step-0000", "step-0001"]
    summary = json.loads((tmp_path / "api" / "sweep.json").read_text())
    assert summary["complete"] is False and [s["step"] for s in summary["steps"]] == [0, 1]
    assert info.value.result is not None and len(info.value.result.steps) == 2

    # a value the schema refuses is caught the same way, before anything is solved
    steps, error = plan_steps(sphere_case((1.0, -1.0, 2.0)))
    assert len(steps) == 1 and error is not None and "step 1" in str(error) and "-1" in str(error)

    path = write_case(
        '[surface]\nshape = "star"\ndeformation = [{ l = 2, m = 0, amplitude = 0.0 }]\n'
        '[resolution]\nsubdivisions = 1\n[modes]\ncount = 4\n'
        f'[sweep]\nworkers = 1\nparameters = [{{ key = "{AMPLITUDE}", values = [0.1, 4.0] }}]\n')
    done = run_cli("sweep", path, "--out", tmp_path / "cli", "--quiet")
    assert done.status == 2
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1 and "case.toml" in lines[0] and AMPLITUDE in lines[0] and "= 4" in lines[0]
    assert sorted(p.name for p in (tmp_path / "cli" / "steps").iterdir()) == ["step-0000"]


# -- resume ------------------------------------------------------------------------------------------

def test_rerun_recomputes_only_missing_or_mismatching_steps(tmp_path):
    radii = (1.0, 1.25, 1.5, 2.0)
    first = run_sweep(sphere_case(radii), tmp_path)
    assert first.solved == (0, 1, 2, 3) and first.reused == ()
    steps = tmp_path / "steps"
    stamp = {p.name: (p / "spectrum.json").stat().st_mtime_ns for p in steps.iterdir()}
    import shutil

    shutil.rmtree(steps / "step-0001")  # lost
    record = json.loads((steps / "step-0002" / "step.json").read_text())
    record["parameters"][0]["value"] = 1.4  # computed for another value
    (steps / "step-0002" / "step.json").write_text(json.dumps(record))
    (steps / ".step-0003.k1ll3d").mkdir()  # what a killed run leaves: a hidden, half-written folder
    (steps / ".step-0003.k1ll3d" / "spectrum.json").write_text("{")
    second = run_sweep(sphere_case(radii), tmp_path)
    assert second.solved == (1, 2) and second.reused == (0, 3)
    assert sorted(p.name for p in steps.iterdir()) == [f"step-{i:04d}" for i in range(4)]
    assert (steps / "step-0000" / "spectrum.json").stat().st_mtime_ns == stamp["step-0000"]
    assert (steps / "step-0003" / "spectrum.json").stat().st_mtime_ns == stamp["step-0003"]
    assert len(second.rows) == len(first.rows) == 4 * len(radii)
    for a, b in zip(first.rows, second.rows):
        assert a["eigenvalue"] == pytest.approx(b["eigenvalue"], rel=1e-12, abs=1e-12)  # same solve, same v0
    # lam = l(l+1)/R^2 on the sphere; 2e-2 is the level-1 degree-2 mesh's error (162 nodes, docs/MEASURED.md)
    p_rows = [row for row in second.rows if row["mode"] > 0]
    assert len(p_rows) == 3 * len(radii)
    for row in p_rows:
        assert row["eigenvalue"] * radii[row["step"]] ** 2 == pytest.approx(2.0, rel=2e-2)


def test_interrupted_sweep_loses_nothing(tmp_path):
    """A crash after the first step was saved (here raised from the progress callback)."""

    class Crash(Exception):
        pass

    def crash_after_one(done, total):
        if done == 1:
            raise Crash

    with pytest.raises(Crash):
        run_sweep(sphere_case((1.0, 2.0, 3.0)), tmp_path, progress=crash_after_one)
    names = sorted(p.name for p in (tmp_path / "steps").iterdir())
    assert names == ["step-0000"]  # complete or absent: no half-written folder
    again = run_sweep(sphere_case((1.0, 2.0, 3.0)), tmp_path)
    assert again.reused == (0,) and again.solved == (1, 2)


# -- parallel runs -----------------------------------------------------------------------------------

@pytest.fixture
def loopback_cluster():
    """Two in-process Dask workers on 127.0.0.1, closed after the test."""
    distributed = pytest.importorskip("dask.distributed")
    # protocol tcp: an in-process cluster otherwise talks inproc://, which the scheduler address cannot name
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=False, protocol="tcp",
                                       host="127.0.0.1",
                                       dashboard_address=None)
    try:
        yield cluster.scheduler_address
    finally:
        cluster.close()


def test_local_processes_and_dask_cluster_equal_the_serial_sweep(tmp_path, loopback_cluster):
    values = (-0.05, 0.0, 0.05)
    serial = run_sweep(star_case(values, count=4), tmp_path / "serial")
    pooled = run_sweep(star_case(values, count=4), tmp_path / "pool", workers=2)
    dask = run_sweep(star_case(values, count=4), tmp_path / "dask", scheduler=loopback_cluster)
    # rows are compared by (step, track): which eigenvector of an exactly degenerate level (l = 1 at
    # a = 0) a track is given depends on round-off, its eigenvalue does not
    expected = {(r["step"], r["track"]): (r["parent_l"], r["eigenvalue"]) for r in serial.rows}
    assert len(expected) == len(serial.rows) == 3 * 4
    for other in (pooled, dask):
        assert other.solved == (0, 1, 2)
        got = {(r["step"], r["track"]): (r["parent_l"], r["eigenvalue"]) for r in other.rows}
        assert len(got) == len(other.rows) == len(expected) and got.keys() == expected.keys()
        for key, (label, lam) in expected.items():
            assert got[key][0] == label
            # the same arithmetic with a fixed start vector; 1e-10 allows for BLAS summation order
            assert got[key][1] == pytest.approx(lam, rel=1e-10, abs=1e-10)


def test_unreachable_scheduler_is_one_line_and_loses_nothing(tmp_path, run_cli, write_case):
    with socket.socket() as s:  # a loopback port nobody listens on
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    address = f"tcp://127.0.0.1:{port}"
    run_sweep(sphere_case((1.0, 2.0)), tmp_path / "out")
    stamp = (tmp_path / "out" / "steps" / "step-0000" / "spectrum.json").stat().st_mtime_ns
    with pytest.raises(ShellmodesError, match="cannot reach the Dask scheduler"):
        run_sweep(sphere_case((1.0, 2.0, 3.0)), tmp_path / "out", scheduler=address, connect_timeout=1.0)
    assert (tmp_path / "out" / "steps" / "step-0000" / "spectrum.json").stat().st_mtime_ns == stamp
    assert (tmp_path / "out" / "steps" / "step-0001").is_dir()
    path = write_case('[surface]\nshape = "sphere"\n[resolution]\nsubdivisions = 1\n[modes]\ncount = 4\n'
                      '[sweep]\nparameters = [{ key = "surface.radius", values = [1.0, 2.0] }]\n')
    done = run_cli("sweep", path, "--out", tmp_path / "cli", "--scheduler", address, "--quiet")
    assert done.status == 2
    assert len(done.stderr.strip().splitlines()) == 1 and address in done.stderr


# -- files -------------------------------------------------------------------------------------------

def test_sweep_files_table_collection_and_picture(tmp_path, run_cli, write_case):
    radii = (1.0, 1.5, 2.0)
    path = write_case('title = "growing sphere"\n[surface]\nshape = "sphere"\n[resolution]\nsubdivisions = 1\n'
                      '[modes]\ncount = 4\n[sweep]\nworkers = 1\n'
                      f'parameters = [{{ key = "surface.radius", values = {list(radii)} }}]\n')
    out = tmp_path / "out"
    done = run_cli("sweep", path, "--out", out, "-v")
    assert done.status == 0, done.stderr
    # not a terminal: progress as plain lines with -v, never carriage returns
    assert "3 steps (3 solved, 0 reused)" in done.stdout and "sweep steps: 3 of 3 done" in done.stderr
    assert "\r" not in done.stderr

    root = ET.parse(out / "series.pvd").getroot()
    assert root.tag == "VTKFile" and root.get("type") == "Collection"
    datasets = root.find("Collection").findall("DataSet")
    assert len(datasets) == len(radii)
    assert [d.get("file") for d in datasets] == [f"series/step-{i:04d}.vtu" for i in range(3)]
    assert [float(d.get("timestep")) for d in datasets] == list(radii)
    assert all((out / d.get("file")).is_file() for d in datasets)

    png = (out / "levels.png").read_bytes()
    assert png[:8] == b"\x89PNG\r\n\x1a\n"
    import matplotlib.image

    assert matplotlib.image.imread(out / "levels.png").shape[:2] == (600, 840)  # 7 x 5 in at 120 dpi

    import csv

    with open(out / "sweep.csv", newline="") as handle:
        rows = list(csv.DictReader(handle))
    summary = json.loads((out / "sweep.json").read_text())
    assert len(rows) == len(summary["rows"]) == 3 * 4
    assert list(rows[0]) == ["step", "surface.radius", "track", "mode", "energy", "eigenvalue", "parent_l",
                             "overlap", "residual"]
    for row, data in zip(rows, summary["rows"]):
        assert float(row["eigenvalue"]) == data["eigenvalue"] and int(row["track"]) == data["track"]
        assert float(row["surface.radius"]) == radii[int(row["step"])]
    assert [t["parent_l"] for t in summary["tracks"]] == [0, 1, 1, 1]
    assert summary["complete"] is True


def test_saved_vectors_are_orthonormal_in_the_reassembled_mass_matrix(tmp_path):
    """The tracker's M (reassembled per step) is the solve's M: U^T M U = I to round-off (1e-10)."""
    result = run_sweep(star_case((0.0, 0.1), count=4, subdivisions=1), tmp_path)
    assert len(result.steps) == 2
    for step in result.steps:
        _, _, U, record = load_step(tmp_path / "steps" / step.folder_name)
        assert record["parameters"] == [{"key": AMPLITUDE, "value": step.values[0][1]}]
        G = U.T @ (_mass_matrix(step.case) @ U)
        assert G.shape == (4, 4)
        assert np.max(np.abs(G - np.eye(4))) < 1e-10


def test_a_step_that_cannot_be_solved_is_named_and_the_others_are_kept(tmp_path):
    """50 modes fit on the level-1 mesh (162 nodes) but not on level 0 (42 nodes)."""
    case = case_from_dict({"surface": {"shape": "sphere"}, "resolution": {"degree": 2, "subdivisions": 1},
                           "modes": {"count": 50},
                           "sweep": {"workers": 1,
                                     "parameters": [{"key": "resolution.subdivisions", "values": [1, 0]}]}})
    with pytest.raises(ShellmodesError, match="sweep step 1: .*only 42 degrees of freedom") as info:
        run_sweep(case, tmp_path)
    assert "\n" not in str(info.value)
    assert sorted(p.name for p in (tmp_path / "steps").iterdir()) == ["step-0000"]


def test_a_shell_sweep_tracks_the_exact_band_and_stops_before_crossing_walls(tmp_path):
    """Outer radius b of the hard-wall shell 1 < r < b on prisms: the l = 0 track follows k = pi/(b - 1)
    (exact for l = 0: j_0 and y_0 cross product), and b = 0.9 (inside the inner wall) stops the sweep."""
    shell = {"inner": {"shape": "sphere", "radius": 1.0}, "outer": {"shape": "sphere", "radius": 2.0},
             "cells": "prisms", "layers": 1, "radial_degree": 6}
    data = {"shell": shell, "resolution": {"degree": 3, "subdivisions": 1}, "modes": {"count": 4},
            "sweep": {"parameters": [{"key": "shell.outer.radius", "values": [2.0, 2.2, 2.4]}], "workers": 1}}
    result = run_sweep(case_from_dict(data), tmp_path / "ok")
    ground = [r for r in result.rows if r["track"] == 0]
    for row, b in zip(ground, (2.0, 2.2, 2.4)):
        assert row["eigenvalue"] == pytest.approx((np.pi / (b - 1.0)) ** 2, rel=1e-4)
    overlaps = [r["overlap"] for r in result.rows if r["overlap"] is not None]
    assert len(overlaps) == 2 * 4 and min(overlaps) > 0.99
    bad = {**data, "sweep": {"parameters": [{"key": "shell.outer.radius", "values": [2.0, 0.9]}], "workers": 1}}
    with pytest.raises(SweepStopped) as info:
        run_sweep(case_from_dict(bad), tmp_path / "bad")
    assert "step 1" in str(info.value) and "crosses" in str(info.value)
    assert sorted(p.name for p in (tmp_path / "bad" / "steps").iterdir()) == ["step-0000"]


def test_an_evenly_spaced_range_has_no_float_noise():
    """-0.1..0.1 in 21 steps: -0.09, not -0.09000000000000001 (common practice: a range's values are
    meant as written, so they are rounded to 12 significant digits of the largest value)."""
    from shellmodes.case.schema import SweepParameter

    raw = [-0.1 + 0.2 * i / 20 for i in range(21)]
    assert raw[1] != -0.09 and raw[4] != -0.06  # the noise this test is about
    values = SweepParameter(key="surface.radius", start=-0.1, stop=0.1, steps=21).resolved()
    assert values[1] == -0.09 and values[4] == -0.06 and values[10] == 0.0
    assert values[0] == -0.1 and values[-1] == 0.1
    assert max(abs(a - b) for a, b in zip(values, raw)) < 1e-15
