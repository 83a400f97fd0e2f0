"""shellmodes: eigenmodes of particles on curved surfaces and in spherical shells.

Pipeline: case -> shape -> curved mesh -> problem -> solve -> spectrum -> outputs.

>>> import shellmodes
>>> case = shellmodes.case_from_dict({"surface": {"shape": "sphere"}, "modes": {"count": 4},
...                                   "resolution": {"degree": 2, "subdivisions": 2}})
>>> spectrum = shellmodes.run_case(case)
>>> spectrum.eigenvalues.round(3).tolist()
[-0.0, 2.0, 2.0, 2.0]
"""

from ._version import __version__
from .errors import (
                     CaseError,
                     DoubtfulResultWarning,
                     GeometryError,
                     MeshError,
                     MeshQualityWarning,
                     MultipletCutWarning,
                     ShellmodesError,
                     SolverError,
)

#: public name -> module that defines it; imported on first access (PEP 562), so that
#: ``import shellmodes`` and the command line start without loading every stage
_LAZY = {
    "AngularContent": "angular", "angular_content": "angular", "multiplet_content": "angular",
    "ThinShellComparison": "bridge", "thin_shell_comparison": "bridge",
    "Case": "case", "case_from_dict": "case", "case_schema": "case", "load_case": "case",
    "ConvergenceStudy": "convergence", "convergence_study": "convergence",
    "real_sph_harm": "harmonics",
    "SurfaceMeshData": "meshfile", "read_surface_mesh": "meshfile",
    "write_outputs": "outputs",
    "first_order_levels": "perturbation", "splitting_table": "perturbation",
    "SurfaceProblem": "problem", "assemble_surface": "problem",
    "build_shape": "run", "discretise": "run", "run_case": "run",
    "SHAPES": "shapes", "make_shape": "shapes",
    "Eigenpairs": "solve", "lowest_modes": "solve",
    "Multiplet": "spectrum", "Spectrum": "spectrum",
    "CurvedSurface": "surface", "SurfaceMapping": "surface", "curved_surface": "surface",
    "SweepResult": "sweep", "run_sweep": "sweep",
}


def __getattr__(name):
    module = _LAZY.get(name)
    if module is None:
        raise AttributeError(f"module 'shellmodes' has no attribute {name!r}")
    import importlib

    value = getattr(importlib.import_module(f".{module}", __name__), name)
    globals()[name] = value
    return value


def __dir__():
    return sorted(set(globals()) | set(_LAZY))


__all__ = [
    "__version__",
    "Case", "case_from_dict", "case_schema", "load_case",
    "CaseError", "DoubtfulResultWarning", "GeometryError", "MeshError", "MeshQualityWarning",
    "MultipletCutWarning", "ShellmodesError", "SolverError",
    "real_sph_harm", "write_outputs", "SurfaceProblem", "assemble_surface",
    "build_shape", "discretise", "run_case", "SHAPES", "make_shape",
    "Eigenpairs", "lowest_modes", "Multiplet", "Spectrum",
    "CurvedSurface", "SurfaceMapping", "curved_surface",
    "AngularContent", "angular_content", "multiplet_content", "first_order_levels", "splitting_table",
    "ConvergenceStudy", "convergence_study", "SurfaceMeshData", "read_surface_mesh",
    "ThinShellComparison", "thin_shell_comparison", "SweepResult", "run_sweep",
]
