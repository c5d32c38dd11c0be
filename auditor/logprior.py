"""The log-prior of every draw, from a program's prior statements, when the files save none.

Power-scaling sensitivity (Kallioinen, Paananen, Bürkner & Vehtari 2024, Statistics and Computing
34:57) needs the log-prior of each posterior draw. Stan programs rarely save it (the ``lprior``
convention of ``brms`` and ``priorsense`` is young), but most prior statements are simple enough
to evaluate from outside: a family of the Stan Functions Reference whose arguments are
constants, data, or parameters saved in the draws. :func:`evaluate_log_prior` evaluates each
such statement with ``scipy.stats`` at every draw and sums them; every statement it cannot
evaluate is listed with its line and the reason, so an audit can say what was left out.

What a statement contributes:

- the family's full log density (normalizing constants included; Stan's ``~`` drops them, which
  changes the total by a constant only, and power-scaling does not see constants);
- for a truncated statement ``T[L, U]`` also ``-log(F(U) - F(L))``, as Stan adds it (it depends
  on the parameters when the family's arguments do);
- nothing for the declared bounds of the parameter: ``real<lower=0> sigma; sigma ~ normal(0, 1)``
  is a half-normal prior, whose normalizing constant (``log 2``) Stan does not add either. The
  constant does not depend on parameters when the family's arguments and the bounds are
  constants, so power-scaling is unchanged. When the arguments are parameters
  (``theta ~ normal(mu, tau)`` with ``<lower=0> theta``) the missing term does depend on them,
  but Stan's target lacks it too: the value here is the log-prior of the model Stan runs.

Vectorized statements sum over the elements of the left-hand side; vector arguments of its
shape act elementwise, scalar ones are broadcast, as in Stan. Arguments may be simple
expressions of numbers, data and saved draws with ``+ - * /`` and unary minus, read with
Python's :mod:`ast` (never evaluated as code): Stan's products of two vectors are matrix
products and integer division truncates, so a product needs a scalar factor and ``int / int``
is truncated (PyMC programs are Python: elementwise and true division).

Left out, with the reason: statements on an indexed or transformed left-hand side
(``theta[j] ~ ...`` in a loop, ``log(sigma) ~ ...``), statements inside ``_lp`` functions,
``target +=`` statements with more than the density call, families not mapped here, arguments
that are neither constants nor data nor saved draws (function calls, local variables,
transformed data missing from the data), shape mismatches, and densities that are not finite
at some draw. A statement inside a conditional or a loop is taken to run once per evaluation of
the model block: the summary does not say otherwise.
"""

from __future__ import annotations

import ast
import math
import re
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import NDArray
from scipy import special, stats

from auditor.programs.summary import Arg, Declaration, Distribution, ProgramSummary

__all__ = [
    "EvaluatedStatement",
    "FAMILIES",
    "LeftOutStatement",
    "ProgramLogPrior",
    "evaluate_log_prior",
]

#: Blocks whose variables get priors (Stan; PyMC free variables are ``parameters``).
_PARAMETER_BLOCKS = ("parameters", "transformed parameters")
_DATA_BLOCKS = ("data", "transformed data")
#: Longest argument text the expression reader looks at.
_MAX_EXPR_CHARS = 400


class _Unevaluable(Exception):
    """A statement cannot be evaluated; the message is the reason."""


# --------------------------------------------------------------------------------------------
# Families: Stan Functions Reference parametrizations mapped to scipy.stats


class _Half:
    """A distribution symmetric about 0 folded onto ``[0, inf)`` (PyMC's half-forms)."""

    def __init__(self, base: Any) -> None:
        self.base = base

    def logpdf(self, x: NDArray) -> NDArray:
        with np.errstate(invalid="ignore"):
            return np.where(x >= 0, self.base.logpdf(x) + math.log(2.0), -np.inf)

    def logcdf(self, x: NDArray) -> NDArray:
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(x >= 0, np.log(2.0 * self.base.cdf(x) - 1.0), -np.inf)

    def logsf(self, x: NDArray) -> NDArray:
        with np.errstate(invalid="ignore"):
            return np.where(x >= 0, self.base.logsf(x) + math.log(2.0), 0.0)


class _Flat:
    """Improper flat density (PyMC ``Flat``/``HalfFlat``): log density 0 on its support."""

    def __init__(self, lower: float | None) -> None:
        self.lower = lower

    def logpdf(self, x: NDArray) -> NDArray:
        if self.lower is None:
            return np.zeros_like(x)
        return np.where(x >= self.lower, 0.0, -np.inf)


def _scipy(build: Callable[..., Any], n_args: int) -> tuple[int, Callable[..., Any]]:
    return n_args, build


#: Stan family -> (number of arguments, builder of an object with ``logpdf`` (and ``logcdf``,
#: ``logsf`` for truncation) from the arguments in Stan's order). Stan Functions Reference,
#: "Continuous distributions"; PyMC's half-forms under the reader's names.
FAMILIES: dict[str, tuple[int, Callable[..., Any]]] = {
    "normal": _scipy(lambda mu, sigma: stats.norm(mu, sigma), 2),
    "std_normal": _scipy(lambda: stats.norm(0.0, 1.0), 0),
    "student_t": _scipy(lambda nu, mu, sigma: stats.t(nu, mu, sigma), 3),
    "cauchy": _scipy(lambda mu, sigma: stats.cauchy(mu, sigma), 2),
    "double_exponential": _scipy(lambda mu, sigma: stats.laplace(mu, sigma), 2),
    "logistic": _scipy(lambda mu, sigma: stats.logistic(mu, sigma), 2),
    "gumbel": _scipy(lambda mu, beta: stats.gumbel_r(mu, beta), 2),
    "skew_normal": _scipy(lambda xi, omega, alpha: stats.skewnorm(alpha, xi, omega), 3),
    "exp_mod_normal": _scipy(
        lambda mu, sigma, lam: stats.exponnorm(1.0 / (sigma * lam), mu, sigma), 3),
    "lognormal": _scipy(lambda mu, sigma: stats.lognorm(sigma, scale=np.exp(mu)), 2),
    "chi_square": _scipy(lambda nu: stats.chi2(nu), 1),
    # InvChiSquare(nu) = InvGamma(nu / 2, 1 / 2); ScaledInvChiSquare(nu, s) =
    # InvGamma(nu / 2, nu s^2 / 2) (Functions Reference, densities written out).
    "inv_chi_square": _scipy(lambda nu: stats.invgamma(nu / 2.0, scale=0.5), 1),
    "scaled_inv_chi_square": _scipy(
        lambda nu, s: stats.invgamma(nu / 2.0, scale=nu * s * s / 2.0), 2),
    "exponential": _scipy(lambda beta: stats.expon(scale=1.0 / beta), 1),
    "gamma": _scipy(lambda alpha, beta: stats.gamma(alpha, scale=1.0 / beta), 2),
    "inv_gamma": _scipy(lambda alpha, beta: stats.invgamma(alpha, scale=beta), 2),
    "weibull": _scipy(lambda alpha, sigma: stats.weibull_min(alpha, scale=sigma), 2),
    "frechet": _scipy(lambda alpha, sigma: stats.invweibull(alpha, scale=sigma), 2),
    "rayleigh": _scipy(lambda sigma: stats.rayleigh(scale=sigma), 1),
    "pareto": _scipy(lambda y_min, alpha: stats.pareto(alpha, scale=y_min), 2),
    "pareto_type_2": _scipy(lambda mu, lam, alpha: stats.lomax(alpha, mu, lam), 3),
    "loglogistic": _scipy(lambda alpha, beta: stats.fisk(beta, scale=alpha), 2),
    "beta": _scipy(lambda a, b: stats.beta(a, b), 2),
    "beta_proportion": _scipy(lambda mu, kappa: stats.beta(mu * kappa, (1 - mu) * kappa), 2),
    "uniform": _scipy(lambda lo, hi: stats.uniform(lo, hi - lo), 2),
    "von_mises": _scipy(lambda mu, kappa: stats.vonmises(kappa, mu), 2),
    "half_normal": _scipy(lambda sigma: stats.halfnorm(scale=sigma), 1),
    "half_cauchy": _scipy(lambda sigma: stats.halfcauchy(scale=sigma), 1),
    "half_student_t": _scipy(lambda nu, sigma: _Half(stats.t(nu, 0.0, sigma)), 2),
    "flat": _scipy(lambda: _Flat(None), 0),
    "half_flat": _scipy(lambda: _Flat(0.0), 0),
}
#: Families over a whole vector (not elementwise), evaluated by their own function.
_MULTIVARIATE = ("dirichlet",)


def _dirichlet_logpdf(x: NDArray, alpha: NDArray) -> NDArray:
    """Dirichlet log density over the last axis (Functions Reference, "Dirichlet")."""
    alpha = np.broadcast_to(alpha, np.broadcast_shapes(alpha.shape, x.shape))
    with np.errstate(divide="ignore", invalid="ignore"):
        return (special.gammaln(alpha.sum(axis=-1)) - special.gammaln(alpha).sum(axis=-1)
                + special.xlogy(alpha - 1.0, x).sum(axis=-1))


# --------------------------------------------------------------------------------------------
# Results


@dataclass(frozen=True)
class EvaluatedStatement:
    """A prior statement that was evaluated, with its log density per draw (chains, draws)."""

    variable: str
    family: str
    line: int
    text: str
    values: NDArray[np.float64] = field(repr=False, compare=False)
    #: File the statement is in when it is an included file, else ``""``.
    path: str = ""


@dataclass(frozen=True)
class LeftOutStatement:
    """A prior statement that could not be evaluated, and why."""

    variable: str
    family: str
    line: int
    text: str
    reason: str
    path: str = ""


@dataclass
class ProgramLogPrior:
    """The log-prior per draw from a program's prior statements.

    Parameters
    ----------
    values
        Sum of the evaluated statements, shape (chains, draws); ``None`` when none was evaluated.
    evaluated
        The statements summed, in source order.
    left_out
        Statements that could not be evaluated, with the reason, in source order.
    without_statement
        Parameters with no prior statement at all (in Stan an implicit flat prior, which adds
        nothing to the log-prior).
    """

    values: NDArray[np.float64] | None
    evaluated: list[EvaluatedStatement] = field(default_factory=list)
    left_out: list[LeftOutStatement] = field(default_factory=list)
    without_statement: list[str] = field(default_factory=list)


# --------------------------------------------------------------------------------------------
# Values: arrays whose first two axes are (chains, draws), of length 1 for non-draw values


@dataclass(frozen=True)
class _Val:
    a: NDArray[np.float64]  # shape (C or 1, D or 1, *element shape)
    is_int: bool = False

    @property
    def shape(self) -> tuple[int, ...]:
        return self.a.shape[2:]


def _const(x: Any, is_int: bool = False) -> _Val:
    arr = np.asarray(x, dtype=np.float64)
    return _Val(arr.reshape((1, 1, *arr.shape)), is_int)


def _shape_text(shape: tuple[int, ...]) -> str:
    return "a scalar" if not shape else "shape (" + ", ".join(str(n) for n in shape) + ")"


class _Scope:
    """Where names get their values: the draws, the data and the program's declarations."""

    def __init__(self, program: ProgramSummary, draws: Mapping[str, NDArray[np.float64]],
                 data: Mapping[str, Any]) -> None:
        self.program = program
        self.draws = draws
        self.data = data
        self.stan = program.language == "stan"

    def value(self, name: str) -> _Val:
        decl = self.program.declarations.get(name)
        block = decl.block if decl is not None else ""
        if block in _DATA_BLOCKS or (block == "" and name in self.data and name not in self.draws):
            if name not in self.data:
                what = "transformed data" if block == "transformed data" else "data"
                raise _Unevaluable(f"`{name}` is {what} not found in the data")
            raw = self.data[name]
            try:
                arr = np.asarray(raw, dtype=np.float64)
            except (TypeError, ValueError) as exc:
                raise _Unevaluable(f"the data value of `{name}` is not numeric") from exc
            is_int = self.stan and decl is not None and decl.type == "int"
            return _const(arr, is_int)
        if name in self.draws:
            arr = self.draws[name]
            return _Val(arr, False)
        if block in _PARAMETER_BLOCKS:
            raise _Unevaluable(f"`{name}` is not in the draws")
        if block == "generated quantities":
            raise _Unevaluable(f"`{name}` is a generated quantity, not in the draws")
        raise _Unevaluable(f"`{name}` is neither data nor a variable in the draws "
                           "(a local variable?)")


def _combine(op: ast.operator, x: _Val, y: _Val, stan: bool) -> _Val:
    sx, sy = x.shape, y.shape
    if sx and sy and sx != sy:
        raise _Unevaluable(f"operands of {_shape_text(sx)} and {_shape_text(sy)} do not match")
    if stan and isinstance(op, ast.Mult) and sx and sy:
        raise _Unevaluable("a product of two non-scalars is a matrix product in Stan")
    if stan and isinstance(op, ast.Div) and sy:
        raise _Unevaluable("division by a non-scalar is a matrix division in Stan")
    with np.errstate(all="ignore"):
        if isinstance(op, ast.Add):
            return _Val(x.a + y.a, x.is_int and y.is_int)
        if isinstance(op, ast.Sub):
            return _Val(x.a - y.a, x.is_int and y.is_int)
        if isinstance(op, ast.Mult):
            return _Val(x.a * y.a, x.is_int and y.is_int)
        if stan and x.is_int and y.is_int:
            return _Val(np.trunc(x.a / y.a), True)  # Stan: integer division truncates
        return _Val(x.a / y.a, False)


def _names_in(node: ast.AST) -> list[str]:
    out: list[str] = []

    def visit(n: ast.AST) -> None:
        if isinstance(n, ast.Name):
            out.append(n.id)
        for child in ast.iter_child_nodes(n):
            visit(child)

    visit(node)
    return list(dict.fromkeys(out))


def _evaluate(text: str, arg: Arg | None, scope: _Scope) -> _Val:
    """Value of an argument or bound: a literal, a name or a simple expression of them."""
    if arg is not None and arg.value is not None:
        return _const(arg.value, float(arg.value).is_integer() and "." not in text
                      and "e" not in text.lower())
    text = text.strip()
    if not text:
        raise _Unevaluable("an argument is missing")
    if len(text) > _MAX_EXPR_CHARS:
        raise _Unevaluable("an argument is too long to read")
    try:
        tree = ast.parse(text, mode="eval")
    except (SyntaxError, ValueError, RecursionError, MemoryError) as exc:
        raise _Unevaluable(f"the argument `{text}` is not a simple expression") from exc
    rename: dict[str, str] = {}
    if not scope.stan and arg is not None:
        # PyMC: the text has Python names, ``arg.names`` the PyMC names, first use first.
        written = _names_in(tree)
        if len(written) == len(arg.names):
            rename = dict(zip(written, arg.names, strict=True))

    def ev(node: ast.AST) -> _Val:
        if isinstance(node, ast.Expression):
            return ev(node.body)
        if isinstance(node, ast.Constant) and type(node.value) in (int, float):
            return _const(node.value, isinstance(node.value, int))
        if isinstance(node, ast.Name):
            name = node.id
            if not scope.stan and name not in scope.draws and name not in scope.data:
                name = rename.get(name, name)
            return scope.value(name)
        if isinstance(node, ast.UnaryOp) and isinstance(node.op, ast.USub | ast.UAdd):
            v = ev(node.operand)
            return _Val(-v.a if isinstance(node.op, ast.USub) else v.a, v.is_int)
        if isinstance(node, ast.BinOp) and isinstance(node.op, ast.Add | ast.Sub | ast.Mult
                                                      | ast.Div):
            return _combine(node.op, ev(node.left), ev(node.right), scope.stan)
        raise _Unevaluable(f"the argument `{text}` is not a simple expression "
                           "(only numbers, names, + - * / and unary minus are evaluated)")

    try:
        return ev(tree)
    except RecursionError as exc:
        raise _Unevaluable(f"the argument `{text}` is nested too deeply") from exc


# --------------------------------------------------------------------------------------------
# Statements


_DENSITY_CALL = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*_l(?:u)?p[dm]f\s*\(")


def _lhs_text(dist: Distribution) -> str | None:
    """The left-hand side as written: before ``~``, or the first argument of ``f_lpdf(x | ...)``."""
    text = dist.text
    depth = 0
    if _DENSITY_CALL.match(text):
        start = text.index("(") + 1
        for i in range(start, len(text)):
            ch = text[i]
            if ch in "([{":
                depth += 1
            elif ch in ")]}":
                depth -= 1
            elif ch == "|" and depth == 0:
                return text[start:i].strip()
        return None
    for i, ch in enumerate(text):
        if ch in "([{":
            depth += 1
        elif ch in ")]}":
            depth -= 1
        elif ch == "~" and depth == 0:
            return text[:i].strip()
    return None


def _whole_target_statement(program: ProgramSummary, dist: Distribution) -> bool:
    """Whether a ``*_lpdf`` call is the whole right-hand side of ``target += ...;``.

    Checked in the program's own text; a call in an included file cannot be checked here and
    is taken as written alone.
    """
    if dist.path or not program.source_lines or not (1 <= dist.line <= len(program.source_lines)):
        return True
    lines = program.source_lines
    offset = sum(len(line) + 1 for line in lines[: dist.line - 1]) + dist.column - 1
    joined = "\n".join(lines)
    if not re.search(r"target\s*\+=\s*$", joined[:offset]):
        return False
    pattern = r"\s+".join(re.escape(part) for part in dist.text.split(" ")) + r"\s*;"
    return re.compile(pattern).match(joined, offset) is not None


def _check_left_side(program: ProgramSummary, decl: Declaration, dist: Distribution) -> None:
    if program.language != "stan":
        return
    lhs = _lhs_text(dist)
    if lhs is None:
        raise _Unevaluable("the left-hand side could not be read")
    if lhs != decl.name:
        if lhs.startswith(decl.name) and lhs[len(decl.name):].lstrip().startswith("["):
            raise _Unevaluable(f"the left-hand side `{lhs}` is indexed (a statement in a "
                               "loop?); only whole variables are evaluated")
        raise _Unevaluable(f"the left-hand side `{lhs}` is not the variable `{decl.name}` "
                           "itself (a transform, or an argument of a function)")
    if _DENSITY_CALL.match(dist.text) and not _whole_target_statement(program, dist):
        raise _Unevaluable("the density is part of a larger `target +=` expression")


def _check_shape(what: str, v: _Val, shape: tuple[int, ...]) -> None:
    if v.shape and v.shape != shape:
        raise _Unevaluable(f"{what} has {_shape_text(v.shape)}, the left-hand side "
                           f"{_shape_text(shape)}")


def _align(v: _Val, shape: tuple[int, ...]) -> NDArray[np.float64]:
    """A scalar value with axes of length 1 added, to broadcast over the left-hand side."""
    return v.a if v.shape else v.a.reshape(v.a.shape[:2] + (1,) * len(shape))


def _log_normalizer(d: Any, lo: NDArray | None, hi: NDArray | None) -> NDArray:
    """``log(F(hi) - F(lo))`` with a missing bound at the end of the support."""
    if not (hasattr(d, "logcdf") and hasattr(d, "logsf")):
        raise _Unevaluable("truncation of this family is not evaluated")
    with np.errstate(all="ignore"):
        if lo is None and hi is not None:
            return d.logcdf(hi)
        if hi is None and lo is not None:
            return d.logsf(lo)
        assert lo is not None and hi is not None
        # Difference of CDFs below the median, of survival functions above it.
        upper_tail = d.cdf(lo) > 0.5
        mass = np.where(upper_tail, d.sf(lo) - d.sf(hi), d.cdf(hi) - d.cdf(lo))
        return np.log(mass)


def _statement(dist: Distribution, decl: Declaration, scope: _Scope,
               x: NDArray[np.float64]) -> NDArray[np.float64]:
    """Log density of one statement per draw, shape (chains, draws)."""
    _check_left_side(scope.program, decl, dist)
    shape = x.shape[2:]
    family = dist.family
    if family in _MULTIVARIATE:
        if dist.truncation is not None:
            raise _Unevaluable("truncation of a multivariate family")
        if len(dist.args) != 1:
            raise _Unevaluable(f"`{family}` takes 1 argument, the statement has "
                               f"{len(dist.args)}")
        alpha = _evaluate(dist.args[0].text, dist.args[0], scope)
        if not shape or (alpha.shape and alpha.shape != shape[-1:]):
            raise _Unevaluable(f"the concentration has {_shape_text(alpha.shape)}, the "
                               f"left-hand side {_shape_text(shape)}")
        a = alpha.a.reshape(alpha.a.shape[:2] + (1,) * (len(shape) - len(alpha.shape))
                            + alpha.shape)
        lp = _dirichlet_logpdf(x, a)
        return lp.reshape(x.shape[0], x.shape[1], -1).sum(axis=2)
    spec = FAMILIES.get(family)
    if spec is None:
        raise _Unevaluable(f"the family `{family}` is not mapped to scipy")
    n_args, build = spec
    if len(dist.args) != n_args:
        raise _Unevaluable(f"`{family}` takes {n_args} arguments, the statement has "
                           f"{len(dist.args)}")
    args = []
    for i, arg in enumerate(dist.args):
        v = _evaluate(arg.text, arg, scope)
        _check_shape(f"argument {i + 1} (`{arg.text}`)", v, shape)
        args.append(_align(v, shape))
    with np.errstate(all="ignore"):
        d = build(*args)
        lp = np.asarray(d.logpdf(x), dtype=np.float64)
    if dist.truncation is not None:
        bounds: list[NDArray | None] = []
        for text in dist.truncation:
            if text is None:
                bounds.append(None)
                continue
            b = _evaluate(text, None, scope)
            _check_shape(f"the truncation bound `{text}`", b, shape)
            bounds.append(_align(b, shape))
        lo, hi = bounds
        if lo is not None or hi is not None:
            with np.errstate(all="ignore"):
                inside = np.ones(x.shape, dtype=bool)
                if lo is not None:
                    inside &= x >= lo
                if hi is not None:
                    inside &= x <= hi
                lp = np.where(inside, lp, -np.inf) - _log_normalizer(d, lo, hi)
    lp = np.broadcast_to(lp, x.shape)
    return lp.reshape(x.shape[0], x.shape[1], -1).sum(axis=2)


def _draws_arrays(posterior: Any) -> tuple[dict[str, NDArray[np.float64]], int, int]:
    """Variables as float64 arrays (chains, draws, ...) and the number of chains and draws."""
    out: dict[str, NDArray[np.float64]] = {}
    shape: tuple[int, int] | None = None
    if hasattr(posterior, "data_vars"):
        items = []
        for name in posterior.data_vars:
            da = posterior[name]
            if "chain" in da.dims and "draw" in da.dims:
                da = da.transpose("chain", "draw", ...)
            items.append((str(name), da.values))
    else:
        items = [(str(k), v) for k, v in posterior.items()]
    for name, raw in items:
        arr = np.asarray(raw)
        if arr.ndim < 2 or arr.dtype.kind not in "biuf":
            continue
        out[name] = arr.astype(np.float64, copy=False)
        if shape is None:
            shape = (arr.shape[0], arr.shape[1])
    if shape is None:
        raise ValueError("the posterior holds no numeric variables with (chain, draw) axes")
    return out, shape[0], shape[1]


def evaluate_log_prior(
    program: ProgramSummary,
    posterior: Any,
    data: Mapping[str, Any] | None = None,
) -> ProgramLogPrior:
    """Evaluate a program's prior statements at every draw and sum them.

    Parameters
    ----------
    program : ProgramSummary
        The program (Stan, or PyMC mapped to Stan's names): each parameter's ``priors``.
    posterior : xarray.Dataset or mapping of arrays
        Posterior draws, variables of shape ``(chain, draw, ...)`` named as in the program.
    data : mapping, optional
        Data values by name (numbers or arrays), for arguments that refer to data.

    Returns
    -------
    ProgramLogPrior
        The sum of the statements that could be evaluated (each also on its own) and the
        statements left out, each with its line and reason. Never raises on what the program
        says; raises ``ValueError`` only when ``posterior`` holds no draws at all.
    """
    draws, n_chain, n_draw = _draws_arrays(posterior)
    scope = _Scope(program, draws, dict(data or {}))
    evaluated: list[EvaluatedStatement] = []
    left_out: list[LeftOutStatement] = []
    without: list[str] = []
    statements = []
    for decl in program.declarations.values():
        if decl.block not in _PARAMETER_BLOCKS:
            continue
        if not decl.priors and decl.block == "parameters":
            without.append(decl.name)
        statements.extend((decl, dist) for dist in decl.priors)
    statements.sort(key=lambda s: (s[1].path, s[1].line, s[1].column))
    total = np.zeros((n_chain, n_draw))
    for decl, dist in statements:
        try:
            x = draws.get(decl.name)
            if x is None:
                raise _Unevaluable(f"`{decl.name}` is not in the draws")
            if x.shape[:2] != (n_chain, n_draw):
                raise _Unevaluable(f"`{decl.name}` has {x.shape[0]} chains of {x.shape[1]} "
                                   f"draws, the posterior {n_chain} of {n_draw}")
            values = _statement(dist, decl, scope, x)
            bad = int(np.sum(~np.isfinite(values)))
            if bad:
                raise _Unevaluable(
                    f"the log density is not finite at {bad} of {values.size} draws (a value "
                    "outside the family's support, or an invalid argument)")
        except _Unevaluable as exc:
            left_out.append(LeftOutStatement(decl.name, dist.family, dist.line, dist.text,
                                             str(exc), dist.path))
            continue
        except (ValueError, TypeError, ArithmeticError) as exc:
            left_out.append(LeftOutStatement(decl.name, dist.family, dist.line, dist.text,
                                             f"could not be evaluated ({exc})", dist.path))
            continue
        evaluated.append(EvaluatedStatement(decl.name, dist.family, dist.line, dist.text,
                                            values, dist.path))
        total += values
    return ProgramLogPrior(total if evaluated else None, evaluated, left_out, without)
