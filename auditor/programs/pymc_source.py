"""Read a PyMC model from Python source into a :class:`ProgramSummary`, without running it.

The file is parsed with :mod:`ast` and never imported or executed: a project under
audit may do anything when run. We find the names the file binds to the ``pymc``
module (``import pymc as pm``, ``import pymc``, ``from pymc import Normal``) and
read every call ``<alias>.<Distribution>("name", ...)``, ``Deterministic`` and
``Data``; PyMC's parameter names and order are mapped to Stan's (PyMC API
documentation, ``pymc.distributions``; Stan Functions Reference for Stan's order).
"""

from __future__ import annotations

import ast
import math
from dataclasses import dataclass, field
from pathlib import Path

from auditor.boundary import Boundary, Refused
from auditor.programs.summary import (
    LOCATION_SCALE_ARGS,
    Arg,
    Bound,
    Declaration,
    Distribution,
    Likelihood,
    ProgramSummary,
    SyntaxProblem,
)

_PYMC_MODULES = {"pymc", "pymc3"}
_DATA_CALLS = {"Data", "MutableData", "ConstantData"}
#: Keywords that shape or place a variable rather than parametrize its distribution.
_NON_PARAMETER_KEYWORDS = {
    "observed", "shape", "dims", "size", "initval", "testval", "transform",
    "default_transform", "total_size", "rng", "dtype", "coords",
}
_DISCRETE = {"poisson", "neg_binomial_2", "bernoulli", "bernoulli_logit", "binomial",
             "binomial_logit", "categorical", "geometric", "discrete_uniform"}


@dataclass
class _Family:
    """How one PyMC distribution maps to Stan.

    ``params`` are PyMC's positional parameter names, in PyMC's order; ``stan`` the
    PyMC names to read for each Stan argument, in Stan's order.
    """

    stan: str
    params: tuple[str, ...]
    stan_args: tuple[str, ...]
    lower: float | None = None
    upper: float | None = None


# PyMC 5 signatures (pymc.distributions API reference); Stan order from the
# Stan Functions Reference.
_FAMILIES: dict[str, _Family] = {
    "Normal": _Family("normal", ("mu", "sigma"), ("mu", "sigma")),
    "HalfNormal": _Family("half_normal", ("sigma",), ("sigma",), lower=0),
    "Cauchy": _Family("cauchy", ("alpha", "beta"), ("alpha", "beta")),
    "HalfCauchy": _Family("half_cauchy", ("beta",), ("beta",), lower=0),
    "StudentT": _Family("student_t", ("nu", "mu", "sigma"), ("nu", "mu", "sigma")),
    "HalfStudentT": _Family("half_student_t", ("nu", "sigma"), ("nu", "sigma"), lower=0),
    "Exponential": _Family("exponential", ("lam",), ("lam",), lower=0),
    "Gamma": _Family("gamma", ("alpha", "beta"), ("alpha", "beta"), lower=0),
    "InverseGamma": _Family("inv_gamma", ("alpha", "beta"), ("alpha", "beta"), lower=0),
    "Uniform": _Family("uniform", ("lower", "upper"), ("lower", "upper")),
    "Beta": _Family("beta", ("alpha", "beta"), ("alpha", "beta"), lower=0, upper=1),
    "LogNormal": _Family("lognormal", ("mu", "sigma"), ("mu", "sigma"), lower=0),
    "Lognormal": _Family("lognormal", ("mu", "sigma"), ("mu", "sigma"), lower=0),
    "Laplace": _Family("double_exponential", ("mu", "b"), ("mu", "b")),
    "Logistic": _Family("logistic", ("mu", "s"), ("mu", "s")),
    "Gumbel": _Family("gumbel", ("mu", "beta"), ("mu", "beta")),
    "SkewNormal": _Family("skew_normal", ("mu", "sigma", "alpha"), ("mu", "sigma", "alpha")),
    "Weibull": _Family("weibull", ("alpha", "beta"), ("alpha", "beta"), lower=0),
    "ChiSquared": _Family("chi_square", ("nu",), ("nu",), lower=0),
    "VonMises": _Family("von_mises", ("mu", "kappa"), ("mu", "kappa")),
    "TruncatedNormal": _Family("normal", ("mu", "sigma", "lower", "upper"), ("mu", "sigma")),
    "Poisson": _Family("poisson", ("mu",), ("mu",), lower=0),
    "NegativeBinomial": _Family("neg_binomial_2", ("mu", "alpha"), ("mu", "alpha"), lower=0),
    "Bernoulli": _Family("bernoulli", ("p",), ("p",), lower=0, upper=1),
    "Binomial": _Family("binomial", ("n", "p"), ("n", "p"), lower=0),
    "Geometric": _Family("geometric", ("p",), ("p",), lower=1),
    "Categorical": _Family("categorical", ("p",), ("p",)),
    "Dirichlet": _Family("dirichlet", ("a",), ("a",)),
    "MvNormal": _Family("multi_normal", ("mu", "cov"), ("mu", "cov")),
    "Flat": _Family("flat", (), ()),
    "HalfFlat": _Family("half_flat", (), (), lower=0),
}


@dataclass
class _Reader:
    source: str
    summary: ProgramSummary
    #: The source's lines as UTF-8 bytes (ast positions are byte offsets), split
    #: once: ``ast.get_source_segment`` splits the whole source on every call,
    #: which made reading a long generated model quadratic.
    byte_lines: list[bytes] = field(default_factory=list)
    modules: set[str] = field(default_factory=set)
    direct: dict[str, str] = field(default_factory=dict)
    #: Python variable -> name of the PyMC variable it holds.
    rv_names: dict[str, str] = field(default_factory=dict)
    #: Python variable or PyMC name -> names its value is computed from.
    computed_from: dict[str, list[str]] = field(default_factory=dict)
    #: Names bound by any import (``np``, ``pm``): modules, not model quantities.
    imported: set[str] = field(default_factory=set)
    definition_count: dict[str, int] = field(default_factory=dict)

    # ------------------------------------------------------------ helpers
    def text(self, node: ast.AST | None) -> str:
        if node is None:
            return ""
        segment = self.segment(node)
        return " ".join(segment.split()) if segment else ast.unparse(node)

    def segment(self, node: ast.AST) -> str | None:
        """The source text of ``node``, as ``ast.get_source_segment`` gives it."""
        try:
            first, last = node.lineno - 1, node.end_lineno - 1  # type: ignore[attr-defined]
            start, end = node.col_offset, node.end_col_offset  # type: ignore[attr-defined]
        except AttributeError:
            return None
        if not self.byte_lines:
            self.byte_lines = self.source.encode("utf-8").splitlines(keepends=True)
        if first < 0 or last >= len(self.byte_lines) or start is None or end is None:
            return None
        if first == last:
            chunk = self.byte_lines[first][start:end]
        else:
            chunk = b"".join([self.byte_lines[first][start:],
                              *self.byte_lines[first + 1:last],
                              self.byte_lines[last][:end]])
        return chunk.decode("utf-8", "replace")

    def names(self, node: ast.AST | None) -> tuple[str, ...]:
        """Names used in an expression (not called functions), as PyMC names."""
        found: list[str] = []

        def visit(n: ast.AST) -> None:
            if isinstance(n, ast.Call):
                for a in [*n.args, *(k.value for k in n.keywords)]:
                    visit(a)
                return
            if isinstance(n, ast.Attribute):
                visit(n.value)
                return
            if isinstance(n, ast.Name):
                if n.id not in self.imported or n.id in self.rv_names:
                    found.append(self.rv_names.get(n.id, n.id))
                return
            for child in ast.iter_child_nodes(n):
                visit(child)

        if node is not None:
            visit(node)
        return tuple(dict.fromkeys(found))

    def arg(self, node: ast.AST) -> Arg:
        return Arg(self.text(node), literal(node), self.names(node))

    def pymc_callee(self, call: ast.Call) -> str | None:
        """``Normal`` for ``pm.Normal(...)``/``Normal(...)`` when bound to PyMC, else None."""
        func = call.func
        if (isinstance(func, ast.Attribute) and isinstance(func.value, ast.Name)
                and func.value.id in self.modules):
            return func.attr
        if isinstance(func, ast.Name) and func.id in self.direct:
            return self.direct[func.id]
        return None

    # ------------------------------------------------------------ reading
    def find_imports(self, tree: ast.Module) -> None:
        for node in ast.walk(tree):
            if isinstance(node, ast.Import | ast.ImportFrom):
                self.imported.update((a.asname or a.name).split(".")[0] for a in node.names)
            if isinstance(node, ast.Import):
                for alias in node.names:
                    if alias.name in _PYMC_MODULES:
                        self.modules.add(alias.asname or alias.name)
            elif isinstance(node, ast.ImportFrom) and node.module in _PYMC_MODULES:
                for alias in node.names:
                    if alias.name != "*":
                        self.direct[alias.asname or alias.name] = alias.name
        if not self.modules and not self.direct:
            # A script exported from a notebook may rely on an import made elsewhere.
            self.modules = {"pm", "pymc"}

    def read(self, tree: ast.Module) -> None:
        self.find_imports(tree)
        _Walker(self).visit(tree)
        self.link_hierarchy()

    def note_assignment(self, node: ast.Assign | ast.AnnAssign) -> None:
        targets = node.targets if isinstance(node, ast.Assign) else [node.target]
        value = node.value
        if value is None:
            return
        rv = None
        if isinstance(value, ast.Call) and self.pymc_callee(value) is not None:
            rv = _first_string(value)
        for target in targets:
            if not isinstance(target, ast.Name):
                continue
            if rv is not None:
                self.rv_names[target.id] = rv
            else:
                self.rv_names.pop(target.id, None)
                self.computed_from[target.id] = list(self.names(value))
                self.define(target.id, value)

    def define(self, name: str, expr: ast.expr) -> None:
        """Note ``name``'s defining expression; a second definition cancels it."""
        count = self.definition_count.get(name, 0) + 1
        self.definition_count[name] = count
        if count == 1:
            self.summary.definitions[name] = self.text(expr)
        else:
            self.summary.definitions.pop(name, None)

    def read_call(self, call: ast.Call) -> None:
        callee = self.pymc_callee(call)
        name = _first_string(call)
        if callee is None or name is None or not callee[:1].isupper():
            return
        line, column = call.lineno, call.col_offset + 1
        kwargs = {k.arg: k.value for k in call.keywords if k.arg}
        dims = _dims(self, kwargs)
        if callee == "Deterministic":
            expr = call.args[1] if len(call.args) > 1 else kwargs.get("var")
            self.declare(name, "transformed parameters", line, column, dims)
            self.computed_from[name] = list(self.names(expr))
            if expr is not None:
                self.define(name, expr)
            return
        if callee in _DATA_CALLS:
            self.declare(name, "data", line, column, dims)
            return
        if callee in {"Censored", "Truncated"}:
            self.read_wrapped(callee, name, call, kwargs, dims)
            return
        if callee in {"Model", "Potential", "Mixture"}:
            return
        dist, family, given = self.distribution(callee, call, kwargs, list(call.args[1:]))
        self.record(name, callee, family, given, dist, kwargs, call, dims)

    def read_wrapped(self, callee: str, name: str, call: ast.Call,
                     kwargs: dict[str, ast.expr], dims: tuple[str, ...]) -> None:
        """``pm.Truncated("y", pm.Normal.dist(...), lower=, upper=)`` and ``pm.Censored``."""
        inner = kwargs.get("dist", call.args[1] if len(call.args) > 1 else None)
        inner_callee = self.dist_callee(inner)
        if inner_callee is None or not isinstance(inner, ast.Call):
            return
        inner_kwargs = {k.arg: k.value for k in inner.keywords if k.arg}
        dist, family, given = self.distribution(
            inner_callee, inner, inner_kwargs, list(inner.args))
        # Place and text are the outer call's: that is the statement the user wrote.
        dist.line, dist.column, dist.text = call.lineno, call.col_offset + 1, self.text(call)
        low, high = kwargs.get("lower"), kwargs.get("upper")
        if callee == "Truncated":
            # Truncation renormalizes the density, as Stan's T[lower, upper].
            dist.truncation = (self.text(low) or None, self.text(high) or None)
        decl = self.record(name, inner_callee, family, given, dist, kwargs, call, dims)
        if decl is not None and callee == "Truncated":
            for key, node in (("lower", low), ("upper", high)):
                if node is not None:
                    setattr(decl, key, Bound(self.text(node), literal(node)))

    def dist_callee(self, node: ast.AST | None) -> str | None:
        """``Normal`` for ``pm.Normal.dist(...)``, else None."""
        if not (isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute)
                and node.func.attr == "dist"):
            return None
        owner = node.func.value
        if (isinstance(owner, ast.Attribute) and isinstance(owner.value, ast.Name)
                and owner.value.id in self.modules):
            return owner.attr
        if isinstance(owner, ast.Name) and owner.id in self.direct:
            return self.direct[owner.id]
        return None

    def record(self, name: str, callee: str, family: _Family | None,
               given: dict[str, ast.expr], dist: Distribution, kwargs: dict[str, ast.expr],
               call: ast.Call, dims: tuple[str, ...]) -> Declaration | None:
        """Declare the variable and file its distribution as prior or likelihood."""
        line, column = call.lineno, call.col_offset + 1
        observed = kwargs.get("observed")
        block = "data" if observed is not None else "parameters"
        decl = self.declare(name, block, line, column, dims)
        if decl is None:
            return None
        decl.type = "int" if dist.family in _DISCRETE else "real"
        if observed is not None:
            used = self.data_reached([n for a in dist.args for n in a.names], name)
            self.summary.likelihoods.append(
                Likelihood(name, dist, used, observed=self.text(observed)))
            return decl
        decl.priors.append(dist)
        self.set_bounds(decl, callee, family, given)
        return decl

    def distribution(
        self, callee: str, call: ast.Call, kwargs: dict[str, ast.expr],
        positional: list[ast.expr],
    ) -> tuple[Distribution, _Family | None, dict[str, ast.expr]]:
        """The Stan-named distribution of a PyMC call, arguments in Stan's order.

        ``positional`` are the call's distribution parameters given by position
        (after the name for ``pm.X("name", ...)``, all for ``pm.X.dist(...)``).
        Also returns the PyMC parameters given, by name.
        """
        family = _FAMILIES.get(callee)
        if family is None:
            # Not in our table: keep PyMC's own order under a snake_case name.
            args = [self.arg(a) for a in positional]
            args += [self.arg(v) for k, v in kwargs.items() if k not in _NON_PARAMETER_KEYWORDS]
            return self.make(call, _snake(callee), args), None, {}
        given: dict[str, ast.expr] = dict(zip(family.params, positional, strict=False))
        given.update({k: v for k, v in kwargs.items() if k not in _NON_PARAMETER_KEYWORDS})
        stan_name = family.stan
        args: list[Arg] = []
        for pname in family.stan_args:
            node = given.get(pname)
            if node is not None:
                args.append(self.arg(node))
            elif pname == "sigma" and "tau" in given:
                args.append(self.precision_to_scale(given["tau"]))
            elif pname == "sigma" and "lam" in given:
                args.append(self.precision_to_scale(given["lam"]))
            elif pname == "lam" and "scale" in given:
                args.append(self.inverse(given["scale"]))
            elif pname == "p" and "logit_p" in given:
                stan_name = f"{stan_name}_logit"
                args.append(self.arg(given["logit_p"]))
            elif pname == "mu" and callee in {"Normal", "StudentT", "LogNormal", "Lognormal",
                                             "TruncatedNormal"}:
                args.append(Arg("0", 0.0))  # PyMC's default location
            elif pname in {"lower", "upper"} and callee == "Uniform":
                default = 0.0 if pname == "lower" else 1.0
                args.append(Arg(f"{default:g}", default))
            elif callee == "Gamma" and "mu" in given and "sigma" in given:
                args = self.gamma_from_moments(given["mu"], given["sigma"])
                break
            else:
                args.append(Arg(""))
        dist = self.make(call, stan_name, args)
        if callee == "TruncatedNormal":
            low, high = given.get("lower"), given.get("upper")
            dist.truncation = (self.text(low) or None, self.text(high) or None)
        return dist, family, given

    def make(self, call: ast.Call, family: str, args: list[Arg]) -> Distribution:
        return Distribution(family, args, call.lineno, call.col_offset + 1, self.text(call))

    def precision_to_scale(self, node: ast.expr) -> Arg:
        # PyMC: sigma = 1 / sqrt(tau) (pymc.Normal docs); exact only for literals.
        value = literal(node)
        names = self.names(node)
        if value is not None and value > 0:
            scale = 1 / math.sqrt(value)
            return Arg(f"{scale:.6g}", scale, names)
        return Arg(f"1 / sqrt({self.text(node)})", None, names)

    def inverse(self, node: ast.expr) -> Arg:
        value = literal(node)
        if value is not None and value != 0:
            return Arg(f"{1 / value:.6g}", 1 / value)
        return Arg(f"1 / ({self.text(node)})", None, self.names(node))

    def gamma_from_moments(self, mu: ast.expr, sigma: ast.expr) -> list[Arg]:
        # Gamma(mu, sigma): alpha = mu^2 / sigma^2, beta = mu / sigma^2 (pymc.Gamma docs).
        m, s = literal(mu), literal(sigma)
        names = tuple(dict.fromkeys(self.names(mu) + self.names(sigma)))
        if m is not None and s:
            return [Arg(f"{m * m / (s * s):.6g}", m * m / (s * s)),
                    Arg(f"{m / (s * s):.6g}", m / (s * s))]
        mt, st = self.text(mu), self.text(sigma)
        return [Arg(f"({mt})^2 / ({st})^2", None, names), Arg(f"({mt}) / ({st})^2", None, names)]

    def set_bounds(self, decl: Declaration, callee: str, family: _Family | None,
                   given: dict[str, ast.expr]) -> None:
        if family is None:
            return
        if callee in {"Uniform", "TruncatedNormal"}:
            for key in ("lower", "upper"):
                node = given.get(key)
                if node is not None:
                    setattr(decl, key, Bound(self.text(node), literal(node)))
                elif callee == "Uniform":
                    default = 0.0 if key == "lower" else 1.0
                    setattr(decl, key, Bound(f"{default:g}", default))
            return
        if family.lower is not None:
            decl.lower = Bound(f"{family.lower:g}", float(family.lower))
        if family.upper is not None:
            decl.upper = Bound(f"{family.upper:g}", float(family.upper))

    def declare(self, name: str, block: str, line: int, column: int,
                dims: tuple[str, ...]) -> Declaration | None:
        if name in self.summary.declarations:
            self.summary.syntax_errors.append(SyntaxProblem(
                f"the PyMC variable name '{name}' is used twice (PyMC requires unique names)",
                line, column, self.summary.path))
            return None
        decl = Declaration(name=name, block=block, line=line, column=column, dims=dims)
        self.summary.declarations[name] = decl
        return decl

    def data_reached(self, names: list[str], own: str) -> list[str]:
        found: list[str] = []
        seen: set[str] = set()
        todo = list(names)
        while todo:
            n = todo.pop(0)
            if n in seen or n == own:
                continue
            seen.add(n)
            decl = self.summary.declarations.get(n)
            if decl is not None and decl.block == "data":
                found.append(n)
            elif decl is None or decl.block == "transformed parameters":
                todo.extend(self.computed_from.get(n, []))
        return found

    def link_hierarchy(self) -> None:
        decls = self.summary.declarations
        params = {n for n, d in decls.items()
                  if d.block in {"parameters", "transformed parameters"}}
        for decl in decls.values():
            for prior in decl.priors:
                if prior.family not in LOCATION_SCALE_ARGS:
                    continue
                for arg, role in ((prior.location_arg(), "location_of"),
                                  (prior.scale_arg(), "scale_of")):
                    for ref in arg.names if arg else ():
                        if ref in params and ref != decl.name:
                            roles = getattr(decls[ref], role)
                            if decl.name not in roles:
                                roles.append(decl.name)


class _Walker(ast.NodeVisitor):
    """Visit the module in execution order: a value before the name it is bound to.

    So in ``sigma = pm.HalfNormal("sigma", sigma=sigma)`` the argument still means
    the earlier Python value, as it would when run.
    """

    def __init__(self, reader: _Reader) -> None:
        self.reader = reader

    def visit_Assign(self, node: ast.Assign) -> None:
        self.visit(node.value)
        self.reader.note_assignment(node)

    def visit_AnnAssign(self, node: ast.AnnAssign) -> None:
        if node.value is not None:
            self.visit(node.value)
            self.reader.note_assignment(node)

    def visit_Call(self, node: ast.Call) -> None:
        self.generic_visit(node)
        self.reader.read_call(node)


def _dims(reader: _Reader, kwargs: dict[str, ast.expr]) -> tuple[str, ...]:
    for key in ("dims", "shape", "size"):
        node = kwargs.get(key)
        if node is None:
            continue
        if isinstance(node, ast.Tuple | ast.List):
            return tuple(reader.text(e) for e in node.elts)
        if isinstance(node, ast.Constant) and isinstance(node.value, str):
            return (node.value,)
        return (reader.text(node),)
    return ()


def _first_string(call: ast.Call) -> str | None:
    """The PyMC variable name: first positional argument or ``name=``, when a string."""
    node = call.args[0] if call.args else next(
        (k.value for k in call.keywords if k.arg == "name"), None)
    if isinstance(node, ast.Constant) and isinstance(node.value, str):
        return node.value
    return None


def _snake(name: str) -> str:
    out = []
    for i, ch in enumerate(name):
        if ch.isupper() and i and not name[i - 1].isupper():
            out.append("_")
        out.append(ch.lower())
    return "".join(out)


def literal(node: ast.AST | None) -> float | None:
    """Numeric value of ``3``, ``-2.5``, ``1e3``, ``+1`` (not booleans), else None."""
    if isinstance(node, ast.Constant):
        v = node.value
        if isinstance(v, int | float) and not isinstance(v, bool):
            try:
                return float(v)
            except OverflowError:  # an integer literal beyond any float
                return math.inf if v > 0 else -math.inf
        return None
    if isinstance(node, ast.UnaryOp) and isinstance(node.op, ast.USub | ast.UAdd):
        inner = literal(node.operand)
        if inner is None:
            return None
        return -inner if isinstance(node.op, ast.USub) else inner
    return None


def read_pymc(path: Path, gate: Boundary | None = None) -> ProgramSummary:
    """Summarize the PyMC model in the Python file at ``path``; never raises on bad input.

    The file is opened through ``gate`` (default: type and size checks only),
    parsed, and never imported or run.
    """
    summary = ProgramSummary(language="pymc", path=str(path))
    gate = gate or Boundary.unconfined()
    try:
        source = gate.read_text(path)
    except Refused as exc:
        summary.syntax_errors.append(SyntaxProblem(exc.reason, 1, 1, str(path), exc.kind))
        return summary
    except UnicodeDecodeError:
        summary.syntax_errors.append(SyntaxProblem("the file is not UTF-8 text", 1, 1, str(path)))
        return summary
    except OSError as exc:
        summary.syntax_errors.append(
            SyntaxProblem(f"cannot read the file: {exc.strerror or exc}", 1, 1, str(path)))
        return summary
    return read_pymc_text(source, path)


def read_pymc_text(source: str, path: Path) -> ProgramSummary:
    """Summarize PyMC model ``source`` as if read from ``path``."""
    summary = ProgramSummary(language="pymc", path=str(path), source_lines=source.splitlines())
    try:
        tree = ast.parse(source, filename=str(path))
    except SyntaxError as exc:
        summary.syntax_errors.append(SyntaxProblem(
            f"Python syntax error: {exc.msg}", exc.lineno or 1, exc.offset or 1, str(path)))
        return summary
    except (ValueError, RecursionError, MemoryError) as exc:
        summary.syntax_errors.append(
            SyntaxProblem(f"cannot parse the file as Python: {exc}", 1, 1, str(path)))
        return summary
    try:
        _Reader(source, summary).read(tree)
    except RecursionError:
        summary.syntax_errors.append(SyntaxProblem(
            "the file is nested too deeply to read", 1, 1, str(path)))
    return summary
