"""Registry of linear-solver back-ends for shift-invert eigen-solves.

A back-end is a function ``factorize(A) -> solve`` for a sparse symmetric
positive definite ``A`` (``K - sigma M`` with sigma below the spectrum),
where ``solve(b)`` returns ``A^-1 b`` for a vector or an (n, k) block.
Back-ends register with :func:`register`; ``"auto"`` picks the best one
available on this machine.
"""

from __future__ import annotations

from collections.abc import Callable

__all__ = ["BACKENDS", "register", "get_backend", "available_backends"]

BACKENDS: dict[str, dict] = {}


def register(name: str, *, available: Callable[[], bool], priority: int):
    """Decorator registering ``factorize`` under ``name``."""

    def wrap(factorize):
        BACKENDS[name] = {"factorize": factorize, "available": available, "priority": priority}
        return factorize

    return wrap


def available_backends() -> list[str]:
    return sorted((n for n, b in BACKENDS.items() if b["available"]()),
                  key=lambda n: -BACKENDS[n]["priority"])


def get_backend(name: str = "auto") -> tuple[str, Callable]:
    """Resolve ``name`` (or ``"auto"``) to ``(name, factorize)``."""
    if name == "auto":
        name = available_backends()[0]
    if name not in BACKENDS:
        raise ValueError(f"unknown solver back-end {name!r}; allowed: auto, {', '.join(sorted(BACKENDS))}")
    if not BACKENDS[name]["available"]():
        raise ValueError(f"solver back-end {name!r} is not installed here; available: "
                         f"{', '.join(available_backends())}")
    return name, BACKENDS[name]["factorize"]


from . import cholmod, cholmod_system, lobpcg_amg, mumps_seq, pardiso, splu  # noqa: E402,F401  (register)
