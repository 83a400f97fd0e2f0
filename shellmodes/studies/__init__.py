"""Studies built on the pipeline: exact references, the validation checks, convergence, sweeps,
the thin-shell comparison.
"""
