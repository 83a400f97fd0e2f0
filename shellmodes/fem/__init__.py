"""Finite elements: curved surfaces and their forms, curved tetrahedra, layered curved prisms,
assembly, curvature, and the one Discretisation interface they all honour (discretisation).
"""
