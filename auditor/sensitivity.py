"""Prior sensitivity of one analysis, computed once: power-scaling and contraction.

- Power-scaling sensitivity of each posterior quantity to the prior and to the
  likelihood (Kallioinen, Paananen, Bürkner & Vehtari 2024, Statistics and
  Computing 34:57; :mod:`auditor.kernels.psense`). The log-prior per draw comes
  from, in this order: a ``log_prior`` group (PyMC and arviz save one), a
  variable named in the configuration (``log_prior = "lprior"``), or the program's
  own prior statements evaluated at every draw (:mod:`auditor.logprior`; statements
  it cannot evaluate are named). The log-likelihood is the ``log_likelihood``
  group summed per draw.
- Posterior contraction ``1 - Var_post / Var_prior`` of each parameter with prior
  draws (Schad, Betancourt & Vasishth 2021, Psychological Methods 26(1)).

Rules read :class:`SensitivityTable` (``ctx.sensitivity``); the engine adds the
contraction to the diagnostics table's rows, from the same object.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property
from typing import TYPE_CHECKING, Any

import numpy as np

if TYPE_CHECKING:
    from auditor.model import Analysis

#: Where the log-prior came from.
GROUP, CONFIGURED, PROGRAM = "log_prior group", "configured variable", "program"


@dataclass
class Power:
    """Power-scaling sensitivity per quantity, with its inputs' provenance."""

    quantities: list[str]
    variables: list[str]
    prior: np.ndarray
    likelihood: np.ndarray
    diagnosis: list[str]
    pareto_k: dict[str, tuple[float, float]]
    threshold: float
    log_prior_source: str
    left_out: list[Any] = field(default_factory=list)
    without_statement: list[str] = field(default_factory=list)


def _summed(ds: Any) -> np.ndarray | None:
    """The variables of a (chain, draw, ...) group summed per draw."""
    total = None
    for da in ds.data_vars.values():
        if "chain" not in da.dims or "draw" not in da.dims:
            continue
        arr = np.asarray(da.transpose("chain", "draw", ...).values, dtype=float)
        arr = arr.reshape(arr.shape[0], arr.shape[1], -1).sum(axis=2)
        total = arr if total is None else total + arr
    return total


def _parameter_names(analysis: Analysis, exclude: set[str]) -> list[str]:
    """The posterior's parameters: the program's parameters block when known, else
    every variable of the posterior that is not a companion or bookkeeping."""
    post = analysis.group("posterior")
    names = [str(v) for v in post.data_vars if not str(v).endswith("__")
             and str(v) not in exclude] if post is not None else []
    prog = analysis.program
    if prog is not None and not prog.syntax_errors and prog.parameters:
        declared = {d.name for d in prog.parameters}
        names = [n for n in names if n in declared] or names
    return names


def _labels(name: str, da: Any, one_based: bool) -> list[str]:
    from auditor.diagnostics import quantity_label

    shape = tuple(int(da.sizes[d]) for d in da.dims if d not in ("chain", "draw"))
    return [quantity_label(name, da, idx, one_based) for idx in np.ndindex(*shape)] if (
        shape) else [name]


@dataclass
class SensitivityTable:
    """Power-scaling sensitivity and contraction of one analysis, on first use."""

    analysis: Analysis
    errors: list[str] = field(default_factory=list)

    @property
    def one_based(self) -> bool:
        return self.analysis.settings.library == "CmdStan"

    @cached_property
    def log_likelihood(self) -> np.ndarray | None:
        """The log-likelihood per draw (chains, draws), or ``None``."""
        ds = self.analysis.group("log_likelihood")
        if ds is None:
            return None
        total = _summed(ds)
        if total is None or not np.all(np.isfinite(total)):
            return None
        return total

    @cached_property
    def log_prior(self) -> tuple[np.ndarray | None, str, list[Any], list[str], str]:
        """(log-prior per draw, its source, statements left out, parameters without a
        statement, why there is none)."""
        ds = self.analysis.group("log_prior")
        if ds is not None:
            total = _summed(ds)
            if total is not None:
                return total, GROUP, [], [], ""
        spec = self.analysis.spec
        name = getattr(spec, "log_prior", None) if spec is not None else None
        post = self.analysis.group("posterior")
        if name:
            if post is not None and name in post.data_vars:
                arr = np.asarray(post[name].transpose("chain", "draw", ...).values, float)
                return arr.reshape(arr.shape[0], arr.shape[1], -1).sum(axis=2), CONFIGURED, \
                    [], [], ""
            return None, CONFIGURED, [], [], (f"the configured log_prior = {name!r} is not "
                                              "among the draws")
        prog = self.analysis.program
        if prog is None or prog.syntax_errors or post is None:
            return None, "", [], [], ("no log-prior: no log_prior group, no `log_prior` "
                                      "variable configured, and no program to evaluate")
        from auditor.logprior import evaluate_log_prior

        try:
            found = evaluate_log_prior(prog, post, self.analysis.data)
        except ValueError as exc:
            return None, PROGRAM, [], [], f"the program's priors could not be evaluated ({exc})"
        if found.values is None:
            why = ("no prior statement of the program could be evaluated"
                   if found.left_out else "the program states no priors")
            return None, PROGRAM, found.left_out, found.without_statement, why
        return found.values, PROGRAM, found.left_out, found.without_statement, ""

    @cached_property
    def power(self) -> Power | None:
        """Power-scaling sensitivity of every parameter, or ``None`` (see :attr:`missing`)."""
        from auditor.kernels.psense import psense_summary

        lp, source, left_out, without, _ = self.log_prior
        ll = self.log_likelihood
        post = self.analysis.group("posterior")
        if lp is None or ll is None or post is None or lp.shape != ll.shape:
            return None
        names = _parameter_names(self.analysis, set())
        columns, labels, variables = [], [], []
        for n in names:
            da = post[n]
            arr = np.asarray(da.transpose("chain", "draw", ...).values, dtype=float)
            if arr.shape[:2] != lp.shape or not np.all(np.isfinite(arr)):
                continue
            columns.append(arr.reshape(arr.shape[0], arr.shape[1], -1))
            new = _labels(n, da, self.one_based)
            labels += new
            variables += [n] * len(new)
        if not columns:
            return None
        draws = np.concatenate(columns, axis=2)
        try:
            s = psense_summary(draws, lp, ll)
        except (ValueError, FloatingPointError) as exc:
            self.errors.append(f"power-scaling sensitivity failed: {exc}")
            return None
        return Power(labels, variables, np.asarray(s.prior), np.asarray(s.likelihood),
                     list(s.diagnosis), s.pareto_k, s.threshold, source, left_out, without)

    def record(self) -> dict[str, Any]:
        """JSON-safe summary for the reports ({} when not computed)."""
        power = self.power
        if power is None:
            return {}
        return {
            "log_prior_source": power.log_prior_source,
            "threshold": power.threshold,
            "left_out": [{"variable": s.variable, "line": s.line, "text": s.text,
                          "reason": s.reason} for s in power.left_out],
            "rows": [{"quantity": q, "prior": float(p), "likelihood": float(lk),
                      "diagnosis": d}
                     for q, p, lk, d in zip(power.quantities, power.prior, power.likelihood,
                                            power.diagnosis, strict=True)],
        }

    @property
    def missing(self) -> str:
        """Why power-scaling could not be computed ("" when it was)."""
        if self.power is not None:
            return ""
        why = self.log_prior[4]
        if why:
            return why
        if self.log_likelihood is None:
            return "no pointwise log-likelihood"
        return "the log-prior and log-likelihood draws do not match the posterior draws"

    @cached_property
    def contraction(self) -> dict[str, float]:
        """1 - Var_post / Var_prior per quantity label, for parameters with prior draws."""
        post, prior = self.analysis.group("posterior"), self.analysis.group("prior")
        if post is None or prior is None:
            return {}
        out: dict[str, float] = {}
        for n in _parameter_names(self.analysis, set()):
            if n not in prior.data_vars:
                continue
            a = np.asarray(post[n].transpose("chain", "draw", ...).values, dtype=float)
            b = np.asarray(prior[n].transpose("chain", "draw", ...).values, dtype=float)
            a = a.reshape(a.shape[0] * a.shape[1], -1)
            b = b.reshape(b.shape[0] * b.shape[1], -1)
            if a.shape[1] != b.shape[1]:
                continue
            with np.errstate(all="ignore"):
                ratio = np.var(a, axis=0, ddof=1) / np.var(b, axis=0, ddof=1)
            for label, r in zip(_labels(n, post[n], self.one_based), ratio, strict=True):
                if np.isfinite(r):
                    out[label] = float(1.0 - r)
        return out
