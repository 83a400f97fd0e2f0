"""Solved spectra: multiplets, angular content, first-order perturbation theory, (n, l) labels
and the labellers that give modes their parent labels.
"""
