"""First-order perturbation theory printed beside the finite-element splitting of a run.

Reference: degenerate first-order (Rayleigh-Schroedinger) theory for r = R(1 + eps f),
implemented in shellmodes.spectrum.perturbation and checked there against finite elements.
"""

import numpy as np

from shellmodes.case.schema import case_from_dict
from shellmodes.io.outputs import spectrum_json
from shellmodes.pipeline import run_case


def _ratio_error(amplitude):
    case = case_from_dict({"surface": {"shape": "star", "radius": 1.0,
                                       "deformation": [{"l": 2, "m": 0, "amplitude": amplitude}]},
                           "resolution": {"degree": 3, "subdivisions": 2}, "modes": {"count": 9}})
    spectrum = run_case(case)
    rows = spectrum.info["perturbation"]
    assert [r["l"] for r in rows] == [1, 2]
    assert "perturbation" in spectrum_json(spectrum)
    assert "first-order" in spectrum.summary()
    return max(abs(r["ratio"] - 1.0) for r in rows)


def test_splitting_ratio_tends_to_one_linearly_in_amplitude():
    errors = [_ratio_error(a) for a in (0.04, 0.02)]
    # the ratio's departure from 1 is the relative second-order term, O(eps): halving eps halves it
    assert errors[1] < errors[0]
    assert np.log2(errors[0] / errors[1]) > 0.7, errors
    assert errors[0] < 0.05
