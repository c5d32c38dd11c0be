"""Count divergent transitions after warmup and say where they sit."""

from __future__ import annotations

from auditor.rulekit import centered_over, divergence_sites, parameter_index, sample_stat


def _where(site: dict) -> str:
    name = f"log {site['quantity']}" if site["log"] else site["quantity"]
    side = "lower" if site["distance"] < 0 else "higher"
    return (f"{name} ({side}: distance {site['distance']:+.2f}; mean "
            f"{site['divergent_mean']:.3g} in divergent draws, {site['other_mean']:.3g} in the "
            "others)")


def _statement(decl, variable: str) -> str:
    """``theta ~ normal(mu, tau)`` as written, for the prior of ``decl`` scaled by ``variable``."""
    for dist in decl.priors:
        scale = dist.scale_arg()
        if scale is not None and variable in scale.names:
            args = ", ".join(a.text for a in dist.args)
            return f"`{decl.name} ~ {dist.family}({args})`"
    return f"`{decl.name}`"


def check(ctx):
    """One finding when the post-warmup divergence count exceeds ``max_divergent``."""
    div = sample_stat(ctx, "diverging")
    if div is None:
        return
    div = div.astype(bool)
    count = int(div.sum())
    if count <= int(ctx.thresholds["max_divergent"]):
        return
    total = div.size
    per_chain = [int(c) for c in div.sum(axis=1)]
    delta = ctx.analysis.settings.adapt_delta
    message = (
        f"{count} of {total} transitions after warmup diverged ({100 * count / total:.1f}%); "
        f"per chain {per_chain}" + (f"; adapt_delta = {delta:g}" if delta is not None else "")
    )
    min_distance = float(ctx.thresholds["min_distance"])
    sites = [s for s in divergence_sites(ctx, div, parameter_index(ctx))
             if abs(s["distance"]) >= min_distance]
    shown = sites[: max(1, int(ctx.thresholds["sites"]))]
    target = float(ctx.thresholds["raise_adapt_delta_to"])
    raise_delta = (f"Raise adapt_delta (now {delta:g}) to {target:g} or more"
                   if delta is not None and delta < target
                   else f"Raise adapt_delta to {target:g} or more")
    cause, fix, quantity, centered = "unknown", None, None, []
    if shown:
        top = shown[0]
        quantity = top["quantity"]
        message += "; the divergent draws sit apart in " + ", ".join(_where(s) for s in shown)
        funnel = top["log"] and top["distance"] < 0
        variable = quantity.split("[", 1)[0]
        decls = centered_over(ctx, variable)
        centered = [d.name for d in decls]
        if centered:
            cause = "centered-hierarchy"
            names = ", ".join(f"`{n}`" for n in centered)
            statements = "; ".join(_statement(d, variable) for d in decls)
            message += (f": small {quantity} is the neck of the funnel that the centered "
                        f"hierarchy {statements} makes")
            fix = (f"Write {names} in non-centered form (Stan: `<offset=mu, multiplier="
                   f"{quantity}>`; or `z ~ normal(0, 1)` with `theta = mu + {quantity} * z`); "
                   f"{raise_delta[0].lower() + raise_delta[1:]} only if divergences remain.")
        elif funnel:
            cause = "funnel"
            message += (f": they gather where {quantity} is small, the pattern of a funnel's "
                        "neck")
            fix = (f"If {quantity} is the scale of group-level effects, write those effects in "
                   f"non-centered form; otherwise {raise_delta[0].lower() + raise_delta[1:]} "
                   "(or reparameterize the region named above).")
    if fix is None:
        where = ("the region named above" if shown else
                 "where they sit (a pairs plot of the parameters shows it)")
        fix = (f"{raise_delta} so that the step size can follow the curvature, and reparameterize "
               f"{where} if divergences remain.")
    yield ctx.finding(
        message,
        evidence={
            "divergent": count,
            "transitions": total,
            "share": round(count / total, 6),
            "per_chain": per_chain,
            "adapt_delta": delta,
            "cause": cause,
            "centered": centered,
            "sites": [{k: (round(v, 4) if isinstance(v, float) else v) for k, v in s.items()}
                      for s in shown],
        },
        quantity=quantity,
        fix=fix,
    )
