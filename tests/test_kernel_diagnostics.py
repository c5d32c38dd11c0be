"""The fused diagnostics kernel (auditor.kernels) against published values and arviz-stats.

Sources of the numbers checked:
- ../shared/reference-data/posterior-reference/: two CmdStan 1.3 chains of the BUGS "blocker"
  model and, per parameter, 17 measures computed by the R package ``posterior`` (after 1.6.0),
  the reference implementation of Vehtari, Gelman, Simpson, Carpenter & Bürkner (2021),
  Bayesian Analysis 16(2). Tolerance 1e-6 relative.
- /work/shared/methods.md, "AR(1) chain with coefficient phi: ESS = N (1 - phi) / (1 + phi)
  (standard result ...). 4 x 1000 draws: phi = 0.3 gives 2153.8; phi = 0.9 gives 210.5."
- arviz-stats (the reference Python implementation; used here as an oracle only), same
  definitions, compared to floating-point tolerance on random, tied, constant, non-finite and
  tiny inputs.
No test here measures speed: benchmarks/bench_diagnostics.py does, as ratios within one run.
"""

from __future__ import annotations

import csv
import tracemalloc
import warnings
from pathlib import Path

import numpy as np
import pytest

from auditor.kernels.diagnostics import (
    Workspace,
    convergence,
    diagnose_block,
    iter_blocks,
    measure_names,
    summarize,
)
from tests.conftest import require_shared

QUANTILES = (0.01, 0.1, 0.3)

# Column of the reference table -> name of our measure.
REFERENCE_COLUMNS = {
    "rhat_rank": "rhat_rank", "rhat_raw": "rhat_raw",
    "ess_bulk": "ess_bulk", "ess_tail": "ess_tail", "ess_mean": "ess_mean",
    "ess_sd": "ess_sd", "ess_median": "ess_median", "ess_raw": "ess_raw",
    "ess_quantile01": "ess_quantile_0.01", "ess_quantile10": "ess_quantile_0.1",
    "ess_quantile30": "ess_quantile_0.3",
    "mcse_mean": "mcse_mean", "mcse_sd": "mcse_sd", "mcse_median": "mcse_median",
    "mcse_quantile01": "mcse_quantile_0.01", "mcse_quantile10": "mcse_quantile_0.1",
    "mcse_quantile30": "mcse_quantile_0.3",
}  # fmt: skip


def read_cmdstan_csv(path: Path) -> tuple[list[str], np.ndarray]:
    """Parameter names and draws of a CmdStan CSV (``#`` comments, a header, numeric rows)."""
    lines = [ln for ln in path.read_text().splitlines() if ln and not ln.startswith("#")]
    names = lines[0].split(",")
    values = np.array([[float(v) for v in ln.split(",")] for ln in lines[1:]])
    keep = [i for i, name in enumerate(names) if not name.endswith("__")]
    return [names[i] for i in keep], values[:, keep]


@pytest.fixture(scope="module")
def blocker() -> tuple[list[str], np.ndarray, dict[str, dict[str, str]]]:
    folder = require_shared() / "posterior-reference"
    names1, chain1 = read_cmdstan_csv(folder / "blocker.1.csv")
    names2, chain2 = read_cmdstan_csv(folder / "blocker.2.csv")
    assert names1 == names2
    with (folder / "reference_posterior.csv").open() as fh:
        reference = {row[""]: row for row in csv.DictReader(fh)}
    return names1, np.stack([chain1, chain2]), reference


@pytest.mark.parametrize("column", sorted(REFERENCE_COLUMNS))
def test_every_parameter_matches_posterior_package(blocker, column):
    # Source: reference_posterior.csv (R package posterior), 1e-6 relative.
    names, draws, reference = blocker
    ours = summarize(draws, quantiles=QUANTILES)[REFERENCE_COLUMNS[column]]
    assert set(reference) <= set(names)  # every reference row is a parameter of the CSVs
    for k, name in enumerate(names):
        if name in reference:
            assert ours[k] == pytest.approx(float(reference[name][column]), rel=1e-6), name


def test_blocker_float32_input_stays_close(blocker):
    # Source: reference_posterior.csv; float32 storage rounds the draws (7 digits), so only
    # loose agreement is expected, but the computation must run in float64 without error.
    names, draws, reference = blocker
    ours = convergence(draws.astype(np.float32))
    for k, name in enumerate(names):
        assert ours["ess_bulk"][k] == pytest.approx(float(reference[name]["ess_bulk"]), rel=0.05)


def ar1(phi: float, chains: int, draws: int, reps: int, seed: int) -> np.ndarray:
    """``reps`` independent quantities of stationary AR(1) chains, shape (chains, draws, reps)."""
    rng = np.random.default_rng(seed)
    x = np.empty((chains, draws, reps))
    x[:, 0] = rng.standard_normal((chains, reps)) / np.sqrt(1 - phi**2)
    for t in range(1, draws):
        x[:, t] = phi * x[:, t - 1] + rng.standard_normal((chains, reps))
    return x


@pytest.mark.parametrize("phi,expected", [(0.3, 2153.8), (0.9, 210.5)])
def test_ar1_ess_matches_the_analytic_value(phi, expected):
    # Source: methods.md, ESS = N (1 - phi) / (1 + phi) for 4 x 1000 draws; mean of 20
    # independent repetitions (fixed seed) to stay well within 10%.
    result = summarize(ar1(phi, 4, 1000, 20, seed=7))
    assert 4000 * (1 - phi) / (1 + phi) == pytest.approx(expected, abs=0.05)
    for measure in ("ess_mean", "ess_bulk", "ess_raw"):
        assert result[measure].mean() == pytest.approx(expected, rel=0.10), measure


# --- arviz-stats as the oracle -----------------------------------------------------------------


def arviz_measures(x: np.ndarray, quantiles=QUANTILES) -> dict[str, np.ndarray]:
    """Every measure by arviz-stats' array interface (tail-ESS probabilities given explicitly:
    its default follows the ci_prob setting instead of 0.05/0.95)."""
    from arviz_stats.base import array_stats as az

    kw = {"chain_axis": 0, "draw_axis": 1}
    with warnings.catch_warnings(), np.errstate(all="ignore"):
        warnings.simplefilter("ignore")
        out = {
            "rhat_rank": az.rhat(x, method="rank", **kw),
            "rhat_bulk": az.rhat(x, method="z_scale", **kw),
            "rhat_folded": az.rhat(x, method="folded", **kw),
            "rhat_raw": az.rhat(x, method="identity", **kw),
            "rhat_split": az.rhat(x, method="split", **kw),
            "ess_bulk": az.ess(x, method="bulk", **kw),
            "ess_tail": az.ess(x, method="tail", prob=(0.05, 0.95), **kw),
            "ess_mean": az.ess(x, method="mean", **kw),
            "ess_sd": az.ess(x, method="sd", **kw),
            "ess_median": az.ess(x, method="median", **kw),
            "ess_raw": az.ess(x, method="identity", **kw),
            "mcse_mean": az.mcse(x, method="mean", **kw),
            "mcse_sd": az.mcse(x, method="sd", **kw),
            "mcse_median": az.mcse(x, method="median", **kw),
        }
        for p in quantiles:
            out[f"ess_quantile_{p:g}"] = az.ess(x, method="quantile", prob=p, **kw)
            out[f"mcse_quantile_{p:g}"] = az.mcse(x, method="quantile", prob=p, **kw)
    return {k: np.asarray(v, dtype=float) for k, v in out.items()}


def assert_same(ours: dict[str, np.ndarray], theirs: dict[str, np.ndarray], rtol=1e-9) -> None:
    assert set(ours) == set(theirs)
    for name, want in theirs.items():
        # Same NaN (undefined) places, same infinities, and the rest to rounding.
        np.testing.assert_allclose(ours[name], want, rtol=rtol, atol=0, equal_nan=True,
                                   err_msg=name)  # fmt: skip


def _few_ties(rng: np.random.Generator) -> np.ndarray:
    """Continuous draws with a few runs of equal values (the sparse tie path)."""
    x = rng.normal(size=(4, 80, 4))
    x[0, :5, 0] = x[1, 7, 0]  # a run of six equal draws
    x[2, 10:12, 1] = x[3, 3, 1]  # and of three
    x[:, 0, 2] = 0.0  # one run per chain
    return x


def _cases() -> dict[str, np.ndarray]:
    rng = np.random.default_rng(2024)
    cases = {
        "normal 4x100x12": rng.normal(size=(4, 100, 12)),
        "odd draws 3x101x6": rng.normal(size=(3, 101, 6)) * 5 + 2,
        "many chains 8x20x5": rng.standard_t(3, size=(8, 20, 5)),
        "offset 1e6 scale 1e-3": 1e6 + 1e-3 * rng.normal(size=(4, 50, 4)),
        "ties (integers)": rng.integers(0, 4, size=(4, 50, 8)).astype(float),
        "ties (rounded)": np.round(rng.normal(size=(2, 60, 5)), 1),
        "few ties": _few_ties(rng),
        "one chain": rng.normal(size=(1, 50, 5)),
        "2 draws per chain": rng.normal(size=(4, 2, 5)),
        "4 draws per chain": rng.normal(size=(4, 4, 5)),
        "5 draws per chain": rng.normal(size=(2, 5, 5)),
    }
    # Strong autocorrelation: Geyer's truncation beyond the kernel's first FFT pass.
    cases["AR(0.97) 4x400x3"] = ar1(0.97, 4, 400, 3, seed=3)
    # Chains that disagree: R-hat far above 1, one chain constant at a different level.
    split = rng.normal(size=(4, 60, 3))
    split[0] += 10
    split[1, :, 1] = 5.0
    cases["disagreeing chains"] = split
    const = rng.normal(size=(2, 20, 6))
    const[..., 0] = 3.0  # constant
    const[..., 1] = 1 + 1e-17 * rng.normal(size=(2, 20))  # rounds to constant
    const[..., 2] = 1e-16 * rng.normal(size=(2, 20))  # range below float resolution
    const[..., 3] = np.where(rng.random((2, 20)) < 0.5, 0.0, 1e-300)  # tiny two-valued
    const[0, :, 4] = 1.0  # each chain constant, at different levels
    const[1, :, 4] = 2.0
    cases["constant and nearly constant"] = const
    bad = rng.normal(size=(4, 30, 9))
    bad[0, 0, 0] = np.nan  # one NaN
    bad[:, :, 1] = np.nan  # all NaN
    bad[1, 3, 2] = np.inf  # one infinite draw
    bad[:, :16, 3] = np.inf  # many: infinite median
    bad[0, :, 4] = -np.inf  # a whole chain
    bad[2, 5, 5], bad[3, 7, 5] = -np.inf, np.inf  # both signs
    bad[:, :, 6] = np.inf  # all infinite
    bad[0, 1, 7], bad[2, 2, 7] = np.nan, np.inf
    bad[3, 4, 8] = -np.nan  # sign bit set: the keyed sort puts it first, not last
    cases["NaN and infinite draws"] = bad
    return cases


CASES = _cases()


@pytest.mark.parametrize("case", sorted(CASES))
def test_matches_arviz_stats(case):
    # Source: arviz-stats (oracle), to floating-point tolerance, NaN where it gives NaN.
    x = CASES[case]
    assert_same(summarize(x, quantiles=QUANTILES), arviz_measures(x))


def test_split_rhat_sees_a_drift_that_unsplit_rhat_misses():
    # Source: Gelman et al. (2013), BDA3 section 11.4: chains that drift the same way agree
    # with each other (unsplit R-hat near 1), but their first and second halves do not.
    rng = np.random.default_rng(11)
    drift = np.linspace(-2, 2, 200)[None, :, None] + rng.normal(size=(4, 200, 3))
    ours = summarize(drift)
    assert (ours["rhat_raw"] < 1.01).all() and (ours["rhat_split"] > 1.2).all()
    theirs = arviz_measures(drift)
    np.testing.assert_allclose(ours["rhat_split"], theirs["rhat_split"], rtol=1e-9)


def test_draw_summaries_are_numpys():
    # Source: numpy's mean, std (ddof 1), min and max of the pooled draws; NaN for a quantity
    # with a NaN draw, as every measure of the kernel.
    from auditor.kernels.diagnostics import DRAW_SUMMARIES

    bad = CASES["NaN and infinite draws"][:, :, [0, 2, 5]]  # one NaN, one inf, both infs
    x = np.concatenate([CASES["normal 4x100x12"][:, :30, :3], bad], axis=2)
    got = diagnose_block(x, measures=DRAW_SUMMARIES)
    pooled = x.reshape(-1, x.shape[2])
    with np.errstate(invalid="ignore"):
        want = {"draws_mean": pooled.mean(axis=0), "draws_sd": pooled.std(axis=0, ddof=1),
                "draws_min": pooled.min(axis=0), "draws_max": pooled.max(axis=0)}
    want = {k: np.where(np.isnan(pooled).any(axis=0), np.nan, v) for k, v in want.items()}
    for name, values in want.items():
        np.testing.assert_allclose(got[name], values, rtol=1e-12, equal_nan=True, err_msg=name)


def test_undefined_cases_are_nan_as_in_arviz_stats():
    # Source: arviz-stats (oracle): which results are undefined, spelled out.
    ours = summarize(CASES["NaN and infinite draws"])
    assert np.isnan(ours["ess_bulk"][[0, 1, 7, 8]]).all()  # any NaN draw: every measure NaN
    assert np.isnan(ours["rhat_rank"][[0, 1, 7, 8]]).all()
    assert np.isfinite(ours["ess_bulk"][[2, 3, 4, 5, 6]]).all()  # ranks of infinite draws exist
    assert all(np.isnan(v).all() for v in summarize(CASES["2 draws per chain"]).values())
    one_chain = summarize(CASES["one chain"])
    assert np.isnan(one_chain["rhat_rank"]).all() and np.isfinite(one_chain["ess_bulk"]).all()
    const = summarize(CASES["constant and nearly constant"])
    assert np.isnan(const["rhat_rank"][0]) and const["ess_bulk"][0] == 2 * 20


def test_float32_input_is_computed_in_float64():
    # Source: arviz-stats (oracle) on the same values held in float64.
    x = np.random.default_rng(5).normal(size=(3, 60, 6)).astype(np.float32)
    ours = summarize(x)
    for name, values in summarize(x.astype(np.float64)).items():
        np.testing.assert_array_equal(ours[name], values, err_msg=name)
    assert_same(ours, arviz_measures(x.astype(np.float64)))


def test_convergence_is_the_summary_subset():
    # Source: arviz-stats (oracle) for rhat_rank, ess_bulk, ess_tail and mcse_mean.
    x = CASES["normal 4x100x12"]
    ours = convergence(x)
    assert set(ours) == {"rhat_rank", "ess_bulk", "ess_tail", "mcse_mean"}
    theirs = arviz_measures(x)
    assert_same(ours, {k: theirs[k] for k in ours})
    assert set(convergence(x, mcse_mean=False)) == {"rhat_rank", "ess_bulk", "ess_tail"}


def test_other_quantiles_follow_their_names():
    # Source: arviz-stats (oracle), quantile ESS and MCSE at probabilities of our choosing.
    x = CASES["odd draws 3x101x6"]
    probs = (0.025, 0.5, 0.975)
    ours = summarize(x, quantiles=probs)
    assert set(ours) == set(measure_names(probs))
    assert_same(ours, arviz_measures(x, quantiles=probs))


# --- blocks -------------------------------------------------------------------------------


def _block_input() -> np.ndarray:
    x = np.concatenate([CASES["normal 4x100x12"], CASES["AR(0.97) 4x400x3"][:, :100]], axis=2)
    x[:, :, 3] = np.round(x[:, :, 3])
    x[1, 2, 5] = np.nan
    return x


@pytest.mark.parametrize("block_bytes", [1, 200_000, 10**9])
def test_results_do_not_depend_on_the_block_size(block_bytes):
    # Source: the kernel itself; every quantity is computed alone in its row, so block
    # boundaries must not change a single bit.
    x = _block_input()
    whole = summarize(x, block_bytes=10**10)
    parts = summarize(x, block_bytes=block_bytes)
    for name in whole:
        np.testing.assert_array_equal(parts[name], whole[name], err_msg=name)


def test_blocks_fed_by_the_caller_give_the_same_results():
    # Source: the kernel itself; a caller (lazy array, Dask) may drive diagnose_block.
    x = _block_input()
    whole = summarize(x)
    workspace = Workspace()
    for part in iter_blocks(x.shape[2], 4):
        block = diagnose_block(x[:, :, part], workspace=workspace)
        for name in whole:
            np.testing.assert_array_equal(block[name], whole[name][part], err_msg=name)


def test_first_pass_lags_change_nothing_but_speed():
    # Source: the kernel itself; with all lags (lags=None) from the start, to rounding.
    x = _block_input()
    quick, full = diagnose_block(x, lags=4), diagnose_block(x, lags=None)
    for name in full:
        np.testing.assert_allclose(quick[name], full[name], rtol=1e-12, equal_nan=True)


def test_working_memory_stays_below_the_draws_array():
    # Source: the design bound: peak memory under twice the draws array, i.e. the kernel's own
    # allocations (traced by numpy's tracemalloc hooks) stay below the array's size.
    x = np.random.default_rng(0).normal(size=(4, 1000, 300))
    tracemalloc.start()
    try:
        tracemalloc.reset_peak()
        summarize(x)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert peak < x.nbytes


def test_rejects_draws_that_are_not_three_dimensional():
    with pytest.raises(ValueError, match="chains, draws, quantities"):
        summarize(np.zeros((4, 100)))
    with pytest.raises(ValueError, match="unknown measures"):
        diagnose_block(np.zeros((4, 10, 1)), measures=["ess_bulk", "ess_nonsense"])
