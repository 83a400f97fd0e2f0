"""shellmodes: eigenmodes of particles on curved surfaces and in spherical shells.

Pipeline: case -> discretisation -> problem -> solver plan -> eigenpairs -> spectrum -> outputs
(:mod:`shellmodes.pipeline`; the sub-packages are its stages: docs/ARCHITECTURE.md).  The public
names below are loaded on first use, so ``import shellmodes`` (and ``shellmodes --help``) stays quick.

>>> import shellmodes
>>> case = shellmodes.case_from_dict({"surface": {"shape": "sphere"}, "modes": {"count": 4},
...                                   "resolution": {"degree": 2, "subdivisions": 2}})
>>> spectrum = shellmodes.run_case(case)
>>> spectrum.eigenvalues.round(3).tolist()
[-0.0, 2.0, 2.0, 2.0]
"""

from __future__ import annotations

import importlib

from shellmodes._version import __version__

#: public name -> module that defines it
_WHERE = {
    "Case": "case.schema", "case_from_dict": "case.schema", "case_schema": "case.schema",
    "load_case": "case.schema", "CaseError": "errors", "DoubtfulResultWarning": "errors", "GeometryError": "errors",
    "MeshError": "errors", "MeshQualityWarning": "errors", "MultipletCutWarning": "errors",
    "ShellmodesError": "errors", "SolverError": "errors", "real_sph_harm": "harmonics",
    "write_outputs": "io.outputs", "SurfaceProblem": "fem.forms", "assemble_surface": "fem.forms",
    "build_shape": "case.model", "discretise": "fem.discretisation", "run_case": "pipeline", "SHAPES": "shapes",
    "make_shape": "shapes", "Eigenpairs": "eigen.solve", "lowest_modes": "eigen.solve",
    "Multiplet": "spectrum.multiplets", "Spectrum": "spectrum.multiplets", "CurvedSurface": "fem.surface",
    "SurfaceMapping": "fem.surface", "curved_surface": "fem.surface", "AngularContent": "spectrum.angular",
    "angular_content": "spectrum.angular", "multiplet_content": "spectrum.angular",
    "first_order_levels": "spectrum.perturbation", "splitting_table": "spectrum.perturbation",
    "ConvergenceStudy": "studies.convergence", "convergence_study": "studies.convergence",
    "SurfaceMeshData": "meshfiles.surface", "read_surface_mesh": "meshfiles.surface",
    "ThinShellComparison": "studies.thin_shell", "thin_shell_comparison": "studies.thin_shell",
    "SweepResult": "studies.sweep", "run_sweep": "studies.sweep",
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
