"""R-hat and ESS against the reference implementation's numbers.

Source: ../shared/reference-data/posterior-reference/ — two CmdStan 1.3 chains of
the BUGS "blocker" model and, for every parameter, the values of the R package
``posterior`` (the reference implementation of Vehtari, Gelman, Simpson,
Carpenter & Bürkner 2021, Bayesian Analysis 16(2)). Tolerance 1e-6 relative.
"""

from __future__ import annotations

import csv

import pytest

from auditor.engine import run_audit
from tests.conftest import require_shared

COLUMNS = {"rhat": "rhat_rank", "ess_bulk": "ess_bulk", "ess_tail": "ess_tail",
           "mcse_mean": "mcse_mean"}


@pytest.fixture(scope="module")
def blocker():
    folder = require_shared() / "posterior-reference"
    result = run_audit([folder / "blocker.1.csv", folder / "blocker.2.csv"])
    with (folder / "reference_posterior.csv").open() as fh:
        reference = {row[""]: row for row in csv.DictReader(fh)}
    return result, reference


def test_blocker_loads_as_two_chains(blocker):
    result, _ = blocker
    (analysis,) = result.analyses
    assert (analysis.n_chains, analysis.n_draws) == (2, 1000)


@pytest.mark.parametrize("ours,theirs", sorted(COLUMNS.items()))
def test_every_parameter_matches_posterior_package(blocker, ours, theirs):
    result, reference = blocker
    rows = result.analyses[0].diagnostics
    compared = 0
    for row in rows:
        # Our labels are theta[1]; the reference names rows theta.1 (both 1-based).
        name = row["quantity"].replace("[", ".").replace("]", "").replace(",", ".")
        if name not in reference:
            continue
        want = float(reference[name][theirs])
        assert row[ours] == pytest.approx(want, rel=1e-6), (name, ours)
        compared += 1
    # Every parameter of the reference table is present in our table.
    assert compared == len(reference)
