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
from .angular import AngularContent, angular_content, multiplet_content
from .bridge import ThinShellComparison, thin_shell_comparison
from .case import Case, case_from_dict, case_schema, load_case
from .convergence import ConvergenceStudy, convergence_study
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
from .harmonics import real_sph_harm
from .meshfile import SurfaceMeshData, read_surface_mesh
from .outputs import write_outputs
from .perturbation import first_order_levels, splitting_table
from .problem import SurfaceProblem, assemble_surface
from .run import build_shape, discretise, run_case
from .shapes import SHAPES, make_shape
from .solve import Eigenpairs, lowest_modes
from .spectrum import Multiplet, Spectrum
from .surface import CurvedSurface, SurfaceMapping, curved_surface
from .sweep import SweepResult, run_sweep

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
