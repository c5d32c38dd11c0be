"""Numerical kernels (numpy/scipy only) that import nothing else of the project."""
