"""Tests of the Stan grammar, include expansion and program summary.

Expected values come from the Stan language as the Stan Reference Manual defines
it (section names cited beside each check, from memory of the 2.3x manual) and from
the corpus programs' own text: expected line numbers are found by searching the
file for the statement, never taken from the parser.
"""

from __future__ import annotations

import shutil
import time
from pathlib import Path

import pytest
from lark import Token, Tree

from auditor.programs.read import read_program
from auditor.programs.stan.parser import StanSyntaxError, parse_stan

REPO = Path(__file__).resolve().parent.parent
CORPUS = Path(__file__).resolve().parent / "stan_corpus"
GOOD = sorted(CORPUS.glob("*.stan"))
EXAMPLES = sorted(REPO.glob("examples/**/models/*.stan"))


def line_of(path: Path, snippet: str) -> int:
    """1-based line of the first line of ``path`` containing ``snippet``."""
    for number, line in enumerate(path.read_text().splitlines(), start=1):
        if snippet in line:
            return number
    raise AssertionError(f"{snippet!r} not in {path}")


def column_of(path: Path, snippet: str) -> int:
    line = path.read_text().splitlines()[line_of(path, snippet) - 1]
    return line.index(snippet) + 1


def sexpr(node: Tree | Token) -> str:
    """Fully parenthesised form of an expression tree, to check precedence."""
    if isinstance(node, Token):
        return str(node)
    kind = node.data
    if kind in {"int_lit", "real_lit", "imag_lit", "var"}:
        return str(node.children[0])
    if kind == "binop":
        left, op, right = node.children
        return f"({sexpr(left)} {op} {sexpr(right)})"
    if kind == "unop":
        return f"({node.children[0]}{sexpr(node.children[1])})"
    if kind == "transpose":
        return f"({sexpr(node.children[0])}')"
    if kind == "cond_expr":
        c, a, b = node.children
        return f"({sexpr(c)} ? {sexpr(a)} : {sexpr(b)})"
    if kind == "paren":
        return sexpr(node.children[0])
    return f"{kind}[{', '.join(sexpr(c) for c in node.children if c is not None)}]"


def expression(src: str) -> str:
    """Parse ``src`` as the initial value of a transformed-data variable."""
    tree = parse_stan(f"transformed data {{ real v = {src}; }}")
    decl = tree.children[0].children[0]
    return sexpr(decl.children[1].children[2])


# ------------------------------------------------------------------ whole programs
@pytest.mark.parametrize("path", GOOD, ids=lambda p: p.name)
def test_every_corpus_program_parses(path: Path) -> None:
    summary = read_program(path)
    assert summary.syntax_errors == []
    assert summary.language == "stan"
    assert summary.source_lines == path.read_text().splitlines()
    assert summary.declarations, "each corpus program declares something"


@pytest.mark.skipif(not EXAMPLES, reason="no examples/**/models/*.stan written yet")
@pytest.mark.parametrize("path", EXAMPLES, ids=lambda p: str(p.relative_to(REPO)))
def test_every_example_program_parses(path: Path) -> None:
    summary = read_program(path)
    assert summary.syntax_errors == []
    assert summary.parameters, "an example model has parameters"


def test_a_200_line_program_parses_quickly() -> None:
    body = "\n".join(
        f"  theta[{i}] ~ normal(mu + beta * x[{i}], tau) T[-10, ];" if i % 2 else
        f"  real z{i} = x[{i}] ^ 2 - (tau > 1 ? 1 : 0);"
        for i in range(1, 190))
    program = ("data { int N; vector[N] x; }\nparameters { real mu; real<lower=0> tau;"
               " vector[N] theta; }\nmodel {\n" + body + "\n}\n")
    assert program.count("\n") >= 190
    parse_stan("model { }")  # build the parser once; the budget is for parsing
    start = time.perf_counter()
    parse_stan(program)
    assert time.perf_counter() - start < 0.5


# ------------------------------------------------------------------ declarations
def test_declaration_types_bounds_and_dims() -> None:
    # Stan Reference Manual, "Data Types and Declarations": constrained and
    # affinely transformed types, vector/matrix sizes, array dimensions.
    s = read_program(CORPUS / "declarations.stan")
    d = s.declarations
    assert (d["N"].block, d["N"].type, d["N"].lower.value, d["N"].upper) == ("data", "int", 1, None)
    assert d["K"].upper.text == "N" and d["K"].upper.value is None
    t = d["temperature"]
    assert (t.type, t.dims, t.lower.value, t.upper.value) == ("real", ("N",), -40.0, 60.0)
    assert d["shares"].dims == ("N", "3") and d["shares"].type == "matrix"
    assert d["counts"].dims == ("N", "2") and d["counts"].type == "int"
    assert d["tiny"].lower.value == pytest.approx(1e-3)
    assert d["negative_cap"].upper.value == -1.5
    assert d["level"].offset == "10" and d["level"].multiplier == "2.5"
    assert d["spread_raw"].multiplier == "3" and d["spread_raw"].offset is None
    assert d["L_rect"].type == "cholesky_factor_cov" and d["L_rect"].dims == ("4", "3")
    for name, kind in [("mix", "simplex"), ("cutpoints", "ordered"),
                       ("rates", "positive_ordered"), ("direction", "unit_vector"),
                       ("L_corr", "cholesky_factor_corr"), ("Omega", "corr_matrix"),
                       ("Sigma", "cov_matrix"), ("effects", "sum_to_zero_vector"),
                       ("z0", "complex"), ("zv", "complex_vector"),
                       ("zr", "complex_row_vector"), ("zm", "complex_matrix")]:
        assert d[name].type == kind, name
    # array[2] vector<lower=0>[3]: array dimensions first, then the vector size.
    assert d["scales"].dims == ("2", "3") and d["scales"].lower.value == 0
    assert d["mean_moisture"].block == "transformed data"
    assert d["spread"].block == "transformed parameters"
    # Reference Manual, "Declaring multiple variables at once": `real<lower=0> x, y;`.
    assert d["width"].lower.value == 0 and d["height"].lower.value == 0
    assert d["low"].block == d["high"].block == "transformed parameters"
    # A distribution statement on a function of one parameter is about that parameter.
    assert [p.family for p in d["spread_raw"].priors] == ["normal"]
    path = CORPUS / "declarations.stan"
    assert d["rho"].line == line_of(path, "[N] rho;")
    assert d["rho"].column == column_of(path, "vector<lower=-1")


def test_old_array_syntax_puts_array_dims_first() -> None:
    # Stan Reference Manual, "Removed features": `real x[N]` is the pre-2.33 form of
    # `array[N] real x`; `vector[2] arms[N]` is an N-array of 2-vectors.
    d = read_program(CORPUS / "old_syntax.stan").declarations
    assert d["height"].dims == ("N",) and d["height"].type == "real"
    assert d["flags"].dims == ("N", "2") and d["flags"].lower.value == 0
    assert d["arms"].dims == ("N", "2") and d["arms"].type == "vector"


def test_tuple_declarations() -> None:
    # Stan Reference Manual, "Tuple data type".
    d = read_program(CORPUS / "tuples.stan").declarations
    assert d["gauge"].type == "tuple" and d["readings"].dims == ("N",)
    assert d["copy"].block == "transformed data"


def test_model_block_locals_are_not_program_variables() -> None:
    # Stan Reference Manual, "Program block: model": its declarations are local.
    d = read_program(CORPUS / "regression.stan").declarations
    assert "mu" not in d
    assert "mu_dough" in d


# ------------------------------------------------------------------ priors
def test_priors_in_every_spelling() -> None:
    # Stan Reference Manual, "Distribution statements" and "Log probability
    # increment": `y ~ f(...)` and `target += f_lpdf(y | ...)` (or `_lupdf`) state
    # the same density; the family is the name without the suffix.
    path = CORPUS / "regression.stan"
    d = read_program(path).declarations
    alpha = d["alpha"].priors
    assert [(p.family, [a.value for a in p.args]) for p in alpha] == [("normal", [0, 100])]
    assert alpha[0].line == line_of(path, "normal_lpdf(alpha")
    assert alpha[0].column == column_of(path, "normal_lpdf(alpha")
    beta = d["beta"].priors[0]  # beta[k] ~ ... inside a loop
    assert beta.family == "normal" and beta.args[1].value == 1000.0 and beta.args[1].text == "1e3"
    assert beta.line == line_of(path, "beta[k] ~")
    gamma = d["gamma_heat"].priors[0]
    assert gamma.family == "normal" and gamma.args[0].value == -1.0
    assert gamma.args[0].text == "-1"
    # A prior on a parameter named like a variance.
    s2 = d["sigma2"].priors[0]
    assert s2.family == "inv_gamma" and [a.value for a in s2.args] == [0.001, 0.001]
    assert s2.text == "sigma2 ~ inv_gamma(0.001, 0.001);"


def test_prior_on_a_transformed_parameter_stays_with_it(tmp_path: Path) -> None:
    program = tmp_path / "tp.stan"
    program.write_text(
        "parameters { real<lower=0> sigma; }\n"
        "transformed parameters { real<lower=0> sigma2 = square(sigma); }\n"
        "model { sigma2 ~ inv_gamma(1, 1); }\n")
    d = read_program(program).declarations
    assert [p.family for p in d["sigma2"].priors] == ["inv_gamma"]
    assert d["sigma"].priors == []


def test_truncation_bounds() -> None:
    # Stan Reference Manual, "Truncated distributions": T[L, U], T[L, ] and T[, U].
    path = CORPUS / "truncation.stan"
    s = read_program(path)
    d = s.declarations
    assert d["mu"].priors[0].truncation == ("0", None)
    assert d["sigma"].priors[0].truncation == (None, "10")
    assert d["nu"].priors[0].truncation == ("1", "50")
    (lik,) = s.likelihoods
    assert lik.variable == "w" and lik.distribution.truncation == ("0.1", "cap")
    assert lik.distribution.line == line_of(path, "w[n] ~ normal")


def test_hierarchy_roles() -> None:
    # theta ~ normal(mu, tau): mu is theta's location, tau its scale (normal's
    # first and second arguments, Stan Functions Reference "Normal distribution").
    d = read_program(CORPUS / "hierarchical.stan").declarations
    assert d["mu"].location_of == ["theta"] and d["mu"].scale_of == []
    assert d["tau"].scale_of == ["theta"] and d["tau"].location_of == []
    assert d["theta"].location_of == [] and d["theta"].scale_of == []


def test_non_centered_form_has_no_direct_hierarchy_but_affine_does() -> None:
    # theta = mu + tau * eta is a deterministic transform: no prior links mu or tau
    # to eta; `vector<offset=mu, multiplier=tau>` with its own normal(mu, tau) prior does.
    d = read_program(CORPUS / "funnel_noncentered.stan").declarations
    assert d["mu"].location_of == ["theta_affine"]
    assert d["tau"].scale_of == ["theta_affine"]
    assert d["eta"].priors[0].family == "std_normal"
    assert d["theta_affine"].offset == "mu" and d["theta_affine"].multiplier == "tau"


# ------------------------------------------------------------------ likelihoods
def test_likelihood_reaches_predictors_through_transforms() -> None:
    path = CORPUS / "regression.stan"
    (lik,) = read_program(path).likelihoods
    assert lik.variable == "loaf" and lik.distribution.family == "normal"
    assert sorted(lik.data_used) == ["dough", "heat", "oven"]
    assert lik.distribution.line == line_of(path, "loaf ~ normal")


def test_likelihood_with_direct_data() -> None:
    (lik,) = read_program(CORPUS / "hierarchical.stan").likelihoods
    assert lik.variable == "yield" and lik.data_used == ["se"]
    assert [a.names for a in lik.distribution.args] == [("theta",), ("se",)]


def test_user_defined_densities_and_lpmf_in_target() -> None:
    # Stan Reference Manual, "User-defined probability functions": `y ~ hive(...)`
    # calls hive_lpdf; `count_lpmf(n | ...)` and `count_lupmf` are mass functions.
    s = read_program(CORPUS / "functions.stan")
    families = [(lik.variable, lik.distribution.family) for lik in s.likelihoods]
    assert families == [("weight", "hive"), ("visits", "count"), ("visits", "count")]
    # `shrink_lp(z, 1.0)` runs `z ~ normal(0, tau)` with tau = 1.0 (Reference Manual,
    # "Log probability access in functions": _lp functions add to target).
    path = CORPUS / "functions.stan"
    (prior,) = s.declarations["z"].priors
    assert prior.family == "normal" and [a.value for a in prior.args] == [0.0, 1.0]
    assert prior.line == line_of(path, "z ~ normal(0, tau);")


def test_lp_function_arguments_carry_hierarchy(tmp_path: Path) -> None:
    program = tmp_path / "lp.stan"
    program.write_text(
        "functions {\n"
        "  void group_lp(vector a, real m, real s) { a ~ normal(m, s); }\n"
        "}\n"
        "parameters { real mu; real<lower=0> tau; vector[3] theta; }\n"
        "model { mu ~ normal(0, 1); tau ~ normal(0, 1); group_lp(theta, mu, tau); }\n")
    d = read_program(program).declarations
    assert [a.names for a in d["theta"].priors[0].args] == [("mu",), ("tau",)]
    assert d["mu"].location_of == ["theta"] and d["tau"].scale_of == ["theta"]
    # The function's own names never leak into program variables.
    assert "a" not in d and "m" not in d


# ------------------------------------------------------------------ expressions
@pytest.mark.parametrize(("src", "expected"), [
    # Stan Reference Manual, "Operator precedence and associativity", with the
    # correction of stan-dev/docs issue 27 (.* and ./ share the level of * and /,
    # \ binds tighter), which is what the Stan compiler's grammar declares.
    ("-2 ^ 2", "(-(2 ^ 2))"),
    ("2 ^ 3 ^ 2", "(2 ^ (3 ^ 2))"),
    ("2 ^ -1", "(2 ^ (-1))"),
    ("a + b * c", "(a + (b * c))"),
    ("a - b - c", "((a - b) - c)"),
    ("a * b .* c", "((a * b) .* c)"),
    ("a .* b * c", "((a .* b) * c)"),
    ("a ./ b / c", "((a ./ b) / c)"),
    ("A * B \\ c", "(A * (B \\ c))"),
    ("a %/% b * c", "((a %/% b) * c)"),
    ("a * b %/% c", "(a * (b %/% c))"),
    ("-a \\ b", "((-a) \\ b)"),
    ("-x'", "(-(x'))"),
    ("x' * y", "((x') * y)"),
    ("a || b && c", "(a || (b && c))"),
    ("a < b == c", "((a < b) == c)"),
    ("!a + b", "((!a) + b)"),
    ("a ? b : c ? d : e", "(a ? b : (c ? d : e))"),
    ("a > b ? 1 : 0", "((a > b) ? 1 : 0)"),
    ("x .^ 2 ./ y", "((x .^ 2) ./ y)"),
])
def test_operator_precedence(src: str, expected: str) -> None:
    assert expression(src) == expected


@pytest.mark.parametrize("src", [
    # Stan Reference Manual, "Expressions": literals, containers, indexing.
    "1.5e2", ".25", "3.", "2E-3", "2.5i", "3i", "{1, 2, 3}", "[1, 2, 3]",
    "[[1, 2], [3, 4]]", "x[1:N, :]", "x[:, 1]", "x[2:]", "x[:3]", "x[, 1]",
    "x[{1, 3}]", "normal_lpdf(y | mu, sigma)", "std_normal_lpdf(y |)", "f()",
    "target()", "(a, b)", "t.1", "t.2.1", "m[1][2]",
])
def test_expression_forms_parse(src: str) -> None:
    assert expression(src)


def test_literal_kinds() -> None:
    tree = parse_stan("transformed data { real a = 1.5e2; real b = 7; complex c = 2i; }")
    kinds = [d.children[1].children[2].data for d in tree.children[0].children]
    assert kinds == ["real_lit", "int_lit", "imag_lit"]


def test_keywords_that_are_not_reserved_stay_usable_as_names() -> None:
    # `lower`, `upper`, `offset`, `multiplier` and `T` are keywords only in their
    # own places (Stan Reference Manual, "Reserved names", from memory).
    s = read_program_text("data { real lower; real offset; real T; }\n"
                          "parameters { real<lower=lower> x; }\n"
                          "model { x ~ normal(offset, T) T[lower, ]; }\n")
    assert s.syntax_errors == []
    assert s.declarations["x"].lower.text == "lower"
    assert s.declarations["x"].priors[0].truncation == ("lower", None)


def read_program_text(text: str):
    from auditor.programs.stan import read_stan_text

    return read_stan_text(text, Path("inline.stan"))


# ------------------------------------------------------------------ includes
def test_include_line_mapping() -> None:
    # Stan Reference Manual, "Includes": the included text replaces the line.
    main = CORPUS / "include_main.stan"
    data_part = CORPUS / "includes" / "data_part.stan"
    part = CORPUS / "includes" / "part.stan"
    s = read_program(main)
    assert s.syntax_errors == []
    assert s.includes == [str(data_part), str(part)]
    n = s.declarations["N"]
    assert n.path == str(data_part) and n.line == line_of(data_part, "int<lower=0> N;")
    assert s.declarations["mu"].path == "" and s.declarations["mu"].line == line_of(main, "real mu")
    prior = s.declarations["mu"].priors[0]
    assert prior.path == str(part) and prior.line == line_of(part, "mu ~ normal(0, 5)")
    sigma = s.declarations["sigma"].priors[0]
    assert sigma.line == line_of(part, "sigma ~ exponential(1)")
    (lik,) = s.likelihoods
    assert lik.distribution.path == "" and lik.distribution.line == line_of(main, "flow ~")


def test_cyclic_include_is_reported_not_followed(tmp_path: Path) -> None:
    (tmp_path / "a.stan").write_text("model {\n#include b.stan\n}\n")
    (tmp_path / "b.stan").write_text("#include a.stan\n")
    s = read_program(tmp_path / "a.stan")
    (problem,) = s.syntax_errors
    assert "includes itself" in problem.message
    assert problem.path == str(tmp_path / "b.stan") and problem.line == 1


# ------------------------------------------------------------------ syntax errors
ERRORS = CORPUS / "errors"


@pytest.mark.parametrize(("name", "snippet", "offset", "words"), [
    ("bad_expression.stan", "normal(0, );", len("normal(0, "),
     "unexpected token ')' — expected an expression"),
    ("bad_character.stan", "@", 0, "unexpected character '@'"),
    ("missing_semicolon.stan", "int<lower=0> N", len("int<lower=0> N"), "missing ';' after 'N'"),
    ("block_order.stan", "data {", 0, "the 'data' block must come before the 'model' block"),
    ("bad_assignment.stan", "mu + 1 = 2;", 0, "left side of an assignment"),
    ("bad_include.stan", "#include", 0, "cannot find the included file 'no_such_part.stan'"),
    ("unterminated_comment.stan", "/*", 0, "never closed"),
    ("tilde_outside_model.stan", "mu ~", 0, "only allowed in the model block"),
    ("data_with_value.stan", "N = 3", 0, "'N' cannot be given a value in the 'data' block"),
])
def test_syntax_errors_have_the_right_position(name: str, snippet: str, offset: int,
                                               words: str) -> None:
    path = ERRORS / name
    s = read_program(path)
    assert len(s.syntax_errors) == 1
    problem = s.syntax_errors[0]
    assert words in problem.message
    assert problem.path == str(path)
    assert problem.line == line_of(path, snippet)
    assert problem.column == column_of(path, snippet) + offset


def test_syntax_error_inside_an_included_file_points_there() -> None:
    part = ERRORS / "includes" / "broken_part.stan"
    (problem,) = read_program(ERRORS / "include_with_error.stan").syntax_errors
    assert problem.path == str(part)
    assert problem.line == line_of(part, "x + * 2")
    assert problem.column == column_of(part, "* 2")
    assert "unexpected token '*'" in problem.message


def test_parser_error_carries_position() -> None:
    with pytest.raises(StanSyntaxError) as info:
        parse_stan("model {\n  y ~ normal(0, 1)\n}\n")
    assert (info.value.line, info.value.column) == (2, 19)
    assert "';'" in info.value.message


@pytest.mark.parametrize("content", [b"\xff\xfe\x00bad", b""])
def test_unreadable_or_empty_files_never_raise(tmp_path: Path, content: bytes) -> None:
    path = tmp_path / "odd.stan"
    path.write_bytes(content)
    s = read_program(path)
    if content:
        assert s.syntax_errors[0].message == "the file is not UTF-8 text"
    else:
        # An empty program is valid Stan (Reference Manual, "Program Blocks": all optional).
        assert s.syntax_errors == [] and s.declarations == {}


def test_missing_file_and_unknown_suffix(tmp_path: Path) -> None:
    missing = read_program(tmp_path / "absent.stan")
    assert missing.syntax_errors and "cannot read the file" in missing.syntax_errors[0].message
    other = read_program(tmp_path / "model.bug")
    assert "expected a .stan or .py file" in other.syntax_errors[0].message


def test_reading_never_changes_the_file(tmp_path: Path) -> None:
    copy = tmp_path / "hierarchical.stan"
    shutil.copy(CORPUS / "hierarchical.stan", copy)
    before = copy.read_bytes()
    read_program(copy)
    assert copy.read_bytes() == before


def test_censoring_terms_are_likelihoods_of_the_censoring_point() -> None:
    # target += N * f_lccdf(U | ...) adds the log survival of the censored units
    # (Stan User's Guide, "Censored data"); it is about data, not a prior.
    path = CORPUS / "censoring.stan"
    s = read_program(path)
    liks = [(lik.variable, lik.distribution.family) for lik in s.likelihoods]
    assert liks == [("hours", "lognormal"), ("U", "lognormal_lccdf")]
    assert s.likelihoods[1].distribution.line == line_of(path, "lognormal_lccdf")
    assert [p.family for p in s.declarations["mu"].priors] == ["normal"]


def test_include_with_trailing_comment_and_malformed_include(tmp_path: Path) -> None:
    (tmp_path / "priors.stan").write_text("  mu ~ normal(0, 1);\n")
    (tmp_path / "main.stan").write_text(
        "parameters { real mu; }\nmodel {\n#include \"priors.stan\" // the priors\n}\n")
    s = read_program(tmp_path / "main.stan")
    assert s.syntax_errors == [] and s.declarations["mu"].priors[0].family == "normal"
    (tmp_path / "bad.stan").write_text("model {\n  #include\n}\n")
    (problem,) = read_program(tmp_path / "bad.stan").syntax_errors
    assert (problem.line, problem.column) == (2, 3) and "names no file" in problem.message


@pytest.mark.parametrize("path", [CORPUS / "expressions.stan", CORPUS / "functions.stan",
                                  CORPUS / "tuples.stan"], ids=lambda p: p.name)
def test_damaged_programs_never_raise(path: Path) -> None:
    # Bad input must give a finding, never a traceback: cut the program short,
    # drop characters or insert a stray one at many places.
    from auditor.programs.stan import read_stan_text

    text = path.read_text()
    n_lines = len(text.splitlines()) + 1
    for cut in range(0, len(text), 41):
        for damaged in (text[:cut], text[:cut] + text[cut + 3:], text[:cut] + "(" + text[cut:]):
            summary = read_stan_text(damaged, path)
            for problem in summary.syntax_errors:
                assert 1 <= problem.line <= n_lines and problem.column >= 1
                assert problem.message and problem.path == str(path)


def test_very_deep_nesting_is_a_finding_not_a_crash() -> None:
    from auditor.programs.stan import read_stan_text

    fine = read_stan_text("transformed data { real x = " + "(" * 200 + "1" + ")" * 200 + "; }",
                          Path("deep.stan"))
    assert fine.syntax_errors == [] and "x" in fine.declarations
    deep = read_stan_text("transformed data { real x = " + "(" * 5000 + "1" + ")" * 5000 + "; }",
                          Path("deep.stan"))
    assert "nested too deeply" in deep.syntax_errors[0].message


@pytest.mark.parametrize(("src", "suggestion", "column"), [
    # Block names of the Stan Reference Manual, "Program Blocks".
    ("parameter {\n}\n", "did you mean 'parameters'?", 1),
    ("data { int N; }\ntransformed_data {\n}\n", "did you mean 'transformed data'?", 1),
    ("generated_quantity {\n}\n", "did you mean 'generated quantities'?", 1),
    ("data { rael x; }\n", "did you mean 'real'?", 8),
    ("parameters { real<lowe=0> x; }\n", "did you mean 'lower'?", 19),
])
def test_misspelt_keywords_get_a_suggestion(src: str, suggestion: str, column: int) -> None:
    (problem,) = read_program_text(src).syntax_errors
    assert suggestion in problem.message and problem.column == column


def test_definitions_of_single_assignment_variables() -> None:
    s = read_program(CORPUS / "regression.stan")
    assert s.definitions["mu_dough"] == "alpha + beta[oven] .* dough"
    assert s.definitions["mu"] == "mu_dough + gamma_heat * heat"
    # Assigned in more than one statement (or with +=): no single definition.
    st = read_program(CORPUS / "statements.stan").definitions
    assert "total" not in st and "scaled" not in st and "k" not in st
    assert st["log_rate"] == "alpha + beta * wind"


def test_tuple_unpacking_is_an_assignment() -> None:
    # Reference Manual, "Unpacking assignment of tuples" (Stan 2.34+, from memory).
    s = read_program_text("transformed data { real a; array[2] int b;\n"
                          "  (a, b[1]) = (1.5, 2);\n  (a, b[2]) = (b[1], 3); }\n")
    assert s.syntax_errors == []
    (problem,) = read_program_text("transformed data { real a;\n  (a, 1) = (1, 2); }\n"
                                   ).syntax_errors
    assert problem.line == 2 and "left side of an assignment" in problem.message
