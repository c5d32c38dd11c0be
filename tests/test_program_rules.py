"""Unit tests of the rules that read what a model program says.

Each check is run on ProgramSummary / Analysis objects built here directly, so
these tests do not depend on the Stan parser or the PyMC reader. Where a test
needs real sampler output or real data it reads the files written by CmdStan in
``../shared/reference-data/cmdstan-outputs/`` in place (see its README) with the
small independent readers below, and skips when that folder is absent.

Expected values come from the sources named beside each test: the Stan
Reference Manual's semantics, Gelman (2006), the data's own standard deviations
computed with Python's ``statistics`` module (not with the code under test), and
the contents of the reference files.
"""

from __future__ import annotations

import json
import re
import statistics
from pathlib import Path
from typing import Any

import numpy as np
import pytest
import xarray as xr

from auditor.findings import Finding, Severity
from auditor.model import Analysis, AnalysisSpec, Project
from auditor.programs.summary import (
    Arg,
    Bound,
    Declaration,
    Distribution,
    Likelihood,
    ProgramSummary,
    SyntaxProblem,
)
from auditor.registry import load_rule
from auditor.rules_api import RuleContext
from tests.conftest import REPO, require_shared

RULES = REPO / "rules"
PROGRAM = REPO / "model.stan"
_IDENT = re.compile(r"[A-Za-z_]\w*")


# ---------------------------------------------------------------- builders

def arg(text: str) -> Arg:
    """An argument as a reader would give it: literal value and referenced names."""
    try:
        value = float(text)
    except ValueError:
        value = None
    return Arg(text=text, value=value, names=tuple(_IDENT.findall(text)) if value is None else ())


def dist(family: str, *args: str, line: int = 1, truncation=None) -> Distribution:
    return Distribution(family=family, args=[arg(a) for a in args], line=line,
                        truncation=truncation)


def bound(text: str | None) -> Bound | None:
    if text is None:
        return None
    try:
        return Bound(text, float(text))
    except ValueError:
        return Bound(text, None)


def decl(name: str, *priors: Distribution, block: str = "parameters", type: str = "real",
         dims: tuple[str, ...] = (), lower: str | None = None, upper: str | None = None,
         line: int = 1, **kw: Any) -> Declaration:
    return Declaration(name=name, block=block, type=type, dims=dims, lower=bound(lower),
                       upper=bound(upper), line=line, priors=list(priors), **kw)


def program(*decls: Declaration, likelihoods: tuple[Likelihood, ...] = (),
            language: str = "stan") -> ProgramSummary:
    return ProgramSummary(language=language, path=str(PROGRAM),
                          declarations={d.name: d for d in decls},
                          likelihoods=list(likelihoods))


def lik(variable: str, d: Distribution, data_used: tuple[str, ...] = ()) -> Likelihood:
    return Likelihood(variable=variable, distribution=d, data_used=list(data_used))


def run(rule_id: str, prog: ProgramSummary | None, *, data: dict | None = None,
        tree: xr.DataTree | None = None, observed: str | None = None,
        severity: str | None = None, **thresholds: Any) -> list[Finding]:
    """Run one rule's check on an analysis built from the given parts."""
    stage, name = rule_id.split(".", 1)
    meta = load_rule(RULES / stage / name)
    spec = AnalysisSpec(name="t", draws=[], observed=observed)
    analysis = Analysis(name="t", tree=tree, program=prog, spec=spec,
                        data={k: np.asarray(v) for k, v in (data or {}).items()})
    ctx = RuleContext(rule=meta, analysis=analysis, project=Project(root=REPO),
                      thresholds={**meta.thresholds, **thresholds},
                      severity=Severity(severity) if severity else meta.severity,
                      diagnostics=None)  # type: ignore[arg-type]  # these rules do not read it
    return list(meta.check(ctx))


def posterior_tree(shapes: dict[str, tuple[int, ...]], chains: int = 2, draws: int = 5,
                   diverging: np.ndarray | None = None) -> xr.DataTree:
    post = xr.Dataset({
        n: (("chain", "draw", *[f"{n}_dim_{i}" for i in range(len(s))]),
            np.zeros((chains, draws, *s)))
        for n, s in shapes.items()
    })
    groups = {"posterior": post}
    if diverging is not None:
        groups["sample_stats"] = xr.Dataset({"diverging": (("chain", "draw"), diverging)})
    return xr.DataTree.from_dict(groups)


# ------------------------------------------- independent readers of real files

def read_r_dump(path: Path) -> dict[str, np.ndarray]:
    """Numbers of an R dump file (``name <- value``), enough for the reference files."""
    text = path.read_text()
    marks = list(re.finditer(r"^\s*([A-Za-z_.]\w*)\s*<-", text, flags=re.M))
    out = {}
    number = r"-?\d+(?:\.\d*)?(?:[eE][-+]?\d+)?"
    for i, m in enumerate(marks):
        body = text[m.end(): marks[i + 1].start() if i + 1 < len(marks) else len(text)]
        dim = re.search(r"\.Dim\s*=\s*c\(([^)]*)\)", body)
        values_part = body[: dim.start()] if dim else body
        values = np.array([float(v) for v in re.findall(number, values_part)])
        if dim:
            shape = tuple(int(v) for v in re.findall(r"\d+", dim.group(1)))
            values = values.reshape(shape, order="F")  # R stores column-major
        elif values.size == 1 and "c(" not in body:
            values = values.reshape(())
        out[m.group(1)] = values
    return out


def read_stan_csv(paths: list[Path]) -> xr.DataTree:
    """Posterior and ``diverging`` of CmdStan CSV files, one file per chain."""
    chains = []
    for p in paths:
        rows = [ln for ln in p.read_text().splitlines() if ln and not ln.startswith("#")]
        header = rows[0].split(",")
        chains.append((header, np.array([[float(v) for v in r.split(",")] for r in rows[1:]])))
    header = chains[0][0]
    values = np.stack([c[1] for c in chains])  # chain, draw, column
    groups: dict[str, dict[tuple[int, ...], int]] = {}
    for j, col in enumerate(header):
        base, *idx = col.split(".")
        groups.setdefault(base, {})[tuple(int(i) - 1 for i in idx)] = j
    post = {}
    for base, cols in groups.items():
        if base.endswith("__"):
            continue
        shape = tuple(max(k[d] for k in cols) + 1 for d in range(len(next(iter(cols)))))
        arr = np.zeros((values.shape[0], values.shape[1], *shape))
        for k, j in cols.items():
            arr[(slice(None), slice(None), *k)] = values[:, :, j]
        post[base] = (("chain", "draw", *[f"{base}_dim_{i}" for i in range(len(shape))]), arr)
    stats = {"diverging": (("chain", "draw"), values[:, :, header.index("divergent__")] > 0)}
    return xr.DataTree.from_dict({"posterior": xr.Dataset(post),
                                  "sample_stats": xr.Dataset(stats)})


def _cmdstan(*parts: str) -> Path:
    return require_shared().joinpath("cmdstan-outputs", *parts)


# ------------------------------------------------------------ priors.missing

def test_missing_unbounded_parameter_is_an_improper_flat_prior():
    # Stan Reference Manual, model block: an unmentioned parameter adds nothing to
    # the log density, i.e. a uniform prior, improper over an unbounded range.
    prog = program(decl("alpha", line=8), decl("beta", dist("normal", "0", "1"), line=9))
    found = run("priors.missing", prog)
    assert [(f.quantity, f.severity, f.location.line) for f in found] == [
        ("alpha", Severity.ERROR, 8)]
    assert found[0].location.path == "model.stan"
    assert found[0].evidence["implicit_prior"] == "flat (improper)"


def test_missing_one_sided_bound_is_still_improper():
    # Same manual: <lower=0> alone leaves (0, inf), on which a uniform is improper.
    found = run("priors.missing", program(decl("sigma", lower="0", line=3)))
    assert found[0].severity is Severity.ERROR


def test_missing_two_sided_bounds_give_a_proper_uniform_warning():
    # A uniform over a bounded interval (0, 1) is proper: a warning, not an error.
    found = run("priors.missing", program(decl("p", lower="0", upper="1", line=4)))
    assert [(f.severity, f.location.line) for f in found] == [(Severity.WARNING, 4)]
    assert found[0].evidence["implicit_prior"] == "uniform (proper)"


def test_missing_simplex_is_proper_uniform():
    # The uniform density on a simplex is the (proper) Dirichlet(1, ..., 1)
    # (Stan Reference Manual, constrained types; from memory).
    found = run("priors.missing", program(decl("w", type="simplex", dims=("K",))))
    assert found[0].severity is Severity.WARNING


def test_missing_offset_multiplier_gives_no_prior():
    # The affine transform is a reparameterization with its Jacobian; it adds no
    # prior (Stan Reference Manual, affinely transformed reals).
    d = decl("gamma", line=11, offset="0", multiplier="5")
    found = run("priors.missing", program(d))
    assert found[0].severity is Severity.ERROR
    assert "offset/multiplier" in found[0].message
    assert found[0].evidence["multiplier"] == "5"


def test_missing_ignores_pymc_and_broken_programs():
    # PyMC free random variables always carry a distribution.
    assert run("priors.missing", program(decl("a"), language="pymc")) == []
    broken = program(decl("a"))
    broken.syntax_errors.append(SyntaxProblem("unexpected '}'", 3, 1, str(PROGRAM)))
    assert run("priors.missing", broken) == []
    assert run("priors.missing", None) == []


def test_findings_point_into_included_files():
    # A declaration or statement written in an #include'd file is reported there.
    inc = REPO / "inc" / "priors.stanfunctions"
    d = decl("alpha", line=3)
    d.path = str(inc)
    (f,) = run("priors.missing", program(d))
    assert (f.location.path, f.location.line) == ("inc/priors.stanfunctions", 3)
    prior = dist("normal", "0", "1000", line=7)
    prior.path = str(inc)
    (f,) = run("priors.vague", program(decl("b", prior)))
    assert (f.location.path, f.location.line) == ("inc/priors.stanfunctions", 7)


def test_missing_configured_severity_wins():
    found = run("priors.missing", program(decl("alpha")), severity="note")
    assert found[0].severity is Severity.NOTE


# --------------------------------------------------------------- priors.flat

def test_flat_improper_pymc_priors_are_errors():
    prog = program(decl("level", dist("flat", line=9)),
                   decl("spread", dist("half_flat", line=10), lower="0"), language="pymc")
    found = run("priors.flat", prog)
    assert sorted((f.quantity, f.severity, f.location.line) for f in found) == [
        ("level", Severity.ERROR, 9), ("spread", Severity.ERROR, 10)]


def test_flat_wide_uniform_warns_with_width():
    prog = program(decl("mu", dist("uniform", "0", "1000", line=12), lower="0", upper="1000"))
    (f,) = run("priors.flat", prog)
    assert (f.severity, f.location.line, f.evidence["width"]) == (Severity.WARNING, 12, 1000.0)


def test_flat_uniform_threshold_is_strict_and_configurable():
    narrow = program(decl("mu", dist("uniform", "-50", "50")))  # width exactly 100
    assert run("priors.flat", narrow) == []
    assert len(run("priors.flat", narrow, max_uniform_width=10.0)) == 1


def test_flat_uniform_with_unknown_bounds_is_not_judged():
    assert run("priors.flat", program(decl("mu", dist("uniform", "0", "U")))) == []


# -------------------------------------------------------------- priors.vague

def test_vague_without_data_uses_absolute_scale():
    prog = program(
        decl("b", dist("normal", "0", "1000", line=5)),       # the canonical bad case
        decl("c", dist("normal", "0", "100", line=6)),        # at the limit, not above
        decl("d", dist("student_t", "3", "0", "500", line=7)),
        decl("s", dist("cauchy", "0", "250", line=8), lower="0"),
    )
    found = run("priors.vague", prog)
    assert sorted((f.quantity, f.location.line) for f in found) == [
        ("b", 5), ("d", 7), ("s", 8)]
    b = next(f for f in found if f.quantity == "b")
    assert b.evidence["prior_scale"] == 1000.0 and b.evidence["data_scale"] is None


def test_vague_pymc_half_normal_scale():
    prog = program(decl("sigma", dist("half_normal", "1000", line=4), lower="0"),
                   language="pymc")
    assert [f.location.line for f in run("priors.vague", prog)] == [4]


def test_vague_coefficient_against_sd_y_over_sd_x():
    # Data scale of a slope: sd(y) / sd(x), with sample sds from `statistics`.
    y = [2.1, 2.4, 2.5, 2.9, 3.0, 3.4]
    x = [60, 64, 68, 72, 76, 80]
    prog = program(
        decl("alpha", dist("normal", "0", "5")),
        decl("beta", dist("normal", "0", "10", line=14)),
        decl("sigma", dist("normal", "0", "1"), lower="0"),
        likelihoods=(lik("y", dist("normal", "alpha + beta * x", "sigma", line=16), ("x",)),),
    )
    (f,) = run("priors.vague", prog, data={"y": y, "x": x})
    expected_scale = statistics.stdev(y) / statistics.stdev(x)
    assert f.quantity == "beta" and f.location.line == 14
    assert f.evidence["data_scale"] == pytest.approx(expected_scale)
    assert f.evidence["ratio"] == pytest.approx(10 / expected_scale)


def test_vague_standardized_predictor_compares_with_sd_y():
    # For a standardized predictor (sd 1) the slope's data scale is sd(y).
    x = [-1.5, -0.5, 0.5, 1.5]
    x = [v / statistics.stdev(x) for v in x]
    y = [10.0, 14.0, 9.0, 13.0]
    prog = program(decl("b", dist("normal", "0", "1000")),
                   likelihoods=(lik("y", dist("normal", "b * x", "1")),))
    (f,) = run("priors.vague", prog, data={"y": y, "x": x})
    assert f.evidence["data_scale"] == pytest.approx(statistics.stdev(y))


def test_vague_wide_prior_on_data_in_large_units_is_fine():
    # normal(0, 1000) on a slope when y is in grams (sd ~ 470) and x in days:
    # the ratio is below 100 although the absolute limit of 100 is exceeded.
    y = [2100, 2400, 2500, 2900, 3000, 3400]
    x = [60, 64, 68, 72, 76, 80]
    prog = program(decl("beta", dist("normal", "0", "1000")),
                   decl("alpha", dist("normal", "0", "5000")),
                   likelihoods=(lik("y", dist("normal", "alpha + beta * x", "20")),))
    assert run("priors.vague", prog, data={"y": y, "x": x}) == []
    # Without the data the same priors are flagged by the absolute limit.
    assert len(run("priors.vague", prog)) == 2


def test_vague_factor_of_unknown_value_is_not_an_intercept():
    # x_std is transformed data (not in the data file): beta * x_std has no known
    # data scale, so beta falls back to the absolute limit instead of being taken
    # for an intercept.
    y = [2100.0, 2400.0, 2500.0, 2900.0]
    prog = program(decl("beta", dist("normal", "0", "1000")),
                   likelihoods=(lik("y", dist("normal", "beta * x_std", "20")),))
    (f,) = run("priors.vague", prog, data={"y": y})
    assert f.evidence["data_scale"] is None and f.evidence["max_scale"] == 100.0


def test_vague_intercept_and_sigma_scales():
    # An intercept's scale is the larger of |mean(y)| and sd(y); sigma's is sd(y).
    y = [0.3, -0.2, 0.1, -0.4, 0.2]
    prog = program(decl("alpha", dist("normal", "0", "1000")),
                   decl("sigma", dist("normal", "0", "1000"), lower="0"),
                   likelihoods=(lik("y", dist("normal", "alpha", "sigma")),))
    found = {f.quantity: f for f in run("priors.vague", prog, data={"y": y})}
    sd, mean = statistics.stdev(y), statistics.mean(y)
    assert found["alpha"].evidence["data_scale"] == pytest.approx(max(abs(mean), sd))
    assert found["sigma"].evidence["data_scale"] == pytest.approx(sd)


def test_vague_hierarchy_inherits_data_scale():
    # mu and tau of theta ~ normal(mu, tau) take theta's data scale.
    y = [28.0, 8.0, -3.0, 7.0, -1.0, 1.0, 18.0, 12.0]  # Rubin (1981) eight schools
    mu = decl("mu", dist("normal", "0", "5000"), location_of=["theta"])
    tau = decl("tau", dist("normal", "0", "5"), lower="0", scale_of=["theta"])
    theta = decl("theta", dist("normal", "mu", "tau"), type="vector", dims=("J",))
    prog = program(mu, tau, theta,
                   likelihoods=(lik("y", dist("normal", "theta", "sigma"), ("sigma",)),))
    (f,) = run("priors.vague", prog, data={"y": y, "sigma": [15.0] * 8, "J": 8})
    assert f.quantity == "mu"
    sd, mean = statistics.stdev(y), statistics.mean(y)
    assert f.evidence["data_scale"] == pytest.approx(max(abs(mean), sd))


def test_vague_logit_link_uses_unit_scale_on_real_data():
    # Real data written for CmdStan's logistic example: y is 0/1 and x is a
    # 128 x 2 matrix whose first column is the intercept's ones. Under the logit
    # link the outcome scale is 1, so beta's data scale is 1 / sd(x[, 2]) (the
    # constant column has no spread and is skipped).
    data = read_r_dump(_cmdstan("cmdstanpy-misc", "logistic.data.R"))
    assert data["x"].shape == (128, 2) and np.all(data["x"][:, 0] == 1)
    prog = program(decl("beta", dist("normal", "0", "1000", line=9), type="vector",
                        dims=("M",)),
                   likelihoods=(lik("y", dist("bernoulli_logit", "x * beta")),))
    (f,) = run("priors.vague", prog, data=data)
    sd_x2 = statistics.stdev(float(v) for v in data["x"][:, 1])
    assert f.evidence["data_scale"] == pytest.approx(1 / sd_x2)
    assert f.evidence["ratio"] == pytest.approx(1000 * sd_x2)
    # A weakly informative normal(0, 2.5) (Gelman et al. 2008) is not flagged.
    prog.declarations["beta"].priors = [dist("normal", "0", "2.5")]
    assert run("priors.vague", prog, data=data) == []


def test_vague_glm_exponential_and_lognormal():
    # normal_id_glm(x, alpha, beta, sigma) is y ~ normal(alpha + x * beta, sigma)
    # (Stan Functions Reference, GLM distributions).
    y, x = [3.0, 5.0, 4.0, 6.0], [1.0, 2.0, 3.0, 4.0]
    prog = program(decl("alpha", dist("normal", "0", "10")),
                   decl("beta", dist("normal", "0", "1000", line=3)),
                   decl("sigma", dist("exponential", "0.001", line=4), lower="0"),
                   likelihoods=(lik("y", dist("normal_id_glm", "x", "alpha", "beta", "sigma")),))
    found = {f.quantity: f for f in run("priors.vague", prog, data={"y": y, "x": x})}
    assert set(found) == {"beta", "sigma"}
    assert found["beta"].evidence["data_scale"] == pytest.approx(
        statistics.stdev(y) / statistics.stdev(x))
    # exponential(rate) has scale 1 / rate; sigma's data scale is sd(y).
    assert found["sigma"].evidence["prior_scale"] == pytest.approx(1000.0)
    assert found["sigma"].evidence["data_scale"] == pytest.approx(statistics.stdev(y))
    # lognormal: the location and scale live on log(y).
    logs = [1.0, 1.5, 2.5, 3.0]
    pos = [float(np.exp(v)) for v in logs]
    prog = program(decl("m", dist("normal", "0", "1000")),
                   decl("s", dist("normal", "0", "1000"), lower="0"),
                   likelihoods=(lik("y", dist("lognormal", "m", "s")),))
    found = {f.quantity: f for f in run("priors.vague", prog, data={"y": pos})}
    assert found["s"].evidence["data_scale"] == pytest.approx(statistics.stdev(logs))
    assert found["m"].evidence["data_scale"] == pytest.approx(
        max(statistics.mean(logs), statistics.stdev(logs)))


def test_vague_ratio_threshold_is_configurable():
    y, x = [1.0, 2.0, 3.0], [1.0, 2.0, 3.0]
    prog = program(decl("b", dist("normal", "0", "50")),
                   likelihoods=(lik("y", dist("normal", "b * x", "1")),))
    assert run("priors.vague", prog, data={"y": y, "x": x}) == []
    assert len(run("priors.vague", prog, data={"y": y, "x": x}, max_scale_ratio=10.0)) == 1


# ---------------------------------------------- priors.inverse-gamma-epsilon

def test_inverse_gamma_epsilon_on_variance_and_gamma_on_precision():
    # Gelman (2006), section 3: inverse-gamma(eps, eps) with eps = 0.001 on a
    # variance, the same as gamma(eps, eps) on the precision.
    prog = program(decl("tau2", dist("inv_gamma", "0.001", "0.001", line=18), lower="0"),
                   decl("prec", dist("gamma", "0.001", "0.001", line=19), lower="0"),
                   decl("ok", dist("inv_gamma", "1", "1"), lower="0"),
                   decl("half", dist("inv_gamma", "0.001", "1"), lower="0"))
    found = run("priors.inverse-gamma-epsilon", prog)
    assert sorted((f.quantity, f.location.line, f.severity) for f in found) == [
        ("prec", 19, Severity.WARNING), ("tau2", 18, Severity.WARNING)]


def test_inverse_gamma_epsilon_threshold():
    prog = program(decl("v", dist("inv_gamma", "0.05", "0.05"), lower="0"),
                   decl("w", dist("inv_gamma", "a", "0.001"), lower="0"))
    assert run("priors.inverse-gamma-epsilon", prog) == []
    found = run("priors.inverse-gamma-epsilon", prog, max_eps=0.1)
    assert [f.quantity for f in found] == ["v"]


# ------------------------------------------------------ priors.support-mismatch

def test_support_uniform_cut_inside_declared_range_warns():
    # <lower=0> declares (0, inf); uniform(0, 100) has density only on (0, 100).
    prog = program(decl("sigma", dist("uniform", "0", "100", line=15), lower="0"))
    (f,) = run("priors.support-mismatch", prog)
    assert (f.severity, f.location.line) == (Severity.WARNING, 15)
    assert (f.evidence["declared_support"], f.evidence["prior_support"]) == (
        "(0, +inf)", "(0, 100)")
    assert f.evidence["declared_upper"] is None and f.evidence["prior_upper"] == 100.0


def test_support_matching_or_wider_priors_are_fine():
    prog = program(
        decl("sigma", dist("uniform", "0", "100"), lower="0", upper="100"),
        decl("tau", dist("normal", "0", "1"), lower="0"),       # a proper half-normal
        decl("rate", dist("gamma", "2", "2"), lower="0"),
        decl("p", dist("beta", "2", "2"), lower="0", upper="1"),
        decl("nu", dist("gamma", "2", "0.1"), lower="1"),        # narrower than (0, inf)
        decl("w", dist("beta", "1", "1"), type="simplex", dims=("K",)),
    )
    assert run("priors.support-mismatch", prog) == []


def test_support_positive_prior_on_unbounded_parameter_is_error():
    prog = program(decl("slope", dist("gamma", "2", "2", line=16)),
                   decl("base", dist("beta", "2", "2", line=17), lower="0"),
                   decl("s", dist("lognormal", "0", "1", line=18), lower="-1"))
    found = run("priors.support-mismatch", prog)
    assert sorted((f.quantity, f.severity, f.location.line) for f in found) == [
        ("base", Severity.ERROR, 17), ("s", Severity.ERROR, 18), ("slope", Severity.ERROR, 16)]


def test_support_bounds_from_data_and_unknown_bounds():
    prog = program(decl("a", dist("exponential", "1"), lower="L"),
                   decl("b", dist("exponential", "1"), lower="mu"))  # a parameter: unknown
    assert run("priors.support-mismatch", prog, data={"L": 0}) == []
    found = run("priors.support-mismatch", prog, data={"L": -2})
    assert [(f.quantity, f.evidence["declared_lower"]) for f in found] == [("a", -2.0)]


def test_support_truncated_prior_narrows_support():
    # normal(0, 1) T[0, ] has support (0, inf): on an unbounded parameter the
    # declaration is wider than the prior. The cut is stated (a truncation), so,
    # like uniform's ends, it is a warning.
    prog = program(decl("x", dist("normal", "0", "1", truncation=("0", None))))
    (f,) = run("priors.support-mismatch", prog)
    assert (f.evidence["prior_support"], f.severity) == ("(0, +inf)", Severity.WARNING)
    # gamma T[, 10] on an unbounded parameter: the family itself excludes x < 0.
    prog = program(decl("x", dist("gamma", "2", "1", truncation=(None, "10"))))
    (f,) = run("priors.support-mismatch", prog)
    assert (f.evidence["prior_support"], f.severity) == ("(0, 10)", Severity.ERROR)
    prog = program(decl("x", dist("normal", "0", "1", truncation=("0", None)), lower="0"))
    assert run("priors.support-mismatch", prog) == []


def test_support_ignores_pymc():
    prog = program(decl("s", dist("half_normal", "1")), language="pymc")
    assert run("priors.support-mismatch", prog) == []


# --------------------------------------------------- model.centered-hierarchy

def _centered(line: int = 15, multiplier: str | None = None) -> ProgramSummary:
    return program(
        decl("mu", dist("normal", "0", "5"), location_of=["theta"]),
        decl("tau", dist("normal", "0", "5"), lower="0", scale_of=["theta"]),
        decl("theta", dist("normal", "mu", "tau", line=line), type="vector", dims=("J",),
             offset="mu" if multiplier else None, multiplier=multiplier),
    )


def test_centered_without_draws_is_a_note():
    (f,) = run("model.centered-hierarchy", _centered())
    assert (f.quantity, f.severity, f.location.line) == ("theta", Severity.NOTE, 15)
    assert f.evidence["divergences"] is None


def test_centered_with_divergences_is_a_warning():
    div = np.zeros((2, 5), dtype=bool)
    div[0, 1] = div[1, 3] = div[1, 4] = True
    tree = posterior_tree({"mu": (), "tau": (), "theta": (4,)}, diverging=div)
    (f,) = run("model.centered-hierarchy", _centered(), tree=tree)
    assert (f.severity, f.evidence["divergences"]) == (Severity.WARNING, 3)


def test_centered_affine_or_fixed_scale_is_not_flagged():
    # Stan's offset/multiplier already samples the standardized variable.
    assert run("model.centered-hierarchy", _centered(multiplier="tau")) == []
    fixed = program(decl("mu", dist("normal", "0", "5")),
                    decl("theta", dist("normal", "mu", "5"), type="vector", dims=("J",)))
    assert run("model.centered-hierarchy", fixed) == []
    data_scale = program(decl("theta", dist("normal", "0", "s"), type="vector", dims=("J",)),
                         decl("s", block="data", lower="0"))
    assert run("model.centered-hierarchy", data_scale) == []


def test_centered_on_real_nondivergent_fit_stays_a_note():
    # The non-centered eight schools run in the reference data has no divergent
    # transition (its divergent__ column is all 0), so a centered statement on its
    # draws stays a note; the count comes from the file itself.
    files = sorted(_cmdstan("arviz-eight-schools-nc").glob("eight_schools_output*.csv"))
    tree = read_stan_csv(files)
    n_div = int(tree["sample_stats"].to_dataset()["diverging"].values.sum())
    (f,) = run("model.centered-hierarchy", _centered(), tree=tree)
    assert f.evidence["divergences"] == n_div == 0
    assert f.severity is Severity.NOTE


# ------------------------------------------------ model.likelihood-data-type

def _normal_lik(var: str = "y", line: int = 20, family: str = "normal", **kw) -> ProgramSummary:
    return program(decl("mu", dist("normal", "0", "1")),
                   likelihoods=(lik(var, dist(family, "mu", "1", line=line, **kw)),))


@pytest.mark.parametrize("values, kind", [
    ([0, 3, 7, 2, 12, 5], "non-negative integer counts"),
    ([0, 0, 1, 0, 1, 0], "binary 0/1"),
    ([0.12, 0.85, 0.05, 0.40, 1.30, 0.22], "strictly positive values near zero"),
    ([0.04, 0.31, 0.12, 0.02, 0.45, 0.09], "proportions strictly inside (0, 1)"),
])
def test_data_type_mismatches(values, kind):
    (f,) = run("model.likelihood-data-type", _normal_lik(), data={"y": values})
    assert (f.evidence["data_kind"], f.location.line, f.severity) == (
        kind, 20, Severity.WARNING)


@pytest.mark.parametrize("values", [
    [34.2, 35.1, 33.8, 34.9, 35.6, 34.4],   # positive but far from zero (mean/sd > 50)
    [-0.4, 0.2, 0.9, -1.1, 0.3, 0.05],      # real-valued
    [0.48, 0.51, 0.50, 0.49, 0.52],          # inside (0, 1) but far from both bounds
])
def test_data_type_fine_for_normal(values):
    assert run("model.likelihood-data-type", _normal_lik(), data={"y": values}) == []


def test_data_type_matching_family_truncation_and_too_few_values():
    counts = {"y": [0, 3, 7, 2]}
    assert run("model.likelihood-data-type", _normal_lik(family="poisson"), data=counts) == []
    trunc = _normal_lik(truncation=("0", None))
    assert run("model.likelihood-data-type", trunc, data=counts) == []
    assert run("model.likelihood-data-type", _normal_lik(), data={"y": [1, 2]}) == []


def test_data_type_uses_declared_observed_name():
    # The likelihood's variable is not in the data under that name; the analysis
    # declares which data variable is observed.
    found = run("model.likelihood-data-type", _normal_lik("obs"), data={"y": [0, 1, 1, 0]},
                observed="y")
    assert [f.evidence["data_kind"] for f in found] == ["binary 0/1"]


def test_data_type_on_real_data_files():
    # Real Stan data: the eight schools effects are integers but some negative
    # (not counts); the Bernoulli example's y is 0/1.
    schools = read_r_dump(_cmdstan("arviz-eight-schools-nc", "eight_schools.data.R"))
    assert run("model.likelihood-data-type", _normal_lik(), data=schools) == []
    bern = json.loads(_cmdstan("cmdstanpy-misc", "bernoulli.data.json").read_text())
    found = run("model.likelihood-data-type", _normal_lik(), data=bern)
    assert [(f.evidence["data_kind"], f.evidence["n"]) for f in found] == [
        ("binary 0/1", bern["N"])]
    assert run("model.likelihood-data-type", _normal_lik(family="bernoulli"), data=bern) == []


# ------------------------------------------------------------ inputs.stale-fit

def _eight_schools_nc(theta_tilde_dims: str = "J", gq: bool = True) -> ProgramSummary:
    """Declarations of the non-centered eight schools program behind the reference run."""
    decls = [
        decl("J", block="data", type="int", lower="0"),
        decl("mu", dist("normal", "0", "5"), line=7),
        decl("tau", dist("cauchy", "0", "5"), lower="0", line=8),
        decl("theta_tilde", dist("normal", "0", "1"), type="vector", dims=(theta_tilde_dims,),
             line=9),
        decl("theta", block="transformed parameters", type="vector", dims=("J",), line=12),
    ]
    if gq:
        decls += [decl("log_lik", block="generated quantities", type="vector", dims=("J",)),
                  decl("y_hat", block="generated quantities", type="vector", dims=("J",))]
    return program(*decls)


def _eight_schools_run() -> tuple[xr.DataTree, dict]:
    folder = _cmdstan("arviz-eight-schools-nc")
    tree = read_stan_csv(sorted(folder.glob("eight_schools_output*.csv")))
    return tree, read_r_dump(folder / "eight_schools.data.R")


def test_stale_fit_matching_real_run_is_clean():
    # The real CmdStan run's columns: mu, tau, theta_tilde.1-8, theta.1-8,
    # log_lik.1-8, y_hat.1-8, with J = 8 in its data file.
    tree, data = _eight_schools_run()
    assert run("inputs.stale-fit", _eight_schools_nc(), tree=tree, data=data) == []


def test_stale_fit_resized_parameter_on_real_run():
    tree, data = _eight_schools_run()
    prog = _eight_schools_nc(theta_tilde_dims="J + 2")
    (f,) = run("inputs.stale-fit", prog, tree=tree, data=data)
    assert (f.quantity, f.location.line, f.severity) == ("theta_tilde", 9, Severity.ERROR)
    assert (f.evidence["declared_shape"], f.evidence["draws_shape"]) == ("10", "8")


def test_stale_fit_undeclared_and_missing_on_real_run():
    tree, data = _eight_schools_run()
    prog = _eight_schools_nc(gq=False)
    prog.declarations["sigma_extra"] = decl("sigma_extra", dist("normal", "0", "1"),
                                            lower="0", line=10)
    found = {(f.quantity, f.evidence["problem"]): f
             for f in run("inputs.stale-fit", prog, tree=tree, data=data)}
    assert set(found) == {("log_lik", "undeclared"), ("y_hat", "undeclared"),
                          ("sigma_extra", "missing")}
    assert found["sigma_extra", "missing"].location.line == 10
    assert found["y_hat", "undeclared"].location.line is None


def test_stale_fit_real_logistic_run_with_vector_from_data():
    # Real run of CmdStan's logistic example: beta.1, beta.2 with M = 2 in its data.
    folder = _cmdstan("cmdstanpy-misc")
    tree = read_stan_csv(sorted(folder.glob("logistic_output_*.csv")))
    data = read_r_dump(folder / "logistic.data.R")
    ok = program(decl("M", block="data", type="int"),
                 decl("beta", dist("normal", "0", "1"), type="vector", dims=("M",)))
    assert run("inputs.stale-fit", ok, tree=tree, data=data) == []
    ok.declarations["beta"].dims = ("M + 1",)
    (f,) = run("inputs.stale-fit", ok, tree=tree, data=data)
    assert (f.evidence["declared_shape"], f.evidence["draws_shape"]) == ("3", "2")


def test_stale_fit_square_types_and_unresolvable_sizes():
    tree = posterior_tree({"Sigma": (3, 3), "z": (4,)})
    prog = program(decl("Sigma", type="cov_matrix", dims=("K",)),
                   decl("z", type="vector", dims=("size(y)",)))
    assert run("inputs.stale-fit", prog, tree=tree, data={"K": 3}) == []
    found = run("inputs.stale-fit", prog, tree=tree, data={"K": 4})
    assert [(f.quantity, f.evidence["declared_shape"]) for f in found] == [("Sigma", "4x4")]


def test_stale_fit_pymc_transformed_names_are_ignored():
    # PyMC keeps transformed values (sigma_log__) out of the posterior by default;
    # if a file still has them they are bookkeeping, not model variables.
    tree = posterior_tree({"sigma": (), "sigma_log__": (), "mu_det": ()})
    prog = program(decl("sigma", dist("half_normal", "1"), lower="0"),
                   decl("mu_det", block="transformed parameters"), language="pymc")
    assert run("inputs.stale-fit", prog, tree=tree) == []


def test_stale_fit_pymc_unseen_name_is_a_warning():
    # A PyMC name built at run time is invisible to a reader that never runs the file.
    tree = posterior_tree({"sigma": (), "beta_0": ()})
    prog = program(decl("sigma", dist("half_normal", "1"), lower="0"), language="pymc")
    (f,) = run("inputs.stale-fit", prog, tree=tree)
    assert (f.quantity, f.severity) == ("beta_0", Severity.WARNING)
    prog.language = "stan"
    (f,) = run("inputs.stale-fit", prog, tree=tree)
    assert f.severity is Severity.ERROR


def test_stale_fit_needs_draws():
    assert run("inputs.stale-fit", _eight_schools_nc(), tree=None) == []


# ----------------------------------------------------- the project's own demo

DEMO = REPO / "examples" / "demo"
PROGRAM_RULES = {"priors.missing", "priors.flat", "priors.vague", "priors.inverse-gamma-epsilon",
                 "priors.support-mismatch", "model.centered-hierarchy",
                 "model.likelihood-data-type", "inputs.stale-fit"}


def _line_of(path: Path, pattern: str) -> int:
    """1-based line of the first source line matching ``pattern``."""
    for n, text in enumerate(path.read_text().splitlines(), start=1):
        if re.search(pattern, text):
            return n
    raise AssertionError(f"{path}: no line matches {pattern!r}")


@pytest.fixture(scope="module")
def demo_findings() -> list[Finding]:
    if not (DEMO / "bayes-auditor.toml").is_file():
        pytest.skip("examples/demo/ with its manifest is not there yet")
    from auditor.engine import run_audit

    return run_audit([DEMO], only_rules=PROGRAM_RULES | {"inputs.rule-failed"}).all_findings


def test_demo_implicit_flat_and_vague_models(demo_findings):
    # The demo's wax_flat.stan leaves `beta` without a prior and wax_vague.py gives
    # it normal(0, 1000) (task brief); the lines are found in the sources by text.
    by = {(Path(f.location.path).name, f.rule_id): f for f in demo_findings if f.location}
    assert not [f for f in demo_findings if f.rule_id == "inputs.rule-failed"]
    flat = by["wax_flat.stan", "priors.missing"]
    assert flat.location.line == _line_of(DEMO / "models" / "wax_flat.stan", r"^\s*real beta;")
    assert (flat.quantity, flat.severity) == ("beta", Severity.ERROR)
    vague = by["wax_vague.py", "priors.vague"]
    assert vague.location.line == _line_of(DEMO / "models" / "wax_vague.py", r"sigma=1000\b")
    # Data scale of the slope: sd(y) / sd(distance) of the demo's data file.
    wax = json.loads((DEMO / "data" / "wax.json").read_text())
    scale = statistics.stdev(wax["y"]) / statistics.stdev(wax["distance"])
    assert vague.evidence["data_scale"] == pytest.approx(scale, rel=1e-6)
    assert vague.evidence["ratio"] == pytest.approx(1000 / scale, rel=1e-6)


def test_demo_hierarchy_and_fits(demo_findings):
    centered = [f for f in demo_findings if f.rule_id == "model.centered-hierarchy"]
    assert [Path(f.location.path).name for f in centered] == ["yards_centered.stan"]
    (f,) = centered
    assert f.location.line == _line_of(DEMO / "models" / "yards_centered.stan",
                                       r"theta ~ normal\(mu, tau\)")
    # Divergences counted straight from the CSV files' divergent__ column.
    tree = read_stan_csv(sorted((DEMO / "fits").glob("yards_centered-*.csv")))
    n_div = int(tree["sample_stats"].to_dataset()["diverging"].values.sum())
    assert f.evidence["divergences"] == n_div
    assert f.severity is (Severity.WARNING if n_div > 0 else Severity.NOTE)
    # Every demo fit came from the program beside it.
    assert [f.message for f in demo_findings if f.rule_id == "inputs.stale-fit"] == []


def test_demo_flagged_where_the_examples_readme_says():
    readmes = [p for p in (REPO / "examples" / "README.md", DEMO / "README.md") if p.is_file()]
    if not readmes:
        pytest.skip("examples/README.md not written yet: it lists the demo's bad lines")
    from auditor.programs.read import read_program

    # A README line naming one of these rules and a file:line place.
    pattern = re.compile(r"((?:[\w./-]+/)?\w+\.(?:stan|py))\D{0,12}?(?:line\s*)?:?(\d+)")
    checked = 0
    for readme in readmes:
        for rule_id in ("priors.missing", "priors.vague"):
            for line in readme.read_text().splitlines():
                if rule_id not in line:
                    continue
                for m in pattern.finditer(line):
                    matches = list((REPO / "examples").rglob(Path(m.group(1)).name))
                    if not matches:
                        continue
                    path, want = matches[0], int(m.group(2))
                    data_file = path.parent.parent / "data" / (path.stem.split("_")[0] + ".json")
                    data = json.loads(data_file.read_text()) if data_file.is_file() else {}
                    found = run(rule_id, read_program(path), data=data)
                    assert want in [f.location.line for f in found], (rule_id, path.name, want)
                    checked += 1
    if checked == 0:
        pytest.skip("the examples README names no file:line for priors.missing/priors.vague yet")


# --------------------------------------------------------------- odd inputs

@pytest.mark.parametrize("rule_id", sorted(PROGRAM_RULES))
def test_rules_take_odd_summaries_without_raising(rule_id):
    # A reader may leave arguments out or give texts no rule expects; data may hold
    # strings. A check must then say nothing rather than fail (a raising check
    # becomes an inputs.rule-failed finding, rules_format.md).
    prog = program(
        decl("a", dist("normal"), dist("uniform", "0"), dist("inv_gamma", "0.001")),
        decl("b", dist("student_t", "3", "0", "x ? 1 : 2"), type="cov_matrix", dims=("K",)),
        decl("c", dist("normal", "0", "1"), type="vector", dims=("N +* 2",), lower="lo"),
        decl("t", dist("normal", "m", "s"), type="tuple", dims=("2",)),
        likelihoods=(lik("y", dist("normal")), lik("z", dist("normal", "a +", "b")),
                     lik("w", dist("bernoulli", "inv_logit()"))),
    )
    data = {"y": ["a", "b", "c"], "z": [1.0, float("nan"), 2.0], "w": [], "K": "three",
            "N": 2.5, "lo": [1, 2]}
    tree = posterior_tree({"a": (), "b": (2, 2), "c": (3,)}, diverging=np.zeros((2, 5), bool))
    found = run(rule_id, prog, data=data, tree=tree, observed="y")
    assert all(isinstance(f, Finding) and f.rule_id == rule_id for f in found)
