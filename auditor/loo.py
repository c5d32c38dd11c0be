"""PSIS-LOO and WAIC of each observed variable of one analysis, computed once.

Rules read :class:`LooTable` (``ctx.loo``) and the engine keeps its compact
:class:`LooRecord` s (totals and pointwise elpd, never the draws) for the
project-level comparison (:mod:`auditor.comparison`), so the numbers a finding
states are the numbers the comparison table shows.

Methods: PSIS-LOO (Vehtari, Gelman & Gabry 2017, Statistics and Computing
27:1413-1432) with Pareto smoothed importance sampling (Vehtari, Simpson, Gelman,
Yao & Gabry 2024, JMLR 25(72)); WAIC (Watanabe 2010) only beside it. Both come
from our kernel :mod:`auditor.kernels.psis` (checked against arviz-stats in its
tests), with the settings of the reference implementation, arviz-stats 1.3, so a
reviewer gets the same numbers from it: one relative efficiency from the posterior
draws (``posterior_r_eff``, over the finite, non-constant quantities) and the tail
length rounded down. (The loo package estimates the relative efficiency per
observation instead, which costs about as much again; the kernel offers both.)
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field
from functools import cached_property
from typing import TYPE_CHECKING, Any

import numpy as np

if TYPE_CHECKING:
    from auditor.model import Analysis

#: Tail length rounding of PSIS: arviz-stats' (the paper and the loo package round up).
TAIL_ROUNDING = "floor"

#: Pointwise p_waic above this makes WAIC unreliable (Vehtari, Gelman & Gabry 2017,
#: section 2.2: "p_waic,i > 0.4"; from memory of the loo package's warning).
P_WAIC_LIMIT = 0.4


@dataclass
class LooRecord:
    """What the comparison needs of one analysis's observed variable.

    ``key`` identifies the observed data: analyses with the same key are
    compared. ``elpd_i`` is pointwise (one float per observation); nothing else
    of the draws is kept.
    """

    analysis: str
    observed: str
    key: str
    data_label: str
    elpd_loo: float
    se: float
    p_loo: float
    n_obs: int
    n_samples: int
    k_threshold: float
    n_high_k: int
    max_k: float
    elpd_waic: float
    se_waic: float
    p_waic: float
    n_high_p_waic: int
    n_parameters: int | None
    chosen: bool = False
    elpd_i: np.ndarray = field(default_factory=lambda: np.empty(0), repr=False)

    def as_dict(self) -> dict[str, Any]:
        """JSON-safe summary (the pointwise values are left out)."""
        return {
            "observed": self.observed, "data": self.data_label,
            "elpd_loo": self.elpd_loo, "se": self.se, "p_loo": self.p_loo,
            "observations": self.n_obs, "draws": self.n_samples,
            "k_threshold": self.k_threshold, "high_k": self.n_high_k, "max_k": self.max_k,
            "elpd_waic": self.elpd_waic, "se_waic": self.se_waic, "p_waic": self.p_waic,
            "high_p_waic": self.n_high_p_waic, "parameters": self.n_parameters,
            "chosen": self.chosen,
        }


@dataclass
class VariableLoo:
    """PSIS-LOO and WAIC of one observed variable, with its observed values."""

    observed: str
    y: np.ndarray | None
    loo: Any  # auditor.kernels.psis.LooResult
    waic: Any  # auditor.kernels.psis.WaicResult


def data_key(analysis: Analysis, observed: str, y: np.ndarray | None) -> tuple[str, str]:
    """(comparison key, label): the data file and variable when declared, else the
    observed values themselves (identical values are the same data)."""
    spec = analysis.spec
    if spec is not None and spec.data is not None:
        label = f"{spec.data.name}: {observed}"
        return f"file:{spec.data.resolve()}:{observed}", label
    if y is not None:
        digest = hashlib.sha256(np.ascontiguousarray(y, dtype=float).tobytes()).hexdigest()
        return f"values:{observed}:{digest}", f"{observed} ({y.size} values)"
    return f"analysis:{analysis.name}:{observed}", observed


def posterior_r_eff_of(analysis: Analysis) -> float:
    """One relative efficiency from the posterior draws (arviz-stats 1.3's default for
    ``loo``), over the quantities with finite, non-constant draws; 1 when there are none."""
    from auditor.kernels.psis import posterior_r_eff

    post = analysis.group("posterior")
    if post is None:
        return 1.0
    arrays = []
    for name, da in post.data_vars.items():
        if str(name).endswith("__") or "chain" not in da.dims or "draw" not in da.dims:
            continue
        arr = np.asarray(da.transpose("chain", "draw", ...).values, dtype=float)
        arr = arr.reshape(arr.shape[0], arr.shape[1], -1)
        keep = np.all(np.isfinite(arr), axis=(0, 1)) & (np.ptp(arr, axis=(0, 1)) > 0)
        if keep.any():
            arrays.append(arr[..., keep])
    if not arrays:
        return 1.0
    value = posterior_r_eff(arrays)
    return value if np.isfinite(value) and value > 0 else 1.0


def n_parameters(analysis: Analysis) -> int | None:
    """Scalar parameters: the program's parameters block when known, else every
    scalar of the posterior (an upper bound: it counts derived quantities too)."""
    post = analysis.group("posterior")
    if post is None:
        return None
    names = [str(v) for v in post.data_vars if not str(v).endswith("__")]
    prog = analysis.program
    if prog is not None and not prog.syntax_errors and prog.parameters:
        declared = {d.name for d in prog.parameters}
        names = [n for n in names if n in declared] or names
    total = 0
    for n in names:
        da = post[n]
        total += int(np.prod([da.sizes[d] for d in da.dims if d not in ("chain", "draw")]))
    return total


@dataclass
class LooTable:
    """PSIS-LOO of every paired observed variable of an analysis, computed on first use."""

    analysis: Analysis
    errors: list[str] = field(default_factory=list)

    @cached_property
    def r_eff(self) -> float:
        """The relative efficiency of the posterior draws (see the module's docstring)."""
        return posterior_r_eff_of(self.analysis)

    @cached_property
    def variables(self) -> list[VariableLoo]:
        """One entry per observed variable with a usable pointwise log-likelihood."""
        from auditor.kernels.psis import psis_loo, waic
        from auditor.predictive_checks import observed_values

        out = []
        for p in self.analysis.pairings:
            if p.log_likelihood is None:
                continue
            ds = self.analysis.group("log_likelihood")
            if ds is None or p.log_likelihood.stored not in ds.data_vars:
                continue
            da = ds[p.log_likelihood.stored]
            if "chain" not in da.dims or "draw" not in da.dims:
                continue
            arr = np.asarray(da.transpose("chain", "draw", ...).values, dtype=float)
            arr = arr.reshape(arr.shape[0], arr.shape[1], -1)
            if arr.shape[1] < 2 or not np.all(np.isfinite(arr)):
                self.errors.append(
                    f"the pointwise log-likelihood of {p.observed} has "
                    + ("too few draws" if arr.shape[1] < 2 else "infinite or missing values")
                    + "; PSIS-LOO was not computed")
                continue
            try:
                loo = psis_loo(arr, r_eff=self.r_eff, tail_rounding=TAIL_ROUNDING)
                w = waic(arr)
            except (ValueError, FloatingPointError) as exc:
                self.errors.append(f"PSIS-LOO of {p.observed} failed: {exc}")
                continue
            y = observed_values(self.analysis, p.observed)
            out.append(VariableLoo(p.observed, y if y is not None and y.size == arr.shape[2]
                                   else None, loo, w))
        return out

    def unscored(self) -> list[tuple[str, str, str, bool]]:
        """(observed, comparison key, label, chosen) of observed variables without
        PSIS-LOO, so the comparison knows which models of the same data could not be
        scored."""
        from auditor.predictive_checks import observed_values

        scored = {v.observed for v in self.variables}
        out = []
        for p in self.analysis.pairings:
            if p.observed in scored:
                continue
            y = observed_values(self.analysis, p.observed)
            chosen = bool(getattr(self.analysis.spec, "chosen", False))
            out.append((p.observed, *data_key(self.analysis, p.observed, y), chosen))
        return out

    def records(self) -> list[LooRecord]:
        """Compact records for the project-level comparison."""
        spec = self.analysis.spec
        chosen = bool(getattr(spec, "chosen", False))
        n_par = n_parameters(self.analysis)
        out = []
        for v in self.variables:
            key, label = data_key(self.analysis, v.observed, v.y)
            k = v.loo.pareto_k
            out.append(LooRecord(
                analysis=self.analysis.name, observed=v.observed, key=key, data_label=label,
                elpd_loo=float(v.loo.elpd_loo), se=float(v.loo.se), p_loo=float(v.loo.p_loo),
                n_obs=int(v.loo.n_obs), n_samples=int(v.loo.n_samples),
                k_threshold=float(v.loo.k_threshold),
                n_high_k=int(np.sum(~(k <= v.loo.k_threshold))),
                max_k=float(np.nanmax(k)) if np.isfinite(k).any() else float("nan"),
                elpd_waic=float(v.waic.elpd_waic), se_waic=float(v.waic.se),
                p_waic=float(v.waic.p_waic),
                n_high_p_waic=int(np.sum(v.waic.p_waic_i > P_WAIC_LIMIT)),
                n_parameters=n_par, chosen=chosen,
                elpd_i=np.asarray(v.loo.elpd_loo_i, dtype=float),
            ))
        return out
