"""Flag variables whose rank-normalized R-hat exceeds the threshold, by how sure that is."""

from __future__ import annotations

from collections import defaultdict

import numpy as np

from auditor.findings import Severity
from auditor.kernels.chains import rhat_sure, split_chain_ess
from auditor.rulekit import many_short_chains

#: Fix of the warning: the run is too short to judge, not known to disagree.
SHORT_FIX = ("Run longer chains (more draws, and warmup) until every R-hat is at most 1.01 and "
             "ESS is at least 100 per chain; until then this run can neither show that the "
             "chains agree nor that they disagree, so do not report estimates from it.")


def _own_ess(ctx, rows: list[dict]) -> dict[int, float]:
    """Split chains' own ESS of each row (by id), from its draws."""
    table = ctx.diagnostics
    position = {q: k for k, q in enumerate(table.quantities)}
    index = np.array(sorted(position[r["quantity"]] for r in rows), dtype=np.int64)
    own: dict[int, float] = {}
    for idx, block in table.blocks(index=index):
        x = np.moveaxis(np.asarray(block, dtype=np.float64), 2, 0)  # (quantity, chain, draw)
        finite = np.isfinite(x).all(axis=(1, 2))
        ess = np.full(x.shape[0], np.nan)
        if finite.any():
            ess[finite] = split_chain_ess(x[finite])
        own.update({int(k): float(e) for k, e in zip(idx, ess, strict=True)})
    return {id(r): own[position[r["quantity"]]] for r in rows}


def check(ctx):
    """One finding per variable with an R-hat above ``max_rhat`` (worst element named).

    Error or warning by how sure the disagreement is: where the split chains hold at least
    ``min_ess_per_chain`` effective draws a chain of their own, an R-hat beyond what chains
    that long show by chance (:func:`~auditor.kernels.chains.rhat_noise_bound`) is an error;
    where they hold fewer, the run is too short to tell, and only an R-hat above
    ``gross_rhat`` is an error. Nothing for many short chains, where sampling.nested-rhat
    replaces this rule.
    """
    th = ctx.thresholds
    limit, gross = float(th["max_rhat"]), float(th["gross_rhat"])
    min_chains = int(th["nested_min_chains"])
    if min_chains > 0 and many_short_chains(ctx, min_chains, int(th["nested_max_draws"])):
        return  # many short chains: sampling.nested-rhat judges convergence
    # undefined R-hat is sampling.constant's business
    judged = [r for r in ctx.diagnostics.rows if not r["constant"] and r["rhat"] is not None]
    flagged = [r for r in judged if r["rhat"] > limit]
    if not flagged:
        return
    chains, draws = ctx.analysis.n_chains, ctx.analysis.n_draws
    own = _own_ess(ctx, flagged)
    enough = float(th["min_ess_per_chain"]) * chains
    sure_of, bounds = rhat_sure(
        [r["rhat"] for r in flagged], [own[id(r)] for r in flagged], draws=draws,
        chains=chains, gross=gross, alpha=float(th["noise_alpha"]),
        tests=2 * len(judged),  # bulk and folded R-hat of every quantity judged
        min_ess_per_chain=float(th["min_ess_per_chain"]))
    bound = dict(zip(map(id, flagged), bounds.tolist(), strict=True))
    sure = dict(zip(map(id, flagged), sure_of.tolist(), strict=True))

    by_var = defaultdict(list)
    for row in judged:
        by_var[row["variable"]].append(row)
    for var, rows in by_var.items():
        bad = [r for r in rows if r["rhat"] > limit]
        if not bad:
            continue
        beyond = [r for r in bad if sure[id(r)]]
        share = f"{len(bad)} of {len(rows)} elements of {var}" if len(rows) > 1 else var
        worst = max(beyond or bad, key=lambda r: r["rhat"])
        evidence = {"rhat": round(worst["rhat"], 6), "threshold": limit, "flagged": len(bad),
                    "beyond_chance": len(beyond), "elements": len(rows), "chains": chains,
                    "draws": draws}
        if np.isfinite(own[id(worst)]):
            evidence["ess_own"] = round(own[id(worst)], 1)
        if np.isfinite(bound[id(worst)]):
            evidence["chance_bound"] = round(bound[id(worst)], 6)
        head = f"R-hat of {share} above {limit:g}; worst {worst['quantity']} = {worst['rhat']:.3f}"
        if beyond:
            why = (f"above {gross:g}" if worst["rhat"] > gross else
                   f"beyond the {bound[id(worst)]:.3f} that chains of this length reach by chance")
            yield ctx.finding(f"{head}, {why}", evidence=evidence, quantity=worst["quantity"],
                              severity=ctx.pick_severity(Severity.ERROR))
        else:
            ess = own[id(worst)]
            if ess >= enough:
                why = (f"within the {bound[id(worst)]:.3f} that chains of this length reach by "
                       "chance: run longer to tell noise from chains that disagree")
            else:
                size = f"only {ess / chains:.0f}" if np.isfinite(ess) else "an unknown number of"
                why = (f"but the chains hold {size} effective draws each (under "
                       f"{enough / chains:g}): too short to tell noise from chains that disagree")
            yield ctx.finding(f"{head}, {why}", evidence=evidence, quantity=worst["quantity"],
                              severity=ctx.pick_severity(Severity.WARNING), fix=SHORT_FIX)
