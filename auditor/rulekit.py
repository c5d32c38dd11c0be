"""Small helpers that several rule checks share (rules import this; it imports no rule)."""

from __future__ import annotations

from collections import defaultdict
from collections.abc import Iterator

import numpy as np

from auditor.findings import Finding, Location
from auditor.programs.summary import Declaration, Distribution
from auditor.rules_api import RuleContext


def low_ess_findings(ctx: RuleContext, column: str, label: str) -> Iterator[Finding]:
    """Findings for variables whose ``column`` ESS is below ``min_per_chain`` x chains
    (or below ``min_total`` when that is higher)."""
    chains = max(ctx.analysis.n_chains, 1)
    per_chain = float(ctx.thresholds["min_per_chain"])
    floor = float(ctx.thresholds.get("min_total", 0))
    limit = max(per_chain * chains, floor)
    basis = ("the required minimum" if floor > per_chain * chains
             else f"{per_chain:g} per chain x {chains} chains")
    by_var = defaultdict(list)
    for row in ctx.diagnostics.rows:
        if not row["constant"] and row[column] is not None:
            by_var[row["variable"]].append(row)
    for var, rows in by_var.items():
        bad = [r for r in rows if r[column] < limit]
        if not bad:
            continue
        worst = min(bad, key=lambda r: r[column])
        share = f"{len(bad)} of {len(rows)} elements of {var}" if len(rows) > 1 else var
        yield ctx.finding(
            f"{label} of {share} below {limit:g} ({basis}); "
            f"lowest {worst['quantity']} = {worst[column]:.0f}",
            evidence={
                column: round(worst[column], 2),
                "threshold": limit,
                "per_chain": per_chain,
                "min_total": floor,
                "chains": chains,
                "flagged": len(bad),
                "elements": len(rows),
            },
            quantity=worst["quantity"],
        )


def draws_blocks(da, block_bytes: int = 16 * 2**20) -> Iterator[np.ndarray]:  # noqa: ANN001
    """The draws of one (chain, draw, ...) variable in blocks of elements, each (chains,
    draws, k) in C order (of about ``block_bytes``), so that draws read lazily are never
    loaded whole."""
    from auditor.diagnostics import element_blocks

    per_draw = 8 * int(da.sizes["chain"]) * int(da.sizes["draw"])
    for _, block in element_blocks(da, max(1, block_bytes // max(1, per_draw))):
        yield block


def sample_stat(ctx: RuleContext, name: str) -> np.ndarray | None:
    """Sampler statistic ``name`` as a (chain, draw) array, or ``None`` when absent."""
    ds = ctx.analysis.group("sample_stats")
    if ds is None or name not in ds.data_vars:
        return None
    return np.asarray(ds[name].transpose("chain", "draw", ...).values)


#: Blocks whose declarations take prior statements.
PRIOR_BLOCKS = ("parameters", "transformed parameters")


def prior_statements(ctx: RuleContext) -> Iterator[tuple[Declaration, Distribution]]:
    """Every prior statement of the program with its variable; none when it does not parse."""
    prog = ctx.analysis.program
    if prog is None or prog.syntax_errors:
        return
    for decl in prog.declarations.values():
        if decl.block in PRIOR_BLOCKS:
            for dist in decl.priors:
                yield decl, dist


def problem_findings(ctx: RuleContext, kind: str) -> Iterator[Finding]:
    """One finding per input problem of ``kind`` recorded while loading the analysis.

    A finding points at the file only when the file is inside the project; a path
    outside it is named in the message, never given to reviewers' tools as a place.
    """
    for p in ctx.analysis.problems:
        if p.kind != kind:
            continue
        path = ctx.project.relpath(p.path)
        inside = not (path.startswith("/") or path.startswith(".."))
        yield ctx.finding(
            f"{path}" + (f", line {p.line}" if p.line else "") + f": {p.message}",
            evidence={"file": path, "line": p.line},
            location=Location(path, p.line) if inside else None,
        )


# --------------------------------------------------------------------------- predictive checks


def likelihood_of(ctx: RuleContext, observed: str) -> Distribution | None:
    """The program's likelihood statement of ``observed``, when the program has one."""
    prog = ctx.analysis.program
    if prog is None:
        return None
    for lik in prog.likelihoods:
        if lik.variable == observed:
            return lik.distribution
    return None


def observed_location(ctx: RuleContext, observed: str) -> Location | None:
    """Where a predictive finding about ``observed`` points: its likelihood statement,
    else its declaration, else (``None``) the analysis's first draws file."""
    dist = likelihood_of(ctx, observed)
    if dist is not None:
        return ctx.location_of(dist)
    prog = ctx.analysis.program
    decl = prog.declarations.get(observed) if prog is not None else None
    return ctx.location_of(decl) if decl is not None else None


def observed_support(ctx: RuleContext, observed: str, kind: str):  # noqa: ANN201
    """The outcome's support: the program's declared bounds and type, else its kind."""
    from auditor.predictive_checks import support

    prog = ctx.analysis.program
    decl = prog.declarations.get(observed) if prog is not None else None
    lower = decl.lower.value if decl is not None and decl.lower is not None else None
    upper = decl.upper.value if decl is not None and decl.upper is not None else None
    return support(kind, lower, upper, integer_type=decl is not None and decl.type == "int")


# --- sampling rules that explain a cause (issue 12) --------------------------------------------
# Helpers of sampling.divergences, stuck-chain, step-size, thinning, nested-rhat and mcse.


def chain_names(ctx: RuleContext) -> list[str]:
    """Printable name of every chain: its id from the files (``chain 3``), else its position."""
    n = ctx.analysis.n_chains
    ids = ctx.analysis.settings.chain_ids
    if len(ids) == n:
        return [f"chain {i}" for i in ids]
    return [f"chain {i + 1}" for i in range(n)]


def chain_location(ctx: RuleContext, chain: int) -> Location | None:
    """The file of one chain when every chain has its own (CmdStan CSV), else the first file."""
    sources = ctx.analysis.sources
    if len(sources) == ctx.analysis.n_chains and 0 <= chain < len(sources):
        return Location(ctx.project.relpath(sources[chain]))
    return Location(ctx.project.relpath(sources[0])) if sources else None


def many_short_chains(ctx: RuleContext, min_chains: int, max_draws: int) -> bool:
    """True when the run has at least ``min_chains`` chains of fewer than ``max_draws`` draws,
    the regime where nested R-hat (Margossian et al. 2024) replaces the classic R-hat rule."""
    a = ctx.analysis
    return a.n_chains >= min_chains and 0 < a.n_draws < max_draws


def parameter_index(ctx: RuleContext) -> np.ndarray | None:
    """Table positions of the program's parameters, or ``None`` (all quantities) when the
    program is unknown or none of its parameters is in the posterior."""
    prog = ctx.analysis.program
    if prog is None or prog.syntax_errors:
        return None
    names = {d.name for d in prog.parameters}
    index = ctx.diagnostics.index_of(names) if names else np.array([], dtype=np.int64)
    return index if index.size else None


def divergence_sites(ctx: RuleContext, divergent: np.ndarray,
                     index: np.ndarray | None = None) -> list[dict]:
    """Quantities whose divergent draws lie farthest from the other draws, farthest first.

    For every quantity with finite, non-constant draws: the difference between the mean of the
    divergent draws and the mean of the others, divided by the sd of all draws (a standardized
    mean difference), on the log scale when every draw is positive (scales, where a funnel's
    neck opens up; Betancourt 2017). ``divergent`` is a (chain, draw) mask aligned with the
    posterior. Each site: ``quantity``, ``distance`` (signed: negative when the divergent draws
    sit lower), ``log`` (whether the log scale was used), ``divergent_mean`` and ``other_mean``
    (on the draws' own scale, geometric means for log-scale quantities).
    """
    table = ctx.diagnostics
    mask = np.asarray(divergent, dtype=bool).reshape(-1)
    n_div = int(mask.sum())
    chains, draws, total = table.shape
    if n_div == 0 or n_div == mask.size or chains * draws != mask.size or total == 0:
        return []
    sites: list[dict] = []
    labels = table.quantities
    with np.errstate(all="ignore"):
        rows = np.flatnonzero(mask)
        for idx, block in table.blocks(index=index):
            # (draws, q) with draws in (chain, draw) order, as the mask.
            values = np.asarray(block, dtype=np.float64).reshape(mask.size, -1)
            low, high = values.min(axis=0), values.max(axis=0)
            ok = np.isfinite(low) & np.isfinite(high) & (high > low)
            positive = ok & (low > 0)
            div_mean, other_mean, sd = (np.empty(values.shape[1]) for _ in range(3))
            for cols, scale in ((~positive, None), (positive, np.log)):
                if not cols.any():
                    continue
                part = values[:, cols] if scale is None else scale(values[:, cols])
                total = part.mean(axis=0)
                div = part[rows].mean(axis=0)
                div_mean[cols] = div
                other_mean[cols] = (total * mask.size - div * n_div) / (mask.size - n_div)
                sd[cols] = part.std(axis=0, ddof=1)
            distance = (div_mean - other_mean) / sd
            for j in np.flatnonzero(ok & np.isfinite(distance) & (sd > 0)):
                log = bool(positive[j])
                back = np.exp if log else float
                sites.append({
                    "quantity": labels[int(idx[j])],
                    "distance": float(distance[j]),
                    "log": log,
                    "divergent_mean": float(back(div_mean[j])),
                    "other_mean": float(back(other_mean[j])),
                })  # fmt: skip
    sites.sort(key=lambda s: (-abs(s["distance"]), s["quantity"]))
    return sites


def centered_over(ctx: RuleContext, variable: str) -> list[Declaration]:
    """Parameters drawn in centered form with ``variable`` in their prior's scale (a
    hierarchy ``theta ~ normal(mu, tau)`` over ``tau``, without an affine ``multiplier``)."""
    prog = ctx.analysis.program
    if prog is None or prog.syntax_errors or variable not in prog.declarations:
        return []
    out = []
    for name in prog.declarations[variable].scale_of:
        decl = prog.declarations.get(name)
        if decl is not None and decl.block in PRIOR_BLOCKS and decl.multiplier is None:
            out.append(decl)
    return out


def posterior_attr(ctx: RuleContext, name: str) -> object | None:
    """An attribute of the posterior group (or the tree), or ``None``."""
    tree = ctx.analysis.tree
    if tree is None:
        return None
    for node in (tree["posterior"] if "posterior" in tree.children else None, tree):
        if node is not None and name in node.attrs:
            return node.attrs[name]
    return None


# --- sensitivity (issue 11) ----------------------------------------------------------------


def sensitivity_findings(ctx: RuleContext, conflict: bool) -> Iterator[Finding]:
    """Findings of power-scaling sensitivity per variable: prior-data conflict
    (``conflict``) or a prior that dominates; statements left out of the log-prior are
    named in the message."""
    from auditor.kernels.psense import PRIOR_DATA_CONFLICT, STRONG_PRIOR, diagnose

    if ctx.sensitivity is None or ctx.sensitivity.power is None:
        return
    power = ctx.sensitivity.power
    limit = float(ctx.thresholds["threshold"])
    wanted = PRIOR_DATA_CONFLICT if conflict else STRONG_PRIOR
    diagnosis = diagnose(power.prior, power.likelihood, limit)
    by_var: dict[str, list[int]] = defaultdict(list)
    for i, d in enumerate(diagnosis):
        if d == wanted:
            by_var[power.variables[i]].append(i)
    left = power.left_out
    note = ""
    if left:
        listed = "; ".join(f"{s.text or s.variable} (line {s.line}: {s.reason})"
                           for s in left[:3])
        note = (f" The log-prior was evaluated from the program; {len(left)} statement"
                f"{'s were' if len(left) != 1 else ' was'} left out: {listed}"
                + ("; ..." if len(left) > 3 else "") + ".")
    total = {v: power.variables.count(v) for v in set(power.variables)}
    for var, idx in by_var.items():
        worst = max(idx, key=lambda i: power.prior[i])
        share = (f"{len(idx)} of {total[var]} elements of `{var}`" if total[var] > 1
                 else f"`{var}`")
        what = ("is sensitive to both the prior and the likelihood: prior-data conflict"
                if conflict else "is sensitive to the prior but not to the likelihood: a "
                "strong prior or a weak likelihood")
        yield ctx.finding(
            f"The posterior of {share} {what} (power-scaling sensitivity of "
            f"{power.quantities[worst]}: prior {power.prior[worst]:.3f}, likelihood "
            f"{power.likelihood[worst]:.3f}; threshold {limit:g}; log-prior from the "
            f"{power.log_prior_source}).{note}",
            evidence={"quantity": power.quantities[worst],
                      "prior_sensitivity": round(float(power.prior[worst]), 4),
                      "likelihood_sensitivity": round(float(power.likelihood[worst]), 4),
                      "threshold": limit, "flagged": len(idx),
                      "log_prior_source": power.log_prior_source,
                      "left_out_statements": len(left)},
            quantity=power.quantities[worst],
        )
