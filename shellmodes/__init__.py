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
from .case import Case, case_from_dict, case_schema, load_case
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
from .outputs import write_outputs
from .problem import SurfaceProblem, assemble_surface
from .run import build_shape, discretise, run_case
from .shapes import SHAPES, make_shape
from .solve import Eigenpairs, lowest_modes
from .spectrum import Multiplet, Spectrum
from .surface import CurvedSurface, SurfaceMapping, curved_surface

__all__ = [
    "__version__",
    "Case", "case_from_dict", "case_schema", "load_case",
    "CaseError", "DoubtfulResultWarning", "GeometryError", "MeshError", "MeshQualityWarning",
    "MultipletCutWarning", "ShellmodesError", "SolverError",
    "real_sph_harm", "write_outputs", "SurfaceProblem", "assemble_surface",
    "build_shape", "discretise", "run_case", "SHAPES", "make_shape",
    "Eigenpairs", "lowest_modes", "Multiplet", "Spectrum",
    "CurvedSurface", "SurfaceMapping", "curved_surface",
]
