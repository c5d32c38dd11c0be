"""Tests of the PyMC source reader (Python ``ast``; the file is never run).

PyMC facts come from the PyMC 5 API documentation (``pymc.distributions``), from
memory: argument order, defaults (``Normal(mu=0)``, ``Uniform(lower=0, upper=1)``),
``sigma = 1 / sqrt(tau)``; Stan's argument order from the Stan Functions Reference.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

from auditor.programs.pymc_source import read_pymc_text
from auditor.programs.read import read_program

CORPUS = Path(__file__).resolve().parent / "pymc_corpus"
REPO = Path(__file__).resolve().parent.parent
EXAMPLES = sorted(REPO.glob("examples/**/models/*.py"))


def line_of(path: Path, snippet: str) -> int:
    for number, line in enumerate(path.read_text().splitlines(), start=1):
        if snippet in line:
            return number
    raise AssertionError(f"{snippet!r} not in {path}")


def summary_of(source: str):
    return read_pymc_text(source, Path("model.py"))


def test_hierarchical_model() -> None:
    path = CORPUS / "hierarchical_model.py"
    s = read_program(path)
    assert s.language == "pymc" and s.syntax_errors == []
    assert s.source_lines == path.read_text().splitlines()
    d = s.declarations
    assert {n: d[n].block for n in d} == {
        "se": "data", "mu": "parameters", "tau": "parameters", "theta": "parameters",
        "yield": "data"}
    # Normal(mu=0, tau=1e-6): sigma = 1 / sqrt(1e-6) = 1000 (pymc.Normal docs).
    (mu_prior,) = d["mu"].priors
    assert mu_prior.family == "normal"
    assert [a.value for a in mu_prior.args] == [0.0, pytest.approx(1000.0)]
    assert mu_prior.line == line_of(path, 'pm.Normal("mu"')
    assert d["tau"].priors[0].family == "half_cauchy" and d["tau"].lower.value == 0
    theta = d["theta"].priors[0]
    assert [a.names for a in theta.args] == [("mu",), ("tau",)]
    assert d["theta"].dims == ("village",)
    assert d["mu"].location_of == ["theta"] and d["tau"].scale_of == ["theta"]
    (lik,) = s.likelihoods
    assert lik.variable == "yield" and lik.observed == "yield_obs"
    assert lik.data_used == ["se"]
    assert lik.distribution.line == line_of(path, 'pm.Normal("yield"')


def test_families_and_argument_order() -> None:
    s = read_program(CORPUS / "aliases_and_families.py")
    assert s.syntax_errors == []
    d = s.declarations

    def prior(name):
        (p,) = d[name].priors
        return p.family, [a.value for a in p.args]

    # `import pymc as bayes` and `from pymc import HalfNormal as PositiveNormal` are both found.
    assert prior("alpha") == ("flat", [])
    assert prior("scale_free") == ("half_flat", []) and d["scale_free"].lower.value == 0
    assert prior("beta") == ("student_t", [3.0, 0.0, 2.5])  # StudentT(nu, mu, sigma)
    assert prior("sigma") == ("half_normal", [1.0]) and d["sigma"].lower.value == 0
    assert prior("share") == ("uniform", [-1.0, 1.5])
    assert (d["share"].lower.value, d["share"].upper.value) == (-1.0, 1.5)
    assert prior("shape") == ("gamma", [2.0, 0.5])
    assert prior("var_oven") == ("inv_gamma", [0.001, 0.001])
    assert d["var_oven"].lower.value == 0
    assert prior("rate") == ("exponential", [1.0])
    assert prior("spread") == ("lognormal", [0.0, 1.0]) and d["spread"].lower.value == 0
    assert prior("p_burn") == ("beta", [1.0, 1.0])
    assert prior("loc_c") == ("cauchy", [0.0, 2.0])
    assert d["mu"].block == "transformed parameters"
    assert d["dough"].block == "data"
    liks = {lik.variable: lik for lik in s.likelihoods}
    # Normal("loaf", mu, sigma): positional mu then sigma; mu is a Deterministic of
    # alpha + beta * x where x holds the MutableData "dough".
    assert [a.names for a in liks["loaf"].distribution.args] == [("mu",), ("sigma",)]
    assert liks["loaf"].data_used == ["dough"]
    assert liks["burnt"].distribution.family == "bernoulli_logit"
    assert liks["burnt"].distribution.args[0].names == ("alpha", "shape", "dough")
    assert liks["rejects"].distribution.family == "binomial"
    # NegativeBinomial(mu, alpha) is Stan's neg_binomial_2(mu, phi).
    crumbs = liks["crumbs"].distribution
    assert crumbs.family == "neg_binomial_2" and [a.text for a in crumbs.args] == ["rate", "shape"]
    assert liks["chips"].distribution.family == "poisson"
    assert d["chips"].type == "int" and d["loaf"].type == "real"


def test_harmful_file_is_never_executed(tmp_path: Path) -> None:
    # The file deletes a sentinel and its own folder, then exits, if it is ever run.
    folder = tmp_path / "project"
    folder.mkdir()
    shutil.copy(CORPUS / "harmful.py", folder / "harmful.py")
    sentinel = folder / "sentinel.txt"
    sentinel.write_text("still here")
    s = read_program(folder / "harmful.py")
    assert sentinel.read_text() == "still here"
    assert (folder / "harmful.py").is_file()
    assert s.declarations["rate"].priors[0].family == "gamma"
    assert s.likelihoods[0].variable == "arrivals" and s.likelihoods[0].observed == "[3, 1, 4]"


def test_syntax_error_position(tmp_path: Path) -> None:
    # Kept as .txt in the corpus so the linter does not trip on it; read as .py.
    path = tmp_path / "syntax_error.py"
    shutil.copy(CORPUS / "syntax_error.py.txt", path)
    (problem,) = read_program(path).syntax_errors
    # CPython reports an unclosed '(' at the bracket itself.
    line = line_of(path, 'pm.Normal("mu"')
    assert problem.line == line
    assert problem.column == path.read_text().splitlines()[line - 1].index("(") + 1
    assert "never closed" in problem.message and problem.path == str(path)


def test_precision_and_defaults() -> None:
    s = summary_of(
        "import pymc as pm\n"
        "with pm.Model():\n"
        "    prec = pm.Gamma('prec', 1, 1)\n"
        "    a = pm.Normal('a', tau=0.01)\n"
        "    b = pm.Normal('b', 0, tau=prec)\n"
        "    u = pm.Uniform('u')\n"
        "    g = pm.Gamma('g', mu=2, sigma=1)\n")
    d = s.declarations
    # tau = 0.01 -> sigma = 10; PyMC's default mu is 0.
    assert [a.value for a in d["a"].priors[0].args] == [0.0, pytest.approx(10.0)]
    # A precision that is itself a parameter is kept as an expression in Stan terms.
    scale = d["b"].priors[0].args[1]
    assert scale.text == "1 / sqrt(prec)" and scale.value is None and scale.names == ("prec",)
    assert d["prec"].scale_of == ["b"]
    assert (d["u"].lower.value, d["u"].upper.value) == (0.0, 1.0)
    # Gamma(mu=2, sigma=1): alpha = mu^2/sigma^2 = 4, beta = mu/sigma^2 = 2.
    assert [a.value for a in d["g"].priors[0].args] == [4.0, 2.0]


def test_other_aliases_and_pymc_module_name() -> None:
    s = summary_of(
        "import pymc\nfrom pymc import Normal\n"
        "with pymc.Model() as m:\n"
        "    x = pymc.ConstantData('x', [1.0, 2.0])\n"
        "    w = Normal('w', 0, 1)\n"
        "    pymc.Normal('y', w * x, 1, observed=[1.0, 2.0])\n"
        "import numpy as np\n"
        "np.Normal('not_pymc', 0, 1)\n")
    assert set(s.declarations) == {"x", "w", "y"}
    assert s.likelihoods[0].data_used == ["x"]


def test_duplicate_names_and_unreadable_file(tmp_path: Path) -> None:
    s = summary_of("import pymc as pm\nwith pm.Model():\n"
                   "    pm.Normal('a', 0, 1)\n    pm.Normal('a', 0, 2)\n")
    assert s.syntax_errors[0].line == 4 and "used twice" in s.syntax_errors[0].message
    bad = tmp_path / "bad.py"
    bad.write_bytes(b"\xff\xfe")
    assert read_program(bad).syntax_errors[0].message == "the file is not UTF-8 text"


@pytest.mark.skipif(not EXAMPLES, reason="no examples/**/models/*.py written yet")
@pytest.mark.parametrize("path", EXAMPLES, ids=lambda p: str(p.relative_to(REPO)))
def test_example_pymc_models_are_read(path: Path) -> None:
    s = read_program(path)
    assert s.syntax_errors == []
    assert s.parameters and s.likelihoods


def test_damaged_sources_never_raise() -> None:
    # Bad input must give a finding, never a traceback.
    path = CORPUS / "aliases_and_families.py"
    text = path.read_text()
    for cut in range(0, len(text), 13):
        for damaged in (text[:cut], text[:cut] + text[cut + 2:]):
            summary = read_pymc_text(damaged, path)
            for problem in summary.syntax_errors:
                assert problem.line >= 1 and problem.column >= 1 and problem.message


def test_value_is_read_before_its_name_is_rebound() -> None:
    # Python evaluates the right-hand side first: `scale` in the call is the float.
    s = summary_of("import pymc as pm\nscale = 2.0\nwith pm.Model():\n"
                   "    scale = pm.HalfNormal('tau', sigma=scale)\n"
                   "    pm.Normal('y', 0, scale, observed=[0.5])\n")
    assert s.declarations["tau"].priors[0].args[0].names == ("scale",)
    assert s.likelihoods[0].distribution.args[1].names == ("tau",)


def test_more_parametrizations() -> None:
    s = summary_of(
        "import pymc3 as pm\n"
        "with pm.Model():\n"
        "    t = pm.TruncatedNormal('t', mu=1, sigma=2, lower=0, upper=10)\n"
        "    e = pm.Exponential('e', scale=4)\n"
        "    h = pm.HalfNormal('h', tau=4)\n"
        "    st = pm.StudentT('st', nu=4, lam=0.25)\n"
        "    z = pm.ZeroInflatedPoisson('z', psi=0.9, mu=3)\n"
        "    pm.Bernoulli('b', p=0.3, observed=[0, 1])\n")
    d = s.declarations
    t = d["t"].priors[0]
    # TruncatedNormal is Stan's normal(mu, sigma) T[lower, upper] on a bounded variable.
    assert (t.family, [a.value for a in t.args], t.truncation) == ("normal", [1.0, 2.0],
                                                                    ("0", "10"))
    assert (d["t"].lower.value, d["t"].upper.value) == (0.0, 10.0)
    # Exponential(scale=4) is rate 1/4; HalfNormal(tau=4) is sigma 1/2; StudentT(lam=0.25)
    # is sigma 2, with PyMC's default mu = 0 (pymc docs).
    assert [a.value for a in d["e"].priors[0].args] == [0.25]
    assert [a.value for a in d["h"].priors[0].args] == [0.5]
    assert [a.value for a in d["st"].priors[0].args] == [4.0, 0.0, 2.0]
    # A family we do not map keeps PyMC's own order under a snake_case name.
    z = d["z"].priors[0]
    assert z.family == "zero_inflated_poisson" and [a.value for a in z.args] == [0.9, 3.0]
    assert s.likelihoods[0].distribution.family == "bernoulli"


def test_truncated_and_censored_wrappers() -> None:
    s = summary_of(
        "import pymc as pm\nimport numpy as np\n"
        "with pm.Model():\n"
        "    mu = pm.Truncated('mu', pm.Normal.dist(mu=5, sigma=3), lower=0)\n"
        "    s = pm.HalfNormal('s', 1)\n"
        "    pm.Censored('hours', pm.LogNormal.dist(mu, s), lower=None, upper=40,\n"
        "                observed=np.array([3.0, 40.0]))\n")
    mu = s.declarations["mu"]
    # Truncated renormalizes like Stan's T[0, ] (pymc.Truncated docs).
    assert mu.priors[0].family == "normal" and mu.priors[0].truncation == ("0", None)
    assert [a.value for a in mu.priors[0].args] == [5.0, 3.0] and mu.lower.value == 0
    assert mu.priors[0].line == 4
    (lik,) = s.likelihoods
    assert lik.variable == "hours" and lik.distribution.family == "lognormal"
    assert [a.names for a in lik.distribution.args] == [("mu",), ("s",)]
    assert lik.distribution.truncation is None and lik.observed == "np.array([3.0, 40.0])"


def test_definitions_of_deterministics_and_python_expressions() -> None:
    s = read_program(CORPUS / "aliases_and_families.py")
    assert s.definitions["mu"] == "alpha + beta * x"
    assert s.definitions["loaf"] == "1.1 * dough + 0.05"
