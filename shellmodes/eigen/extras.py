"""Optional parts a case asks for, checked before any mesh is built.

Everything the bundled cases need is an ordinary dependency.  The heavy optional parts are the
factorization back-ends (``modes.backend``: extras ``fast``, ``cholmod-system``, ``pardiso``,
``mumps``), algebraic multigrid for ``modes.method = "lobpcg"`` on tetrahedra (extra ``volume``) and a
Dask scheduler for sweeps (``sweep.scheduler``, extra ``sweep``).  :func:`check_extras` refuses a
case that names one which is not installed, with the install line, before anything is solved.
"""

from __future__ import annotations

import importlib.util

from shellmodes.errors import CaseError

__all__ = ["check_extras", "BACKEND_EXTRAS"]

#: back-end name -> (extra that installs it, system packages it builds against or "")
BACKEND_EXTRAS = {
    "cholmod": ("fast", ""),
    "cholmod-system": ("cholmod-system", "apt-get install libsuitesparse-dev libopenblas-dev, then "),
    "pardiso": ("pardiso", ""),
    "mumps": ("mumps", "apt-get install libmumps-seq-dev, then "),
}


def _install(extra: str, system: str = "") -> str:
    return f"{system}python3 -m pip install 'shellmodes[{extra}]'"


def check_extras(case) -> None:
    """Refuse ``case`` if it names an optional part that is not installed here.

    Parameters
    ----------
    case : Case
        A validated case.

    Raises
    ------
    CaseError
        Naming the key, the value, what is installed and how to install the missing part.
    """
    backend = case.modes.backend
    if backend != "auto":
        from shellmodes.eigen.backends import BACKENDS, available_backends

        if backend in BACKENDS and not BACKENDS[backend]["available"]():
            extra, system = BACKEND_EXTRAS.get(backend, ("", ""))
            hint = f"; install it with: {_install(extra, system)}" if extra else ""
            raise CaseError(f"value {backend!r}: this back-end is not installed here (installed: "
                            f"{', '.join(available_backends())}, or 'auto'){hint}", case.source, "modes.backend")
    tetrahedra = case.shell is not None and case.shell.cells == "tetrahedra"
    if case.modes.method == "lobpcg" and (case.surface is not None or tetrahedra) \
            and importlib.util.find_spec("pyamg") is None:
        raise CaseError(f"value 'lobpcg': LOBPCG with algebraic multigrid needs pyamg, not installed here; "
                        f"install it with: {_install('volume')}, or use method = 'auto'", case.source, "modes.method")
    sweep = case.sweep
    if sweep is not None and sweep.scheduler is not None and importlib.util.find_spec("distributed") is None:
        raise CaseError(f"value {sweep.scheduler!r}: a Dask scheduler needs dask.distributed, not installed here; "
                        f"install it with: {_install('sweep')}, or drop sweep.scheduler to use the local cores",
                        case.source, "sweep.scheduler")
