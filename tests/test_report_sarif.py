"""SARIF 2.1.0 report, validated against the OASIS schema (shared reference data,
sarif-2.1/schema at oasis-tcs/sarif-spec commit e058381) with jsonschema's draft-04
validator, plus the mapping of rules and findings, and a golden file."""

from __future__ import annotations

import json
from urllib.parse import unquote

import jsonschema
import pytest

from auditor.reporters import sarif_report
from tests.conftest import require_shared
from tests.report_fixtures import (
    check_gold,
    demo_result,
    eight_schools_nc_result,
    pinned,
    unsafe_result,
)


@pytest.fixture(scope="module")
def validator() -> jsonschema.Draft4Validator:
    schema_path = require_shared() / "sarif" / "sarif-schema-2.1.0.json"
    schema = json.loads(schema_path.read_text(encoding="utf-8"))
    return jsonschema.Draft4Validator(schema)


RESULTS = {"demo": demo_result, "eight-schools-nc": eight_schools_nc_result,
           "unsafe": unsafe_result}


@pytest.mark.parametrize("name", sorted(RESULTS))
def test_valid_against_the_sarif_schema(validator, name):
    log = json.loads(sarif_report.render(RESULTS[name]()))
    errors = sorted(validator.iter_errors(log), key=lambda e: list(e.path))
    assert not errors, "\n".join(f"{list(e.path)}: {e.message}" for e in errors[:5])
    assert log["version"] == "2.1.0"


def test_contract(tmp_path):
    assert sarif_report.FORMAT == "sarif" and sarif_report.FILENAME == "audit.sarif"
    assert sarif_report.write(demo_result(), tmp_path) == tmp_path / "audit.sarif"


def test_every_rule_is_described():
    result = demo_result()
    run = sarif_report.build(result)["runs"][0]
    described = {r["id"]: r for r in run["tool"]["driver"]["rules"]}
    for rule in result.rules:
        d = described[rule.id]
        assert d["shortDescription"]["text"] == rule.title
        assert rule.rationale in d["help"]["text"] and rule.fix in d["help"]["text"]
        assert d["defaultConfiguration"]["level"] == rule.severity.value
        assert "helpUri" not in d


def test_every_finding_is_a_result_at_its_place():
    result = demo_result()
    run = sarif_report.build(result)["runs"][0]
    rules = run["tool"]["driver"]["rules"]
    findings = result.all_findings
    assert len(run["results"]) == len(findings)
    for f, r in zip(findings, run["results"], strict=True):
        assert r["ruleId"] == f.rule_id == rules[r["ruleIndex"]]["id"]
        assert r["level"] == f.severity.value
        assert r["properties"]["evidence"] == json.loads(json.dumps(f.evidence))
        loc = r["locations"][0]["physicalLocation"]
        assert loc["artifactLocation"]["uriBaseId"] == "PROJECTROOT"
        assert unquote(loc["artifactLocation"]["uri"]) == f.location.path
        if f.location.line:
            assert loc["region"]["startLine"] == f.location.line
        else:
            assert "region" not in loc
    assert any("region" in r["locations"][0]["physicalLocation"] for r in run["results"])
    assert "PROJECTROOT" in run["originalUriBaseIds"]


def test_uris_are_percent_encoded():
    run = sarif_report.build(unsafe_result())["runs"][0]
    for r in run["results"]:
        uri = r["locations"][0]["physicalLocation"]["artifactLocation"]["uri"]
        assert "<" not in uri and " " not in uri and ":" not in uri
    hashes = {unquote(a["location"]["uri"]): a["hashes"]["sha-256"] for a in run["artifacts"]}
    assert hashes == {i.path: i.sha256 for i in unsafe_result().inputs}


def test_gold_eight_schools_nc():
    check_gold("sarif", "eight-schools-nc.sarif", sarif_report.render(pinned(
        eight_schools_nc_result())))


def test_same_input_same_bytes(tmp_path):
    a = sarif_report.write(demo_result(), tmp_path / "a").read_bytes()
    b = sarif_report.write(demo_result(), tmp_path / "b").read_bytes()
    assert a == b
