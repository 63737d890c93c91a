"""``loopwarden rules``: the check catalog and the shipped rule sets."""

from __future__ import annotations

import argparse

HELP = "list the check catalog and the shipped rule sets"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--show", metavar="SET",
                        help="print the rules of a shipped set (name) or a rule-set file, "
                             "with limits, severity and where each rule comes from")


def _table(rows: list[tuple[str, ...]]) -> list[str]:
    widths = [max(len(r[i]) for r in rows) for i in range(len(rows[0]))]
    return ["  ".join(c.ljust(w) for c, w in zip(r, widths, strict=True)).rstrip()
            for r in rows]


def _catalog() -> list[str]:
    from ..ruleset.checks import CHECKS

    rows = [("CHECK", "UNIT", "LIMITS", "MEASURES")]
    for name, check in CHECKS.items():
        unit = check.unit or "-"
        if name == "error_constant":
            unit = "by which"
        limits = ", ".join(check.limit_keys) or "pass/fail"
        rows.append((name, unit, limits, check.summary))
    return ["Check catalog:", *("  " + line for line in _table(rows))]


def _shipped() -> list[str]:
    from ..ruleset.loader import load_ruleset, shipped_rulesets

    rows = [("SET", "VERSION", "RULES", "EXTENDS", "TITLE")]
    for name in shipped_rulesets():
        rs = load_ruleset(name)
        rows.append((rs.id, rs.version, str(len(rs.rules)), ", ".join(rs.extends) or "-",
                     rs.title))
    return ["Shipped rule sets (use --rules NAME, or --show NAME for the rules):",
            *("  " + line for line in _table(rows))]


def _show(spec: str) -> list[str]:
    from ..report.numbers import fmt
    from ..ruleset.checks import CHECKS
    from ..ruleset.loader import load_ruleset

    rs = load_ruleset(spec)
    lines = [f"{rs.id} {rs.version}: {rs.title}",
             f"  file {rs.path}, SHA-256 {rs.sha256}"]
    if rs.extends:
        lines.append(f"  extends {' -> '.join(rs.extends)}")
    rows = [("RULE", "CHECK", "SEVERITY", "LIMITS", "FROM")]
    for r in rs.rules:
        check = CHECKS[r.check]
        limits = [f"{k} {fmt(v, check.limit_unit(k, r.options))}" for k, v in r.limits.items()]
        limits += [f"{k}={fmt(v) if not isinstance(v, bool) else str(v).lower()}"
                   for k, v in r.options.items()]
        shown = ", ".join(limits) or ("pass/fail" if check.predicate else "(from the design)")
        rows.append((r.id, r.check, r.severity, shown, r.origin))
    lines += ["", *("  " + line for line in _table(rows)), ""]
    for r in rs.rules:
        lines += [f"{r.id}:", f"  why:    {r.rationale}", f"  source: {r.source}"]
    return lines


def run(args: argparse.Namespace) -> int:
    from ..report.escape import for_terminal

    lines = _show(args.show) if args.show else [*_catalog(), "", *_shipped()]
    # A user's rule set may carry control characters in its texts: shown, never sent raw.
    print(for_terminal("\n".join(lines)))
    return 0
