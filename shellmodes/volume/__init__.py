"""Three-dimensional shells and balls: layered meshes, curved elements, assembly, labels.

The volume half of the pipeline: :func:`shell_mesh` builds conforming
tetrahedra between curved walls, :func:`discretise` (or :func:`read_volume_mesh`)
makes a curved discretisation of degree 1 or 2, :func:`assemble_volume` gives
K and M in lambda units, :func:`free_dofs` and :func:`restricted` impose
Dirichlet walls, :func:`radial_angular_labels` labels modes (n, l), and
:func:`export_cells` gives VTU cells.  Layered curved prisms (triangle degree 1-4 times
a radial degree) live in :mod:`~shellmodes.volume.prisms`; the separable solve
and the spherical preconditioner for deformed prism shells in
:mod:`~shellmodes.volume.separable`.
"""

from .assemble import assemble_volume, free_dofs, restricted
from .discretise import VolumeDiscretisation, discretise, discretise_tetrahedra, export_cells
from .labels import RadialAngularLabels, radial_angular_labels
from .reader import read_volume_mesh
from .shellmesh import ShellMesh, constant_wall, shell_mesh, signed_volumes

__all__ = [
    "ShellMesh", "shell_mesh", "constant_wall", "signed_volumes",
    "VolumeDiscretisation", "discretise", "discretise_tetrahedra", "export_cells",
    "read_volume_mesh",
    "assemble_volume", "free_dofs", "restricted",
    "RadialAngularLabels", "radial_angular_labels",
]
