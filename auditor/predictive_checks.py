"""The numbers behind the prior and posterior predictive rules, computed once.

- observed values and replicated draws of a paired observed variable
  (:mod:`auditor.predictive`), as arrays of one row per draw;
- the outcome's kind (binary, count, proportion, positive, continuous) and its
  support, from the program's declaration and the data themselves;
- test statistics chosen for the kind and their posterior predictive p-values
  (Gelman, Meng & Stern 1996, Statistica Sinica 6:733-807; Gelman et al., Bayesian
  Data Analysis, 3rd ed., ch. 6; Gabry et al. 2019, JRSS A 182(2):389-402);
- PSIS-weighted LOO-PIT values, randomized for discrete outcomes, and their test
  against uniformity with simultaneous ECDF bands (Säilynoja, Bürkner & Vehtari
  2022, Statistics and Computing 32:32).

Rules and figures both call these functions, so a figure shows the numbers its
finding states.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from auditor.predictive import Source

if TYPE_CHECKING:
    from auditor.model import Analysis

#: Families whose outcome is a count (Stan names).
COUNT_FAMILIES = ("poisson", "neg_binomial", "binomial", "beta_binomial", "geometric")
#: Families whose outcome is positive.
POSITIVE_FAMILIES = ("lognormal", "gamma", "exponential", "weibull", "inv_gamma", "frechet",
                     "chi_square", "rayleigh", "pareto", "half_normal", "half_cauchy")

BINARY, COUNT, PROPORTION, POSITIVE, CONTINUOUS = (
    "binary", "count", "proportion", "positive", "continuous")


# --------------------------------------------------------------------------- draws


def observed_values(analysis: Analysis, name: str) -> np.ndarray | None:
    """The observed values of ``name`` (data file or ``observed_data`` group), flat."""
    value = analysis.data.get(name)
    if value is None:
        ds = analysis.group("observed_data")
        if ds is None or name not in ds.data_vars:
            return None
        value = ds[name].values
    arr = np.asarray(value)
    if arr.dtype.kind not in "biuf" or arr.size == 0:
        return None
    return arr.reshape(-1).astype(float)


def draws_of(analysis: Analysis, source: Source | None, group: str) -> np.ndarray | None:
    """Draws of a companion as (draws, observations), chains pooled; ``None`` when absent."""
    if source is None:
        return None
    ds = analysis.group(group)
    if ds is None or source.stored not in ds.data_vars:
        return None
    da = ds[source.stored]
    if "chain" not in da.dims or "draw" not in da.dims:
        return None
    arr = np.asarray(da.transpose("chain", "draw", ...).values, dtype=float)
    return arr.reshape(arr.shape[0] * arr.shape[1], -1)


def share_in_range(values: np.ndarray, low: float, high: float) -> float:
    """Share of ``values`` in [``low``, ``high``]; NaN and infinite values count as outside.

    NaN for no values. The prior predictive rule and its figure both use it.
    """
    flat = np.asarray(values, dtype=float).reshape(-1)
    if flat.size == 0:
        return float("nan")
    return float(np.mean((flat >= low) & (flat <= high)))


# --------------------------------------------------------------------------- kind


@dataclass(frozen=True)
class Support:
    """Values the outcome can take: bounds (``None``: unbounded) and integer-ness."""

    lower: float | None
    upper: float | None
    integer: bool

    def outside(self, x: np.ndarray) -> np.ndarray:
        """Boolean mask of values outside the support (NaN counts as outside)."""
        bad = ~np.isfinite(x)
        if self.lower is not None:
            bad |= x < self.lower
        if self.upper is not None:
            bad |= x > self.upper
        if self.integer:
            bad |= np.abs(x - np.round(x)) > 1e-9
        return bad

    def describe(self) -> str:
        kind = "whole numbers" if self.integer else "values"
        if self.lower is not None and self.upper is not None:
            return f"{kind} from {self.lower:g} to {self.upper:g}"
        if self.lower is not None:
            return f"{kind} of at least {self.lower:g}"
        if self.upper is not None:
            return f"{kind} of at most {self.upper:g}"
        return kind


def outcome_kind(y: np.ndarray, family: str | None = None) -> str:
    """``binary``, ``count``, ``proportion``, ``positive`` or ``continuous``."""
    finite = y[np.isfinite(y)]
    whole = finite.size > 0 and bool(np.all(finite == np.round(finite)))
    if whole and np.all((finite == 0) | (finite == 1)) and (
            family is None or family.startswith("bernoulli") or not family.startswith(
                ("normal", "student"))):
        return BINARY
    if whole and np.all(finite >= 0) and (
            family is None or family.startswith(COUNT_FAMILIES) or not family.startswith(
                ("normal", "student", "cauchy"))):
        return COUNT
    if finite.size and np.all((finite >= 0) & (finite <= 1)):
        return PROPORTION
    if finite.size and np.all(finite > 0):
        return POSITIVE
    return CONTINUOUS


def support(kind: str, declared_lower: float | None = None,
            declared_upper: float | None = None, integer_type: bool = False) -> Support:
    """The outcome's support: its declared bounds when the program gives them, else
    what its kind allows (counts from 0, binary and proportions in [0, 1])."""
    lower, upper = declared_lower, declared_upper
    integer = integer_type or kind in (BINARY, COUNT)
    if kind in (BINARY, COUNT) and lower is None:
        lower = 0.0
    if kind in (BINARY, PROPORTION):
        lower = 0.0 if lower is None else lower
        upper = 1.0 if upper is None else upper
    return Support(lower, upper, integer)


# --------------------------------------------------------------------------- statistics


Statistic = Callable[[np.ndarray], np.ndarray]


def _sd(x: np.ndarray) -> np.ndarray:
    return np.std(x, axis=-1, ddof=1) if x.shape[-1] > 1 else np.full(x.shape[:-1], np.nan)


def _dispersion(x: np.ndarray) -> np.ndarray:
    mean = np.mean(x, axis=-1)
    var = np.var(x, axis=-1, ddof=1) if x.shape[-1] > 1 else np.full(mean.shape, np.nan)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(mean > 0, var / mean, np.nan)


#: name -> (label, function of an array (..., observations) giving (...)).
STATISTICS: dict[str, tuple[str, Statistic]] = {
    "mean": ("mean", lambda x: np.mean(x, axis=-1)),
    "sd": ("standard deviation", _sd),
    "min": ("minimum", lambda x: np.min(x, axis=-1)),
    "max": ("maximum", lambda x: np.max(x, axis=-1)),
    "share_zeros": ("share of zeros", lambda x: np.mean(x == 0, axis=-1)),
    "dispersion": ("dispersion (variance / mean)", _dispersion),
    "share_ones": ("share of ones", lambda x: np.mean(x == 1, axis=-1)),
}


def statistics_for(kind: str) -> list[str]:
    """The test statistics a practising statistician would look at for this kind."""
    if kind == BINARY:
        return ["share_ones"]
    names = ["mean", "sd", "min", "max"]
    if kind == COUNT:
        names += ["share_zeros", "dispersion"]
    return names


def ppp_value(t_rep: np.ndarray, t_obs: float) -> float:
    """Posterior predictive p-value Pr(T(y_rep) >= T(y)), ties counted half (mid-p).

    Half-counting ties keeps discrete statistics (minimum, share of zeros) from
    piling up at 0 or 1 when replicated and observed values coincide (mid-p;
    common practice). NaN replications are left out.
    """
    t = t_rep[np.isfinite(t_rep)]
    if t.size == 0 or not np.isfinite(t_obs):
        return float("nan")
    return float(np.mean(t > t_obs) + 0.5 * np.mean(t == t_obs))


@dataclass(frozen=True)
class StatisticCheck:
    """One test statistic: observed value, replicated quantiles and p-value."""

    name: str
    label: str
    observed: float
    q05: float
    q50: float
    q95: float
    p_value: float


def check_statistics(y: np.ndarray, rep: np.ndarray, kind: str) -> list[StatisticCheck]:
    """Every statistic of :func:`statistics_for` on observed ``y`` and ``rep`` (draws, n)."""
    out = []
    for name in statistics_for(kind):
        label, fn = STATISTICS[name]
        t_obs = float(fn(y[None, :])[0])
        t_rep = np.asarray(fn(rep), dtype=float)
        finite = t_rep[np.isfinite(t_rep)]
        if finite.size == 0 or not np.isfinite(t_obs):
            continue
        q05, q50, q95 = (float(v) for v in np.quantile(finite, [0.05, 0.5, 0.95]))
        out.append(StatisticCheck(name, label, t_obs, q05, q50, q95, ppp_value(t_rep, t_obs)))
    return out


def replicated_statistic(rep: np.ndarray, name: str) -> np.ndarray:
    """T(y_rep) for every draw (for the figure of a flagged statistic)."""
    return np.asarray(STATISTICS[name][1](rep), dtype=float)


# --------------------------------------------------------------------------- LOO-PIT


def psis_log_weights(log_lik: np.ndarray, n_chains: int,
                     r_eff: float = 1.0) -> tuple[np.ndarray, np.ndarray]:
    """Normalized Pareto-smoothed log importance weights for leaving out each observation.

    ``log_lik`` is (draws, observations) with chains stacked in order; returns the
    log weights (draws, observations) and Pareto k per observation, from our PSIS
    kernel (:mod:`auditor.kernels.psis`, checked against arviz-stats in its tests),
    the same one the comparison stage uses (Vehtari, Gelman & Gabry 2017;
    Vehtari et al. 2024).
    """
    from auditor.kernels.psis import psis_log_weights as kernel

    chains = max(n_chains, 1)
    draws = log_lik.shape[0] // chains
    # The same settings as the audit's PSIS-LOO (auditor/loo.py), so the Pareto k
    # here are the comparison stage's.
    log_w, k = kernel(log_lik.reshape(chains, draws, -1), r_eff=r_eff, tail_rounding="floor")
    return np.asarray(log_w).reshape(chains * draws, -1), np.asarray(k).reshape(-1)


def loo_pit(y: np.ndarray, rep: np.ndarray, log_w: np.ndarray, discrete: bool,
            rng: np.random.Generator) -> np.ndarray:
    """LOO-PIT values: Pr(y_rep_i <= y_i | y_-i) under the PSIS weights.

    For discrete outcomes the PIT is randomized between Pr(y_rep < y) and
    Pr(y_rep <= y), which makes it uniform under a correct model (Säilynoja et al.
    2022, section 2; Czado, Gneiting & Held 2009).
    """
    w = np.exp(log_w - np.max(log_w, axis=0, keepdims=True))
    w /= np.sum(w, axis=0, keepdims=True)
    below_eq = np.sum(w * (rep <= y[None, :]), axis=0)
    if not discrete:
        return np.clip(below_eq, 0.0, 1.0)
    below = np.sum(w * (rep < y[None, :]), axis=0)
    u = rng.uniform(size=y.shape)
    return np.clip(below + u * (below_eq - below), 0.0, 1.0)


@dataclass(frozen=True)
class PitTest:
    """The LOO-PIT ECDF against its simultaneous band (``outside``: evaluation points
    where the ECDF leaves the band)."""

    x: np.ndarray
    ecdf: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    outside: int
    largest_gap: float


def pit_band_test(pit: np.ndarray, alpha: float, n_simulations: int = 1000,
                  seed: int = 20261202) -> PitTest:
    """Test PIT values for uniformity with simultaneous ECDF bands at 1 - ``alpha``.

    The bands come from arviz-stats (``arviz_stats.ecdf_utils.ecdf_pit``: the
    simulation method of Säilynoja, Bürkner & Vehtari 2022 for one sample); the
    fixed seed makes the band, and so the verdict, the same on every run.
    """
    from arviz_stats.ecdf_utils import ecdf_pit

    x, ecdf, lower, upper = ecdf_pit(np.asarray(pit, dtype=float), 1 - alpha, n_simulations,
                                     rng=np.random.default_rng(seed))
    above = np.maximum(ecdf - upper, 0)
    below = np.maximum(lower - ecdf, 0)
    gap = np.maximum(above, below)
    return PitTest(np.asarray(x), np.asarray(ecdf), np.asarray(lower), np.asarray(upper),
                   int(np.sum(gap > 0)), float(np.max(gap)) if gap.size else 0.0)
