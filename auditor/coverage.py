"""What each audit checked, stage by stage, and what it could not check.

A PASS means little if half of the workflow was never looked at, so every
analysis carries a coverage record over the stages of a Bayesian workflow
(Gelman et al. 2020, "Bayesian Workflow", arXiv:2011.01808): the model program,
the priors, the prior predictive check, sampling, the posterior predictive check,
model comparison and sensitivity. Each stage is ``checked``, ``partly checked``
or ``not checked`` (with the missing input named), or ``not applicable``.

The record is computed from the inputs where they are known (the analysis) and
the rules that ran; reporters only show it.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from auditor.model import Analysis

CHECKED = "checked"
PARTLY = "partly checked"
NOT_CHECKED = "not checked"
NOT_APPLICABLE = "not applicable"

#: Workflow stages of the record: key, title, the rule stages that check it.
STAGES: tuple[tuple[str, str, tuple[str, ...]], ...] = (
    ("program", "Model program", ("model",)),
    ("priors", "Priors", ("priors",)),
    ("prior-predictive", "Prior predictive check", ("prior-predictive",)),
    ("sampling", "Sampling", ("sampling",)),
    ("posterior-predictive", "Posterior predictive check", ("posterior-predictive",)),
    ("comparison", "Model comparison", ("loo", "comparison")),
    ("sensitivity", "Sensitivity to the priors", ("sensitivity",)),
    ("calibration", "Simulation-based calibration", ("calibration",)),
)


@dataclass(frozen=True)
class StageCoverage:
    """One stage of the record: its status and, unless checked, why."""

    stage: str
    title: str
    status: str
    note: str = ""

    def as_dict(self) -> dict[str, str]:
        """JSON-safe record."""
        return {"stage": self.stage, "title": self.title, "status": self.status,
                "note": self.note}


def _program_state(analysis: Analysis) -> str | None:
    """Why the program cannot be read, or ``None`` when it was read."""
    prog = analysis.program
    if prog is None:
        return "no model program"
    if prog.syntax_errors:
        return f"the model program {_name(prog.path)} could not be read"
    return None


def _name(path: str) -> str:
    return path.replace("\\", "/").rsplit("/", 1)[-1]


def _observed_unknown(analysis: Analysis) -> str:
    if analysis.program is None:
        return ("the observed variable is unknown (no model program, and no `observed` in "
                "the configuration)")
    if not analysis.program.likelihoods:
        return "the model program has no likelihood statement of an observed variable"
    return "the observed variable is unknown"


def _without_observed(analysis: Analysis) -> tuple[str, str]:
    """State of a predictive stage when no observed variable is known."""
    prog = analysis.program
    if prog is not None and not prog.syntax_errors and not prog.likelihoods:
        return NOT_APPLICABLE, "the model program has no likelihood statement"
    return NOT_CHECKED, _observed_unknown(analysis)


def _prior_predictive(analysis: Analysis) -> tuple[str, str]:
    if not analysis.pairings:
        return _without_observed(analysis)
    missing = [p.observed for p in analysis.pairings if p.prior_predictive is None]
    if len(missing) == len(analysis.pairings):
        return NOT_CHECKED, "no prior predictive draws"
    if missing:
        return PARTLY, "no prior predictive draws of " + ", ".join(missing)
    return CHECKED, ""


def _sampling(analysis: Analysis) -> tuple[str, str]:
    if analysis.group("posterior") is None:
        return NOT_CHECKED, "no posterior draws"
    settings = analysis.settings
    if settings.algorithm == "fixed_param" or settings.method in ("optimize", "variational",
                                                                  "laplace", "pathfinder"):
        how = settings.algorithm or settings.method
        return NOT_APPLICABLE, f"the draws were not made by MCMC ({how})"
    if analysis.group("sample_stats") is None:
        return PARTLY, ("no sampler statistics: divergences, E-BFMI and tree depth were not "
                        "checked (R-hat and ESS were)")
    return CHECKED, ""


def _posterior_predictive(analysis: Analysis) -> tuple[str, str]:
    from auditor.predictive_checks import observed_values

    if not analysis.pairings:
        return _without_observed(analysis)
    if analysis.group("posterior") is None:
        return NOT_CHECKED, "no draws"
    reasons = []
    for p in analysis.pairings:
        if p.posterior_predictive is None:
            reasons.append(f"no replicated draws of {p.observed}")
        elif observed_values(analysis, p.observed) is None:
            reasons.append(f"the observed values of {p.observed} are not among the inputs "
                           "(no data file)")
    if len(reasons) == len(analysis.pairings):
        return NOT_CHECKED, "; ".join(reasons)
    without_ll = [p.observed for p in analysis.pairings if p.log_likelihood is None]
    if without_ll:
        reasons.append("no pointwise log-likelihood of " + ", ".join(without_ll)
                       + ": LOO-PIT was not checked")
    return (PARTLY, "; ".join(reasons)) if reasons else (CHECKED, "")


#: The comparison stage's note until the project pass settles it.
LOO_PENDING = "PSIS-LOO could not be computed"


def _comparison(analysis: Analysis) -> tuple[str, str]:
    if not analysis.pairings:
        return _without_observed(analysis)
    if not any(p.log_likelihood is not None for p in analysis.pairings):
        return NOT_CHECKED, "no pointwise log-likelihood"
    # Settled by comparison_coverage once every analysis has been audited.
    return NOT_CHECKED, LOO_PENDING


def comparison_coverage(entry: dict[str, str], has_loo: bool, compared: bool,
                        enabled: bool) -> dict[str, str]:
    """The model comparison stage of one analysis after the project pass.

    ``has_loo``: PSIS-LOO was computed for it; ``compared``: it is in a comparison
    set; ``enabled``: some rule of the stage is enabled.
    """
    if entry["note"] != LOO_PENDING:
        return entry  # no log-likelihood, no observed variable: the reason stands
    if not enabled:
        return {**entry, "note": "its rules are disabled in the configuration"}
    if compared:
        return {**entry, "status": CHECKED, "note": ""}
    if has_loo:
        return {**entry, "status": PARTLY,
                "note": "PSIS-LOO checked; no other analysis of the same data to compare with"}
    return entry


def _sensitivity(analysis: Analysis, table: Any) -> tuple[str, str]:
    if table is None:
        return NOT_CHECKED, "sensitivity was not computed"
    missing = table.missing
    if missing:
        if "log-prior" in missing or "log_prior" in missing or "prior" in missing:
            missing += (" (save a log_prior group, name a drawn `lprior` with "
                        "log_prior = \"lprior\", or keep the prior statements evaluable)")
        return NOT_CHECKED, missing
    left = table.power.left_out
    if left:
        return PARTLY, (f"{len(left)} prior statement{'s' if len(left) != 1 else ''} could not "
                        "be evaluated and were left out of the log-prior")
    return CHECKED, ""


def _calibration(analysis: Analysis) -> tuple[str, str]:
    sbc = analysis.sbc
    if sbc is None:
        return NOT_CHECKED, ("no simulation-based calibration ranks (name a ranks CSV with "
                             "sbc_ranks in the configuration)")
    if not sbc.parameters or sbc.ranks is None or len(sbc.ranks) == 0:
        return NOT_CHECKED, "the simulation-based calibration ranks could not be read"
    return CHECKED, ""


def analysis_coverage(analysis: Analysis, enabled_stages: Iterable[str],
                      sensitivity: Any = None) -> list[StageCoverage]:
    """The coverage record of one analysis.

    ``enabled_stages`` are the rule stages with at least one enabled rule; a stage
    whose rules are all disabled is not checked, whatever the inputs.
    ``sensitivity`` is the analysis's :class:`auditor.sensitivity.SensitivityTable`.
    """
    enabled = set(enabled_stages)
    program_why = _program_state(analysis)
    states = {
        "program": (NOT_CHECKED, program_why) if program_why else (CHECKED, ""),
        "priors": ((NOT_CHECKED, program_why + ": priors were not read") if program_why
                   else (CHECKED, "")),
        "prior-predictive": _prior_predictive(analysis),
        "sampling": _sampling(analysis),
        "posterior-predictive": _posterior_predictive(analysis),
        "comparison": _comparison(analysis),
        "sensitivity": _sensitivity(analysis, sensitivity),
        "calibration": _calibration(analysis),
    }
    out = []
    for key, title, rule_stages in STAGES:
        status, note = states[key]
        if status in (CHECKED, PARTLY) and not enabled & set(rule_stages):
            status, note = NOT_CHECKED, "its rules are disabled in the configuration"
        out.append(StageCoverage(key, title, status, note))
    return out
