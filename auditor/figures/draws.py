"""Find the draws of a named scalar quantity in a posterior dataset.

Quantity names follow the diagnostics table (:mod:`auditor.diagnostics`):
``name`` for a scalar, ``name[i,j]`` otherwise, where an integer coordinate is
written 1-based when the table is ``one_based`` (Stan's convention) and a label
coordinate as its label.
"""

from __future__ import annotations

from collections.abc import Iterator

import numpy as np
import xarray as xr

from auditor.diagnostics import quantity_label

_SAMPLE_DIMS = ("chain", "draw")


def iter_quantities(
    ds: xr.Dataset, one_based: bool = False
) -> Iterator[tuple[str, np.ndarray]]:
    """Yield ``(quantity, draws)`` for every numeric scalar quantity; draws are (chain, draw)."""
    for var in ds.data_vars:
        da = ds[var]
        if not np.issubdtype(da.dtype, np.number) or not set(_SAMPLE_DIMS) <= set(da.dims):
            continue
        values = da.transpose("chain", "draw", ...).values.astype(float)
        shape = values.shape[2:]
        if not shape:
            yield str(var), values
            continue
        for index in np.ndindex(*shape):
            label = quantity_label(str(var), da, index, one_based)
            yield label, values[(slice(None), slice(None), *index)]


def quantity_draws(ds: xr.Dataset, quantity: str, one_based: bool = False) -> np.ndarray | None:
    """Draws of ``quantity`` as a (chain, draw) float array, or ``None`` when absent."""
    var = quantity.split("[", 1)[0]
    if var not in ds.data_vars:
        return None
    for name, values in iter_quantities(ds[[var]], one_based):
        if name == quantity:
            return values
    return None
