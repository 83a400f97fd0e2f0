"""Every default and limit of shellmodes that is not a schema field default, stated once.

A light module (only the standard library's re): the case schema, the pipeline, the planner and the
command line all read their numbers from here, so a limit changes in one place.
"""

import re

#: most halvings of a surface's reference mesh (the icosahedron at 9 has 5.2 million triangles)
MAX_SUBDIVISIONS = 9
#: subdivisions of a surface's reference mesh when a case gives neither subdivisions nor edge_length
DEFAULT_SUBDIVISIONS = 3
#: subdivisions of a shell's icosphere of directions by default (3-D meshes grow as 4^level x layers)
DEFAULT_SHELL_SUBDIVISIONS = 2
#: most subdivisions of a shell's directions, per cell kind
MAX_SHELL_SUBDIVISIONS = {"prisms": 8, "tetrahedra": 7}
#: highest radial degree of layered prisms (Gauss-Lobatto nodes stay well conditioned up to here)
MAX_RADIAL_DEGREE = 12
#: modes found when a case gives neither modes.count nor modes.below
DEFAULT_MODE_COUNT = 20
#: most modes one case may ask for
MAX_MODE_COUNT = 100_000
#: modes a solve by energy window (modes.below) starts from, and assumes when planning memory
WINDOW_START_COUNT = 40
#: free unknowns from which deformed prism shells use LOBPCG with the spherical preconditioner
#: instead of factorizing K - shift M: high-order prisms fill in badly (P4 x Q8, 71,694 unknowns:
#: 151 s with CHOLMOD shift-invert on a 2-core machine, benchmarks/README.md)
PRISM_ITERATIVE_FROM = 15_000
#: finest refinement ``shellmodes converge`` goes to by default
CONVERGE_MAX_SUBDIVISIONS = 6
#: multiplets whose first mode a report renders by default
DEFAULT_RENDERS = 6
#: below this size a dense generalized eigensolver is cheaper and exact
DENSE_LIMIT = 600
#: from this many unknowns on ``modes.method = "auto"`` uses the blocked iteration (measured: benchmarks/README.md)
BLOCK_THRESHOLD = 50_000
#: ... and from this many modes on at any size where the block fits (4 k < n): ARPACK's single-vector
#: reorthogonalisation grows like n k^2.  CPU time measured at 1 BLAS thread (benchmarks/README.md):
#: 10,242 unknowns and 100 modes 1.6 s Lanczos, 1.2 s block; 36 or 64 modes: Lanczos 25-40 % faster
BLOCK_COUNT = 80
#: levels estimated for automatic layers (shell.decay) when a case gives modes.below instead of a count
AUTO_LAYER_LEVELS = 200
#: from this many requested modes on ``modes.method = "auto"`` slices the spectrum where a factorization
#: is planned (measured: benchmarks/README.md, "Spectrum slicing": one Lanczos space grows as the square
#: of the count, the slices linearly; 300 modes on 10,242 unknowns 7.4 s CPU in one shift, 4.2 s in slices)
SLICE_FROM = 200
#: modes per slice aimed at by default (each slice: its own shift, factorization and Lanczos window)
SLICE_MODES = 150
#: local Dask worker processes for slices start only from this much work on (unknowns x modes; a rule of
#: thumb: below it starting a local cluster, a few seconds, exceeds the solve)
SLICE_PARALLEL_FROM = 5e6
#: what a Dask scheduler address must look like (sweep.scheduler, modes.scheduler)
SCHEDULER_ADDRESS = re.compile(r"tcp://(\[[0-9a-fA-F:]+\]|[A-Za-z0-9.-]+):(\d{1,5})")
#: ... and its port range
PORT_RANGE = (1, 65535)
