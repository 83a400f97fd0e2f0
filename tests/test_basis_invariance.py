"""What a run reports per multiplet must not depend on the eigen-solver's basis.

Inside a degenerate multiplet any orthonormal basis of the eigenspace is an
eigenbasis; which one the solver returns depends on floating-point details of
the machine (BLAS kernels, library builds).  Every per-multiplet quantity in
the tables is therefore recomputed after rotating each multiplet's vectors by
a random orthogonal matrix (fixed seed) and must come out the same.
"""

from __future__ import annotations

import numpy as np
import pytest

from shellmodes.case.model import energy_scale
from shellmodes.case.schema import case_from_dict
from shellmodes.eigen.planner import Solved
from shellmodes.eigen.solve import Eigenpairs
from shellmodes.pipeline import run_case
from shellmodes.spectrum.labelling import label_modes

SURFACES = {
    # the sphere: every multiplet is (2l+1)-fold degenerate
    "sphere": {"shape": "sphere", "radius": 1.0},
    # a spheroid: the +-m pairs stay degenerate inside each split parent multiplet
    "spheroid": {"shape": "spheroid", "equatorial_radius": 1.0, "polar_radius": 1.15},
}


def _rotated(vectors, multiplets, rng):
    out = vectors.copy()
    for m in multiplets:
        idx = list(m.members)
        Q, _ = np.linalg.qr(rng.standard_normal((len(idx), len(idx))))
        out[:, idx] = vectors[:, idx] @ Q
    return out


@pytest.mark.parametrize("name", sorted(SURFACES))
def test_multiplet_quantities_survive_a_random_basis_rotation(name):
    case = case_from_dict({"surface": SURFACES[name], "resolution": {"degree": 2, "subdivisions": 2},
                           "modes": {"count": 16}})
    spectrum = run_case(case)
    problem, plan = spectrum.problem, spectrum.plan
    rotated = _rotated(spectrum.vectors, spectrum.multiplets, np.random.default_rng(14))
    # the labeller of the pipeline, given the same eigenvalues and the rotated vectors
    pairs = Eigenpairs(lam=spectrum.eigenvalues, vectors=rotated[problem.free], residuals=spectrum.residuals,
                       orthogonality=0.0, shift=plan.shift, backend="test", requested=None)
    labels = label_modes(problem, plan, Solved(pairs, rotated, []), energy_scale(case),
                         case.modes.multiplet_tolerance)
    per_mode, again = labels.angular, labels.multiplets
    before = [m.as_dict() for m in spectrum.multiplets]
    after = [m.as_dict() for m in again]
    assert len(before) == len(after) and all(m["subspace_l"] is not None for m in before)
    for a, b in zip(before, after, strict=True):
        assert a.keys() == b.keys()
        for key in a:
            if isinstance(a[key], float):
                # subspace traces are invariant up to rounding (measured <= 1e-13)
                assert b[key] == pytest.approx(a[key], rel=1e-9, abs=1e-12), (key, a, b)
            else:
                assert b[key] == a[key], key
    assert any(m["size"] > 1 for m in before)  # some multiplet was really rotated
    assert per_mode.abs_m is not None
    if name == "sphere":
        # the rotation has teeth: a per-mode value (the |m| class) changed, the subspace's did not
        assert not np.array_equal(per_mode.abs_m, spectrum.angular.abs_m)
    else:
        # on a spheroid a multiplet is a +-m pair: every vector in it keeps the same |m|
        assert np.array_equal(per_mode.abs_m, spectrum.angular.abs_m)
