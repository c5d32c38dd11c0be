"""Power-scaling sensitivity kernel (auditor/kernels/psense.py) against arviz-stats.

Sources of the numbers checked here:
- arviz-stats 1.3 (``psense``, ``psense_summary``, ``power_scale_lw``), the reference Python
  implementation of Kallioinen, Paananen, Bürkner & Vehtari (2024), "Detecting and diagnosing
  prior and likelihood sensitivity with power-scaling", Statistics and Computing 34:57; used as
  the oracle in tests only;
- the example project's PyMC fits (examples/demo/fits/harvest_*.nc, wax_vague.nc: real nutpie
  draws with ``log_prior`` and ``log_likelihood`` groups, see examples/README.md);
- the conjugate normal model (posterior of a normal mean with known sd; from memory, any
  textbook, e.g. Gelman et al., Bayesian Data Analysis, 3rd ed., section 2.5), whose exact
  posterior draws stand in for MCMC output.
"""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pytest
from scipy.stats import norm

from auditor.kernels import psense

azs = pytest.importorskip("arviz_stats")
azb = pytest.importorskip("arviz_base")
xr = pytest.importorskip("xarray")
array_stats = pytest.importorskip("arviz_stats.base").array_stats

FITS = Path(__file__).resolve().parent.parent / "examples" / "demo" / "fits"

# Our values against arviz-stats on float64 draws: the same operations, so they differ only by
# rounding (seen: up to 6e-13); 1e-9 leaves room for other numpy builds.
TOL = 1e-9
# On the demo's float32 draws arviz-stats computes the log weights in float32 and we in
# float64: differences seen up to 2e-7; 2e-6 is a tenth of the 3-decimal rounding of
# psense_summary.
TOL_FLOAT32 = 2e-6


def _ar1(rng: np.random.Generator, shape: tuple[int, ...], phi: float) -> np.ndarray:
    """Chains (axis 1 is the draw) of a stationary AR(1) with unit variance: r_eff < 1."""
    x = np.empty(shape)
    x[:, 0] = rng.normal(size=shape[:1] + shape[2:])
    eps = rng.normal(size=shape) * np.sqrt(1 - phi**2)
    for t in range(1, shape[1]):
        x[:, t] = phi * x[:, t - 1] + eps[:, t]
    return x


def _hierarchical(seed: int, chains: int, draws: int) -> dict[str, dict[str, np.ndarray]]:
    """Draws that look like a hierarchical normal model's, with their log densities."""
    rng = np.random.default_rng(seed)
    j, n = 6, 3
    mu = 1.0 + 0.4 * _ar1(rng, (chains, draws), 0.6)
    tau = np.exp(-0.7 + 0.3 * _ar1(rng, (chains, draws), 0.8))
    theta = mu[..., None] + tau[..., None] * _ar1(rng, (chains, draws, j), 0.3)
    y = rng.normal(1.0, 1.0, (j, n))
    log_prior = {
        "mu": norm.logpdf(mu, 0, 2),
        "tau": norm.logpdf(tau, 0, 1) + np.log(2),
        "theta": norm.logpdf(theta, mu[..., None], tau[..., None]),
    }
    log_lik = {"y": norm.logpdf(y[None, None], theta[..., None], 1.0).reshape(chains, draws, -1)}
    return {"posterior": {"mu": mu, "tau": tau, "theta": theta}, "log_prior": log_prior,
            "log_likelihood": log_lik}


def _stack(group: dict[str, np.ndarray], chains: int, draws: int) -> np.ndarray:
    """Variables as (chains, draws, quantities), in the order arviz-stats returns them."""
    return np.concatenate([v.reshape(chains, draws, -1) for v in group.values()], axis=2)


def _total(group: dict[str, np.ndarray] | xr.Dataset) -> np.ndarray:
    """A component summed per draw over all its variables and elements (as arviz-stats)."""
    values = [np.asarray(group[k], dtype=np.float64) for k in group]
    return sum(v.reshape(v.shape[0], v.shape[1], -1).sum(axis=2) for v in values)


def _arviz_values(result: xr.Dataset, names: list[str]) -> np.ndarray:
    return np.concatenate([np.atleast_1d(result[n].values).ravel() for n in names])


@pytest.mark.parametrize(("seed", "chains", "draws"), [(1, 4, 500), (2, 3, 333), (3, 1, 800)])
def test_sensitivity_equals_arviz_on_hierarchical_draws(seed: int, chains: int,
                                                        draws: int) -> None:
    # Several chains, an odd total (999: the split halves drop a draw), one chain.
    groups = _hierarchical(seed, chains, draws)
    tree = azb.from_dict(groups)
    x = _stack(groups["posterior"], chains, draws)
    names = list(groups["posterior"])
    for group, key in (("prior", "log_prior"), ("likelihood", "log_likelihood")):
        theirs = _arviz_values(azs.psense(tree, group=group), names)  # reference
        ours = psense.power_scaling_sensitivity(x, _total(groups[key]))
        np.testing.assert_allclose(ours, theirs, rtol=0, atol=TOL)
        assert np.all(ours > 0)


def test_log_weights_equal_arviz_power_scale_lw() -> None:
    groups = _hierarchical(4, 4, 400)
    comp = _total(groups["log_prior"])
    for alpha in (0.99, 1.01, 0.5):
        # Reference: arviz-stats' array-level power_scale_lw over (chain, draw).
        theirs = array_stats.power_scale_lw(comp, alpha=alpha, axis=[0, 1])
        ours, k = psense.power_scale_log_weights(comp, alpha)
        np.testing.assert_allclose(ours, theirs, rtol=0, atol=TOL)
        assert np.isfinite(k)


@pytest.mark.parametrize("name", ["harvest_informed", "harvest_vague", "wax_vague"])
def test_summary_equals_arviz_on_demo_fits(name: str) -> None:
    tree = xr.open_datatree(FITS / f"{name}.nc")
    post = tree["posterior"].ds
    names = [str(v) for v in post.data_vars]
    x = np.stack([post[v].values for v in names], axis=-1)
    ours = psense.psense_summary(x, _total(tree["log_prior"].ds),
                                 _total(tree["log_likelihood"].ds))
    for group, values in (("prior", ours.prior), ("likelihood", ours.likelihood)):
        theirs = _arviz_values(azs.psense(tree, group=group), names)  # reference
        np.testing.assert_allclose(values, theirs, rtol=0, atol=TOL_FLOAT32)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        table = azs.psense_summary(tree)  # reference diagnosis
    expected = [table.loc[n, "diagnosis"].replace("potential ", "").replace("✓", "")
                for n in names]
    assert ours.diagnosis == expected
    if name == "harvest_informed":
        # The demo's informed model is built to be unremarkable (examples/README.md).
        assert ours.diagnosis == ["", "", ""]


def _conjugate(prior_mu: float, prior_sd: float, ybar: float, n: int, seed: int
               ) -> psense.Sensitivity:
    """Exact posterior draws of a normal mean (sd 1 known) under a normal prior."""
    rng = np.random.default_rng(seed)
    y = rng.normal(size=n)
    y = y - y.mean() + ybar
    prec = 1 / prior_sd**2 + n
    mean = (prior_mu / prior_sd**2 + y.sum()) / prec
    theta = rng.normal(mean, prec**-0.5, (4, 1000))
    log_prior = norm.logpdf(theta, prior_mu, prior_sd)
    log_lik = norm.logpdf(y[None, None, :], theta[..., None], 1.0).sum(axis=-1)
    return psense.psense_summary(theta, log_prior, log_lik)


@pytest.mark.parametrize("seed", range(5))
def test_prior_in_conflict_with_the_data_is_diagnosed(seed: int) -> None:
    # Prior N(0, 0.5) against 20 observations with mean 3 (6 prior sd away): both components
    # pull the posterior, sensitivities about 0.3 each (seen over these seeds), far above the
    # paper's 0.05 (Kallioinen et al. 2024, section 4).
    s = _conjugate(0.0, 0.5, 3.0, 20, seed)
    assert s.diagnosis == [psense.PRIOR_DATA_CONFLICT]
    assert s.prior[0] > 0.15 and s.likelihood[0] > 0.15


@pytest.mark.parametrize("seed", range(5))
def test_weak_prior_and_informative_data_are_not_flagged(seed: int) -> None:
    # Prior N(0, 10), 20 observations with mean 1: the likelihood dominates (its sensitivity
    # about 0.08), the prior does not matter (below 0.005); values seen over these seeds.
    s = _conjugate(0.0, 10.0, 1.0, 20, seed)
    assert s.diagnosis == [""]
    assert s.prior[0] < 0.01 < 0.05 < s.likelihood[0]


def test_strong_prior_with_one_observation_is_prior_dominated() -> None:
    # Prior N(0, 0.1) and one observation (sd 1): the prior is 100 times more precise.
    s = _conjugate(0.0, 0.1, 0.0, 1, 0)
    assert s.diagnosis == [psense.STRONG_PRIOR]


def test_diagnose_uses_psense_summary_comparisons() -> None:
    # arviz-stats' psense_summary: conflict when both >= threshold, strong prior when
    # prior > threshold > likelihood.
    got = psense.diagnose([0.05, 0.06, 0.06, 0.01, np.nan], [0.05, 0.01, 0.05, 0.2, 0.2])
    assert got == [psense.PRIOR_DATA_CONFLICT, psense.STRONG_PRIOR, psense.PRIOR_DATA_CONFLICT,
                   "", ""]


def test_constant_component_gives_zero_sensitivity() -> None:
    # A flat prior (log density constant): power-scaling changes nothing (Kallioinen et al.
    # 2024, eq. 5: the weights are constant). arviz-stats raises here instead.
    rng = np.random.default_rng(0)
    x = rng.normal(size=(2, 300, 3))
    lw, k = psense.power_scale_log_weights(np.zeros((2, 300)), 0.99)
    np.testing.assert_allclose(np.exp(lw), 1 / 600, rtol=1e-12)
    assert k == 0.0
    np.testing.assert_allclose(
        psense.power_scaling_sensitivity(x, np.zeros((2, 300))), 0.0, atol=1e-12)


def test_cjs_distance_of_equal_weights_is_zero_and_constant_quantity_nan() -> None:
    # The distance of a distribution to itself is 0 (from memory: a property of any
    # divergence); a constant quantity has no spread to compare (nan, documented).
    rng = np.random.default_rng(1)
    x = np.concatenate([rng.normal(size=(2, 200, 2)), np.ones((2, 200, 1))], axis=2)
    d = psense.cjs_distance(x, np.ones((2, 200)))
    np.testing.assert_array_equal(d[:2], 0.0)
    assert np.isnan(d[2])


def test_blocks_of_quantities_do_not_change_the_values(monkeypatch: pytest.MonkeyPatch) -> None:
    # Common practice: a chunked computation equals the one-block computation (up to the
    # order of floating-point sums, which numpy may change with the block's shape).
    groups = _hierarchical(5, 2, 300)
    x = _stack(groups["posterior"], 2, 300)
    comp = _total(groups["log_likelihood"])
    whole = psense.power_scaling_sensitivity(x, comp)
    monkeypatch.setattr(psense, "_BLOCK_BYTES", 1)  # one quantity per block
    np.testing.assert_allclose(psense.power_scaling_sensitivity(x, comp), whole, rtol=0,
                               atol=1e-12)


def test_bad_component_is_refused() -> None:
    with pytest.raises(ValueError, match="non-finite"):
        psense.power_scale_log_weights(np.array([[0.0, np.nan, 1.0]]), 0.99)
    with pytest.raises(ValueError, match="shape"):
        psense.power_scale_log_weights(np.zeros((2, 3, 4)), 0.99)
