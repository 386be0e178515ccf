"""More ``loopcraft`` subcommands: report, check, snap and spread.

::

    loopcraft report FILE -o report.html [--notes TEXT] [--series E24] [--no-spread] [--seed N] [--samples N]
    loopcraft check FILE [--no-spread] [--seed N] [--json]
    loopcraft snap FILE [--series E24] [-o snapped.json] [--combinations] [--inductors] [--json]
    loopcraft spread FILE [--samples 10000] [--seed 1] [--json]

``check`` is meant for a CI job that guards a design: exit status 0 when
every spec item holds, 1 when some fail (the failing items are listed on
standard output), 2 for errors (a missing spec section, a bad file …).
:func:`add_commands` registers the subcommands on the main parser's
subparsers; each handler returns the exit status.
"""

from __future__ import annotations

import argparse
import json
import math
from pathlib import Path
from typing import Any

from .._numbers import json_safe
from .._text import terminal_safe
from ..design import Design, load
from ..errors import DesignFileError, LoopcraftError
from ..parts.eseries import SERIES_NAMES

__all__ = ["add_commands", "cmd_report", "cmd_check", "cmd_snap", "cmd_spread"]


def _series(text: str) -> str:
    key = text.strip().upper()
    if key not in SERIES_NAMES:
        raise argparse.ArgumentTypeError(f"unknown E-series {text!r} (expected one of {', '.join(SERIES_NAMES)})")
    return key


def _positive_int(text: str) -> int:
    try:
        n = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number > 0 (got {text!r})") from None
    if n <= 0:
        raise argparse.ArgumentTypeError(f"expected a whole number > 0 (got {text!r})")
    return n


def _int(text: str) -> int:
    try:
        return int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number (got {text!r})") from None


def add_commands(subparsers: Any) -> None:
    """Register ``report``, ``check``, ``snap`` and ``spread`` on the main parser's subparsers.

    Parameters
    ----------
    subparsers : argparse._SubParsersAction
        What ``ArgumentParser.add_subparsers`` returned; each new subparser sets
        ``handler`` (``fn(args) -> int`` exit status) as its default.
    """
    r = subparsers.add_parser("report", help="write a design record (HTML or Markdown, by the -o suffix)")
    r.add_argument("file", help="design file (JSON)")
    r.add_argument("-o", "--output", required=True, help="record to write: .html/.htm or .md/.markdown")
    r.add_argument("--notes", default="", help="free notes to add to the record")
    r.add_argument("--series", type=_series, default="E24", help="E-series to mark the values against (E24)")
    r.add_argument("--no-spread", action="store_true", help="skip the Monte Carlo spread and yield")
    r.add_argument("--seed", type=_int, default=1, help="Monte Carlo seed (1)")
    r.add_argument("--samples", type=_positive_int, default=2000, help="Monte Carlo samples for the spread (2000)")
    r.set_defaults(handler=cmd_report)

    c = subparsers.add_parser("check", help="check a design against its spec (exit 0 pass, 1 fail, 2 error)")
    c.add_argument("file", help="design file (JSON) with a 'spec' section")
    c.add_argument("--no-spread", action="store_true", help="skip the Monte Carlo yield item")
    c.add_argument("--seed", type=_int, default=1, help="Monte Carlo seed (1)")
    c.add_argument("--json", action="store_true", help="machine-readable output")
    c.set_defaults(handler=cmd_check)

    s = subparsers.add_parser("snap", help="snap R and C values to an E-series and show what moved")
    s.add_argument("file", help="design file (JSON)")
    s.add_argument("--series", type=_series, default="E24", help="E-series (E24)")
    s.add_argument("-o", "--output", help="write the snapped design file here")
    s.add_argument("--combinations", action="store_true", help="allow two-part series/parallel combinations")
    s.add_argument("--inductors", action="store_true", help="snap inductors too")
    s.add_argument("--json", action="store_true", help="machine-readable output")
    s.set_defaults(handler=cmd_snap)

    p = subparsers.add_parser("spread", help="Monte Carlo spread of corners and margins over the tolerances")
    p.add_argument("file", help="design file (JSON) with a 'tolerances' section")
    p.add_argument("--samples", type=_positive_int, default=10000, help="Monte Carlo samples (10000)")
    p.add_argument("--seed", type=_int, default=1, help="Monte Carlo seed (1)")
    p.add_argument("--json", action="store_true", help="machine-readable output")
    p.set_defaults(handler=cmd_spread)


# --------------------------------------------------------------------------- handlers


def cmd_report(args: argparse.Namespace) -> int:
    """``loopcraft report``: write the design record; returns 0."""
    from ..report.record import _SUFFIXES, record

    out = Path(args.output)
    if out.suffix.lower() not in _SUFFIXES:
        raise LoopcraftError(
            f"-o {args.output!r}: cannot tell the record format from the suffix {out.suffix!r}; "
            f"expected one of {', '.join(_SUFFIXES)}"
        )
    design = load(args.file)
    rec = record(design, args.notes, series=args.series, spread=not args.no_spread, seed=args.seed,
                 samples=args.samples)
    rec.save(out)
    verdict = ""
    if rec.spec_passed is not None:
        verdict = f" (spec {'PASS' if rec.spec_passed else 'FAIL'})"
    print(terminal_safe(f"wrote {out}{verdict}"))
    return 0


def cmd_check(args: argparse.Namespace) -> int:
    """``loopcraft check``: 0 when the spec holds, 1 when an item fails (listed on stdout)."""
    from ..checks.spec import check

    design = load(args.file)
    if design.spec is None:
        raise DesignFileError(f"{args.file}: the design has no 'spec' section, so there is nothing to check", "spec")
    rep = check(design, spread=not args.no_spread, seed=args.seed)
    if args.json:
        print(terminal_safe(json.dumps(json_safe(rep.to_dict()), indent=2, ensure_ascii=False, allow_nan=False)))
    else:
        print(terminal_safe(str(rep)))
        if not rep.passed:
            print()
            print(f"{len(rep.failures)} spec item(s) failed:")
            for item in rep.failures:
                print(terminal_safe(f"  FAILED {item.name} (required {item.required}): {item.message}"))
    return 0 if rep.passed else 1


def _save_design(design: Design, path: str) -> Path:
    try:
        return design.save(path)
    except OSError as err:
        raise LoopcraftError(f"cannot write {path!r}: {err.strerror or err}") from err


def cmd_snap(args: argparse.Namespace) -> int:
    """``loopcraft snap``: print the moves table; write the snapped design with ``-o``; returns 0."""
    from ..parts.snapping import snap_design

    design = load(args.file)
    res = snap_design(design, args.series, combinations=args.combinations, inductors=args.inductors)
    if args.output:
        _save_design(res.design, args.output)
    if args.json:
        doc = res.to_dict()
        if args.output:
            doc["written"] = str(args.output)
        print(terminal_safe(json.dumps(json_safe(doc), indent=2, ensure_ascii=False, default=_json_default,
                                         allow_nan=False)))
    else:
        print(terminal_safe(str(res)))
        if args.output:
            print()
            print(terminal_safe(f"wrote {args.output}"))
    return 0


def _json_default(x: Any) -> Any:
    if isinstance(x, float) and not math.isfinite(x):
        return str(x)
    raise TypeError(f"{type(x).__name__} is not JSON serializable")


def cmd_spread(args: argparse.Namespace) -> int:
    """``loopcraft spread``: the Monte Carlo summary of corners, crossover and margins; returns 0."""
    from ..analysis.tolerance import monte_carlo

    design = load(args.file)
    if design.tolerances is None:
        raise DesignFileError(
            f"{args.file}: the design has no 'tolerances' section, so there is nothing to spread", "tolerances")
    spec = None
    if design.spec is not None:
        from ..checks.spec import parse_spec

        spec = parse_spec(design.spec, "spec")
    spread = monte_carlo(design, args.samples, seed=args.seed, spec=spec)
    doc = spread.to_dict()
    if args.json:
        print(terminal_safe(json.dumps(json_safe(doc), indent=2, ensure_ascii=False, allow_nan=False)))
    else:
        print(terminal_safe(_spread_text(design, doc)))
    return 0


def _spread_text(design: Design, doc: dict) -> str:
    from ..report.record import spread_header, spread_rows

    lines = [design.title or "(untitled design)", "Monte Carlo spread: " + spread_header(doc)[0]]
    lines += spread_header(doc)[1:]
    lines.append("")
    rows = spread_rows(doc)
    widths = [max(len(r[i]) for r in rows) for i in range(len(rows[0]))]
    for j, r in enumerate(rows):
        lines.append("  " + "  ".join(c.rjust(w) if i else c.ljust(w) for i, (c, w) in enumerate(zip(r, widths,
                                                                                                   strict=True))))
        if j == 0:
            lines.append("  " + "  ".join("-" * w for w in widths))
    return "\n".join(lines)
