"""Per-quantity convergence diagnostics of the posterior, computed once per analysis.

R-hat (rank-normalized, folded; Vehtari et al. 2021), bulk and tail ESS and the
MCSE of the mean come from arviz-stats, the reference Python implementation; we
only arrange them into one row per scalar quantity.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field
from functools import cached_property
from typing import Any

import numpy as np
import xarray as xr

TAIL_PROBS = (0.05, 0.95)
COLUMNS = ("quantity", "variable", "rhat", "ess_bulk", "ess_tail", "mcse_mean", "mean", "sd")


def quantity_label(var: str, da: xr.DataArray, index: tuple, one_based: bool) -> str:
    """Name of one scalar element: ``var`` or ``var[i,j]``.

    Integer coordinates are written 1-based when ``one_based`` (Stan's convention,
    matching CmdStan's ``var.i.j`` columns); label coordinates as their label.
    """
    if not index:
        return var
    parts = []
    for dim, i in zip([d for d in da.dims if d not in ("chain", "draw")], index, strict=True):
        coord = da.coords[dim].values[i] if dim in da.coords else i
        if isinstance(coord, np.integer | int) and not isinstance(coord, bool):
            parts.append(str(int(coord) + (1 if one_based else 0)))
        else:
            parts.append(str(coord))
    return f"{var}[{','.join(parts)}]"


def _finite(x: float) -> float | None:
    return float(x) if np.isfinite(x) else None


@dataclass
class DiagnosticsTable:
    """Rows of diagnostics, one per scalar quantity of the posterior group.

    ``one_based`` labels integer indices from 1 (Stan's convention, so that
    ``theta[1]`` matches the CSV column ``theta.1``).
    """

    posterior: xr.Dataset | None
    one_based: bool = False
    errors: list[str] = field(default_factory=list)

    @cached_property
    def rows(self) -> list[dict[str, Any]]:
        """One dict per quantity with the keys of :data:`COLUMNS` and ``constant``.

        Odd draws that make the computation fail give no rows and a message in
        :attr:`errors`, so that rules reading the table still run.
        """
        try:
            return self._compute()
        except Exception as exc:  # odd data must not stop the audit
            self.errors.append(f"{type(exc).__name__}: {exc}")
            return []

    def _compute(self) -> list[dict[str, Any]]:
        ds = self.posterior
        if ds is None or not ds.data_vars or ds.sizes.get("draw", 0) < 4:
            return []
        ds = ds[[v for v in ds.data_vars if np.issubdtype(ds[v].dtype, np.number)]]
        ds = ds.astype(float)
        import arviz_stats as azs

        with warnings.catch_warnings(), np.errstate(all="ignore"):
            warnings.simplefilter("ignore")
            rhat = azs.rhat(ds, method="rank")
            bulk = azs.ess(ds, method="bulk")
            # Tail-ESS is defined at the 5% and 95% quantiles (Vehtari et al. 2021);
            # arviz-stats' default probability follows its ci_prob setting instead.
            tail = azs.ess(ds, method="tail", prob=TAIL_PROBS)
            mcse = azs.mcse(ds, method="mean")
        out: list[dict[str, Any]] = []
        for var in ds.data_vars:
            da = ds[var]
            values = da.transpose("chain", "draw", ...).values
            flat = values.reshape(values.shape[0] * values.shape[1], -1)
            shape = values.shape[2:]
            r = np.asarray(rhat[var].values).reshape(-1)
            b = np.asarray(bulk[var].values).reshape(-1)
            t = np.asarray(tail[var].values).reshape(-1)
            m = np.asarray(mcse[var].values).reshape(-1)
            for k, index in enumerate(np.ndindex(*shape) if shape else [()]):
                col = flat[:, k]
                finite = col[np.isfinite(col)]
                constant = bool(finite.size and np.ptp(finite) == 0)
                out.append(
                    {
                        "quantity": quantity_label(str(var), da, index, self.one_based),
                        "variable": str(var),
                        "rhat": _finite(r[k]),
                        "ess_bulk": _finite(b[k]),
                        "ess_tail": _finite(t[k]),
                        "mcse_mean": _finite(m[k]),
                        "mean": _finite(np.mean(finite)) if finite.size else None,
                        "sd": _finite(np.std(finite, ddof=1)) if finite.size > 1 else None,
                        "constant": constant,
                        "nonfinite": int(col.size - finite.size),
                    }
                )
        return out
