"""Comparison across the project's analyses of the same observed data.

Works on compact per-analysis records (:class:`auditor.loo.LooRecord`: totals and
pointwise elpd), never on draws, so it runs after every analysis has been audited
and released. Analyses whose records share a key (the same data file and observed
variable, or identical observed values) form a comparison set.

For each set: elpd_loo and its SE, the difference to the best model with the SE of
the paired differences (Vehtari, Gelman & Gabry 2017, section 5.2: the standard
error of a difference is computed from the pointwise differences, not from the two
SEs), p_loo, and stacking weights, the weights of the model mixture that
maximizes the leave-one-out log score (Yao, Vehtari, Simpson & Gelman 2018,
"Using stacking to average Bayesian predictive distributions", Bayesian Analysis
13(3):917-1007).
"""

from __future__ import annotations

from collections import defaultdict
from dataclasses import dataclass
from typing import Any

import numpy as np

from auditor.loo import LooRecord


@dataclass(frozen=True)
class ComparisonRow:
    """One model of a comparison set, best first."""

    analysis: str
    elpd_loo: float
    se: float
    elpd_diff: float
    diff_se: float
    p_loo: float
    weight: float
    chosen: bool
    high_k: int

    def as_dict(self) -> dict[str, Any]:
        """JSON-safe row."""
        return {"analysis": self.analysis, "elpd_loo": self.elpd_loo, "se": self.se,
                "elpd_diff": self.elpd_diff, "diff_se": self.diff_se, "p_loo": self.p_loo,
                "stacking_weight": self.weight, "chosen": self.chosen, "high_k": self.high_k}


@dataclass(frozen=True)
class ComparisonSet:
    """Analyses of the same observed data, with their comparison table (best first)."""

    key: str
    label: str
    observed: str
    rows: tuple[ComparisonRow, ...]
    n_obs: int
    #: Analyses of the same data without PSIS-LOO (no pointwise log-likelihood).
    unscored: tuple[str, ...] = ()
    #: Whether one of the unscored analyses is marked chosen.
    unscored_chosen: bool = False

    def as_dict(self) -> dict[str, Any]:
        """JSON-safe record."""
        return {"data": self.label, "observed": self.observed, "observations": self.n_obs,
                "models": [r.as_dict() for r in self.rows], "unscored": list(self.unscored)}


def stacking_weights(elpd_i: np.ndarray) -> np.ndarray:
    """Stacking weights of K models from pointwise elpd, shape (K, N).

    Maximizes sum_i log sum_k w_k exp(elpd_ik) over the simplex (Yao et al. 2018,
    eq. 4 with the leave-one-out predictive densities): a concave problem, solved
    on the simplex itself (SLSQP with the analytic gradient, from equal weights)
    so that a model can get a weight of exactly 0.
    """
    from scipy.optimize import Bounds, LinearConstraint, minimize

    k = elpd_i.shape[0]
    if k == 1:
        return np.ones(1)
    # Scale each observation's densities by a common factor for stability; this
    # adds a constant to the objective and does not move the optimum.
    dens = np.exp(elpd_i - elpd_i.max(axis=0, keepdims=True)).T  # (N, K)

    def objective(w: np.ndarray) -> float:
        return float(-np.sum(np.log(dens @ w)))

    def gradient(w: np.ndarray) -> np.ndarray:
        return -np.sum(dens / (dens @ w)[:, None], axis=0)

    res = minimize(objective, np.full(k, 1.0 / k), jac=gradient, method="SLSQP",
                   bounds=Bounds(np.zeros(k), np.ones(k)),
                   constraints=LinearConstraint(np.ones(k), 1.0, 1.0))
    w = np.clip(res.x, 0.0, None)
    return w / w.sum()


def comparison_sets(records: list[LooRecord],
                    unscored: list[tuple[str, str, str, str, bool]] = ()
                    ) -> list[ComparisonSet]:
    """The project's comparison sets (two or more analyses of the same data), in a
    fixed order (by data label).

    ``unscored`` lists ``(analysis, observed, key, label, chosen)`` of analyses of
    observed data without PSIS-LOO; they count as models of their data but get no row.
    """
    groups: dict[str, list[LooRecord]] = defaultdict(list)
    for r in records:
        groups[r.key].append(r)
    others: dict[str, list[tuple[str, str, str, str, bool]]] = defaultdict(list)
    for u in unscored:
        others[u[2]].append(u)
    out = []
    for key in sorted(set(groups) | set(others)):
        members = groups.get(key, [])
        missing = tuple(sorted({u[0] for u in others.get(key, [])}))
        missing_chosen = any(u[4] for u in others.get(key, []))
        names = {m.analysis for m in members} | set(missing)
        sizes = {m.elpd_i.size for m in members}
        if len(names) < 2 or len(sizes) > 1:
            continue
        if not members:
            first = others[key][0]
            out.append(ComparisonSet(key, first[3], first[1], (), 0, missing, missing_chosen))
            continue
        members = sorted(members, key=lambda m: (-m.elpd_loo, m.analysis))
        pointwise = np.vstack([m.elpd_i for m in members])
        weights = stacking_weights(pointwise)
        best = pointwise[0]
        n = best.size
        rows = []
        for m, elpd, w in zip(members, pointwise, weights, strict=True):
            diff = elpd - best
            diff_se = float(np.sqrt(n * np.var(diff, ddof=1))) if n > 1 else 0.0
            rows.append(ComparisonRow(m.analysis, m.elpd_loo, m.se, float(diff.sum()),
                                      diff_se, m.p_loo, float(w), m.chosen, m.n_high_k))
        out.append(ComparisonSet(key, members[0].data_label, members[0].observed,
                                 tuple(rows), n, missing, missing_chosen))
    return sorted(out, key=lambda s: (s.label, s.key))
