"""HTML report and the sampling figures, on real draws through the real engine.

External checks: the page is parsed with the standard library's HTML parser and
loaded in a real browser (Debian's chromium, headless); E-BFMI in the energy
figure is compared with Betancourt's (2016, arXiv:1604.00695) formula computed
here with numpy; the divergence pair on the centered eight schools draws must
involve log tau (Betancourt 2017, arXiv:1701.02434: divergences of the centered
model gather where tau is small, the funnel's neck).
"""

from __future__ import annotations

import os
import re
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest
from markupsafe import escape

from auditor.figures.inline import inline_svg
from auditor.findings import Finding
from auditor.reporters import html_report
from auditor.reporters.views import inline_code
from tests.conftest import require_shared
from tests.report_fixtures import centered_eight_path, demo_result, tool

CHROMIUM_FLAGS = [
    "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
    "--disable-background-networking", "--disable-component-update", "--disable-sync",
]


class Page(HTMLParser):
    """Elements with their attributes, in document order, plus the text of each id."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.elements: list[tuple[str, dict[str, str]]] = []
        self.text: list[str] = []

    def handle_starttag(self, tag: str, attrs: list) -> None:
        self.elements.append((tag, {k: v or "" for k, v in attrs}))

    def handle_startendtag(self, tag: str, attrs: list) -> None:
        self.handle_starttag(tag, attrs)

    def handle_data(self, data: str) -> None:
        self.text.append(data)

    def tags(self, name: str) -> list[dict[str, str]]:
        return [a for t, a in self.elements if t == name]

    def index(self, pred) -> int:
        return next(i for i, (t, a) in enumerate(self.elements) if pred(t, a))


def parse(html: str) -> Page:
    page = Page()
    page.feed(html)
    return page


@pytest.fixture(scope="module")
def demo_html(tmp_path_factory) -> tuple[Path, str]:
    out = tmp_path_factory.mktemp("html")
    path = html_report.write(demo_result(), out)
    return path, path.read_text(encoding="utf-8")


def test_contract():
    assert html_report.FORMAT == "html"
    assert html_report.FILENAME == "audit.html"


def test_verdict_and_counts_come_first(demo_html):
    _, html = demo_html
    result = demo_result()
    page = parse(html)
    verdict = page.index(lambda t, a: "verdict" in a.get("class", "").split())
    first_finding = page.index(lambda t, a: t == "article")
    assert verdict < first_finding
    text = " ".join(page.text)
    c = result.counts()
    assert f"{c['error']} errors" in " ".join(text.split())
    assert f"{c['warning']} warnings" in " ".join(text.split())
    # One row per analysis in the overview, each linking to its section.
    links = [a["href"] for a in page.tags("a") if a.get("href", "").startswith("#a")]
    assert len(set(links)) >= len(result.analyses)


def test_findings_in_workflow_order_with_evidence_fix_and_rationale(demo_html):
    _, html = demo_html
    result = demo_result()
    rules = {r.id: r for r in result.rules}
    for i, a in enumerate(result.analyses, start=1):
        expected = sorted(a.findings, key=Finding.sort_key)
        section = html.split(f'id="a{i}"', 1)[1].split('<section class="analysis', 1)[0]
        shown = re.findall(r'<code class="rule-id">([^<]+)</code>', section)
        assert shown == [f.rule_id for f in expected]
        for f in expected:
            rule = rules[f.rule_id]
            # The rule's rationale, the fix and the references are all shown, escaped.
            assert str(inline_code(rule.rationale)) in section
            assert str(inline_code(f.fix)) in section
            assert all(str(escape(ref)) in section for ref in rule.references)
            for key in f.evidence:
                assert f"<th scope=\"row\">{key}</th>" in section


def test_program_finding_shows_flagged_line_in_context(demo_html):
    _, html = demo_html
    result = demo_result()
    program_findings = [
        (a, f) for a in result.analyses for f in a.findings
        if f.location and f.location.line and f.location.path == a.program
    ]
    assert program_findings, "the demo has program findings (centered hierarchy, missing prior)"
    for a, f in program_findings:
        lines = a.excerpts[f"{f.location.path}:{f.location.line}"]
        assert len(lines) > 1  # context around the line, not the line alone
        hit = re.findall(r'<div class="src-line hit"><span class="ln">(\d+)</span>', html)
        assert str(f.location.line) in hit


def test_diagnostics_table_flagged_rows_first_and_collapsible(demo_html):
    _, html = demo_html
    result = demo_result()
    i, a = next((i, a) for i, a in enumerate(result.analyses, start=1)
                if any(f.quantity for f in a.findings if f.stage == "sampling"))
    section = html.split(f'id="a{i}"', 1)[1].split('<section class="analysis', 1)[0]
    tables = section.split('<table class="grid diag">')
    flagged_table = tables[1]
    named = {f.quantity for f in a.findings if f.quantity}
    rows = re.findall(r'<tr class="([^"]*)">\s*<th scope="row"><code>([^<]+)</code>',
                      flagged_table.split("</table>")[0])
    assert rows and all("flagged" in cls and q in named for cls, q in rows)
    assert "<details" in section and f"All {len(a.diagnostics)} quantities" in section


def test_table_is_cut_above_the_row_limit():
    result = demo_result(max_table_rows=2)
    html = html_report.render(result)
    big = [a for a in result.analyses if len(a.diagnostics) > 2]
    assert big
    assert "more than the limit of 2" in html
    assert html.count("setting <code>max_table_rows</code>") == len(big)


def test_self_contained_and_inert(demo_html):
    _, html = demo_html
    page = parse(html)
    assert not page.tags("script")
    assert not page.tags("link") and not page.tags("img") and not page.tags("iframe")
    for tag, attrs in page.elements:
        for name, value in attrs.items():
            if name in ("href", "src", "xlink:href"):
                assert value.startswith("#"), (tag, name, value)
            assert not name.startswith("on"), (tag, name)
    assert "url(http" not in html and "@import" not in html and "@font-face" not in html
    csp = [m for m in page.tags("meta") if m.get("http-equiv") == "Content-Security-Policy"]
    assert csp and "default-src 'none'" in csp[0]["content"]


def test_figures_inline_and_ids_unique(demo_html):
    _, html = demo_html
    result = demo_result()
    page = parse(html)
    svgs = page.tags("svg")
    assert svgs, "the demo's centered model has sampling figures"
    assert len(svgs) <= sum(len(a.figures) for a in result.analyses)
    ids = [a["id"] for _, a in page.elements if "id" in a]
    assert len(ids) == len(set(ids))


def test_same_input_same_bytes(tmp_path):
    result = demo_result()
    first = html_report.write(result, tmp_path / "one").read_bytes()
    second = html_report.write(result, tmp_path / "two").read_bytes()
    assert first == second


def test_loads_in_headless_chromium(demo_html, tmp_path):
    """A real browser renders the page with nothing else to fetch; the screenshot is not blank."""
    from PIL import Image

    path, _ = demo_html
    chromium = tool("chromium", "/usr/bin/chromium")
    png = tmp_path / "report.png"
    flags = [*CHROMIUM_FLAGS, f"--user-data-dir={tmp_path / 'profile'}"]
    subprocess.run([chromium, *flags, f"--screenshot={png}", "--window-size=1280,2000",
                    path.as_uri()], check=True, capture_output=True, timeout=120)
    assert png.is_file()
    with Image.open(png) as im:
        small = im.convert("RGB").resize((64, 100))
        colours = len(small.getcolors(maxcolors=64 * 100) or [])
        assert im.size == (1280, 2000)
    assert colours > 20, "screenshot looks blank"
    dom = subprocess.run([chromium, *flags, "--dump-dom", path.as_uri()], check=True,
                         capture_output=True, text=True, timeout=120).stdout
    assert "verdict-badge" in dom and demo_result().project_name in dom
    # BAYES_AUDITOR_ARTIFACTS=DIR keeps the screenshot for a developer to look at.
    keep = os.environ.get("BAYES_AUDITOR_ARTIFACTS")
    if keep:
        Path(keep).mkdir(parents=True, exist_ok=True)
        shutil.copy(png, Path(keep) / "report_html.png")


# --- figures ---------------------------------------------------------------------------


def _ctx_for(path: Path, rule_id: str, max_figures: int = 4):
    from auditor.config import load_config
    from auditor.diagnostics import DiagnosticsTable
    from auditor.engine import build_project, project_root
    from auditor.registry import find_rule
    from auditor.rules_api import RuleContext

    root = project_root([path])
    cfg = load_config(root, None, {})
    project = build_project([path], cfg, root)
    analysis = project.analyses[0]
    rule = find_rule(rule_id)
    table = DiagnosticsTable(analysis.group("posterior"))
    ctx = RuleContext(rule, analysis, project, dict(rule.thresholds), rule.severity, table,
                      options={"max_figures": max_figures})
    return ctx, list(rule.check(ctx))


def test_divergence_pair_on_centered_eight_involves_log_tau():
    ctx, hits = _ctx_for(centered_eight_path(), "sampling.divergences")
    assert hits, "the centered eight schools draws have divergences (Betancourt 2017)"
    figs = ctx.rule.figures(ctx, hits)
    assert len(figs) == 1
    assert "log tau" in figs[0].quantity
    assert figs[0].svg.startswith("<?xml") and "<svg" in figs[0].svg


def test_energy_figure_reports_ebfmi_by_the_published_formula():
    ctx, hits = _ctx_for(centered_eight_path(), "sampling.ebfmi")
    energy = ctx.analysis.group("sample_stats")["energy"].transpose("chain", "draw").values
    # Betancourt (2016): E-BFMI = sum (E_n - E_{n-1})^2 / sum (E_n - mean E)^2, per chain.
    expected = [np.sum(np.diff(e) ** 2) / np.sum((e - e.mean()) ** 2) for e in energy]
    hits = hits or [ctx.finding("forced for the figure test")]
    figs = ctx.rule.figures(ctx, hits)
    assert len(figs) == 1
    shown = [float(x) for x in re.findall(r"chain \d+: ([0-9]+\.[0-9]+)", figs[0].caption)]
    assert shown == pytest.approx(expected, abs=0.005)


def test_trace_figures_worst_first_and_capped():
    ctx, hits = _ctx_for(centered_eight_path(), "sampling.rhat", max_figures=3)
    assert hits, "the centered eight schools draws have R-hat above 1.01"
    figs = ctx.rule.figures(ctx, hits)
    assert 1 <= len(figs) <= 3
    rhat = {r["quantity"]: r["rhat"] for r in ctx.diagnostics.rows}
    named = [f.quantity for f in hits]
    shown_named = [g.quantity for g in figs if g.quantity in named]
    assert shown_named == sorted(shown_named, key=lambda q: -rhat[q])
    ctx.options["max_figures"] = 0
    assert ctx.rule.figures(ctx, hits) == []


def test_figures_are_deterministic():
    ctx, hits = _ctx_for(centered_eight_path(), "sampling.divergences")
    assert ctx.rule.figures(ctx, hits)[0].svg == ctx.rule.figures(ctx, hits)[0].svg


def test_inline_svg_keeps_drawing_and_drops_everything_active():
    evil = (
        '<?xml version="1.0"?><svg xmlns="http://www.w3.org/2000/svg" '
        'xmlns:xlink="http://www.w3.org/1999/xlink" width="100pt" height="50pt" '
        'viewBox="0 0 100 50" onload="alert(1)">'
        '<script>alert(2)</script><defs><clipPath id="c"><rect width="5" height="5"/>'
        '</clipPath></defs><style>@import url(http://x.invalid/a.css);</style>'
        '<foreignObject><div>x</div></foreignObject>'
        '<image href="file:///etc/passwd"/><a href="javascript:alert(3)"><text>t</text></a>'
        '<path d="M0 0L1 1" clip-path="url(#c)" fill="url(http://x.invalid/p)"/>'
        '<use xlink:href="#c"/><use xlink:href="http://x.invalid/s.svg#a"/></svg>'
    )
    out = inline_svg(evil, "fig1", scale=1.5)
    for bad in ("script", "onload", "foreignObject", "image", "javascript", "http://x",
                "@import", "file:"):
        assert bad not in out, bad
    assert 'id="fig1-c"' in out and 'clip-path="url(#fig1-c)"' in out
    assert 'xlink:href="#fig1-c"' in out
    assert 'width="150.0pt"' in out and "height" not in out.split(">", 1)[0]


# --- reporting checklist -------------------------------------------------------------


def test_checklist_prefilled_from_the_cmdstan_header():
    """Chains, warmup, draws and software come from the files; the rest is marked unknown.

    Expected values are read here straight from the shared CmdStan file's header
    (written by CmdStan 2.18), not from our loader.
    """
    from auditor.reporters.checklist import UNKNOWN, build_checklist
    from tests.report_fixtures import eight_schools_nc_result

    folder = require_shared() / "cmdstan-outputs" / "arviz-eight-schools-nc"
    header = (folder / "eight_schools_output1.csv").read_text().split("\nlp__", 1)[0]
    warmup = re.search(r"num_warmup = (\d+)", header).group(1)
    samples = re.search(r"num_samples = (\d+)", header).group(1)
    minor = re.search(r"stan_version_minor = (\d+)", header).group(1)
    result = eight_schools_nc_result()
    items = {it.topic: it for it in build_checklist(result, result.analyses[0])}
    # Kruschke (2021): software, chains, warmup, priors, predictive checks, convergence of
    # every reported quantity, sensitivity, availability of code, data and chains.
    assert len(items) == 9
    assert f"2.{minor}" in items["Software and versions"].seen
    assert items["Number of chains"].seen.startswith(f"{len(list(folder.glob('*.csv')))} chains")
    assert f"{warmup} warmup" in items["Warmup and kept draws"].seen
    assert f"{samples} kept draws" in items["Warmup and kept draws"].seen
    assert UNKNOWN in items["Sensitivity analysis (priors, likelihood)"].missing
    assert items["Sensitivity analysis (priors, likelihood)"].status == "unknown"
    conv = items["Convergence diagnostics for every reported quantity"]
    assert conv.status == "attention" and "sampling.rhat" in conv.flags


def test_checklist_and_repro_footer_in_the_page(demo_html):
    _, html = demo_html
    result = demo_result()
    assert html.count('<details class="checklist-box"') == len(result.analyses)
    assert "Kruschke" in html and "cannot be known from the files" in html
    footer = html.split('<footer class="repro"', 1)[1]
    for i in result.inputs:
        assert i.sha256 in footer
    for name, version in result.libraries.items():
        assert f"<th scope=\"row\">{name}</th><td>{version}</td>" in footer
    # The caution stands before the first finding (escaped as HTML text).
    assert str(escape(result.caution)) in html.split("<article", 1)[0]


def test_project_findings_have_their_own_section(tmp_path):
    import shutil

    from auditor.engine import run_audit
    from auditor.reporters import sarif_report
    from tests.report_fixtures import UNSAFE

    project = tmp_path / "proj"
    shutil.copytree(UNSAFE, project)
    manifest = project / "bayes-auditor.toml"
    manifest.write_text('gatee = "error"\n' + manifest.read_text(encoding="utf-8"))
    result = run_audit([project])
    assert [f.rule_id for f in result.project_findings] == ["inputs.config"]
    html = html_report.render(result)
    project_part = html.split('<section class="analysis project-level"', 1)[1].split(
        "</section>\n</section>", 1)[0]
    assert "gatee" in project_part and "inputs.config" in project_part
    sarif = sarif_report.build(result)["runs"][0]["results"]
    assert sarif[0]["ruleId"] == "inputs.config"  # project findings come first
    loc = sarif[0]["locations"][0]["physicalLocation"]["artifactLocation"]
    assert loc["uri"] == "bayes-auditor.toml"


def test_best_pair_finds_the_separating_pair():
    """Constructed draws: divergences sit at low values of quantities 1 and 3 only."""
    from auditor.figures.sampling import best_pair

    rng = np.random.default_rng(7)
    n = 2000
    draws = rng.normal(size=(n, 5))
    divergent = np.zeros(n, dtype=bool)
    divergent[:60] = True
    draws[:60, 1] -= 2.0
    draws[:60, 3] -= 1.5
    quantities = [(f"q{k}", draws[:, k]) for k in range(5)]
    i, j, dist = best_pair(quantities, divergent)
    assert {i, j} == {1, 3}
    # Mahalanobis distance of the mean shift (2, 1.5) under unit covariance: 2.5.
    assert dist == pytest.approx(2.5, abs=0.3)
    assert best_pair(quantities, np.zeros(n, dtype=bool)) is None
