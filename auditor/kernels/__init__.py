"""Vectorized numerical kernels (numpy/scipy only) used by the audit's diagnostics."""
