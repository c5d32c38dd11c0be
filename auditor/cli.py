"""The ``bayes-auditor`` command line: ``audit``, ``accept``, ``rules``, ``explain``.

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
    _common(audit)
    audit.add_argument("--baseline", type=Path, metavar="FILE",
                       help="an earlier JSON report: mark each finding new, unchanged or gone")
    audit.add_argument("--gate-new-only", action="store_true",
                       help="with --baseline: only new findings can reach the gate")
    audit.add_argument("--since", metavar="REF",
                       help="audit only the analyses whose inputs changed since git revision "
                            "REF")
    where = audit.add_mutually_exclusive_group()
    where.add_argument("--scheduler", metavar="ADDRESS",
                       help="send the analyses to a running Dask distributed scheduler "
                            "(e.g. tcp://10.0.0.5:8786); every worker must reach the project "
                            "at the same path (needs the scale extra)")
    where.add_argument("--workers", type=_positive, metavar="N",
                       help="audit on a local Dask cluster of N worker processes (needs the "
                            "scale extra)")
    audit.add_argument("--quiet", action="store_true",
                       help="print only the closing line (no findings, no progress)")
    audit.add_argument("--no-write", action="store_true",
                       help="write no report files (print only), as a pre-commit hook does")
    audit.add_argument("--allow-empty", action="store_true",
                       help="exit 0 when the paths hold nothing to audit (a commit that "
                            "touches no model or draws)")
    accept = sub.add_parser(
        "accept", help="write the current findings as a starting accepted-findings file")
    accept.add_argument("paths", nargs="*", type=Path, metavar="PATH",
                        help="project folder, or draws/program files (default: current folder)")
    accept.add_argument("--write", type=Path, metavar="FILE", required=True,
                        help="the file to write (refused if it exists); fill in each reason "
                             "and who accepted it before the gate honours it")
    _common(accept)
    rules = sub.add_parser("rules", help="list every rule")
    rules.add_argument("--policy", metavar="NAME_OR_FILE",
                       help="show each rule's effective severity and thresholds under a policy")
    rules.add_argument("--markdown", action="store_true",
                       help="print the rule catalogue as Markdown (docs/rules.md)")
    explain = sub.add_parser("explain", help="explain one rule")
    explain.add_argument("rule_id", metavar="RULE_ID")
    return parser


def _positive(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        value = 0
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be a whole number >= 1, not {text!r}")
    return value


def _common(cmd: argparse.ArgumentParser) -> None:
    cmd.add_argument("--config", type=Path, metavar="FILE",
                     help="configuration file (default: bayes-auditor.toml or pyproject.toml)")
    cmd.add_argument("--policy", metavar="NAME_OR_FILE",
                     help="policy: everyday (default), submission, or a policy file")
    cmd.add_argument("--allow-read", action="append", type=Path, metavar="DIR", default=[],
                     help="also read files under DIR, outside the project (only for a "
                          "project you trust; repeatable; off by default)")


def _cmd_rules(args: argparse.Namespace) -> int:
    from auditor.registry import all_rules

    rules = all_rules()
    if args.markdown:
        from auditor.catalogue import rule_catalogue

        sys.stdout.write(rule_catalogue(rules))
        return 0
    if args.policy:
        from auditor.gate.policy import PolicyError, load_policy

        try:
            policy = load_policy(args.policy, Path.cwd(), lambda p: Path(p).read_bytes())
        except PolicyError as exc:
            print(f"{TOOL_NAME}: {exc}", file=sys.stderr)
            return EXIT_NOTHING
        print(f"policy {policy.name} (sha256 {policy.sha256[:16]}): {policy.description}")
        if policy.require_stages:
            print("required workflow stages: " + ", ".join(policy.require_stages))
        print()
        for r in rules:
            opts = policy.rules.get(r.id, {})
            enabled = opts.get("enabled", True)
            severity = opts.get("severity", r.severity.value) if enabled else "off"
            thresholds = {**r.thresholds, **{k: v for k, v in opts.items()
                                             if k in r.thresholds}}
            changed = "*" if opts else " "
            shown = ", ".join(f"{k}={v}" for k, v in thresholds.items())
            print(f"{changed} {r.id}  {severity}  {shown}")
        print("\n* set by the policy")
        return 0
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
    from auditor.engine import NothingToAudit, project_root, return_large_blocks, run_audit
    from auditor.reporters import ReportPathError, write_reports
    from auditor.reporters.terminal import closing_line, render, terminal_progress, use_colour

    paths = args.paths or [Path.cwd()]
    return_large_blocks()
    overrides = {"gate": args.gate, "report": args.report, "policy": args.policy}
    progress = None if args.quiet else terminal_progress(sys.stderr)
    try:
        result = run_audit(paths, config_path=args.config, overrides=overrides,
                           allow_read=tuple(args.allow_read), baseline=args.baseline,
                           gate_new_only=args.gate_new_only, since=args.since,
                           progress=progress, scheduler=args.scheduler,
                           workers=args.workers)
    except NothingToAudit as exc:
        print(f"{TOOL_NAME}: {exc}", file=sys.stderr)
        return 0 if args.allow_empty else EXIT_NOTHING
    except ConfigError as exc:
        print(f"{TOOL_NAME}: {exc}", file=sys.stderr)
        return EXIT_NOTHING
    finally:
        if progress is not None:
            progress.close()
    formats = [] if args.no_write else list(result.config.get("report") or ["json"])
    root = project_root(paths)
    out_dir = args.out if args.out is not None else root / result.config["out"]
    try:
        written = write_reports(result, formats, out_dir) if formats else []
    except ReportPathError as exc:
        print(f"{TOOL_NAME}: {exc}", file=sys.stderr)
        return EXIT_NOTHING
    except OSError as exc:
        print(f"{TOOL_NAME}: cannot write reports to {out_dir}: {exc.strerror}", file=sys.stderr)
        return EXIT_NOTHING
    except RuntimeError as exc:  # a reporter's missing optional library (weasyprint)
        print(f"{TOOL_NAME}: {exc}", file=sys.stderr)
        return EXIT_NOTHING
    if args.quiet:
        sys.stdout.write(closing_line(result) + "\n")
    else:
        sys.stdout.write(render(result, colour=use_colour(sys.stdout), written=written))
    return result.exit_status


def _cmd_accept(args: argparse.Namespace) -> int:
    from auditor.engine import NothingToAudit, run_audit
    from auditor.gate.accepted import starting_file

    target: Path = args.write
    if target.exists() or target.is_symlink():
        print(f"{TOOL_NAME}: {target} exists; it is not overwritten (choose another name)",
              file=sys.stderr)
        return EXIT_NOTHING
    try:
        result = run_audit(args.paths or [Path.cwd()], config_path=args.config,
                           overrides={"policy": args.policy},
                           allow_read=tuple(args.allow_read))
    except (ConfigError, NothingToAudit) as exc:
        print(f"{TOOL_NAME}: {exc}", file=sys.stderr)
        return EXIT_NOTHING
    open_findings = [f for f in result.all_findings if f.accepted is None]
    try:
        with target.open("x", encoding="utf-8") as fh:
            fh.write(starting_file(open_findings))
    except OSError as exc:
        print(f"{TOOL_NAME}: cannot write {target}: {exc.strerror}", file=sys.stderr)
        return EXIT_NOTHING
    print(f"{TOOL_NAME}: wrote {len(open_findings)} findings to {target}; fill in each "
          "'reason' and 'by' (and 'expires' if wanted), then name the file with "
          "accepted = \"...\" in the configuration or keep it as "
          "bayes-auditor-accepted.toml in the project")
    return 0


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``bayes-auditor`` console script; returns the exit status."""
    args = _parser().parse_args(argv)
    try:
        if args.command == "rules":
            return _cmd_rules(args)
        if args.command == "accept":
            return _cmd_accept(args)
        if args.command == "explain":
            return _cmd_explain(args.rule_id)
        return _cmd_audit(args)
    except KeyboardInterrupt:
        return 130
    except BrokenPipeError:  # the output went to a pipe that closed (`| head`): not an error
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 0
    except Exception as exc:  # never show a traceback to users; keep it for debugging
        if os.environ.get("BAYES_AUDITOR_DEBUG") == "1":
            raise
        print(f"{TOOL_NAME}: internal error: {type(exc).__name__}: {exc} "
              "(set BAYES_AUDITOR_DEBUG=1 for details; please report it)", file=sys.stderr)
        return EXIT_NOTHING


if __name__ == "__main__":
    sys.exit(main())
