"""PSIS-LOO kernel (auditor/kernels/psis.py) against exact LOO, arviz-stats and real draws.

Sources of the numbers checked here:
- exact LOO of the conjugate normal model: ../shared/methods.md, "Check values for tests";
- arviz-stats 1.3 (``loo``, ``psislw``, ``ess``), the reference Python implementation of
  Vehtari, Gelman & Gabry (2017) and Vehtari et al. (2024), used as the oracle in tests only;
- real CmdStan output: ../shared/reference-data/cmdstan-outputs/arviz-eight-schools-nc/ and the
  R package ``posterior``'s ESS table in ../shared/reference-data/posterior-reference/.
"""

from __future__ import annotations

import csv
import warnings
from pathlib import Path

import numpy as np
import pytest
from scipy.special import logsumexp
from scipy.stats import norm

from auditor.kernels import psis
from tests.conftest import require_shared

azs = pytest.importorskip("arviz_stats")
azb = pytest.importorskip("arviz_base")
array_stats = pytest.importorskip("arviz_stats.base").array_stats

# Our results against arviz-stats: the same operations in float64, so they differ only by
# rounding (seen: up to 3e-14); 1e-9 leaves room for other BLAS/numpy builds.
TOL = 1e-9


def _arviz_loo(ll: np.ndarray, posterior: dict[str, np.ndarray]):
    """arviz-stats' default ``loo`` on (chains, draws, obs) log-likelihood."""
    tree = azb.from_dict({"posterior": posterior, "log_likelihood": {"y": ll}})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # its high-k warning is expected for heavy tails
        return azs.loo(tree, pointwise=True)


def _assert_same_as_arviz(ours: psis.LooResult, theirs) -> None:
    np.testing.assert_allclose(ours.pareto_k, theirs.pareto_k.values.ravel(), rtol=0, atol=TOL)
    np.testing.assert_allclose(ours.elpd_loo_i, theirs.elpd_i.values.ravel(), rtol=0, atol=TOL)
    assert ours.elpd_loo == pytest.approx(theirs.elpd, abs=TOL)
    assert ours.se == pytest.approx(theirs.se, abs=TOL)
    assert ours.p_loo == pytest.approx(theirs.p, abs=TOL)
    assert ours.k_threshold == pytest.approx(theirs.good_k, abs=1e-15)
    assert ours.warning == theirs.warning


def _ar1(rng: np.random.Generator, shape: tuple[int, int], phi: float) -> np.ndarray:
    """Chains of a stationary AR(1) process with unit marginal variance (so r_eff < 1)."""
    x = np.empty(shape)
    x[:, 0] = rng.normal(size=shape[0])
    eps = rng.normal(size=shape) * np.sqrt(1 - phi**2)
    for t in range(1, shape[1]):
        x[:, t] = phi * x[:, t - 1] + eps[:, t]
    return x


def _regression(seed: int, chains: int, draws: int, n_obs: int, outliers: int = 0,
                phi: float = 0.5):
    """Posterior-like draws of a normal regression and their pointwise log-likelihood.

    ``outliers`` observations far from the fit give heavy-tailed importance ratios (k > 0.7,
    and k > 1 for the farthest).
    """
    rng = np.random.default_rng(seed)
    alpha = 0.2 + 0.1 * _ar1(rng, (chains, draws), phi)
    beta = 1.0 + 0.1 * _ar1(rng, (chains, draws), phi)
    sigma = np.exp(0.1 * _ar1(rng, (chains, draws), phi))
    x = rng.normal(size=n_obs)
    y = 0.2 + x + rng.normal(size=n_obs)
    y[:outliers] += np.linspace(4, 12, outliers)
    x[:outliers] += np.linspace(1, 4, outliers)
    mean = alpha[..., None] + beta[..., None] * x
    ll = norm.logpdf(y, loc=mean, scale=sigma[..., None])
    return ll, {"alpha": alpha, "beta": beta, "sigma": sigma}


# ---------------------------------------------------------------------------------------------
# 1. Exact LOO of the conjugate normal model


Y = np.array([-1.2, 0.4, 0.9, 1.5, 2.3])
# ../shared/methods.md, "Check values for tests": exact LOO for y_i ~ normal(mu, 1),
# mu ~ normal(0, 1); full-data posterior m = 0.65, v = 1/6.
EXACT_ELPD_I = np.array([-3.063599, -1.047599, -1.047599, -1.443599, -2.643599])
EXACT_ELPD, EXACT_SE, EXACT_P_LOO = -9.245997, 2.108161, 1.269141


@pytest.fixture(scope="module")
def conjugate():
    # Exact posterior draws, 4 x 1000, numpy seed 1 (as in methods.md).
    mu = np.random.default_rng(1).normal(0.65, np.sqrt(1 / 6), size=(4, 1000))
    return mu, norm.logpdf(Y, loc=mu[..., None], scale=1.0)


def test_conjugate_normal_within_monte_carlo_error_of_exact_loo(conjugate):
    _, ll = conjugate
    res = psis.psis_loo(ll)  # defaults: paper's tail length, r_eff per observation
    lw, k = psis.psis_log_weights(ll)
    np.testing.assert_array_equal(k, res.pareto_k)
    # Monte Carlo error of each elpd_i: delta-method standard error of the self-normalized
    # importance sampling estimate of p(y_i | y_-i), sum_s w_s^2 (p_s - p_hat)^2 / p_hat^2
    # (Vehtari et al. 2024, eq. 6 without the Pareto tail correction), and of each lppd_i,
    # sd_s(p_s) / (sqrt(S) mean_s p_s). 4 standard errors: a false failure has probability
    # < 1e-4 per value under normal errors.
    w = np.exp(lw).reshape(-1, Y.size)
    p = np.exp(ll).reshape(-1, Y.size)
    p_hat = (w * p).sum(axis=0)
    mcse_elpd = np.sqrt((w**2 * (p - p_hat) ** 2).sum(axis=0)) / p_hat
    mcse_lppd = p.std(axis=0) / np.sqrt(p.shape[0]) / p.mean(axis=0)
    assert np.all(np.abs(res.elpd_loo_i - EXACT_ELPD_I) < 4 * mcse_elpd)
    # The errors of the elpd_i share the same draws: bound the total by the sum of the bounds.
    assert abs(res.elpd_loo - EXACT_ELPD) < 4 * mcse_elpd.sum()
    # |sd(a) - sd(b)| <= sd(a - b): the SE moves by at most sqrt(N/(N-1)) ||elpd_i errors||.
    n = Y.size
    assert abs(res.se - EXACT_SE) < np.sqrt(n / (n - 1)) * 4 * np.sqrt((mcse_elpd**2).sum())
    assert abs(res.p_loo - EXACT_P_LOO) < 4 * (mcse_elpd.sum() + mcse_lppd.sum())
    # Exact draws are independent: r_eff near 1, all k-hat good.
    assert np.all(np.abs(res.r_eff - 1) < 0.1)
    assert np.all(res.pareto_k < res.k_threshold)


def test_conjugate_normal_reproduces_the_arviz_stats_value_in_methods_md(conjugate):
    mu, ll = conjugate
    # methods.md: arviz-stats 1.3.3 on these draws gave elpd_loo -9.2663 and max Pareto k
    # 0.49 (rounded); arviz-stats' rules are tail_rounding="floor" and r_eff from the posterior.
    res = psis.psis_loo(ll, r_eff=psis.posterior_r_eff({"mu": mu}), tail_rounding="floor")
    assert round(res.elpd_loo, 4) == -9.2663
    assert round(float(res.pareto_k.max()), 2) == 0.49


# ---------------------------------------------------------------------------------------------
# 2. Same numbers as arviz-stats


CASES = {
    # name: (chains, draws, observations, outliers)
    "four-chains": (4, 250, 40, 0),
    "heavy-tails": (4, 300, 30, 6),
    "one-chain": (1, 500, 25, 3),
    "tiny-S": (1, 30, 12, 2),  # 6 tail draws
    # S = 25: the smallest S arviz-stats accepts (5 tail draws). With 5 the first quartile is
    # the minimum, so both libraries give k = nan (fit refused) and raw importance weights.
    "S-25": (1, 25, 12, 2),
    "two-short-chains": (2, 15, 10, 2),
}


@pytest.mark.parametrize("name", sorted(CASES))
def test_loo_equals_arviz_stats_on_random_arrays(name):
    chains, draws, n_obs, outliers = CASES[name]
    ll, posterior = _regression(sum(map(ord, name)), chains, draws, n_obs, outliers)
    theirs = _arviz_loo(ll, posterior)
    ours = psis.psis_loo(ll, r_eff=psis.posterior_r_eff(posterior), tail_rounding="floor")
    _assert_same_as_arviz(ours, theirs)
    if name == "heavy-tails":
        # The case covers both regimes named in the brief: k > 0.7 and k > 1.
        assert np.any((ours.pareto_k > 0.7) & (ours.pareto_k <= 1))
        assert np.any(ours.pareto_k > 1)
    if name == "S-25":
        assert np.all(np.isnan(ours.pareto_k))
    else:
        assert np.all(np.isfinite(ours.pareto_k))


def test_float32_input_equals_arviz_on_the_widened_array():
    ll, posterior = _regression(7, 4, 200, 30, outliers=3)
    ll32 = ll.astype(np.float32)
    theirs = _arviz_loo(ll32.astype(np.float64), posterior)
    ours = psis.psis_loo(ll32, r_eff=psis.posterior_r_eff(posterior), tail_rounding="floor")
    _assert_same_as_arviz(ours, theirs)


def test_r_eff_per_observation_equals_arviz_ess_of_exp_log_lik():
    ll, _ = _regression(11, 4, 200, 15, outliers=2, phi=0.8)
    ours = psis.psis_loo(ll, tail_rounding="floor")  # r_eff="log_lik"
    # The loo package's relative_eff(exp(log_lik)) is split-chain ess_basic / S, which is
    # arviz-stats' ess(method="mean").
    ess = array_stats.ess(np.moveaxis(np.exp(ll), 2, 0), method="mean")
    np.testing.assert_allclose(ours.r_eff, ess / 800, rtol=1e-10)
    np.testing.assert_allclose(psis.relative_eff(ll), ours.r_eff, rtol=1e-12)
    assert np.all(ours.r_eff < 0.9)  # autocorrelated chains: the per-observation path matters
    for i in range(ll.shape[2]):
        elpd_i, k_i, p_i = array_stats.loo(ll[..., i], r_eff=ours.r_eff[i])
        assert ours.elpd_loo_i[i] == pytest.approx(elpd_i, abs=TOL)
        assert ours.pareto_k[i] == pytest.approx(k_i, abs=TOL)
        assert ours.p_loo_i[i] == pytest.approx(p_i, abs=TOL)


def test_log_weights_equal_arviz_psislw():
    ll, _ = _regression(5, 4, 250, 20, outliers=4)
    lw, k = psis.psis_log_weights(ll, r_eff=0.7, tail_rounding="floor")
    lw_ref, k_ref = array_stats.psislw(np.moveaxis(ll, 2, 0).reshape(20, -1), r_eff=0.7)
    np.testing.assert_allclose(lw.reshape(-1, 20).T, lw_ref, rtol=0, atol=TOL)
    np.testing.assert_allclose(k, k_ref, rtol=0, atol=TOL)
    # Normalized over the draws of each observation.
    np.testing.assert_allclose(logsumexp(lw, axis=(0, 1)), 0, atol=1e-12)


def test_too_few_tail_draws_fall_back_to_raw_importance_sampling():
    # S = 10: fewer than 5 tail draws, which arviz-stats refuses; like the loo package
    # (R/psis.R, enough_tail_samples) we do not smooth and report k = inf. The estimate is then
    # plain importance sampling LOO, the harmonic mean of the likelihood (Vehtari, Gelman &
    # Gabry 2017, eq. 8 with raw ratios).
    ll, _ = _regression(3, 2, 5, 6)
    res = psis.psis_loo(ll, r_eff=1.0)
    assert np.all(np.isinf(res.pareto_k))
    want = -(logsumexp(-ll, axis=(0, 1)) - np.log(10))
    np.testing.assert_allclose(res.elpd_loo_i, want, rtol=1e-12)


def test_waic_equals_reference():
    ll, _ = _regression(9, 4, 200, 25, outliers=2)
    ours = psis.waic(ll)
    if hasattr(azs, "waic"):  # not in arviz-stats 1.3
        tree = azb.from_dict({"posterior": {"a": ll[..., 0]}, "log_likelihood": {"y": ll}})
        theirs = azs.waic(tree, pointwise=True)
        assert ours.elpd_waic == pytest.approx(theirs.elpd, abs=TOL)
        assert ours.se == pytest.approx(theirs.se, abs=TOL)
        assert ours.p_waic == pytest.approx(theirs.p, abs=TOL)
        return
    # Textbook formula, Vehtari, Gelman & Gabry (2017) eqs. 11-13: lppd_i = log mean_s
    # p(y_i | theta_s), p_waic_i = sample variance (ddof 1) of log p(y_i | theta_s) over s.
    s = ll.shape[0] * ll.shape[1]
    lppd_i = logsumexp(ll, axis=(0, 1)) - np.log(s)
    p_i = ll.reshape(s, -1).var(axis=0, ddof=1)
    elpd_i = lppd_i - p_i
    np.testing.assert_allclose(ours.elpd_waic_i, elpd_i, rtol=1e-12)
    np.testing.assert_allclose(ours.p_waic_i, p_i, rtol=1e-12)
    assert ours.elpd_waic == pytest.approx(elpd_i.sum(), rel=1e-12)
    assert ours.p_waic == pytest.approx(p_i.sum(), rel=1e-12)
    assert ours.se == pytest.approx(np.sqrt(elpd_i.size * elpd_i.var(ddof=1)), rel=1e-12)


# ---------------------------------------------------------------------------------------------
# Real draws


def _read_cmdstan_csv(path: Path) -> tuple[list[str], np.ndarray]:
    """CmdStan CSV: '#' comment lines, one line of column names, numeric rows."""
    lines = [ln for ln in path.read_text().splitlines() if ln and not ln.startswith("#")]
    names = lines[0].split(",")
    return names, np.array([[float(v) for v in ln.split(",")] for ln in lines[1:]])


def _columns(names: list[str], rows: np.ndarray, prefix: str) -> np.ndarray:
    cols = [i for i, n in enumerate(names) if n == prefix or n.startswith(prefix + ".")]
    return rows[:, cols]


def test_eight_schools_log_lik_equals_arviz_stats():
    # Real CmdStan output (reference-data/README.md): 4 chains x 100 draws of the
    # non-centered eight schools model, columns log_lik.1 .. log_lik.8.
    folder = require_shared() / "cmdstan-outputs" / "arviz-eight-schools-nc"
    chains = [_read_cmdstan_csv(folder / f"eight_schools_output{c}.csv") for c in range(1, 5)]
    ll = np.stack([_columns(n, r, "log_lik") for n, r in chains])
    assert ll.shape == (4, 100, 8)
    posterior = {v: np.stack([_columns(n, r, v) for n, r in chains]).squeeze(-1)
                 if v in ("mu", "tau") else np.stack([_columns(n, r, v) for n, r in chains])
                 for v in ("mu", "tau", "theta_tilde", "theta")}
    theirs = _arviz_loo(ll, posterior)
    ours = psis.psis_loo(ll, r_eff=psis.posterior_r_eff(posterior), tail_rounding="floor")
    _assert_same_as_arviz(ours, theirs)


def test_ess_mean_equals_posterior_package_on_blocker_chains():
    # R package `posterior`'s ess_mean (reference-data/posterior-reference/README.md): the ESS
    # that r_eff is made of. Tolerance 1e-6 relative, as in test_diagnostics_reference.py.
    folder = require_shared() / "posterior-reference"
    chains = [_read_cmdstan_csv(folder / f"blocker.{c}.csv") for c in (1, 2)]
    names = chains[0][0]
    draws = np.stack([rows for _, rows in chains])  # (2, 1000, columns)
    with (folder / "reference_posterior.csv").open() as fh:
        reference = {row[""]: float(row["ess_mean"]) for row in csv.DictReader(fh)}
    ours = psis.ess_mean(draws)
    compared = 0
    for j, name in enumerate(names):
        if name in reference:
            assert ours[j] == pytest.approx(reference[name], rel=1e-6), name
            compared += 1
    assert compared == len(reference)


# ---------------------------------------------------------------------------------------------
# 3. Chunks, dtypes and sources


class _SliceOnly:
    """An array-like that only offers shape, dtype and slicing (like an HDF5 dataset)."""

    def __init__(self, a: np.ndarray) -> None:
        self._a = a
        self.shape = a.shape
        self.dtype = a.dtype

    def __getitem__(self, key):
        return self._a[key].copy()


def _fields(res: psis.LooResult) -> list[np.ndarray]:
    return [res.elpd_loo_i, res.p_loo_i, res.lppd_i, res.pareto_k, res.r_eff,
            np.array([res.elpd_loo, res.se, res.p_loo, res.lppd])]


@pytest.mark.parametrize("r_eff", [0.8, "log_lik"])
def test_results_do_not_depend_on_chunk_size_threads_or_source(r_eff, tmp_path):
    ll, _ = _regression(13, 4, 150, 60, outliers=5, phi=0.7)
    # one observation per chunk, one thread
    base = psis.psis_loo(ll, r_eff=r_eff, chunk_bytes=1, workers=1)
    path = tmp_path / "ll.npy"
    np.save(path, ll)
    others = [psis.psis_loo(ll, r_eff=r_eff, chunk_bytes=b, workers=w)
              for b in (50_000, 400_000, 2**30) for w in (1, 3)]
    others.append(psis.psis_loo(np.load(path, mmap_mode="r"), r_eff=r_eff, chunk_bytes=300_000))
    others.append(psis.psis_loo(_SliceOnly(ll), r_eff=r_eff, chunk_bytes=300_000))
    for other in others:
        for a, b in zip(_fields(base), _fields(other), strict=True):
            if isinstance(r_eff, float):
                # One tail length for all: row by row the same operations, bit for bit.
                np.testing.assert_array_equal(a, b)
            else:
                # Tail lengths vary by observation; rows of a chunk are padded to its longest
                # tail, which changes only the order of float64 summation.
                np.testing.assert_allclose(a, b, rtol=1e-12, atol=1e-12)
    waics = [psis.waic(ll, chunk_bytes=b, workers=w) for b in (1, 100_000, 2**30) for w in (1, 2)]
    for w in waics[1:]:
        np.testing.assert_array_equal(w.elpd_waic_i, waics[0].elpd_waic_i)


def test_streamed_log_weights_equal_whole_and_float32_equals_float64():
    ll, _ = _regression(17, 2, 200, 33, outliers=3)
    whole, k = psis.psis_log_weights(ll)
    seen = 0
    for sl, lw, k_chunk in psis.iter_psis_log_weights(ll, chunk_bytes=60_000):
        assert lw.shape == (2, 200, sl.stop - sl.start)
        np.testing.assert_allclose(lw, whole[..., sl], rtol=0, atol=1e-12)
        np.testing.assert_allclose(k_chunk, k[sl], rtol=0, atol=1e-12)
        seen += sl.stop - sl.start
    assert seen == 33
    # float32 input: exact steps (copy, max, tail selection) stay in float32 and every sum is in
    # float64, so the result is that of float64 arithmetic on the widened array.
    ll32 = ll.astype(np.float32)
    for a, b in zip(_fields(psis.psis_loo(ll32)), _fields(psis.psis_loo(ll32.astype(np.float64))),
                    strict=True):
        np.testing.assert_allclose(a, b, rtol=1e-12, atol=1e-12)
