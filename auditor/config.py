"""Layered configuration: built-in defaults, then the project's file, then the command line.

The file is ``bayes-auditor.toml`` (keys at its top level) or the
``[tool.bayes-auditor]`` table of the project's ``pyproject.toml``. Only our own
table is read. Unknown keys produce a warning naming the closest known key.
"""

from __future__ import annotations

import difflib
import glob
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from auditor.model import AnalysisSpec
from auditor.result import GATES

DEFAULTS: dict[str, Any] = {
    "gate": "error",
    "report": ["json"],
    "out": "audit-report",
    "max_figures": 4,
    "max_table_rows": 1000,
    "page_size": "A4",
}

TOP_KEYS = frozenset(DEFAULTS) | {"rules", "analysis"}
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
    }
)
RULE_KEYS = frozenset({"enabled", "severity"})
REPORT_FORMATS = ("json", "html", "pdf", "md", "sarif")
PAGE_SIZES = ("A4", "letter")


class ConfigError(Exception):
    """The configuration cannot be used (unreadable file, wrong type). Exit status 2."""


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
    rules: dict[str, dict[str, Any]] = field(default_factory=dict)
    analyses: list[AnalysisSpec] = field(default_factory=list)
    source: Path | None = None
    warnings: list[str] = field(default_factory=list)
    only_rules: set[str] | None = None

    def effective(self) -> dict[str, Any]:
        """JSON-safe view of the settings that shaped the audit (for reports)."""
        return {
            "gate": self.gate,
            "report": list(self.report),
            "out": self.out,
            "max_figures": self.max_figures,
            "max_table_rows": self.max_table_rows,
            "page_size": self.page_size,
            "rules": {k: dict(sorted(v.items())) for k, v in sorted(self.rules.items())},
            "config_file": self.source.name if self.source else None,
        }


def _closest(key: str, known: frozenset[str] | set[str]) -> str:
    match = difflib.get_close_matches(key, sorted(known), n=1, cutoff=0.5)
    return f"; did you mean {match[0]!r}?" if match else ""


def find_config_file(root: Path) -> Path | None:
    """``bayes-auditor.toml`` in ``root``, else a ``pyproject.toml`` with our table."""
    own = root / "bayes-auditor.toml"
    if own.is_file():
        return own
    pyproject = root / "pyproject.toml"
    if pyproject.is_file():
        try:
            with pyproject.open("rb") as fh:
                data = tomllib.load(fh)
        except (OSError, tomllib.TOMLDecodeError):
            return None
        if "bayes-auditor" in data.get("tool", {}):
            return pyproject
    return None


def _read_table(path: Path) -> dict[str, Any]:
    try:
        with path.open("rb") as fh:
            data = tomllib.load(fh)
    except OSError as exc:
        raise ConfigError(f"{path}: cannot be read ({exc.strerror})") from None
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{path}: not valid TOML ({exc})") from None
    if path.name == "pyproject.toml":
        data = data.get("tool", {}).get("bayes-auditor", {})
    if not isinstance(data, dict):
        raise ConfigError(f"{path}: the bayes-auditor table must be a table")
    return data


def _expand(root: Path, patterns: Any, where: str) -> list[Path]:
    if isinstance(patterns, str):
        patterns = [patterns]
    if not isinstance(patterns, list) or not all(isinstance(p, str) for p in patterns):
        raise ConfigError(f"{where}: expected a path or a list of paths")
    found: list[Path] = []
    for pattern in patterns:
        full = str(root / pattern)
        matches = sorted(glob.glob(full)) if glob.has_magic(pattern) else [full]
        found.extend(Path(m) for m in matches)
    return found


def _analysis_spec(
    root: Path, entry: Any, index: int, path: Path, warnings: list[str]
) -> AnalysisSpec:
    where = f"{path}: [[analysis]] #{index + 1}"
    if not isinstance(entry, dict):
        raise ConfigError(f"{where}: must be a table")
    for key in entry:
        if key not in ANALYSIS_KEYS:
            warnings.append(f"{where}: unknown key {key!r}{_closest(key, ANALYSIS_KEYS)}")
    name = entry.get("name")
    if not isinstance(name, str) or not name:
        raise ConfigError(f"{where}: 'name' is required and must be a string")
    if "draws" not in entry and "model" not in entry:
        raise ConfigError(f"{where} ({name}): needs 'draws' or 'model'")
    draws = _expand(root, entry.get("draws", []), f"{where} draws")
    prior = _expand(root, entry.get("prior_draws", []), f"{where} prior_draws")
    single: dict[str, Path | None] = {}
    for key in ("model", "data"):
        value = entry.get(key)
        if value is not None and not isinstance(value, str):
            raise ConfigError(f"{where}: '{key}' must be a path string")
        single[key] = (root / value) if value else None
    for key in ("observed", "log_lik", "predictive"):
        value = entry.get(key)
        if value is not None and (not isinstance(value, str) or not value.isidentifier()):
            raise ConfigError(f"{where}: '{key}' must be a variable name")
    rng = entry.get("plausible_range")
    plausible: tuple[float, float] | None = None
    if rng is not None:
        ok = (
            isinstance(rng, list)
            and len(rng) == 2
            and all(isinstance(v, int | float) and not isinstance(v, bool) for v in rng)
            and rng[0] < rng[1]
        )
        if not ok:
            raise ConfigError(f"{where}: 'plausible_range' must be [low, high] with low < high")
        plausible = (float(rng[0]), float(rng[1]))
    return AnalysisSpec(
        name=name,
        draws=draws,
        model=single["model"],
        data=single["data"],
        observed=entry.get("observed"),
        plausible_range=plausible,
        declared=True,
        prior_draws=prior,
        log_lik=entry.get("log_lik", "log_lik"),
        predictive=entry.get("predictive", "y_rep"),
    )


def _apply(cfg: Config, table: dict[str, Any], origin: str) -> None:
    for key, value in table.items():
        if key not in TOP_KEYS:
            cfg.warnings.append(f"{origin}: unknown key {key!r}{_closest(key, TOP_KEYS)}")
            continue
        if key == "gate":
            if value not in GATES:
                raise ConfigError(
                    f"{origin}: gate must be one of {', '.join(GATES)}, not {value!r}"
                )
            cfg.gate = value
        elif key == "report":
            value = [value] if isinstance(value, str) else value
            if not isinstance(value, list):
                value = [value]
            bad = [v for v in value if v not in REPORT_FORMATS]
            if bad:
                raise ConfigError(
                    f"{origin}: unknown report format {bad[0]!r}"
                    f" (known: {', '.join(REPORT_FORMATS)})"
                )
            cfg.report = list(value)
        elif key == "out":
            if not isinstance(value, str):
                raise ConfigError(f"{origin}: out must be a folder path")
            cfg.out = value
        elif key == "page_size":
            if value not in PAGE_SIZES:
                raise ConfigError(f"{origin}: page_size must be one of {', '.join(PAGE_SIZES)}")
            cfg.page_size = value
        elif key in ("max_figures", "max_table_rows"):
            if not isinstance(value, int) or isinstance(value, bool) or value < 0:
                raise ConfigError(f"{origin}: {key} must be a whole number >= 0")
            setattr(cfg, key, value)
        elif key == "rules":
            if not isinstance(value, dict):
                raise ConfigError(f"{origin}: [rules] must be a table of rule ids")
            for rule_id, opts in value.items():
                if not isinstance(opts, dict):
                    raise ConfigError(f"{origin}: [rules.{rule_id!r}] must be a table")
                cfg.rules.setdefault(rule_id, {}).update(opts)


def load_config(root: Path, config_file: Path | None, cli: dict[str, Any]) -> Config:
    """Build the effective configuration for the project at ``root``.

    Parameters
    ----------
    root
        Project folder (where a config file is looked for when none is given).
    config_file
        ``--config FILE``, or ``None`` to look in ``root``.
    cli
        Command-line overrides: keys of :data:`DEFAULTS` with non-``None`` values.

    Raises
    ------
    ConfigError
        Unreadable or invalid configuration.
    """
    cfg = Config()
    path = config_file
    if path is not None and not path.is_file():
        raise ConfigError(f"{path}: configuration file not found")
    if path is None:
        path = find_config_file(root)
    if path is not None:
        table = _read_table(path)
        cfg.source = path
        _apply(cfg, table, str(path))
        entries = table.get("analysis", [])
        if not isinstance(entries, list):
            raise ConfigError(f"{path}: 'analysis' must be an array of tables ([[analysis]])")
        base = path.parent
        cfg.analyses = [
            _analysis_spec(base, e, i, path, cfg.warnings) for i, e in enumerate(entries)
        ]
        names = [a.name for a in cfg.analyses]
        dupes = sorted({n for n in names if names.count(n) > 1})
        if dupes:
            raise ConfigError(f"{path}: analysis names must be unique ({', '.join(dupes)})")
    _apply(cfg, {k: v for k, v in cli.items() if v is not None}, "command line")
    return cfg


def check_rule_options(cfg: Config, rules: list[Any]) -> None:
    """Warn about unknown rule ids and option names in ``[rules]``."""
    by_id = {r.id: r for r in rules}
    by_id.update({a: r for r in rules for a in r.aliases})
    origin = str(cfg.source) if cfg.source else "configuration"
    for rule_id, opts in cfg.rules.items():
        rule = by_id.get(rule_id)
        if rule is None:
            cfg.warnings.append(
                f"{origin}: unknown rule {rule_id!r}{_closest(rule_id, set(by_id))}"
            )
            continue
        known = RULE_KEYS | set(rule.thresholds)
        for key in opts:
            if key not in known:
                cfg.warnings.append(
                    f"{origin}: rule {rule.id}: unknown option {key!r}{_closest(key, known)}"
                )
        sev = opts.get("severity")
        if sev is not None and sev not in ("error", "warning", "note"):
            raise ConfigError(f"{origin}: rule {rule.id}: severity must be error, warning or note")
