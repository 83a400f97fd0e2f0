"""Eigen-solvers: factorization back-ends, Lanczos and blocked shift-invert (solve, block),
the separable solve and spherical preconditioner (separable), and the solver planner (planner).
"""
