"""Layered configuration: built-in defaults, then the project's file, then the command line.

The file is ``bayes-auditor.toml`` (keys at its top level) or the
``[tool.bayes-auditor]`` table of the project's ``pyproject.toml``. Only our own
table is read. Unknown keys produce a warning naming the closest known key.
"""

from __future__ import annotations

import difflib
import math
import os
import re
import tomllib
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from auditor.boundary import DEFAULT_MAX_SHARE, Boundary, Refused, display
from auditor.model import AnalysisSpec, InputProblem
from auditor.result import GATES

#: Default share of the available memory above which draws are read lazily, in blocks
#: (a Zarr store through Dask; a CmdStan CSV converted to a temporary Zarr store first).
#: Reading a CmdStan CSV whole takes about five times its size at its peak (issue 15: a
#: 320 MB posterior peaked at 1.7 GB), so 5% keeps that peak near a quarter of the memory.
DEFAULT_LAZY_SHARE = 0.05

DEFAULTS: dict[str, Any] = {
    "gate": "error",
    "report": ["json"],
    "out": "audit-report",
    "max_figures": 4,
    "max_table_rows": 1000,
    "page_size": "A4",
    "max_input_share": DEFAULT_MAX_SHARE,
    "lazy_share": DEFAULT_LAZY_SHARE,
}

ANALYSIS_KEYS = frozenset(
    {
        "name",
        "draws",
        "model",
        "prior_draws",
        "data",
        "observed",
        "log_lik",
        "predictive",
        "plausible_range",
        "chosen",
        "log_prior",
        "sbc_ranks",
        "sbc_draws",
    }
)
RULE_KEYS = frozenset({"enabled", "severity"})
REPORT_FORMATS = ("json", "html", "pdf", "md", "sarif")
PAGE_SIZES = ("A4", "letter")
SEVERITIES = ("error", "warning", "note")


class ConfigError(Exception):
    """The configuration cannot be used (unreadable file, wrong type). Exit status 2."""


# --------------------------------------------------------------------------- types
# Every key has a declared type: a check that returns the value to keep, or raises
# ``TypeError`` with the expected type in words (the caller names the file and key).


def _is_number(v: Any) -> bool:
    return isinstance(v, int | float) and not isinstance(v, bool)


def _text(v: Any) -> str:
    if not isinstance(v, str):
        raise TypeError("a string")
    return v


def _one_of(options: tuple[str, ...]) -> Callable[[Any], str]:
    def check(v: Any) -> str:
        if v not in options:
            raise TypeError("one of " + ", ".join(repr(o) for o in options))
        return v
    return check


def _count(v: Any) -> int:
    if not isinstance(v, int) or isinstance(v, bool) or v < 0:
        raise TypeError("a whole number >= 0")
    return v


def _share(v: Any) -> float:
    if not _is_number(v) or not 0 < v <= 1:
        raise TypeError("a number above 0 and at most 1")
    return float(v)


def _paths(v: Any) -> list[str]:
    if isinstance(v, str):
        v = [v]
    if not isinstance(v, list) or not all(isinstance(p, str) and p for p in v):
        raise TypeError("a path or a list of paths (strings)")
    return v


def _formats(v: Any) -> list[str]:
    v = [v] if isinstance(v, str) else v
    if not isinstance(v, list) or not all(isinstance(f, str) for f in v):
        raise TypeError("a report format or a list of them")
    bad = [f for f in v if f not in REPORT_FORMATS]
    if bad:
        raise TypeError(f"report formats among {', '.join(REPORT_FORMATS)} (not {bad[0]!r})")
    return list(v)


def _variable(v: Any) -> str:
    if not isinstance(v, str) or not v.isidentifier():
        raise TypeError("a variable name")
    return v


def _positive(v: Any) -> int:
    if not isinstance(v, int) or isinstance(v, bool) or v < 1:
        raise TypeError("a whole number >= 1")
    return v


def _flag(v: Any) -> bool:
    if not isinstance(v, bool):
        raise TypeError("true or false")
    return v


def _range(v: Any) -> tuple[float, float]:
    ok = (isinstance(v, list) and len(v) == 2 and all(_is_number(x) for x in v)
          and all(math.isfinite(x) for x in v) and v[0] < v[1])
    if not ok:
        raise TypeError("[low, high] with low < high")
    return float(v[0]), float(v[1])


def _table(v: Any) -> dict[str, Any]:
    if not isinstance(v, dict):
        raise TypeError("a table")
    return v


def _tables(v: Any) -> list[Any]:
    if not isinstance(v, list):
        raise TypeError("an array of tables ([[analysis]])")
    return v


#: Top-level keys and their types.
TOP_TYPES: dict[str, Callable[[Any], Any]] = {
    "gate": _one_of(GATES),
    "report": _formats,
    "out": _text,
    "max_figures": _count,
    "max_table_rows": _count,
    "page_size": _one_of(PAGE_SIZES),
    "max_input_share": _share,
    "lazy_share": _share,
    "policy": _text,
    "accepted": _text,
    "rules": _table,
    "analysis": _tables,
}
TOP_KEYS = frozenset(TOP_TYPES)
#: ``[[analysis]]`` keys and their types.
ANALYSIS_TYPES: dict[str, Callable[[Any], Any]] = {
    "name": _text,
    "draws": _paths,
    "prior_draws": _paths,
    "model": _text,
    "data": _text,
    "observed": _variable,
    "log_lik": _variable,
    "predictive": _variable,
    "plausible_range": _range,
    "chosen": _flag,
    "log_prior": _variable,
    "sbc_ranks": _text,
    "sbc_draws": _positive,
}
assert set(ANALYSIS_TYPES) == ANALYSIS_KEYS


def _typed(check: Callable[[Any], Any], value: Any, where: str, key: str) -> Any:
    try:
        return check(value)
    except TypeError as exc:
        raise ConfigError(
            f"{where}: {key!r} must be {exc}, not {_shown(value)}") from None


def _shown(value: Any) -> str:
    text = repr(value)
    kind = type(value).__name__
    kind = {"str": "a string", "int": "an integer", "float": "a number", "bool": "a boolean",
            "list": "a list", "dict": "a table"}.get(kind, kind)
    return f"{kind} ({text[:60]}{'...' if len(text) > 60 else ''})"


@dataclass
class Config:
    """Effective configuration.

    ``rules`` maps a rule id to its overrides (``enabled``, ``severity`` and
    threshold names); ``analyses`` holds declared analyses; ``warnings`` the
    messages about unknown keys (each names the file).
    """

    gate: str = "error"
    report: list[str] = field(default_factory=lambda: ["json"])
    out: str = "audit-report"
    max_figures: int = 4
    max_table_rows: int = 1000
    page_size: str = "A4"
    max_input_share: float = DEFAULT_MAX_SHARE
    #: Draws larger than this share of the available memory are read lazily, block by
    #: block (see :mod:`auditor.loaders.lazy`). Not in :meth:`effective`: it changes how
    #: the draws are read, never a result.
    lazy_share: float = DEFAULT_LAZY_SHARE
    #: The policy: a built-in name or a path (see :mod:`auditor.gate.policy`).
    policy: str = "everyday"
    #: The accepted-findings file (see :mod:`auditor.gate.accepted`); ``None``: the
    #: default file when it exists.
    accepted: str | None = None
    rules: dict[str, dict[str, Any]] = field(default_factory=dict)
    analyses: list[AnalysisSpec] = field(default_factory=list)
    source: Path | None = None
    warnings: list[str] = field(default_factory=list)
    only_rules: set[str] | None = None
    #: Where ``out`` came from (``None``: the default or the command line).
    out_origin: str | None = None
    #: Where ``policy`` came from: the folder its relative path is read from, and
    #: whether it is the user's own (command line) or the project's.
    policy_base: Path | None = None
    policy_trusted: bool = True
    #: The rule settings of the project's file and the command line, before the
    #: policy is put beneath them (see :func:`apply_policy`).
    own_rules: dict[str, dict[str, Any]] = field(default_factory=dict)

    def effective(self) -> dict[str, Any]:
        """JSON-safe view of the settings that shaped the audit (for reports)."""
        return {
            "gate": self.gate,
            "report": list(self.report),
            "out": self.out,
            "max_figures": self.max_figures,
            "max_table_rows": self.max_table_rows,
            "page_size": self.page_size,
            "max_input_share": self.max_input_share,
            "policy": self.policy,
            "rules": {k: dict(sorted(v.items())) for k, v in sorted(self.rules.items())},
            "config_file": self.source.name if self.source else None,
        }


def _closest(key: str, known: frozenset[str] | set[str]) -> str:
    match = difflib.get_close_matches(key, sorted(known), n=1, cutoff=0.5)
    return f"; did you mean {match[0]!r}?" if match else ""


def _parse(path: Path, boundary: Boundary) -> dict[str, Any]:
    """The TOML document at ``path``, read through the boundary.

    Raises
    ------
    ConfigError
        Refused, unreadable, not UTF-8 or not valid TOML.
    """
    try:
        raw = boundary.read_bytes(path)
    except Refused as exc:
        raise ConfigError(f"{display(path)}: {exc.reason}") from None
    except OSError as exc:
        raise ConfigError(f"{display(path)}: cannot be read ({exc.strerror})") from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = raw.count(b"\n", 0, exc.start) + 1
        raise ConfigError(f"{display(path)}, line {line}: not UTF-8 text") from None
    try:
        return tomllib.loads(text.removeprefix("\ufeff"))
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{display(path)}: not valid TOML ({exc})") from None


def _tool_table(data: dict[str, Any]) -> Any:
    """``[tool.bayes-auditor]`` of a pyproject document, or ``None`` when absent."""
    tool = data.get("tool")
    if not isinstance(tool, dict):
        return None
    return tool.get("bayes-auditor")


def find_config_file(root: Path, boundary: Boundary | None = None) -> Path | None:
    """``bayes-auditor.toml`` in ``root``, else a ``pyproject.toml`` with our table.

    A ``pyproject.toml`` that cannot be read or parsed is not ours to judge, and is
    passed over; a ``bayes-auditor.toml`` always counts (it is read, and its
    errors reported, by :func:`load_config`).
    """
    boundary = boundary or Boundary(root)
    own = root / "bayes-auditor.toml"
    if own.exists() or own.is_symlink():
        return own
    pyproject = root / "pyproject.toml"
    if pyproject.exists() or pyproject.is_symlink():
        try:
            data = _parse(pyproject, boundary)
        except ConfigError:
            # Not ours to judge, unless it names our table: then its error is ours.
            try:
                mentions = b"bayes-auditor" in boundary.read_bytes(pyproject)
            except (Refused, OSError):
                mentions = False
            return pyproject if mentions else None
        if _tool_table(data) is not None:
            return pyproject
    return None


def _read_table(path: Path, boundary: Boundary) -> dict[str, Any]:
    data = _parse(path, boundary)
    if path.name == "pyproject.toml":
        data = _tool_table(data)
        if data is None:
            return {}
    if not isinstance(data, dict):
        raise ConfigError(f"{display(path)}: [tool.bayes-auditor] must be a table")
    return data


_ANALYSIS_HEADER = re.compile(r"^[ \t]*\[\[[ \t]*analysis[ \t]*\]\]", re.MULTILINE)


def _line_of(text: str, value: str, table: int | None = None) -> int | None:
    """Line of the first TOML string literal equal to ``value`` in ``text``, searched
    from the ``table``-th ``[[analysis]]`` header (0-based) when given."""
    start = 0
    if table is not None:
        headers = [m.start() for m in _ANALYSIS_HEADER.finditer(text)]
        start = headers[table] if table < len(headers) else 0
    for quote in ('"', "'"):
        m = re.compile(re.escape(quote + value + quote)).search(text, start)
        if m:
            return text.count("\n", 0, m.start()) + 1
    return None


def _expand(
    base: Path, patterns: list[str], key: str, ctx: _SpecContext
) -> list[Path]:
    found: list[Path] = []
    for pattern in patterns:
        try:
            matches = ctx.boundary.glob(pattern, base)
        except Refused as exc:
            ctx.refuse(exc, key, pattern)
            continue
        found.extend(matches)
    return found


@dataclass
class _SpecContext:
    """What reading one ``[[analysis]]`` entry needs: where it is, the boundary, and
    where refused paths are recorded."""

    path: Path
    text: str
    boundary: Boundary
    index: int = 0
    problems: list[InputProblem] = field(default_factory=list)

    def refuse(self, exc: Refused, key: str, written: str) -> None:
        shown = written if len(written) <= 120 else written[:80] + "..."
        self.problems.append(InputProblem(
            exc.kind, self.path,
            f"{key} = {shown!r}: {exc.reason}", _line_of(self.text, written, self.index)))


def _analysis_spec(
    base: Path, entry: Any, index: int, ctx: _SpecContext, warnings: list[str]
) -> AnalysisSpec:
    where = f"{display(ctx.path)}: [[analysis]] #{index + 1}"
    ctx.index = index
    if not isinstance(entry, dict):
        raise ConfigError(f"{where}: must be a table")
    for key in entry:
        if key not in ANALYSIS_KEYS:
            warnings.append(f"{where}: unknown key {key!r}{_closest(key, ANALYSIS_KEYS)}")
    values = {k: _typed(ANALYSIS_TYPES[k], v, where, k)
              for k, v in entry.items() if k in ANALYSIS_TYPES}
    name = values.get("name")
    if not name:
        raise ConfigError(f"{where}: 'name' is required and must be a string")
    if "draws" not in values and "model" not in values:
        raise ConfigError(f"{where} ({name}): needs 'draws' or 'model'")
    ctx.problems = []
    draws = _expand(base, values.get("draws", []), "draws", ctx)
    prior = _expand(base, values.get("prior_draws", []), "prior_draws", ctx)
    single: dict[str, Path | None] = {}
    for key in ("model", "data", "sbc_ranks"):
        value = values.get(key)
        single[key] = None
        if value:
            try:
                single[key] = ctx.boundary.locate(value, base)
            except Refused as exc:
                ctx.refuse(exc, key, value)
    return AnalysisSpec(
        name=name,
        draws=draws,
        model=single["model"],
        data=single["data"],
        observed=values.get("observed"),
        plausible_range=values.get("plausible_range"),
        declared=True,
        prior_draws=prior,
        log_lik=values.get("log_lik"),
        predictive=values.get("predictive"),
        problems=list(ctx.problems),
        chosen=values.get("chosen", False),
        log_prior=values.get("log_prior"),
        sbc_ranks=single["sbc_ranks"],
        sbc_draws=values.get("sbc_draws"),
    )


def _apply(cfg: Config, table: dict[str, Any], origin: str) -> None:
    for key, value in table.items():
        if key not in TOP_KEYS:
            cfg.warnings.append(f"{origin}: unknown key {key!r}{_closest(key, TOP_KEYS)}")
            continue
        value = _typed(TOP_TYPES[key], value, origin, key)
        if key == "rules":
            for rule_id, opts in value.items():
                if not isinstance(opts, dict):
                    raise ConfigError(
                        f"{origin}: [rules.{rule_id!r}] must be a table, not {_shown(opts)}")
                cfg.rules.setdefault(rule_id, {}).update(opts)
        elif key != "analysis":
            setattr(cfg, key, value)


def load_config(root: Path, config_file: Path | None, cli: dict[str, Any],
                boundary: Boundary | None = None, find: bool = True) -> Config:
    """Build the effective configuration for the project at ``root``.

    Parameters
    ----------
    root
        Project folder (where a config file is looked for when none is given).
    config_file
        ``--config FILE``, or ``None`` to look in ``root``. A file given on the
        command line is the user's own and may lie outside the project.
    cli
        Command-line overrides: keys of :data:`DEFAULTS` with non-``None`` values.
    boundary
        The project boundary (default: one rooted at ``root``). Paths in the
        file are resolved through it; those it refuses become problems of their
        analysis (``AnalysisSpec.problems``), never reads.
    find
        Look for a configuration file in ``root`` when none is given (the Python
        API auditing draws in memory does not).

    Raises
    ------
    ConfigError
        Unreadable or invalid configuration: a value of the wrong type names the
        key and the expected type.
    """
    cfg = Config()
    boundary = boundary or Boundary(root)
    path = config_file
    if path is not None:
        if not (path.exists() or path.is_symlink()):
            raise ConfigError(f"{display(path)}: configuration file not found")
        reader = Boundary.unconfined(boundary.max_bytes)
    else:
        path = find_config_file(root, boundary) if find else None
        reader = boundary
    if path is not None:
        table = _read_table(path, reader)
        cfg.source = path
        origin = display(path)
        _apply(cfg, table, origin)
        if "out" in table:
            cfg.out_origin = origin
        ctx = _SpecContext(path, reader.read_text(path, errors="replace"), boundary)
        base = path.parent
        cfg.analyses = [
            _analysis_spec(base, e, i, ctx, cfg.warnings)
            for i, e in enumerate(table.get("analysis", []))
        ]
        names = [a.name for a in cfg.analyses]
        dupes = sorted({n for n in names if names.count(n) > 1})
        if dupes:
            raise ConfigError(f"{origin}: analysis names must be unique ({', '.join(dupes)})")
    if path is not None and "policy" in table:
        cfg.policy_base, cfg.policy_trusted = path.parent, config_file is not None
    overrides = {k: v for k, v in cli.items() if v is not None}
    _apply(cfg, overrides, "command line")
    if "out" in overrides:
        cfg.out_origin = None
    if "policy" in overrides:
        cfg.policy_base, cfg.policy_trusted = Path.cwd(), True
    _check_out(root, cfg)
    cfg.own_rules = {k: dict(v) for k, v in cfg.rules.items()}
    return cfg


def apply_policy(cfg: Config, policy: Any) -> None:
    """Put the policy's rule settings beneath the project's own (``cfg.rules``)."""
    merged: dict[str, dict[str, Any]] = {k: dict(v) for k, v in policy.rules.items()}
    for rule_id, opts in cfg.own_rules.items():
        merged.setdefault(rule_id, {}).update(opts)
    cfg.rules = merged


def _check_out(root: Path, cfg: Config) -> None:
    """A report folder named in the project's file must stay inside the project.

    The command line's ``--out`` is the user's own choice and is not checked; a
    hostile project's ``out = "../elsewhere"`` or an absolute path, or a link
    inside the project leading out, would make the audit write anywhere.

    Raises
    ------
    ConfigError
        The configured folder leads outside the project.
    """
    if cfg.out_origin is None:
        return
    real_root = Path(os.path.realpath(root))
    real = Path(os.path.realpath(os.path.join(real_root, cfg.out)))
    if not (real == real_root or real.is_relative_to(real_root)):
        raise ConfigError(
            f"{cfg.out_origin}: out = {cfg.out!r} leads outside the project (to "
            f"{display(real)}); reports are written only inside it (name another folder "
            "with --out on the command line)"
        )


def _threshold_type(default: Any) -> Callable[[Any], Any]:
    """The type of a threshold, declared by its default in ``rule.toml``."""
    if isinstance(default, bool):
        def check(v: Any) -> Any:
            if not isinstance(v, bool):
                raise TypeError("true or false")
            return v
    elif isinstance(default, int):
        def check(v: Any) -> Any:
            if not isinstance(v, int) or isinstance(v, bool):
                raise TypeError("a whole number")
            return v
    elif isinstance(default, float):
        def check(v: Any) -> Any:
            if not _is_number(v) or not math.isfinite(v):
                raise TypeError("a finite number")
            return v
    elif isinstance(default, str):
        check = _text
    elif isinstance(default, list):
        def check(v: Any) -> Any:
            if not isinstance(v, list):
                raise TypeError("a list")
            return v
    elif isinstance(default, dict):
        check = _table
    else:  # pragma: no cover - rule.toml holds only TOML types
        def check(v: Any) -> Any:
            return v
    return check


def check_rule_options(cfg: Config, rules: list[Any]) -> None:
    """Check ``[rules]``: unknown rule ids and options warn; wrong types are errors.

    Raises
    ------
    ConfigError
        An option of the wrong type, naming the rule, the option and the type.
    """
    by_id = {r.id: r for r in rules}
    by_id.update({a: r for r in rules for a in r.aliases})
    origin = display(cfg.source) if cfg.source else "configuration"
    for rule_id, opts in cfg.rules.items():
        rule = by_id.get(rule_id)
        if rule is None:
            cfg.warnings.append(
                f"{origin}: unknown rule {rule_id!r}{_closest(rule_id, set(by_id))}"
            )
            continue
        known = RULE_KEYS | set(rule.thresholds)
        where = f"{origin}: [rules.\"{rule.id}\"]"
        for key, value in opts.items():
            if key == "enabled":
                _typed(_threshold_type(True), value, where, key)
            elif key == "severity":
                _typed(_one_of(SEVERITIES), value, where, key)
            elif key in rule.thresholds:
                _typed(_threshold_type(rule.thresholds[key]), value, where, key)
            else:
                cfg.warnings.append(
                    f"{origin}: rule {rule.id}: unknown option {key!r}{_closest(key, known)}"
                )
