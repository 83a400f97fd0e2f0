"""Reading user meshes with meshio: surfaces (triangles, triangle6) and volumes (tetra, tetra10).
"""
