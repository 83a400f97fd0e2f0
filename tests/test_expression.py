"""The safe expression parser: arithmetic only, never eval."""

import numpy as np
import pytest

from shellmodes.case.expression import ExpressionError, compile_expression


def test_arithmetic_and_functions_vectorised():
    f = compile_expression("0.5*(x**2 + y**2) - 2*z + sin(pi*x) + r - cos(theta) + phi")
    x = np.array([0.5, 1.0])
    y = np.array([0.0, 1.0])
    z = np.array([1.0, -1.0])
    r = np.sqrt(x**2 + y**2 + z**2)
    got = f(x=x, y=y, z=z, r=r, theta=np.zeros(2), phi=np.ones(2))
    want = 0.5 * (x**2 + y**2) - 2 * z + np.sin(np.pi * x) + r - 1.0 + 1.0
    np.testing.assert_allclose(got, want, rtol=1e-15)


def test_constant_broadcasts():
    f = compile_expression("3", variables=("x",))
    assert f(x=np.zeros(4)).shape == (4,)


@pytest.mark.parametrize("text,fragment", [
    ("__import__('os')", "unknown function"),
    ("x.__class__", "Attribute"),
    ("lambda: 1", "Lambda"),
    ("[1, 2]", "List"),
    ("open('f')", "unknown function"),
    ("w + 1", "unknown name 'w'"),
    ("1 +", "not a valid expression"),
    ("", "non-empty"),
    ("'text'", "Constant"),
    ("x if y else z", "IfExp"),
])
def test_rejects_everything_but_arithmetic(text, fragment):
    with pytest.raises(ExpressionError, match=fragment):
        compile_expression(text)
