"""The ``bayes-auditor`` command line: ``audit``, ``rules``, ``explain``.

The CLI parses arguments, calls the engine and the reporters, and returns the
exit status the result object decided.
"""

from __future__ import annotations

import argparse
import os
import sys
import textwrap
from pathlib import Path

from auditor import TOOL_NAME, __version__
from auditor.config import REPORT_FORMATS, ConfigError
from auditor.result import EXIT_NOTHING, GATES


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog=TOOL_NAME,
        description="Audit a Bayesian analysis workflow from its files.",
    )
    parser.add_argument("--version", action="version", version=f"{TOOL_NAME} {__version__}")
    sub = parser.add_subparsers(dest="command", required=True)
    audit = sub.add_parser("audit", help="audit a project folder or files")
    audit.add_argument("paths", nargs="*", type=Path, metavar="PATH",
                       help="project folder, or draws/program files (default: current folder)")
    audit.add_argument("--report", action="append", choices=REPORT_FORMATS, metavar="FORMAT",
                       help=f"report format to write, repeatable ({', '.join(REPORT_FORMATS)})")
    audit.add_argument("--out", type=Path, metavar="DIR",
                       help="folder for the report files (default: audit-report/ in the project)")
    audit.add_argument("--gate", choices=GATES,
                       help="lowest severity that makes the exit status 1 (default: error)")
    audit.add_argument("--config", type=Path, metavar="FILE",
                       help="configuration file (default: bayes-auditor.toml or pyproject.toml)")
    audit.add_argument("--allow-read", action="append", type=Path, metavar="DIR", default=[],
                       help="also read files under DIR, outside the project (only for a "
                            "project you trust; repeatable; off by default)")
    sub.add_parser("rules", help="list every rule")
    explain = sub.add_parser("explain", help="explain one rule")
    explain.add_argument("rule_id", metavar="RULE_ID")
    return parser


def _cmd_rules() -> int:
    from auditor.registry import all_rules

    rules = all_rules()
    width = max(len(r.id) for r in rules)
    stage_w = max(len(r.stage) for r in rules)
    for r in rules:
        severity = r.severity.value.ljust(7)
        print(f"{r.id.ljust(width)}  {r.stage.ljust(stage_w)}  {severity}  {r.title}")
    return 0


def _cmd_explain(rule_id: str) -> int:
    from auditor.registry import all_rules, find_rule

    rule = find_rule(rule_id)
    if rule is None:
        import difflib

        near = difflib.get_close_matches(rule_id, [r.id for r in all_rules()], n=1)
        hint = f"; did you mean {near[0]}?" if near else "; `bayes-auditor rules` lists them"
        print(f"{TOOL_NAME}: unknown rule {rule_id!r}{hint}", file=sys.stderr)
        return EXIT_NOTHING
    wrap = textwrap.TextWrapper(width=88, initial_indent="  ", subsequent_indent="  ")
    print(f"{rule.id} — {rule.title}")
    print(f"stage: {rule.stage}   default severity: {rule.severity.value}")
    if rule.aliases:
        print("also known as: " + ", ".join(rule.aliases))
    print("\nwhy it matters:")
    print(wrap.fill(" ".join(rule.rationale.split())))
    print("\nthresholds:" + ("" if rule.thresholds else " none"))
    for key, value in rule.thresholds.items():
        print(f"  {key} = {value}")
    print("\nfix:")
    print(wrap.fill(rule.fix))
    print("\nreferences:")
    for ref in rule.references:
        print(wrap.fill("- " + ref))
    print(f"\nconfigure in bayes-auditor.toml:  [rules.\"{rule.id}\"]  enabled = true/false, "
          "severity = \"error\"|\"warning\"|\"note\", or a threshold above")
    return 0


def _cmd_audit(args: argparse.Namespace) -> int:
    from auditor.engine import NothingToAudit, project_root, run_audit
    from auditor.reporters import ReportPathError, write_reports
    from auditor.reporters.terminal import render, use_colour

    paths = args.paths or [Path.cwd()]
    overrides = {"gate": args.gate, "report": args.report}
    try:
        result = run_audit(paths, config_path=args.config, overrides=overrides,
                           allow_read=tuple(args.allow_read))
    except (ConfigError, NothingToAudit) as exc:
        print(f"{TOOL_NAME}: {exc}", file=sys.stderr)
        return EXIT_NOTHING
    formats = list(result.config.get("report") or ["json"])
    root = project_root(paths)
    out_dir = args.out if args.out is not None else root / result.config["out"]
    try:
        written = write_reports(result, formats, out_dir)
    except ReportPathError as exc:
        print(f"{TOOL_NAME}: {exc}", file=sys.stderr)
        return EXIT_NOTHING
    except OSError as exc:
        print(f"{TOOL_NAME}: cannot write reports to {out_dir}: {exc.strerror}", file=sys.stderr)
        return EXIT_NOTHING
    except RuntimeError as exc:  # a reporter's missing optional library (weasyprint)
        print(f"{TOOL_NAME}: {exc}", file=sys.stderr)
        return EXIT_NOTHING
    sys.stdout.write(render(result, colour=use_colour(sys.stdout), written=written))
    return result.exit_status


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``bayes-auditor`` console script; returns the exit status."""
    args = _parser().parse_args(argv)
    try:
        if args.command == "rules":
            return _cmd_rules()
        if args.command == "explain":
            return _cmd_explain(args.rule_id)
        return _cmd_audit(args)
    except KeyboardInterrupt:
        return 130
    except Exception as exc:  # never show a traceback to users; keep it for debugging
        if os.environ.get("BAYES_AUDITOR_DEBUG") == "1":
            raise
        print(f"{TOOL_NAME}: internal error: {type(exc).__name__}: {exc} "
              "(set BAYES_AUDITOR_DEBUG=1 for details; please report it)", file=sys.stderr)
        return EXIT_NOTHING


if __name__ == "__main__":
    sys.exit(main())
