"""The diagnostics table (auditor.diagnostics) built on the fused kernel.

Sources of the numbers checked:
- arviz-stats (the reference Python implementation, used here as an oracle only):
  ``rhat(method="rank")``, ``ess(method="bulk")``, ``ess(method="tail", prob=(0.05, 0.95))``,
  ``mcse(method="mean")`` and ``mcse(method="quantile")``, to floating-point tolerance;
- numpy's own mean and standard deviation for the ``mean``/``sd`` columns.
The reference implementation's table (R package ``posterior``) is checked through the whole
audit in tests/test_diagnostics_reference.py.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
import xarray as xr

from auditor.diagnostics import DiagnosticsTable


def _dataset() -> xr.Dataset:
    rng = np.random.default_rng(31)
    a = rng.normal(size=(4, 60, 3, 2))
    a[0, 0, 0, 0] = np.nan  # one NaN: every measure undefined, as in arviz-stats
    a[1, :, 1, 1] = np.inf  # a whole infinite chain
    a[:, :, 2, 0] = 1.5  # constant
    return xr.Dataset(
        {
            "a": (("chain", "draw", "i", "j"), a),
            "k": (("chain", "draw"), rng.integers(0, 3, (4, 60))),  # discrete, many ties
            "f": (("chain", "draw", "q"), rng.normal(size=(4, 60, 5)).astype(np.float32)),
            "flag": (("chain", "draw"), np.ones((4, 60), dtype=bool)),  # not numeric: skipped
        },
        coords={"j": ["north", "south"]},
    )


def _oracle(ds: xr.Dataset) -> dict[str, np.ndarray]:
    from arviz_stats.base import array_stats as az

    kw = {"chain_axis": 0, "draw_axis": 1}
    out: dict[str, list[float]] = {k: [] for k in ("rhat", "ess_bulk", "ess_tail", "mcse_mean")}
    with warnings.catch_warnings(), np.errstate(all="ignore"):
        warnings.simplefilter("ignore")
        for var in ("a", "k", "f"):
            x = ds[var].values.astype(np.float64)
            x = x.reshape(x.shape[0], x.shape[1], -1)
            out["rhat"] += list(az.rhat(x, method="rank", **kw))
            out["ess_bulk"] += list(az.ess(x, method="bulk", **kw))
            out["ess_tail"] += list(az.ess(x, method="tail", prob=(0.05, 0.95), **kw))
            out["mcse_mean"] += list(az.mcse(x, method="mean", **kw))
    return {k: np.array(v, dtype=float) for k, v in out.items()}


def _column(rows, key):
    return np.array([np.nan if r[key] is None else r[key] for r in rows], dtype=float)


def test_rows_match_arviz_stats_and_numpy():
    # Source: arviz-stats (oracle) for R-hat, ESS and MCSE; numpy for mean and sd.
    ds = _dataset()
    rows = DiagnosticsTable(ds, one_based=True).rows
    assert [r["quantity"] for r in rows][:3] == ["a[1,north]", "a[1,south]", "a[2,north]"]
    assert [r["variable"] for r in rows] == ["a"] * 6 + ["k"] + ["f"] * 5
    for key, want in _oracle(ds).items():
        np.testing.assert_allclose(_column(rows, key), want, rtol=1e-9, equal_nan=True,
                                   err_msg=key)  # non-finite results are None in a row
    const = rows[4]  # a[3,north]
    assert const["constant"] and const["mean"] == 1.5 and const["rhat"] is None
    nan_row, inf_row = rows[0], rows[3]
    assert nan_row["nonfinite"] == 1 and inf_row["nonfinite"] == 60
    finite = ds["a"].values[:, :, 0, 0].reshape(-1)
    finite = finite[np.isfinite(finite)]
    assert nan_row["mean"] == pytest.approx(finite.mean(), rel=1e-12)
    assert nan_row["sd"] == pytest.approx(finite.std(ddof=1), rel=1e-12)


@pytest.mark.parametrize("block_bytes", [1, 20_000, 10**9])
def test_rows_do_not_depend_on_the_block_size(block_bytes):
    # Source: the kernel computes each quantity alone, so blocks change no bit of its
    # measures; numpy's sums (mean, sd) may round differently by memory layout (1e-15).
    ds = _dataset()
    whole = DiagnosticsTable(ds, block_bytes=10**10).rows
    parts = DiagnosticsTable(ds, block_bytes=block_bytes).rows
    for a, b in zip(parts, whole, strict=True):
        assert {k: a[k] for k in a if k not in ("mean", "sd")} == {
            k: b[k] for k in b if k not in ("mean", "sd")}
        assert a["mean"] == pytest.approx(b["mean"], rel=1e-12, abs=1e-15)
        assert a["sd"] == pytest.approx(b["sd"], rel=1e-12)


def test_measures_on_demand_match_arviz_stats():
    # Source: arviz-stats (oracle), MCSE of the 5% quantile and classic split R-hat.
    from arviz_stats.base import array_stats as az

    ds = _dataset()
    table = DiagnosticsTable(ds)
    index = table.index_of(["f", "k"])
    assert [table.quantities[i] for i in index] == ["k"] + [f"f[{q}]" for q in range(5)]
    got = table.measures(["mcse_quantile_0.05", "rhat_split"], quantiles=[0.05], index=index)
    x = np.concatenate([ds["k"].values[:, :, None], ds["f"].values], axis=2).astype(float)
    kw = {"chain_axis": 0, "draw_axis": 1}
    np.testing.assert_allclose(got["mcse_quantile_0.05"],
                               az.mcse(x, method="quantile", prob=0.05, **kw), rtol=1e-9)
    np.testing.assert_allclose(got["rhat_split"], az.rhat(x, method="split", **kw), rtol=1e-9)


def test_blocks_walk_every_quantity_once():
    # Source: the layout itself: every column of every numeric variable, in table order.
    ds = _dataset()
    table = DiagnosticsTable(ds)
    seen = []
    for idx, block in table.blocks(per_block=4):
        assert block.shape[:2] == (4, 60) and block.shape[2] == idx.size
        seen.extend(idx.tolist())
        # The block holds the draws of those quantities.
        for j, k in enumerate(idx):
            label = table.quantities[k]
            if label == "k":
                np.testing.assert_array_equal(block[:, :, j], ds["k"].values)
    assert seen == list(range(12))


def test_no_rows_without_enough_draws_or_numbers():
    # Common practice: the kernel needs at least 4 draws per chain (arviz-stats' minimum).
    short = xr.Dataset({"x": (("chain", "draw"), np.zeros((4, 3)))})
    assert DiagnosticsTable(short).rows == []
    words = xr.Dataset({"s": (("chain", "draw"), np.full((2, 10), "a"))})
    assert DiagnosticsTable(words).rows == []
    assert DiagnosticsTable(None).rows == []
