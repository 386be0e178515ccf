"""The ``loopcraft`` command line.

Subcommands::

    loopcraft analyze FILE [--json]
    loopcraft response FILE --hz F [F ...] [--json]
    loopcraft report FILE -o report.html|report.md
    loopcraft check FILE [--no-spread] [--json]          (exit 0: spec holds, 1: it does not)
    loopcraft snap FILE --series E24 -o snapped.json [--combinations]
    loopcraft spread FILE --samples 10000 --seed 1 [--json]

Errors go to standard error with exit status 2.

Every ``--json`` output is valid JSON (RFC 8259: no bare ``NaN`` or
``Infinity``): a number that is not finite at that point, such as the
magnitude in dB at a pole on the jω axis, is written as ``null``.
"""

from __future__ import annotations

import argparse
import json
import math
import sys
from collections.abc import Sequence
from typing import Any

import numpy as np

from .._numbers import json_safe
from .._text import terminal_safe
from ..analysis.analyzer import analysis_sections, response_columns
from ..design import Design, load
from ..errors import LoopcraftError
from ..model.values import format_value

__all__ = ["main", "analyze_dict", "response_dict"]


def _pairs(roots: np.ndarray) -> list[list[float]]:
    return [[float(r.real), float(r.imag)] for r in sorted(roots, key=lambda r: (abs(r), r.imag))]


def analyze_dict(design: Design) -> dict[str, Any]:
    """The ``analyze --json`` document for a design (roots in rad/s, corners in Hz).

    ``zeros_rad_s`` and ``poles_rad_s`` are the reduced transfer function;
    ``cancelled_rad_s`` lists where a zero and a pole cancel (the pole, one
    entry per root). A factor on the jω axis has ``"q": null, "q_infinite": true``.
    """
    ff = design.factored()
    tr = ff.result
    out: dict[str, Any] = {
        "title": design.title,
        "zeros_rad_s": _pairs(tr.reduced_zeros),
        "poles_rad_s": _pairs(tr.reduced_poles),
        "cancelled_rad_s": _pairs(tr.cancelled),
        "factored": ff.to_dict(),
        "dc_gain": _finite_or_text(tr.dc_gain()),
        "hf_gain": _finite_or_text(tr.hf_gain()),
    }
    out.update(_extra_analysis(design))
    return out


def _extra_analysis(design: Design) -> dict[str, Any]:
    """Sections added by the loop analysis when an op-amp or plant is given."""
    return analysis_sections(design)


def _finite_or_text(x: float) -> float | str:
    return x if math.isfinite(x) else "inf"


def response_dict(design: Design, f_hz: Sequence[float]) -> dict[str, Any]:
    """The ``response --json`` document: magnitude (dB) and phase (degrees) per frequency (Hz)."""
    f = np.asarray(f_hz, dtype=float)
    cols = response_columns(design, f)
    points = [{k: float(v[i]) if k != "f_hz" else float(f[i]) for k, v in cols.items()} for i in range(len(f))]
    return {"points": points}


def _print_summary(design: Design) -> None:
    ff = design.factored()
    tr = ff.result
    print(terminal_safe(design.title or "(untitled design)"))  # user text: no control characters
    print(f"stage: {design.stage.kind}")
    print()
    print(ff)
    print()
    print("zeros (rad/s):", ", ".join(_root_text(z) for z in sorted(tr.reduced_zeros, key=abs)) or "none")
    print("poles (rad/s):", ", ".join(_root_text(p) for p in sorted(tr.reduced_poles, key=abs)) or "none")
    if tr.cancelled.size:
        print("cancelled (rad/s):", ", ".join(_root_text(p) for p in sorted(tr.cancelled, key=abs)))
    dc, hf = tr.dc_gain(), tr.hf_gain()
    print(f"DC gain: {_gain_text(dc)}   high-frequency gain: {_gain_text(hf)}")
    extra = _extra_analysis(design)
    for line in extra.get("summary_lines", []):
        print(terminal_safe(line))


def _root_text(r: complex) -> str:
    hz = f" ({format_value(abs(r) / (2 * math.pi), 'Hz')})"
    if r.imag == 0:
        return f"{r.real:.6g}{hz if r else ''}"
    return f"{r.real:.6g}{r.imag:+.6g}j{hz}"


def _gain_text(x: float) -> str:
    if math.isinf(x):
        return "infinite"
    if x == 0:
        return "0"
    return f"{x:.6g} V/V ({20 * math.log10(abs(x)):.2f} dB)"


def _parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="loopcraft", description="Analyse op-amp stages and the loops they close.")
    sub = p.add_subparsers(dest="command", required=True)
    a = sub.add_parser("analyze", help="factored form, corners, poles and zeros of a design file")
    a.add_argument("file")
    a.add_argument("--json", action="store_true", help="machine-readable output")
    r = sub.add_parser("response", help="frequency response at given frequencies")
    r.add_argument("file")
    r.add_argument("--hz", nargs="+", required=True, type=_freq, help="frequencies in Hz")
    r.add_argument("--json", action="store_true", help="machine-readable output")
    _add_more(sub)
    return p


def _add_more(sub) -> None:
    from .tools import add_commands  # report, check, snap, spread

    add_commands(sub)


def _freq(text: str) -> float:
    from ..model.values import parse_value

    try:
        return parse_value(text, name="--hz")
    except LoopcraftError as err:
        raise argparse.ArgumentTypeError(str(err)) from err


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; returns the exit status (0 ok, 2 error)."""
    args = _parser().parse_args(argv)
    try:
        if args.command == "analyze":
            design = load(args.file)
            if args.json:
                print(json.dumps(json_safe(analyze_dict(design)), indent=2, allow_nan=False))
            else:
                _print_summary(design)
            return 0
        if args.command == "response":
            design = load(args.file)
            doc = response_dict(design, args.hz)
            if args.json:
                print(json.dumps(json_safe(doc), indent=2, allow_nan=False))
            else:
                keys = list(doc["points"][0].keys()) if doc["points"] else []
                print("  ".join(f"{k:>16s}" for k in keys))
                for pt in doc["points"]:
                    print("  ".join(f"{pt[k]:16.6g}" for k in keys))
            return 0
        return args.handler(args)
    except LoopcraftError as err:
        print(terminal_safe(f"loopcraft: error: {err}"), file=sys.stderr)
        return 2
    except BrokenPipeError:
        return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
