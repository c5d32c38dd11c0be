"""Layered configuration: defaults, then the project's file, then the command line."""

from __future__ import annotations

from pathlib import Path

import pytest

from auditor.config import ConfigError, check_rule_options, load_config
from auditor.engine import run_audit
from auditor.registry import all_rules

REPO = Path(__file__).resolve().parent.parent
CASE = REPO / "rules" / "sampling" / "divergences" / "cases" / "bad"


def _project(tmp_path: Path, toml: str, name: str = "bayes-auditor.toml") -> Path:
    for src in CASE.glob("*.csv"):
        (tmp_path / src.name).write_bytes(src.read_bytes())
    (tmp_path / name).write_text(toml)
    return tmp_path


def test_defaults_then_file_then_command_line(tmp_path):
    root = _project(tmp_path, 'gate = "warning"\nreport = ["json"]\nmax_figures = 2\n')
    cfg = load_config(root, None, {})
    assert (cfg.gate, cfg.max_figures, cfg.report) == ("warning", 2, ["json"])
    cfg = load_config(root, None, {"gate": "never", "report": None})
    assert cfg.gate == "never" and cfg.report == ["json"]
    assert load_config(tmp_path / "nothing-here", None, {}).gate == "error"


def test_pyproject_table_is_read_and_other_tables_ignored(tmp_path):
    root = _project(
        tmp_path,
        '[project]\nname = "x"\n[tool.other]\ngate = "never"\n'
        '[tool.bayes-auditor]\ngate = "warning"\n',
        name="pyproject.toml",
    )
    cfg = load_config(root, None, {})
    assert cfg.gate == "warning" and cfg.source == root / "pyproject.toml"


def test_unknown_key_warns_with_closest_known_key(tmp_path):
    root = _project(tmp_path, 'gates = "warning"\n[[analysis]]\nname = "a"\ndraw = ["*.csv"]\n'
                              'model = "m.stan"\n')
    cfg = load_config(root, None, {})
    assert any("'gates'" in w and "'gate'" in w for w in cfg.warnings)
    assert any("'draw'" in w and "'draws'" in w for w in cfg.warnings)


def test_rule_options_checked_against_thresholds(tmp_path):
    root = _project(tmp_path, '[rules."sampling.rhat"]\nmax_rht = 1.05\n'
                              '[rules."sampling.rhta"]\nenabled = false\n')
    cfg = load_config(root, None, {})
    check_rule_options(cfg, all_rules())
    assert any("'max_rht'" in w and "'max_rhat'" in w for w in cfg.warnings)
    assert any("'sampling.rhta'" in w and "'sampling.rhat'" in w for w in cfg.warnings)


def test_threshold_and_severity_overrides_change_the_audit(tmp_path):
    # The bad divergences case has 9 divergent transitions (tests/tools/make_rule_cases.py).
    root = _project(tmp_path, '[rules."sampling.divergences"]\nmax_divergent = 20\n')
    assert not [f for f in run_audit([root]).all_findings if f.rule_id == "sampling.divergences"]
    (root / "bayes-auditor.toml").write_text('[rules."sampling.divergences"]\nseverity = "note"\n')
    (hit,) = [f for f in run_audit([root]).all_findings if f.rule_id == "sampling.divergences"]
    assert hit.severity.value == "note"
    (root / "bayes-auditor.toml").write_text('[rules."sampling.divergences"]\nenabled = false\n')
    assert not [f for f in run_audit([root]).all_findings if f.rule_id == "sampling.divergences"]


def test_declared_analyses_and_validation(tmp_path):
    root = _project(tmp_path, '[[analysis]]\nname = "fit"\ndraws = ["fit-*.csv"]\n'
                              'observed = "y"\nplausible_range = [0.5, 40.0]\n')
    cfg = load_config(root, None, {})
    (spec,) = cfg.analyses
    assert [p.name for p in spec.draws] == [f"fit-{i}.csv" for i in range(1, 5)]
    assert spec.plausible_range == (0.5, 40.0) and spec.observed == "y"
    for bad in ('plausible_range = [40, 1]', 'observed = "not a name"', 'name = 3'):
        (root / "bayes-auditor.toml").write_text(
            f'[[analysis]]\nname = "fit"\ndraws = ["fit-*.csv"]\n{bad}\n')
        with pytest.raises(ConfigError) as exc:
            load_config(root, None, {})
        assert "bayes-auditor.toml" in str(exc.value)


@pytest.mark.parametrize("text", ["gate = [unclosed\n", 'gate = "sometimes"\n',
                                  'report = ["docx"]\n', "max_figures = -1\n"])
def test_invalid_files_raise_config_error_naming_the_file(tmp_path, text):
    root = _project(tmp_path, text)
    with pytest.raises(ConfigError) as exc:
        load_config(root, None, {})
    assert str(root / "bayes-auditor.toml") in str(exc.value)


def test_page_size_is_validated(tmp_path):
    root = _project(tmp_path, 'page_size = "letter"\n')
    assert load_config(root, None, {}).effective()["page_size"] == "letter"
    (root / "bayes-auditor.toml").write_text('page_size = "A3"\n')
    with pytest.raises(ConfigError):
        load_config(root, None, {})
