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

from auditor.diagnostics import element_blocks

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
                return _summed_variable(post[name], self.analysis.whole_limit), CONFIGURED, \
                    [], [], ""
            return None, CONFIGURED, [], [], (f"the configured log_prior = {name!r} is not "
                                              "among the draws")
        prog = self.analysis.program
        if prog is None or prog.syntax_errors or post is None:
            return None, "", [], [], ("no log-prior: no log_prior group, no `log_prior` "
                                      "variable configured, and no program to evaluate")
        from auditor.logprior import evaluate_log_prior

        draws: Any = post
        limit = self.analysis.whole_limit
        if limit is not None:
            # Draws read lazily: only the program's variables, and only when they fit.
            names = [n for n in (d.name for d in prog.declarations.values())
                     if n in post.data_vars and "chain" in post[n].dims]
            size = sum(int(post[n].nbytes) for n in names)
            if size > limit:
                return None, PROGRAM, [], [], (
                    f"the program's priors were not evaluated: its variables' draws hold "
                    f"{size / 1e6:,.0f} MB, more than the {limit / 1e6:,.0f} MB that may be "
                    "read whole (save the log-prior among the draws, e.g. `lprior`, and name "
                    "it with log_prior)")
            draws = {n: np.asarray(post[n].transpose("chain", "draw", ...).values)
                     for n in names}
        try:
            found = evaluate_log_prior(prog, draws, self.analysis.data)
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
        from auditor.kernels.psense import Sensitivity, diagnose, psense_summary

        lp, source, left_out, without, _ = self.log_prior
        ll = self.log_likelihood
        post = self.analysis.group("posterior")
        if lp is None or ll is None or post is None or lp.shape != ll.shape:
            return None
        names = _parameter_names(self.analysis, set())
        prior_s, lik_s, labels, variables = [], [], [], []
        found = None
        per_block = _per_block(lp.shape)
        for n in names:
            da = post[n]
            if tuple(int(da.sizes[d]) for d in ("chain", "draw")) != lp.shape:
                continue
            # Quantities are independent in the kernel, so the variable is taken block by
            # block (a posterior read lazily is never loaded whole); a variable with a
            # non-finite draw is left out, as a whole.
            parts: list[Any] = []
            for _, block in element_blocks(da, per_block):
                block = np.asarray(block, dtype=float)
                if not np.all(np.isfinite(block)):
                    parts = []
                    break
                try:
                    found = psense_summary(block, lp, ll)
                except (ValueError, FloatingPointError) as exc:
                    self.errors.append(f"power-scaling sensitivity failed: {exc}")
                    return None
                parts.append(found)
            if not parts:
                continue
            prior_s += [p.prior for p in parts]
            lik_s += [p.likelihood for p in parts]
            new = _labels(n, da, self.one_based)
            labels += new
            variables += [n] * len(new)
        if found is None or not labels:
            return None
        prior, likelihood = np.concatenate(prior_s), np.concatenate(lik_s)
        s = Sensitivity(prior, likelihood, diagnose(prior, likelihood, found.threshold),
                        found.pareto_k, found.threshold)
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
            a_da, b_da = post[n], prior[n]
            if _elements(a_da) != _elements(b_da):
                continue
            labels = _labels(n, a_da, self.one_based)
            per_block = _per_block((int(a_da.sizes["chain"]), int(a_da.sizes["draw"])))
            # Block by block, the posterior's and the prior's elements side by side.
            for (first, a), (_, b) in zip(element_blocks(a_da, per_block),
                                          element_blocks(b_da, per_block), strict=True):
                a = np.asarray(a, dtype=float)
                b = np.asarray(b, dtype=float)
                a = a.reshape(a.shape[0] * a.shape[1], -1)
                b = b.reshape(b.shape[0] * b.shape[1], -1)
                with np.errstate(all="ignore"):
                    ratio = np.var(a, axis=0, ddof=1) / np.var(b, axis=0, ddof=1)
                for label, r in zip(labels[first:first + ratio.size], ratio, strict=True):
                    if np.isfinite(r):
                        out[label] = float(1.0 - r)
        return out


#: Working bytes of the draws of one block of quantities (power-scaling, contraction).
BLOCK_BYTES = 16 * 2**20


def _per_block(shape: tuple[int, ...]) -> int:
    """Quantities per block of draws of ``shape`` (chains, draws)."""
    return max(1, BLOCK_BYTES // max(1, 8 * int(np.prod(shape))))


def _elements(da: Any) -> int:
    """Elements of one draw of a (chain, draw, ...) variable."""
    return int(np.prod([da.sizes[d] for d in da.dims if d not in ("chain", "draw")]))


def _summed_variable(da: Any, limit: int | None) -> np.ndarray:
    """A variable summed over its elements per draw (chains, draws); block by block when
    it was read lazily and does not fit within ``limit``."""
    da = da.transpose("chain", "draw", ...)
    if limit is None or int(da.nbytes) <= limit:
        arr = np.asarray(da.values, float)
        return arr.reshape(arr.shape[0], arr.shape[1], -1).sum(axis=2)
    total = np.zeros((int(da.sizes["chain"]), int(da.sizes["draw"])))
    for _, block in element_blocks(da, _per_block(total.shape)):
        total += np.asarray(block, float).sum(axis=2)
    return total
