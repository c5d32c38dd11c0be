"""Report quantities whose draws include NaN or infinite values."""

from __future__ import annotations

from collections.abc import Iterator

import numpy as np

from auditor.findings import Finding
from auditor.rulekit import draws_blocks

#: Groups of draws checked (sampler statistics such as a fixed_param run's NaN
#: step size are no draws of the model).
GROUPS = ("posterior", "posterior_predictive", "log_likelihood", "prior", "prior_predictive")


def _label(var: str, dims: tuple, coords: dict, index: tuple, one_based: bool) -> str:
    """``var`` or ``var[i,j]``, integer positions 1-based for Stan's conventions."""
    if not index:
        return var
    parts = []
    for dim, i in zip(dims, index, strict=True):
        coord = coords.get(dim)
        value = coord[i] if coord is not None else i
        if isinstance(value, np.integer | int) and not isinstance(value, bool):
            parts.append(str(int(value) + (1 if one_based else 0)))
        else:
            parts.append(str(value))
    return f"{var}[{','.join(parts)}]"


def check(ctx) -> Iterator[Finding]:
    """One finding per variable with non-finite draws: which elements, how many draws."""
    least = int(ctx.thresholds["min_nonfinite"])
    analysis = ctx.analysis
    # CmdStan names elements from 1 (theta[1] is column theta.1), as the diagnostics
    # table labels them (auditor/engine.py); draws tables carry their own 1-based
    # coordinates, other DataTree files their own labels.
    one_based = analysis.settings.library == "CmdStan"
    for group in GROUPS:
        ds = analysis.group(group)
        if ds is None:
            continue
        for var in ds.data_vars:
            da = ds[var]
            if not np.issubdtype(da.dtype, np.floating) or "chain" not in da.dims:
                continue
            da = da.transpose("chain", "draw", ...)
            n_draws = int(da.sizes["chain"]) * int(da.sizes["draw"])
            # Counted block by block: a posterior read lazily is never loaded whole.
            nans, infs = [], []
            for block in draws_blocks(da):
                flat = block.reshape(n_draws, -1)
                nans.append(np.isnan(flat).sum(axis=0))
                infs.append(np.isinf(flat).sum(axis=0))
            if not nans:
                continue
            nan, inf = np.concatenate(nans), np.concatenate(infs)
            bad = np.flatnonzero(nan + inf >= least)
            if bad.size == 0:
                continue
            dims = tuple(d for d in da.dims if d not in ("chain", "draw"))
            coords = {d: da.coords[d].values for d in dims if d in da.coords}
            shape = da.shape[2:]
            worst = int(bad[np.argmax((nan + inf)[bad])])
            labels = [_label(str(var), dims, coords, np.unravel_index(k, shape) if shape else (),
                             one_based) for k in bad[:6]]
            label = _label(str(var), dims, coords,
                           np.unravel_index(worst, shape) if shape else (), one_based)
            total = int(nan.size)
            counts = f"{int(nan[worst])} NaN and {int(inf[worst])} infinite of {n_draws} draws"
            if total == 1:
                message = f"{var} in {group} has {counts}"
            else:
                more = ", ..." if bad.size > len(labels) else ""
                message = (f"{bad.size} of {total} elements of {var} in {group} have draws that "
                           f"are not finite numbers ({', '.join(labels)}{more}); most in "
                           f"{label}: {counts}")
            yield ctx.finding(
                message,
                evidence={"group": group, "variable": str(var), "elements": total,
                          "elements_nonfinite": int(bad.size), "quantity": label,
                          "nan_draws": int(nan[worst]), "infinite_draws": int(inf[worst]),
                          "draws": n_draws, "nonfinite_draws_all": int((nan + inf)[bad].sum())},
                quantity=label,
            )
