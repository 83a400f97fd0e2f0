"""Every public name imports, and the package docstring example runs."""

import doctest

import shellmodes


def test_all_names_exist():
    assert len(shellmodes.__all__) == len(set(shellmodes.__all__))
    for name in shellmodes.__all__:
        assert hasattr(shellmodes, name), name


def test_docstring_examples():
    import shellmodes.case.expression
    import shellmodes.case.schema
    import shellmodes.case.units
    import shellmodes.eigen.solve
    import shellmodes.harmonics

    for module in (shellmodes, shellmodes.case.schema, shellmodes.case.expression, shellmodes.harmonics,
                   shellmodes.eigen.solve, shellmodes.case.units):
        failures, tried = doctest.testmod(module)
        assert failures == 0, module.__name__
