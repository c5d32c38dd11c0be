"""What a model program says, independent of the language it was written in.

The Stan parser and the PyMC source reader both produce a :class:`ProgramSummary`;
rules read only this, never the syntax tree.
"""

from __future__ import annotations

from dataclasses import dataclass, field


@dataclass
class Arg:
    """One argument of a distribution statement.

    Parameters
    ----------
    text
        Source text of the argument as written.
    value
        Its numeric value when it is a literal constant (``1000``, ``-2.5``,
        ``1e3``), else ``None``.
    names
        Identifiers the argument refers to (``mu``, ``tau``, ``x``), in order.
    """

    text: str
    value: float | None = None
    names: tuple[str, ...] = ()


@dataclass
class Distribution:
    """A distribution statement: a prior or a likelihood.

    ``family`` uses Stan's names in lower case (``normal``, ``student_t``,
    ``cauchy``, ``inv_gamma``, ``gamma``, ``uniform``, ``exponential``,
    ``lognormal``, ``beta``, ``poisson``, ``neg_binomial_2``, ``bernoulli``,
    ``binomial``, ``bernoulli_logit``, ...); PyMC names are mapped to these
    (``Normal`` -> ``normal``, ``HalfNormal`` -> ``half_normal``,
    ``InverseGamma`` -> ``inv_gamma``, ``NegativeBinomial`` -> ``neg_binomial_2``,
    ``Flat`` -> ``flat``, ``HalfFlat`` -> ``half_flat``). ``args`` are in Stan's
    positional order (for PyMC keyword arguments, mapped to that order).
    """

    family: str
    args: list[Arg]
    line: int
    column: int = 1
    text: str = ""
    truncation: tuple[str | None, str | None] | None = None
    #: File the statement is written in when that is an included file (Stan
    #: ``#include``); empty for the program's own file. ``line`` is in that file.
    path: str = ""

    def location_arg(self) -> Arg | None:
        """The location argument for location-scale families, else ``None``."""
        idx = LOCATION_SCALE_ARGS.get(self.family)
        return self.args[idx[0]] if idx and len(self.args) > idx[0] else None

    def scale_arg(self) -> Arg | None:
        """The scale argument for location-scale families, else ``None``."""
        idx = LOCATION_SCALE_ARGS.get(self.family)
        return self.args[idx[1]] if idx and len(self.args) > idx[1] else None


#: (location index, scale index) in Stan's argument order.
LOCATION_SCALE_ARGS: dict[str, tuple[int, int]] = {
    "normal": (0, 1),
    "cauchy": (0, 1),
    "student_t": (1, 2),
    "double_exponential": (0, 1),
    "logistic": (0, 1),
    "lognormal": (0, 1),
    "gumbel": (0, 1),
    "skew_normal": (0, 1),
}


@dataclass
class Bound:
    """A declared lower or upper bound: its text and numeric value when literal."""

    text: str
    value: float | None = None


@dataclass
class Declaration:
    """A declared variable (data, parameter, transformed parameter, generated quantity).

    Parameters
    ----------
    name
        Variable name.
    block
        ``data``, ``transformed data``, ``parameters``, ``transformed parameters``,
        ``generated quantities`` (Stan) or the equivalent role for PyMC
        (``parameters`` for free random variables, ``transformed parameters`` for
        ``pm.Deterministic``, ``data`` for observed data and ``pm.Data``).
    type
        Base type: ``real``, ``int``, ``vector``, ``row_vector``, ``matrix``,
        ``simplex``, ``ordered``, ``positive_ordered``, ``unit_vector``,
        ``cholesky_factor_corr``, ``cholesky_factor_cov``, ``corr_matrix``,
        ``cov_matrix``, ``complex``, ``tuple`` ...
    dims
        Size expressions as text, outermost (array) first, e.g. ``("J",)``.
    lower, upper
        Declared bounds, or ``None``.
    offset, multiplier
        Affine transform texts, or ``None``.
    line, column
        1-based position of the declaration.
    priors
        Distribution statements whose left-hand side is this variable
        (``x ~ ...``, ``target += ..._lpdf(x | ...)``, PyMC's own distribution).
    location_of, scale_of
        Names of the parameters whose prior uses this one as location or scale.
    """

    name: str
    block: str
    type: str = "real"
    dims: tuple[str, ...] = ()
    lower: Bound | None = None
    upper: Bound | None = None
    offset: str | None = None
    multiplier: str | None = None
    line: int = 0
    column: int = 1
    priors: list[Distribution] = field(default_factory=list)
    location_of: list[str] = field(default_factory=list)
    scale_of: list[str] = field(default_factory=list)
    #: File the declaration is written in when that is an included file (Stan
    #: ``#include``); empty for the program's own file. ``line`` is in that file.
    path: str = ""


@dataclass
class Likelihood:
    """A distribution statement whose left-hand side is data.

    Parameters
    ----------
    variable
        The observed data variable's name.
    distribution
        The statement.
    data_used
        Data variables referenced on the right-hand side (predictors).
    """

    variable: str
    distribution: Distribution
    data_used: list[str] = field(default_factory=list)
    #: PyMC: source text of the ``observed=`` expression (empty for Stan, where
    #: the observed values come from the data file).
    observed: str = ""


@dataclass
class SyntaxProblem:
    """A parse error with its position (1-based) in ``path``.

    ``kind`` is ``syntax`` for errors in the text; an ``#include`` the project
    boundary refused has the boundary's problem kind (``outside-project``,
    ``special-file``, ``too-large``, ``unreadable``) so that it is reported as
    an input problem, not a syntax error.
    """

    message: str
    line: int
    column: int
    path: str
    kind: str = "syntax"


@dataclass
class ProgramSummary:
    """Everything rules need to know about one model program.

    ``path`` is the file path as given to the reader (absolute or relative to
    the working directory); the engine turns it into a project-relative path.
    """

    language: str
    path: str
    declarations: dict[str, Declaration] = field(default_factory=dict)
    likelihoods: list[Likelihood] = field(default_factory=list)
    syntax_errors: list[SyntaxProblem] = field(default_factory=list)
    includes: list[str] = field(default_factory=list)
    source_lines: list[str] = field(default_factory=list)
    #: Source text of the expression a local, transformed or Deterministic variable
    #: is defined by, when it is given its value in exactly one statement
    #: (``mu = alpha + beta * x;`` or ``mu[n] = alpha + beta * x[n];`` in a loop),
    #: so rules can see through it. PyMC: keyed by the Python name for plain
    #: Python variables, by the PyMC name for ``pm.Deterministic``.
    definitions: dict[str, str] = field(default_factory=dict)

    def block(self, name: str) -> list[Declaration]:
        """Declarations of one block, in source order."""
        return [d for d in self.declarations.values() if d.block == name]

    @property
    def parameters(self) -> list[Declaration]:
        """Declarations of the ``parameters`` block (PyMC: free random variables)."""
        return self.block("parameters")
