"""The reporting checklist: what a write-up of the analysis should state.

The topics follow Kruschke (2021), "Bayesian Analysis Reporting Guidelines",
Nature Human Behaviour 5:1282-1291, in our own words. Each item is pre-filled
from what the audit saw in the files, and says plainly what cannot be known from
the files (the author must state it). Nothing here recomputes the audit: it
reads the result's settings, counts, diagnostics and findings.
"""

from __future__ import annotations

from dataclasses import dataclass

from auditor.result import AnalysisResult, AuditResult

SOURCE = (
    "Kruschke, J. K. (2021). Bayesian Analysis Reporting Guidelines. "
    "Nature Human Behaviour, 5, 1282-1291."
)
UNKNOWN = "cannot be known from the files"

#: Item statuses, in the order a reader should attend to them.
ATTENTION, UNKNOWN_STATUS, PARTLY, SEEN = "attention", "unknown", "partly", "seen"
STATUS_ORDER = (ATTENTION, UNKNOWN_STATUS, PARTLY, SEEN)


@dataclass(frozen=True)
class ChecklistItem:
    """One topic of the checklist.

    ``seen`` is what the files show ("" when nothing); ``missing`` what the
    author must add because it cannot be known from the files ("" when nothing);
    ``flags`` the rule ids of findings that bear on the topic.
    """

    topic: str
    status: str
    seen: str
    missing: str
    flags: tuple[str, ...] = ()


def _item(topic: str, seen: str, missing: str, flags: list[str] | None = None) -> ChecklistItem:
    flags_t = tuple(sorted(set(flags or [])))
    if flags_t:
        status = ATTENTION
    elif seen and missing:
        status = PARTLY
    elif seen:
        status = SEEN
    else:
        status = UNKNOWN_STATUS
    return ChecklistItem(topic, status, seen, missing, flags_t)


def _stage_flags(a: AnalysisResult, *stages: str) -> list[str]:
    return [f.rule_id for f in a.findings if f.stage in stages]


def _groups(a: AnalysisResult) -> set[str] | None:
    """DataTree groups of the analysis (``None`` when it has no draws at all)."""
    return set(a.groups) if a.groups else None


def _software(result: AuditResult, a: AnalysisResult) -> ChecklistItem:
    lib, ver = a.settings.get("library"), a.settings.get("library_version")
    seen_parts = []
    if lib:
        seen_parts.append(f"draws made with {lib} {ver}" if ver else f"draws made with {lib}")
    algo = a.settings.get("algorithm") or a.settings.get("engine")
    if algo:
        seen_parts.append(f"algorithm {algo}")
    missing = "" if lib and ver else f"the sampling software and its version {UNKNOWN}; state them"
    return _item("Software and versions", "; ".join(seen_parts), missing)


def _chains(a: AnalysisResult) -> ChecklistItem:
    if a.n_chains == 0:
        return _item("Number of chains", "", f"the number of chains {UNKNOWN}")
    seen = f"{a.n_chains} chain{'s' if a.n_chains != 1 else ''}"
    if a.n_chains < 4:
        seen += " (at least 4 are recommended to judge convergence; Vehtari et al. 2021)"
    return _item("Number of chains", seen, "",
                 [f.rule_id for f in a.findings if "chain" in f.rule_id])


def _draws(a: AnalysisResult) -> ChecklistItem:
    warmup = a.settings.get("num_warmup")
    thin = a.settings.get("thin")
    seen = []
    if warmup is not None:
        seen.append(f"{warmup} warmup iterations per chain")
    if a.n_draws:
        seen.append(f"{a.n_draws} kept draws per chain")
    if thin not in (None, 1):
        seen.append(f"thinned by {thin}")
    missing = "" if warmup is not None else f"the warmup length {UNKNOWN}; state it"
    return _item("Warmup and kept draws", ", ".join(seen), missing)


def _priors(a: AnalysisResult) -> ChecklistItem:
    stated = a.priors
    if stated:
        listed = "; ".join(str(p) for p in stated[:12])
        more = f"; and {len(stated) - 12} more" if len(stated) > 12 else ""
        seen = f"priors stated in the model program: {listed}{more}"
    elif a.program:
        seen = f"priors are stated in the model program {a.program}"
    else:
        seen = ""
    missing = (
        f"why each prior was chosen {UNKNOWN}; justify each one (and show a prior predictive "
        "check)" if a.program else
        f"the priors and their justification {UNKNOWN} without the model program; list them"
    )
    return _item("Each prior and its justification", seen, missing, _stage_flags(a, "priors"))


def _convergence(a: AnalysisResult) -> ChecklistItem:
    n = len(a.diagnostics)
    seen = (
        f"R-hat, bulk-ESS and tail-ESS computed here for {n} quantit{'y' if n == 1 else 'ies'}"
        if n else ""
    )
    missing = (
        f"which quantities the write-up reports {UNKNOWN}; give R-hat and ESS for every one of "
        "them"
    )
    return _item("Convergence diagnostics for every reported quantity", seen, missing,
                 _stage_flags(a, "sampling"))


def _predictive(a: AnalysisResult, stage: str, group: str, topic: str) -> ChecklistItem:
    flags = _stage_flags(a, stage)
    covered = next((c for c in a.coverage if c["stage"] == stage), None)
    what = group.replace("_", " ")
    if covered is not None and covered["status"] in ("checked", "partly checked"):
        seen = f"{what} draws are in the files and were checked by this audit"
        if covered["status"] == "partly checked":
            seen += f" (partly: {covered['note']})"
        return _item(topic, seen, "how the check was read and what it showed should be "
                     "reported", flags)
    if covered is not None and covered["status"] == "not applicable":
        return _item(topic, f"does not apply: {covered['note']}", "", flags)
    if covered is not None:
        return _item(topic, "", f"not checked here ({covered['note']}); whether a check was "
                     f"done {UNKNOWN}", flags)
    groups = _groups(a)
    if groups is not None and group in groups:
        return _item(topic, f"{what} draws are in the files",
                     "how the check was read and what it showed should be reported", flags)
    return _item(topic, "", f"whether this check was done {UNKNOWN}", flags)


def _sensitivity(a: AnalysisResult) -> ChecklistItem:
    flags = [f.rule_id for f in a.findings if "sensitiv" in f.rule_id]
    return _item(
        "Sensitivity analysis (priors, likelihood)", "",
        f"whether results were checked under other reasonable priors {UNKNOWN}; report how "
        "conclusions change", flags,
    )


def _availability(result: AuditResult, a: AnalysisResult) -> ChecklistItem:
    seen = []
    if a.program:
        seen.append(f"model program {a.program}")
    if a.sources:
        seen.append(f"draws in {len(a.sources)} file{'s' if len(a.sources) != 1 else ''}")
    return _item(
        "Code, data and draws available", "; ".join(seen) + (" in the audited folder" if seen
                                                              else ""),
        f"whether code, data and draws are published with the write-up {UNKNOWN}",
    )


def build_checklist(result: AuditResult, a: AnalysisResult) -> list[ChecklistItem]:
    """The checklist of one analysis, in reporting order."""
    return [
        _software(result, a),
        _chains(a),
        _draws(a),
        _priors(a),
        _predictive(a, "prior-predictive", "prior_predictive", "Prior predictive check"),
        _convergence(a),
        _predictive(a, "posterior-predictive", "posterior_predictive",
                    "Posterior predictive check"),
        _sensitivity(a),
        _availability(result, a),
    ]
