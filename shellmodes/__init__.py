"""shellmodes: eigenmodes of particles on curved surfaces and in spherical shells.

Pipeline: case -> discretisation -> problem -> solver plan -> eigenpairs -> spectrum -> outputs
(:mod:`shellmodes.pipeline`).  The public names below are loaded on first use, so
``import shellmodes`` (and ``shellmodes --help``) stays quick.

>>> import shellmodes
>>> case = shellmodes.case_from_dict({"surface": {"shape": "sphere"}, "modes": {"count": 4},
...                                   "resolution": {"degree": 2, "subdivisions": 2}})
>>> spectrum = shellmodes.run_case(case)
>>> spectrum.eigenvalues.round(3).tolist()
[-0.0, 2.0, 2.0, 2.0]
"""

from __future__ import annotations

import importlib

from ._version import __version__

#: public name -> module that defines it
_WHERE = {
    "Case": "case", "case_from_dict": "case", "case_schema": "case", "load_case": "case",
    "CaseError": "errors", "DoubtfulResultWarning": "errors", "GeometryError": "errors", "MeshError": "errors",
    "MeshQualityWarning": "errors", "MultipletCutWarning": "errors", "ShellmodesError": "errors",
    "SolverError": "errors",
    "real_sph_harm": "harmonics", "write_outputs": "outputs",
    "SurfaceProblem": "problem", "assemble_surface": "problem",
    "build_shape": "model", "discretise": "discretisation", "run_case": "pipeline",
    "SHAPES": "shapes", "make_shape": "shapes",
    "Eigenpairs": "solve", "lowest_modes": "solve", "Multiplet": "spectrum", "Spectrum": "spectrum",
    "CurvedSurface": "surface", "SurfaceMapping": "surface", "curved_surface": "surface",
    "AngularContent": "angular", "angular_content": "angular", "multiplet_content": "angular",
    "first_order_levels": "perturbation", "splitting_table": "perturbation",
    "ConvergenceStudy": "convergence", "convergence_study": "convergence",
    "SurfaceMeshData": "meshfile", "read_surface_mesh": "meshfile",
    "ThinShellComparison": "bridge", "thin_shell_comparison": "bridge",
    "SweepResult": "sweep", "run_sweep": "sweep",
}

__all__ = ["__version__", *_WHERE]


def __getattr__(name: str):
    if name in _WHERE:
        value = getattr(importlib.import_module(f".{_WHERE[name]}", __name__), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'shellmodes' has no attribute {name!r}")


def __dir__():
    return sorted(__all__)
