"""Issue 11, items 3-4: every bad potential is exit 2 naming potential.expression; arity is checked.

Also a property-based fuzz of the parser (hypothesis, fixed seed, small budget here and a larger
one under the ``slow`` mark): no text whatever gives anything but a compiled function or an
ExpressionError, and a compiled function gives finite values or an ExpressionError.
"""

from __future__ import annotations

import numpy as np
import pytest
from hostile import SPHERE, assert_refused, write_case
from hypothesis import HealthCheck, given, seed, settings
from hypothesis import strategies as st

from shellmodes.case.expression import FUNCTIONS, ExpressionError, compile_expression


def potential_case(expression: str) -> str:
    return SPHERE + f"\n[potential]\nexpression = '{expression}'\n"  # a TOML literal string


BAD = {
    "division by zero": "1/0",
    "exponent tower overflow": "10**10**10",
    "tower of four": "9**9**9**9",
    "root of a negative number": "(-8)**(1/3)",
    "missing argument": "sin()",
    "400-digit literal": "9" * 400,
    "1 MB sum": "+".join(["x"] * 500_000),
    "numpy out argument": "sin(x, y) + y",  # would silently compute 2 sin(x)
    "three arguments to a two-argument function": "minimum(x, y, z)",
    "starred arguments": "maximum(*x)",
    "nested too deeply": "-" * 300 + "x",
    "not finite on the mesh": "1/x",  # icosphere vertices lie on x = 0
}


@pytest.mark.parametrize("expression", list(BAD.values()), ids=list(BAD))
def test_bad_expression_is_refused(tmp_path, run_cli, expression):
    case = write_case(tmp_path, potential_case(expression))
    out = tmp_path / "out"
    assert_refused(run_cli("run", case, "--out", out), case, "potential.expression", out=out)


def test_comparison_is_arithmetic(tmp_path, run_cli):
    """``1 < 2`` is the constant 1 (comparisons give 0 or 1): a valid, if dull, potential."""
    f = compile_expression("1 < 2", variables=("x",))
    assert f(x=np.zeros(3)).tolist() == [1.0, 1.0, 1.0]


def test_arity_of_every_function():
    """Every allowed function refuses one argument more than it takes (numpy's ``out``)."""
    from shellmodes.case.expression import ARITY

    for name in FUNCTIONS:
        args = ", ".join(["x"] * (ARITY[name] + 1))
        with pytest.raises(ExpressionError, match="argument"):
            compile_expression(f"{name}({args})", variables=("x",))


def test_shell_potential_not_finite_is_refused(tmp_path, run_cli):
    """A V(r) that is not a number inside the separable prism shell (log of a negative for r < 1.5)."""
    text = ('[shell]\ninner = { shape = "sphere", radius = 1.0 }\nouter = { shape = "sphere", radius = 2.0 }\n'
            'cells = "prisms"\nlayers = 2\n\n[resolution]\ndegree = 1\nsubdivisions = 1\n\n[modes]\ncount = 4\n\n'
            '[potential]\nexpression = "log(r - 1.5)"\n')
    case = write_case(tmp_path, text)
    out = tmp_path / "out"
    assert_refused(run_cli("run", case, "--out", out), case, "potential.expression", out=out)


_TOKENS = st.sampled_from(["x", "y", "z", "r", "theta", "phi", "pi", "e", "1", "0", "2.5", "1e308", "1e-320",
                           "+", "-", "*", "/", "**", "(", ")", ",", "<", ">=", " ", *FUNCTIONS, "__import__",
                           ".", "[", "]", "'", "lambda", ":", "9" * 50])
_POINTS = {k: np.array([0.3, -1.2, 2.0]) for k in ("x", "y", "z", "r", "theta", "phi")}


def _fuzz(tokens):
    text = "".join(tokens)
    try:
        f = compile_expression(text)
    except ExpressionError:
        return
    try:
        values = f(**_POINTS)
    except ExpressionError:
        return
    assert values.shape == (3,) and np.all(np.isfinite(values))


@seed(20261203)
@settings(max_examples=300, deadline=None, suppress_health_check=list(HealthCheck))
@given(st.lists(_TOKENS, max_size=25))
def test_fuzz_expressions(tokens):
    _fuzz(tokens)


@pytest.mark.slow
@seed(20261204)
@settings(max_examples=20_000, deadline=None, suppress_health_check=list(HealthCheck))
@given(st.lists(_TOKENS, max_size=60))
def test_fuzz_expressions_long(tokens):
    _fuzz(tokens)


@seed(20261205)
@settings(max_examples=200, deadline=None, suppress_health_check=list(HealthCheck))
@given(st.text(max_size=40))
def test_fuzz_any_text(text):
    _fuzz([text])
