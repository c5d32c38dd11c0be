"""Simulation-based calibration rank tests (auditor/kernels/sbc.py) and the ranks CSV reader
(auditor/loaders/sbc_ranks.py).

Sources of the numbers checked here:
- Talts, Betancourt, Simpson, Vehtari & Gelman (2018), arXiv:1804.06788: ranks of the prior
  draw among M posterior draws are uniform on 0..M for exact inference (their Theorem 1), and a
  posterior too narrow gives a U-shaped rank histogram (their section 4.2);
- the conjugate normal model (posterior of a normal mean with known sd; from memory, any
  textbook, e.g. Gelman et al., Bayesian Data Analysis, 3rd ed., section 2.5), whose exact
  posterior draws make a correct simulation;
- arviz-stats 1.3 ``ecdf_utils.ecdf_pit`` (Säilynoja, Bürkner & Vehtari 2022), the reference for
  the ECDF and its simultaneous band;
- rejection rates: a test at level alpha rejects about a share alpha of correct simulations;
  with R repetitions the Monte Carlo sd of the rate is sqrt(alpha (1 - alpha) / R), and the
  accepted ranges below are about 3 sd wide on each side (common practice).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from auditor.boundary import Boundary
from auditor.kernels import sbc
from auditor.loaders.sbc_ranks import MAX_ROW_PROBLEMS, read_sbc_ranks

ALPHA = 0.05


def _conjugate_ranks(rng: np.random.Generator, n_sims: int, m: int, shrink: float = 1.0,
                     n_obs: int = 10) -> np.ndarray:
    """Ranks of theta ~ N(0, 1) among M exact posterior draws given 10 observations N(theta, 1),
    the posterior sd multiplied by ``shrink`` (1: correct)."""
    theta = rng.normal(size=n_sims)
    y = rng.normal(theta[:, None], 1.0, (n_sims, n_obs))
    precision = 1.0 + n_obs
    mean = y.sum(axis=1) / precision
    draws = rng.normal(mean[:, None], shrink / math.sqrt(precision), (n_sims, m))
    return (draws < theta[:, None]).sum(axis=1)


def _rates(make, reps: int) -> tuple[float, float, float]:
    chi2 = band = ecdf = 0
    for _ in range(reps):
        ranks, m = make()
        t = sbc.sbc_rank_tests(ranks, m, alpha=ALPHA)[0]
        chi2 += t.chi2_rejects
        band += t.band_rejects
        ecdf += t.ecdf_p < ALPHA
    return chi2 / reps, band / reps, ecdf / reps


def test_correct_simulation_rejects_at_the_nominal_rate() -> None:
    # 300 repetitions of 200 simulations with M = 99 draws (20 equal bins). MC sd of a rate
    # at alpha = 0.05 over 300 repetitions: 0.0126. Chi-square in [0.015, 0.09] (seen 0.04);
    # the ECDF p-value, conservative for a discrete statistic, in [0.01, 0.09] (seen 0.057);
    # the band test at most 0.09 (seen 0.06; arviz-stats' band is slightly liberal, see
    # auditor/kernels/sbc.py).
    rng = np.random.default_rng(20240601)
    chi2, band, ecdf = _rates(lambda: (_conjugate_ranks(rng, 200, 99), 99), 300)
    assert 0.015 <= chi2 <= 0.09, chi2
    assert 0.01 <= ecdf <= 0.09, ecdf
    assert band <= 0.09, band


def test_uniform_ranks_with_unequal_bins_and_varying_draws_reject_at_the_nominal_rate() -> None:
    # Ranks uniform on 0..M by construction (Talts et al. 2018, Theorem 1). M = 24: 25 ranks
    # in 20 bins of 2 or 1 ranks, where expecting equal counts would reject 84% of these
    # samples (seen); M varying between simulations. 400 repetitions: MC sd 0.011; chi-square
    # in [0.02, 0.085] (seen 0.045 and 0.0475), the ECDF p-value in [0.01, 0.085] (seen 0.0525
    # and 0.0225; 0.036 over 2000 repetitions: conservative), the band at most 0.085 (seen
    # 0.0625 and 0.045).
    rng = np.random.default_rng(7)

    def fixed():
        return rng.integers(0, 25, size=200), 24

    def varying():
        m = rng.choice([49, 99, 150], size=300)
        return rng.integers(0, m + 1), m

    for make in (fixed, varying):
        chi2, band, ecdf = _rates(make, 400)
        assert 0.02 <= chi2 <= 0.085, (make.__name__, chi2)
        assert 0.01 <= ecdf <= 0.085, (make.__name__, ecdf)
        assert band <= 0.085, (make.__name__, band)


def test_posterior_too_narrow_fails_nearly_always() -> None:
    # Posterior sd halved (Talts et al. 2018, section 4.2: a U-shaped histogram). Seen: every
    # one of 50 repetitions rejected by both tests; accept at least 47 (94%).
    rng = np.random.default_rng(11)
    chi2, band, ecdf = _rates(lambda: (_conjugate_ranks(rng, 200, 99, shrink=0.5), 99), 50)
    assert chi2 >= 0.94 and band >= 0.94 and ecdf >= 0.94, (chi2, band, ecdf)


def test_ecdf_and_band_equal_arviz_ecdf_pit() -> None:
    from arviz_stats.ecdf_utils import ecdf_pit

    rng = np.random.default_rng(3)
    ranks = _conjugate_ranks(rng, 150, 99)
    t = sbc.sbc_rank_tests(ranks, 99, parameters=["theta"])[0]
    u = sbc.fractional_ranks(ranks, 99)[:, 0]
    # Reference: arviz-stats' ecdf_pit on the same fractional ranks with the same seed.
    x, ecdf, lower, upper = ecdf_pit(u, 1 - ALPHA, 1000, rng=np.random.default_rng(sbc.BAND_SEED))
    for ours, theirs in ((t.x, x), (t.ecdf, ecdf), (t.lower, lower), (t.upper, upper)):
        np.testing.assert_array_equal(ours, theirs)
    gap = np.maximum(np.maximum(ecdf - upper, 0), np.maximum(lower - ecdf, 0))
    assert t.outside == int(np.sum(gap > 0)) and t.largest_gap == float(gap.max())
    xs, diff, lo, hi = t.ecdf_difference()
    np.testing.assert_array_equal(diff, ecdf - x)
    np.testing.assert_array_equal(hi - lo, upper - lower)


def test_fractional_ranks_stay_within_their_rank() -> None:
    # (r + v) / (M + 1) with v in (0, 1) lies in [r / (M + 1), (r + 1) / (M + 1)).
    ranks = np.array([[0, 5], [9, 3], [4, 9]])
    u = sbc.fractional_ranks(ranks, 9)
    assert np.all(u >= ranks / 10) and np.all(u < (ranks + 1) / 10)
    # Column streams are independent of the number of columns.
    np.testing.assert_array_equal(sbc.fractional_ranks(ranks[:, :1], 9), u[:, :1])


def test_chi_square_statistic_by_hand() -> None:
    # Pearson's statistic sum (O - E)^2 / E over 2 bins of 5 ranks each (M = 9), scipy's
    # chi2.sf with 1 degree of freedom (common practice).
    from scipy.stats import chi2

    ranks = np.array([0] * 8 + [9] * 2)
    t = sbc.sbc_rank_tests(ranks, 9, min_expected=5.0)[0]
    assert t.bins == 2
    np.testing.assert_array_equal(t.observed, [8, 2])
    np.testing.assert_allclose(t.expected, [5.0, 5.0])
    assert t.chi2 == pytest.approx(3.6)
    assert t.chi2_p == pytest.approx(chi2.sf(3.6, 1))


@pytest.mark.parametrize(("m", "n_sims", "bins"), [
    (99, 200, 20),    # 100 ranks: 20 equal bins (Talts et al. 2018's choice)
    (100, 200, 20),   # 101 ranks (prime): 20 bins of 6 or 5 ranks
    (89, 1000, 18),   # 90 ranks: the largest divisor of 90 up to 20
    (62, 1000, 20),   # 63 ranks: no divisor in 10..20, 20 unequal bins
    (99, 40, 5),      # 40 simulations: at most 8 bins expect 5; 5 divides 100
    (3, 1000, 4),     # 4 ranks: never more bins than ranks
    (99, 9, 0),       # 9 simulations: not even 2 bins expect 5 ranks
])
def test_choice_of_bins(m: int, n_sims: int, bins: int) -> None:
    # Every expected count at least 5: common practice for the chi-square approximation.
    assert sbc.choose_bins(np.full(n_sims, m)) == bins
    if bins:
        e = sbc.expected_counts(np.full(n_sims, m), bins)
        assert e.min() >= 5.0 and e.sum() == pytest.approx(n_sims)


def test_expected_counts_of_unequal_bins_are_exact() -> None:
    # 101 ranks in 20 bins: floor(20 r / 101) puts r = 0..5 in bin 0 and 5 ranks in each other.
    e = sbc.expected_counts(np.full(101, 100), 20)
    np.testing.assert_allclose(e, [6.0] + [5.0] * 19)


def test_too_few_simulations_skip_the_chi_square_only() -> None:
    t = sbc.sbc_rank_tests(np.arange(9), 99)[0]
    assert t.bins == 0 and math.isnan(t.chi2_p) and not t.chi2_rejects
    assert 0 < t.ecdf_p <= 1


def test_invalid_ranks_are_refused() -> None:
    with pytest.raises(ValueError, match="0..n_draws"):
        sbc.sbc_rank_tests(np.array([0, 5, 11]), 10)
    with pytest.raises(ValueError, match="whole"):
        sbc.sbc_rank_tests(np.array([0.5, 1, 2]), 10)
    with pytest.raises(ValueError, match="n_draws"):
        sbc.sbc_rank_tests(np.array([0, 1, 2]), [10, 10])


# --- the ranks CSV ---------------------------------------------------------------------------


def _write(tmp_path: Path, text: str, name: str = "ranks.csv") -> Path:
    p = tmp_path / name
    p.write_text(text)
    return p


def test_reader_reads_a_good_file(tmp_path: Path) -> None:
    p = _write(tmp_path, "# SBC run 3\nmu,tau,n_draws\n0,99,99\n\n50, 1e1 ,99\n\"7\",3.0,49\n")
    got = read_sbc_ranks(p)
    assert got.problems == []
    assert got.parameters == ["mu", "tau"]
    np.testing.assert_array_equal(got.ranks, [[0, 99], [50, 10], [7, 3]])
    np.testing.assert_array_equal(got.n_draws, [99, 99, 49])
    np.testing.assert_array_equal(got.lines, [3, 5, 6])


def test_reader_takes_the_number_of_draws_from_the_caller(tmp_path: Path) -> None:
    p = _write(tmp_path, "mu\n3\n10\n")
    got = read_sbc_ranks(p, n_draws=10)
    assert got.problems == [] and got.n_draws.tolist() == [10, 10]
    missing = read_sbc_ranks(p)
    assert missing.ranks.shape == (0, 0)
    assert "no 'n_draws' column" in missing.problems[0].message


def test_reader_reports_bad_rows_with_their_lines(tmp_path: Path) -> None:
    p = _write(tmp_path, "\n".join([
        "mu,tau,M",
        "1,2,10",          # 2: good
        "1,2",             # 3: too few fields
        "1,x,10",          # 4: not a number
        "1,2.5,10",        # 5: not whole
        "1,11,10",         # 6: above M
        "-1,2,10",         # 7: negative
        "1,2,0",           # 8: no draws
        "1,2,",            # 9: missing M
        "3,4,10",          # 10: good
        "1,nan,10",        # 11: nan
        "1,1_0,10",        # 12: Python-only digit grouping
    ]) + "\n")
    got = read_sbc_ranks(p, n_draws_column="M")
    assert got.lines.tolist() == [2, 10]
    np.testing.assert_array_equal(got.ranks, [[1, 2], [3, 4]])
    lines = [(q.line, q.message) for q in got.problems]
    assert [line for line, _ in lines] == [3, 4, 5, 6, 7, 8, 9, 11, 12]
    assert all(q.path == p and q.kind == "unreadable" for q in got.problems)
    assert "2 fields, the header has 3" in lines[0][1]
    assert "the rank of 'tau' is 'x'" in lines[1][1]
    assert "outside 0..10" in lines[3][1]
    assert "'M' is ''" in lines[6][1]


def test_reader_caps_row_problems(tmp_path: Path) -> None:
    p = _write(tmp_path, "mu,n_draws\n" + "bad,10\n" * (MAX_ROW_PROBLEMS + 7))
    got = read_sbc_ranks(p)
    assert len(got.problems) == MAX_ROW_PROBLEMS + 2  # each, the rest counted, none usable
    assert got.problems[MAX_ROW_PROBLEMS].message.startswith("7 more simulations")
    assert got.problems[-1].message == "no usable simulations in the file"


@pytest.mark.parametrize(("text", "words"), [
    ("", "no header row"),
    ("# only a comment\n", "no header row"),
    ("mu,mu,n_draws\n1,2,3\n", "appears twice"),
    ("mu,,n_draws\n1,2,3\n", "has no name"),
    ("n_draws\n10\n", "no parameter columns"),
])
def test_reader_reports_unusable_headers(tmp_path: Path, text: str, words: str) -> None:
    got = read_sbc_ranks(_write(tmp_path, text))
    assert got.ranks.size == 0 and any(words in q.message for q in got.problems)


def test_reader_refusals_become_problems(tmp_path: Path) -> None:
    inside = tmp_path / "project"
    inside.mkdir()
    outside = _write(tmp_path, "mu,n_draws\n1,10\n")
    got = read_sbc_ranks(outside, gate=Boundary(inside))
    assert [q.kind for q in got.problems] == ["outside-project"]
    missing = read_sbc_ranks(inside / "nope.csv")
    assert len(missing.problems) == 1 and missing.ranks.size == 0


@settings(max_examples=300, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.text(alphabet=st.sampled_from(list("0123456789,;\"#\n\r -.e_xmun\x00\u00e9")),
               max_size=300),
       st.one_of(st.none(), st.integers(min_value=-3, max_value=50)))
def test_reader_never_raises(tmp_path: Path, text: str, n_draws: int | None) -> None:
    # Loaders never raise on bad input (DEVELOPERS.md); what they keep is valid.
    p = tmp_path / "fuzz.csv"
    p.write_text(text, encoding="utf-8")
    got = read_sbc_ranks(p, n_draws=n_draws)
    assert got.ranks.shape == (got.n_draws.size, len(got.parameters) if got.n_draws.size else
                               got.ranks.shape[1])
    if got.n_draws.size:
        assert np.all(got.ranks >= 0) and np.all(got.ranks <= got.n_draws[:, None])
