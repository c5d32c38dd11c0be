"""Which drawn variable replicates which observed variable, and how we know.

For each observed variable ``y`` of an analysis we look for three companions:
its posterior predictive draws, its prior predictive draws and its pointwise
log-likelihood. Each is found, in this order (issue 9 and 10 of the project):

1. ``configured``: named in the configuration (``predictive``, ``log_lik``);
2. ``program``: a Stan generated quantity assigned from the ``_rng`` function of
   the likelihood's family with the observed variable's shape
   (``y_rep[n] = poisson_log_rng(eta)`` for ``y ~ poisson_log(eta)``), or from
   its ``_lpdf``/``_lpmf`` evaluated at ``y`` (``log_lik[n] =
   poisson_log_lpmf(y[n] | eta)``);
3. ``group``: a variable named ``y`` in the DataTree's ``posterior_predictive``,
   ``prior_predictive`` or ``log_likelihood`` group (PyMC and arviz write them so);
4. ``name``: by the usual names, ``y_rep`` / ``<y>_rep`` and ``log_lik``, for
   draws without a program.

The observed variables themselves come from the configuration (``observed``),
else from the program's likelihood statements, else from an ``observed_data``
group. This module only finds names; moving draws into their groups is
:mod:`auditor.assemble`'s job, checking them the rules'.
"""

from __future__ import annotations

import re
from collections.abc import Iterable
from dataclasses import dataclass, field
from typing import Any

from auditor.programs.summary import ProgramSummary

CONFIGURED, PROGRAM, GROUP, NAME = "configured", "program", "group", "name"

_RNG = re.compile(r"^\s*([A-Za-z_]\w*)_rng\s*\(")
_DENSITY = re.compile(r"^\s*([A-Za-z_]\w*)_(?:lpdf|lpmf|lupdf|lupmf)\s*\(\s*([A-Za-z_]\w*)")


@dataclass(frozen=True)
class Source:
    """Where one companion of an observed variable was found.

    ``variable`` is its name in the files as written (``y_rep``); ``how`` is one
    of ``configured``, ``program``, ``group``, ``name``; ``stored`` its name in
    its group of the analysis's tree (the observed variable's name, unless that
    was taken).
    """

    variable: str
    how: str
    stored: str = ""


@dataclass
class Pairing:
    """An observed variable and the draws that go with it (``None``: not found)."""

    observed: str
    posterior_predictive: Source | None = None
    prior_predictive: Source | None = None
    log_likelihood: Source | None = None
    #: Why a configured companion was not used (a misnamed variable, say).
    notes: list[str] = field(default_factory=list)

    def as_dict(self) -> dict[str, Any]:
        """JSON-safe record for the reports."""
        def one(s: Source | None) -> dict[str, str] | None:
            return None if s is None else {"variable": s.variable, "how": s.how}

        return {
            "observed": self.observed,
            "posterior_predictive": one(self.posterior_predictive),
            "prior_predictive": one(self.prior_predictive),
            "log_likelihood": one(self.log_likelihood),
            "notes": list(self.notes),
        }


def observed_names(configured: str | None, program: ProgramSummary | None,
                   observed_group: Iterable[str] = ()) -> list[str]:
    """The observed variables: configured, else the program's, else the files'."""
    if configured:
        return [configured]
    if program is not None and not program.syntax_errors:
        names = []
        for lik in program.likelihoods:
            decl = program.declarations.get(lik.variable)
            if decl is not None and decl.block == "data" and lik.variable not in names:
                names.append(lik.variable)
        if names:
            return names
    return list(dict.fromkeys(str(n) for n in observed_group))


def _family(program: ProgramSummary, observed: str) -> str | None:
    for lik in program.likelihoods:
        if lik.variable == observed:
            return lik.distribution.family
    return None


def _same_shape(program: ProgramSummary, a: str, b: str) -> bool:
    da, db = program.declarations.get(a), program.declarations.get(b)
    return da is not None and db is not None and da.dims == db.dims


def program_sources(program: ProgramSummary | None, observed: str) -> tuple[str | None,
                                                                          str | None]:
    """(replicated variable, pointwise log-likelihood variable) the program defines for
    ``observed``, each ``None`` when the program has none.

    Only generated quantities count, defined in one statement (see
    :attr:`ProgramSummary.definitions`), from the likelihood's own family.
    """
    if program is None or program.language != "stan" or program.syntax_errors:
        return None, None
    family = _family(program, observed)
    if family is None:
        return None, None
    rng = loglik = None
    for name, text in program.definitions.items():
        decl = program.declarations.get(name)
        if decl is None or decl.block != "generated quantities":
            continue
        m = _RNG.match(text)
        if m and m.group(1) == family and rng is None and _same_shape(program, name, observed):
            rng = name
        m = _DENSITY.match(text)
        if m and m.group(1) == family and m.group(2) == observed and loglik is None:
            loglik = name
    return rng, loglik


def name_candidates(observed: str, single: bool, kind: str) -> list[tuple[str | None, str]]:
    """Names by convention: ``<y>_rep`` (and ``y_rep`` when there is one observed
    variable) for predictive draws, ``log_lik`` for the log-likelihood."""
    if kind == "log_likelihood":
        return [(f"log_lik_{observed}", NAME)] + ([("log_lik", NAME)] if single else [])
    return [(f"{observed}_rep", NAME)] + ([("y_rep", NAME)] if single else [])
