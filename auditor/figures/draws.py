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

from auditor.diagnostics import element_blocks, is_lazy, quantity_labels, read_flat

_SAMPLE_DIMS = ("chain", "draw")


def _numeric(da: xr.DataArray) -> bool:
    return np.issubdtype(da.dtype, np.number) and set(_SAMPLE_DIMS) <= set(da.dims)


def iter_quantities(
    ds: xr.Dataset, one_based: bool = False, per_block: int = 256
) -> Iterator[tuple[str, np.ndarray]]:
    """Yield ``(quantity, draws)`` for every numeric scalar quantity; draws are (chain, draw).

    Variables are read ``per_block`` elements at a time, so a consumer that stops early
    never reads the rest of a posterior read lazily.
    """
    for var in ds.data_vars:
        da = ds[var]
        if not _numeric(da):
            continue
        labels = quantity_labels(str(var), da, one_based)
        for first, block in element_blocks(da, per_block):
            for k in range(block.shape[2]):
                yield labels[first + k], block[:, :, k].astype(float)


def quantity_draws(ds: xr.Dataset, quantity: str, one_based: bool = False) -> np.ndarray | None:
    """Draws of ``quantity`` as a (chain, draw) float array, or ``None`` when absent.

    Only that element is read (a posterior read lazily is not loaded).
    """
    var = quantity.split("[", 1)[0]
    if var not in ds.data_vars or not _numeric(ds[var]):
        return None
    da = ds[var]
    labels = quantity_labels(var, da, one_based)
    try:
        k = labels.index(quantity)
    except ValueError:
        return None
    da = da.transpose("chain", "draw", ...)
    return read_flat(da.data if is_lazy(da.data) else da.values, k, k + 1)[:, :, 0].astype(float)
