"""Issue 11, items 5-10: case files.  Every refusal is exit 2, one line naming file, key and value.

Also a property-based fuzz of the case schema (hypothesis, fixed seed, small budget; a larger one
under the ``slow`` mark): any data whatever validates into a Case or raises CaseError, never
anything else.
"""

from __future__ import annotations

import pytest
from hostile import SPHERE, assert_refused, write_case
from hypothesis import HealthCheck, given, seed, settings
from hypothesis import strategies as st

from shellmodes.case.schema import CASE_TABLES, case_from_dict
from shellmodes.errors import CaseError

SHELL_PRISMS = """\
[shell]
inner = { shape = "sphere", radius = 1.0 }
outer = { shape = "sphere", radius = 2.0 }
cells = "prisms"
layers = 1
radial_degree = 2

[resolution]
degree = 1
subdivisions = 0

[modes]
count = 50
"""


def sphere_with(old: str, new: str) -> str:
    assert old in SPHERE
    return SPHERE.replace(old, new, 1)


REFUSED = {  # name: (case text, key that must be named, value text that must be named)
    # item 5: nesting
    "deep array": (SPHERE + "title2 = " + "[" * 3000 + "]" * 3000 + "\n", None, "nested"),
    "deep inline tables": (SPHERE + "x = " + "{a = " * 600 + "1" + "}" * 600 + "\n", None, None),
    # item 6: the representable range of lengths
    "radius 1e-300": (sphere_with("radius = 1.0", "radius = 1e-300"), "surface.radius", "1e-300"),
    "radius 1e300": (sphere_with("radius = 1.0", "radius = 1e300"), "surface.radius", "1e+300"),  # item 7
    "axes 1e-9": (sphere_with('shape = "sphere"\nradius = 1.0', 'shape = "ellipsoid"\naxes = [1e-9, 1e-9, 1e-9]'),
                  "surface.axes[0]", "1e-09"),
    "axes 1e9": (sphere_with('shape = "sphere"\nradius = 1.0', 'shape = "ellipsoid"\naxes = [1e9, 1e9, 1e9]'),
                 "surface.axes[0]", "1000000000.0"),
    "needle ellipsoid": (sphere_with('shape = "sphere"\nradius = 1.0', 'shape = "ellipsoid"\naxes = [1e-3, 1, 10]'),
                         "surface", "factor 1000"),
    "edge length 1e-9": (sphere_with("subdivisions = 1", "edge_length = 1e-9"), "resolution.edge_length", "1e-09"),
    # item 7: the right key
    "quadrature too low": (sphere_with("degree = 1", "degree = 4\nquadrature_order = 1"), "resolution",
                           "quadrature_order 1"),
    # item 8: masses
    "subnormal mass": (SPHERE + '\n[units]\nlength = "nm"\nenergy = "meV"\n\n[particle]\nmass = 1e-320\n',
                       "particle.mass", "1e-320"),
    "huge effective mass": (SPHERE + '\n[units]\nlength = "nm"\nenergy = "meV"\n\n[particle]\n'
                            'effective_mass = 1e308\n', "particle.effective_mass", "1e+308"),
    "subnormal region mass": (SHELL_PRISMS.replace("count = 50", "count = 4")
                              + '\n[[shell.regions]]\neffective_mass = 1e-320\n', "shell.regions[0].effective_mass",
                              "1e-320"),
    # item 9: strict types
    "count = true": (sphere_with("count = 4", "count = true"), "modes.count", "True"),
    "degree as text": (sphere_with("degree = 1", 'degree = "2"'), "resolution.degree", "'2'"),
    "radius = true": (sphere_with("radius = 1.0", "radius = true"), "surface.radius", "True"),
    "subdivisions 1.0": (sphere_with("subdivisions = 1", "subdivisions = 1.0"), "resolution.subdivisions", "1.0"),
    "vtu as text": (SPHERE + '\n[output]\nvtu = "yes"\n', "output.vtu", "'yes'"),
    # item 10: one rule for every path
    "separable count beyond the unknowns": (SHELL_PRISMS, "modes.count", "only 12 degrees of freedom"),
}


@pytest.mark.parametrize("text, key, value", list(REFUSED.values()), ids=list(REFUSED))
def test_case_is_refused(tmp_path, run_cli, text, key, value):
    case = write_case(tmp_path, text)
    out = tmp_path / "out"
    names = [case] + [n for n in (key, value) if n is not None]
    assert_refused(run_cli("run", case, "--out", out), *names, out=out)


def test_integral_number_for_a_number_key_is_accepted():
    """Strict types still take 2 for a length (an integer is a number) and arrays as arrays."""
    case = case_from_dict({"surface": {"shape": "ellipsoid", "axes": [1, 2, 3]}, "modes": {"count": 4}})
    assert case.surface.axes == (1.0, 2.0, 3.0)


def test_quadrature_order_at_the_bound_is_accepted():
    case = case_from_dict({"surface": {"shape": "sphere"}, "resolution": {"degree": 3, "quadrature_order": 6}})
    assert case.resolution.quadrature_order == 6


# --- the schema under fuzzing ------------------------------------------------------------------

_SCALARS = st.one_of(st.none(), st.booleans(), st.integers(min_value=-10**30, max_value=10**30),
                     st.floats(allow_nan=True, allow_infinity=True), st.text(max_size=12),
                     st.sampled_from(["sphere", "ellipsoid", "star", "mesh", "prisms", "nm", "meV", "auto"]))
_KEYS = st.sampled_from(["shape", "radius", "axes", "count", "below", "degree", "subdivisions", "layers", "inner",
                         "outer", "mass", "effective_mass", "expression", "unit", "deformation", "l", "m",
                         "amplitude", "file", "cells", "regions", "memory_gib", "vtu", "parameters", "key"])
_VALUES = st.recursive(_SCALARS, lambda inner: st.one_of(st.lists(inner, max_size=4),
                                                         st.dictionaries(_KEYS, inner, max_size=4)), max_leaves=12)
_CASES = st.dictionaries(st.sampled_from([*CASE_TABLES, "title", "bogus"]),
                         st.one_of(st.dictionaries(_KEYS, _VALUES, max_size=6), _VALUES), max_size=5)


def _validate(data):
    try:
        case_from_dict(data, "fuzz.toml")
    except CaseError as exc:
        assert "\n" not in str(exc)


@seed(20261206)
@settings(max_examples=300, deadline=None, suppress_health_check=list(HealthCheck))
@given(_CASES)
def test_fuzz_case_schema(data):
    _validate(data)


@pytest.mark.slow
@seed(20261207)
@settings(max_examples=20_000, deadline=None, suppress_health_check=list(HealthCheck))
@given(_CASES)
def test_fuzz_case_schema_long(data):
    _validate(data)
