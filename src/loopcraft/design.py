"""Designs: a stage, its component values and optional analysis sections.

A design file is JSON of loopcraft's own, versioned form::

    {"loopcraft": 1,
     "title": "Error amplifier, 48 V bus converter",
     "stage": {"kind": "inverting", "input": "R1 || (R3 + C3)", "feedback": "(R2 + C1) || C2"},
     "values": {"R1": "10k", "R2": "22k", "R3": "470", "C1": "6.8n", "C2": "150p", "C3": "3.3n"},
     "notes": "free text"}

Optional sections: ``opamp``, ``plant``, ``feedback_gain`` (a number in
1e-6 … 1e6 V/V), ``stage_sign`` (-1 or 1: the stage's sign in the loop gain
L = stage_sign·P·k_fb·H, for an error amplifier wired other than the default rule
of :mod:`loopcraft.analysis.loop`), ``tolerances``, ``spec``. Loading validates
every key and never executes anything; errors carry the key path. Saving is
atomic (temporary file, then rename) and keeps an overwritten file's permission
bits; a symbolic link is followed (see :meth:`Design.save`).

Design-file text may nest arrays and objects at most 32 deep (a real file
nests 4) and hold no number longer than 1000 characters; beyond either it is
refused, with a caret under the offending character, before the JSON decoder
sees it. Numbers beyond the float range (``10**400``) are refused with their
key path.
"""

from __future__ import annotations

import json
import math
import os
import re
from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

from ._files import atomic_write
from ._numbers import Span, shown
from ._text import check_text
from .errors import ComponentValueError, DesignFileError, LoopcraftError
from .model.stage import Stage, stage_from_dict
from .model.values import parse_value
from .numeric.evaluator import Evaluator, TransferResult, compile_derivation
from .numeric.factored import FactoredForm
from .symbolic.derivation import Derivation, derive
from .symbolic.symbols import element_kind

__all__ = ["Design", "load", "loads", "FORMAT_VERSION"]

#: The design-file format version this package writes and reads.
FORMAT_VERSION = 1

#: The accepted range of ``feedback_gain`` (divider or sensor gain), V/V.
FEEDBACK_GAIN = Span(1e-6, 1e6, "V/V")

_TOP_KEYS = ("loopcraft", "title", "stage", "values", "notes", "opamp", "plant", "feedback_gain", "stage_sign",
             "tolerances", "spec")


def _no_duplicates(pairs: list[tuple[str, Any]]) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for k, v in pairs:
        if k in out:
            raise DesignFileError(f"key {k!r} appears twice in one object", k)
        out[k] = v
    return out


def _parse_values(raw: Any, stage: Stage, key_path: str = "values") -> tuple[dict[str, float], dict[str, Any]]:
    if not isinstance(raw, Mapping):
        raise DesignFileError(f"expected an object of designator: value (got {type(raw).__name__})", key_path)
    names = stage.component_names
    for k in raw:
        if k not in names:
            raise DesignFileError(
                f"no element {shown(k)} in the stage (elements: {', '.join(names)})", f"{key_path}.{k}"
            )
    values: dict[str, float] = {}
    given: dict[str, Any] = {}
    for n in names:
        if n not in raw:
            raise DesignFileError(f"missing value for {n}", f"{key_path}.{n}")
        try:
            values[n] = parse_value(raw[n], name=n, kind=element_kind(n))
        except ComponentValueError as err:
            raise DesignFileError(str(err), f"{key_path}.{n}") from err
        given[n] = raw[n]
    return values, given


@dataclass(frozen=True, eq=False)
class Design:
    """An op-amp stage with component values and optional analysis sections.

    Build one with :meth:`from_dict` or :func:`load`; derive new ones with
    :meth:`with_values` (designs are immutable).

    Parameters
    ----------
    stage : Stage
        The topology.
    values : mapping of str to float
        Component values in SI base units (ohms, farads, henries).
    given : mapping of str to str or float
        The values as written (``"4k7"``), kept so a file round-trips unchanged.
    title, notes : str
        Free text.
    opamp : OpAmp or None
        The real amplifier, when given (``opamp`` section).
    plant : Plant or None
        The plant the stage closes a loop around (``plant`` section).
    feedback_gain : float
        Divider or sensor gain between the plant output and the stage, V/V.
    tolerances, spec : mapping or None
        The ``tolerances`` and ``spec`` sections, validated by their modules.
    """

    stage: Stage
    values: Mapping[str, float]
    given: Mapping[str, Any] = field(default_factory=dict)
    title: str = ""
    notes: str = ""
    opamp: Any = None
    plant: Any = None
    feedback_gain: float = 1.0
    tolerances: Mapping[str, Any] | None = None
    spec: Mapping[str, Any] | None = None
    stage_sign: int | None = None

    @property
    def loop_stage_sign(self) -> int:
        """The stage's sign in the loop, L = sign·P·k_fb·H.

        ``stage_sign`` when the file states it, else -1 for inverting and circuit
        stages and +1 for non-inverting ones.
        """
        from .analysis.loop import loop_sign

        return int(loop_sign(self.stage.kind, self.stage_sign))

    # -- construction ----------------------------------------------------
    @classmethod
    def from_dict(cls, d: Mapping[str, Any]) -> Design:
        """Build and validate a design from its dict (the parsed JSON file).

        Raises
        ------
        DesignFileError
            Any unknown or missing key, bad value, or undefined stage, with its key path.
        """
        if not isinstance(d, Mapping):
            raise DesignFileError(f"a design is a JSON object (got {type(d).__name__})")
        for k in d:
            if k not in _TOP_KEYS:
                raise DesignFileError(f"unknown key {k!r} (allowed: {', '.join(_TOP_KEYS)})", str(k))
        if "loopcraft" not in d:
            raise DesignFileError(f'missing format version (expected "loopcraft": {FORMAT_VERSION})', "loopcraft")
        version = d["loopcraft"]
        if not isinstance(version, int) or isinstance(version, bool) or version < 1:
            raise DesignFileError(f"format version must be a positive integer (got {shown(version)})", "loopcraft")
        if version > FORMAT_VERSION:
            raise DesignFileError(
                f"format version {shown(version)} is newer than this loopcraft reads ({FORMAT_VERSION}); "
                "upgrade loopcraft",
                "loopcraft",
            )
        for k in ("stage", "values"):
            if k not in d:
                raise DesignFileError(f"missing section {k!r}", k)
        for k in ("title", "notes"):
            if k in d:
                check_text(d[k], k)  # a string, and one that can be saved (no lone surrogate)
        stage = stage_from_dict(d["stage"], "stage")
        values, given = _parse_values(d["values"], stage)
        opamp = plant = None
        if "opamp" in d:
            from .model.opamp import OpAmp

            opamp = _wrap(lambda: OpAmp.from_dict(d["opamp"], "opamp"), "opamp")
        if "plant" in d:
            from .model.plant import plant_from_dict

            plant = _wrap(lambda: plant_from_dict(d["plant"], "plant"), "plant")
        fb = d.get("feedback_gain", 1.0)
        if not FEEDBACK_GAIN.contains(fb):
            raise DesignFileError(
                f"feedback_gain must be a number in {FEEDBACK_GAIN.text} (got {shown(fb)})", "feedback_gain"
            )
        ss = d.get("stage_sign")
        if ss is not None and (isinstance(ss, bool) or ss not in (-1, 1) or not isinstance(ss, int)):
            raise DesignFileError(
                f"stage_sign must be -1 (L = -P·k_fb·H) or 1 (L = P·k_fb·H) (got {ss!r})", "stage_sign"
            )
        tol = d.get("tolerances")
        spec = d.get("spec")
        if tol is not None:
            from .analysis.tolerance import validate_tolerances

            validate_tolerances(tol, stage.component_names, "tolerances")
        if spec is not None:
            from .model.spec_section import validate_spec

            validate_spec(spec, "spec")
        return cls(stage, values, given, d.get("title", ""), d.get("notes", ""), opamp, plant, float(fb), tol, spec, ss)

    def to_dict(self) -> dict[str, Any]:
        """The design as a JSON-ready dict; ``Design.from_dict(d.to_dict())`` round-trips."""
        out: dict[str, Any] = {"loopcraft": FORMAT_VERSION}
        if self.title:
            out["title"] = self.title
        out["stage"] = self.stage.to_dict()
        out["values"] = {n: self.given.get(n, self.values[n]) for n in self.stage.component_names}
        if self.opamp is not None:
            out["opamp"] = self.opamp.to_dict()
        if self.plant is not None:
            out["plant"] = self.plant.to_dict()
        if self.feedback_gain != 1.0:
            out["feedback_gain"] = self.feedback_gain
        if self.stage_sign is not None:
            out["stage_sign"] = self.stage_sign
        if self.tolerances is not None:
            out["tolerances"] = json.loads(json.dumps(self.tolerances))
        if self.spec is not None:
            out["spec"] = json.loads(json.dumps(self.spec))
        if self.notes:
            out["notes"] = self.notes
        return out

    def to_json(self) -> str:
        """The design file text (UTF-8 JSON, two-space indent, trailing newline)."""
        return json.dumps(self.to_dict(), indent=2, ensure_ascii=False) + "\n"

    def save(self, path: str | os.PathLike[str]) -> Path:
        """Write the design file atomically (see :func:`loopcraft._files.atomic_write`).

        Readers see the old file or the new one, never a mix. An overwritten file keeps its
        permission bits; a symbolic link at ``path`` is followed and the file it leads to is
        replaced (the link stays).

        Parameters
        ----------
        path : str or path-like
            The design file to write (JSON, UTF-8).

        Returns
        -------
        Path
            The path written.

        Raises
        ------
        FileWriteError
            The file cannot be written (the message names the path and the reason); the old
            file, if any, is left intact and no temporary file remains.
        """
        return atomic_write(path, self.to_json())

    def with_values(self, values: Mapping[str, Any] | None = None, /, **kw: Any) -> Design:
        """A new design with some values changed (text or numbers in SI base units).

        Raises
        ------
        ComponentValueError
            An unknown designator or a bad value.
        """
        changes = {**(values or {}), **kw}
        names = self.stage.component_names
        new_vals = dict(self.values)
        new_given = dict(self.given)
        for k, v in changes.items():
            if k not in names:
                raise ComponentValueError(f"no element named {k!r} in this stage (elements: {', '.join(names)})")
            new_vals[k] = parse_value(v, name=k, kind=element_kind(k))
            new_given[k] = v
        return replace(self, values=new_vals, given=new_given)

    def with_sections(self, **sections: Any) -> Design:
        """A new design with ``opamp``, ``plant``, ``feedback_gain``, ``title`` … replaced.

        Raises
        ------
        DesignFileError
            A ``title`` or ``notes`` that is not text, or holds a lone surrogate.
        """
        for k in ("title", "notes"):
            if k in sections:
                check_text(sections[k], k)
        return replace(self, **sections)

    def __eq__(self, other: object) -> bool:
        return isinstance(other, Design) and self.to_dict() == other.to_dict()

    __hash__ = None  # type: ignore[assignment]

    # -- analysis --------------------------------------------------------
    @property
    def derivation(self) -> Derivation:
        """The cached symbolic derivation of the topology."""
        return derive(self.stage)

    def compile(self) -> Evaluator:
        """The compiled fast evaluator of this topology (cached per topology)."""
        return compile_derivation(self.derivation)

    def transfer(self) -> TransferResult:
        """The ideal transfer function at the current values (zeros/poles in rad/s)."""
        return self.compile()(self.values)

    def factored(self) -> FactoredForm:
        """The normalized factored form with each corner's formula and value."""
        return FactoredForm(self.derivation, self.transfer())

    def analyze(self, f_hz=None):
        """Everything at the current values: ideal, asymptotic, actual and loop curves.

        Parameters
        ----------
        f_hz : array of float, optional
            Frequency grid in Hz (500 log-spaced points around the corners by default).

        Returns
        -------
        Analysis
            See :class:`loopcraft.analysis.Analysis`.
        """
        from .analysis.analyzer import Analyzer

        return Analyzer(self, f_hz).update()

    def asymptote_error(self, f_hz=None):
        """Worst error of the straight-line Bode against the exact curve (dB, degrees, where)."""
        from .numeric.asymptote import asymptote_error

        a = self.analyze(f_hz)
        return asymptote_error(a.factored, a.f_hz)

    def actual(self):
        """The stage with its real op-amp (:class:`loopcraft.analysis.amplifier.ActualStage`).

        Raises
        ------
        AnalysisError
            No op-amp, or an ideal one, is given.
        """
        from .analysis.amplifier import actual_stage
        from .errors import AnalysisError

        if self.opamp is None or self.opamp.is_ideal:
            raise AnalysisError("this design has no real op-amp (add an 'opamp' section with a finite model)")
        return actual_stage(self.stage, self.transfer(), self.opamp)

    def amplifier_loop(self):
        """The op-amp's own loop: crossover, phase margin, rate of closure, departure frequency."""
        return self.actual().amplifier_loop

    def large_signal_warnings(self, input_amplitude_v: float, f_hz: float) -> tuple[str, ...]:
        """Output-swing and slew-rate warnings for a sine at the stage input.

        The output amplitude is |H(j·2π·f)|·input, with the real op-amp's
        response when it is finite (ideal otherwise).

        Parameters
        ----------
        input_amplitude_v : float
            Peak amplitude of the input sine, V.
        f_hz : float
            Its frequency, Hz.

        Returns
        -------
        tuple of str
            One message per limit exceeded (empty without an op-amp or without limits).
        """
        from .errors import AnalysisError

        if not (math.isfinite(input_amplitude_v) and input_amplitude_v >= 0):
            raise AnalysisError(f"input_amplitude_v must be a finite peak amplitude >= 0 V (got {input_amplitude_v!r})")
        if self.opamp is None:
            return ()
        f = max(float(f_hz), 1e-12)
        h = self.actual().response([f])[0] if not self.opamp.is_ideal else self.transfer().response([f])[0]
        return self.opamp.large_signal_warnings(abs(h) * input_amplitude_v, float(f_hz))

    def loop(self):
        """The loop around the plant (:class:`loopcraft.analysis.loop.PlantLoop`), with the real op-amp when given.

        Raises
        ------
        AnalysisError
            The design has no plant.
        """
        from .errors import AnalysisError

        if self.plant is None:
            raise AnalysisError("this design has no plant (add a 'plant' section)")
        return self.analyze().loop

    def record(self, notes: str = "", **kw: Any):
        """The design record: renders inline in a notebook, exports to HTML or Markdown.

        Parameters
        ----------
        notes : str
            The decision in words, shown in the record.
        **kw
            Passed to :func:`loopcraft.report.record.record` (``series``, ``spread``, ``seed``, ``samples``).
        """
        from .report.record import record

        return record(self, notes, **kw)

    def snap(self, series: str = "E24", **kw: Any):
        """Snap R and C to an IEC 60063 series; see :func:`loopcraft.parts.snapping.snap_design`."""
        from .parts.snapping import snap_design

        return snap_design(self, series, **kw)

    def spread(self, samples: int = 10000, *, seed: int = 1, **kw: Any):
        """Monte Carlo spread over the ``tolerances`` section; see :func:`loopcraft.analysis.tolerance.monte_carlo`."""
        from .analysis.tolerance import monte_carlo

        return monte_carlo(self, samples, seed=seed, **kw)

    def worst_case(self, **kw: Any):
        """Worst-case corner search over the tolerances; see :func:`loopcraft.analysis.tolerance.worst_case`."""
        from .analysis.tolerance import worst_case

        return worst_case(self, **kw)

    def check(self, *, spread: bool = True, seed: int = 1):
        """Check the design against its ``spec`` section; see :func:`loopcraft.checks.spec.check`."""
        from .checks.spec import check

        return check(self, spread=spread, seed=seed)

    def sensitivity(self):
        """Normalized sensitivities ∂ln(corner)/∂ln(component); see :mod:`loopcraft.analysis.sensitivity`."""
        from .analysis.sensitivity import sensitivity

        return sensitivity(self)


def _wrap(build, key_path: str):
    try:
        return build()
    except DesignFileError:
        raise
    except LoopcraftError as err:
        raise DesignFileError(str(err), key_path) from err


def load(path: str | os.PathLike[str]) -> Design:
    """Read and validate a design file.

    Parameters
    ----------
    path : str or path-like
        A JSON design file.

    Raises
    ------
    DesignFileError
        The file is missing, is not JSON (line and column given), or breaks the format.
    """
    if not isinstance(path, str | os.PathLike):
        raise DesignFileError(f"a design file is named by a path (got {type(path).__name__} {shown(path)})")
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except OSError as err:
        raise DesignFileError(f"cannot read {str(p)!r}: {err.strerror}") from err
    except UnicodeDecodeError as err:
        raise DesignFileError(f"{str(p)!r} is not UTF-8 text") from err
    except ValueError as err:  # a NUL character in the path
        raise DesignFileError(f"cannot read {str(p)!r}: {err}") from err
    return loads(text, p.name)


#: Deepest nesting of JSON arrays and objects in a design file (a real one nests 4 deep).
MAX_JSON_DEPTH = 32
#: Longest number in a design file, in characters (a real one is a few dozen at most).
MAX_JSON_NUMBER = 1000

# JSON tokens that matter for the limits: strings (skipped whole), brackets, numbers.
_JSON_TOKEN = re.compile(r'"[^"\\]*(?:\\.[^"\\]*)*"?|[\[\]{}]|-?[0-9][0-9.eE+-]*')


def _json_limits(text: str, name: str) -> None:
    """Refuse text that nests deeper than MAX_JSON_DEPTH or holds a number longer than MAX_JSON_NUMBER."""
    depth = 0
    for m in _JSON_TOKEN.finditer(text):
        tok = m.group()
        ch = tok[0]
        if ch in "[{":
            depth += 1
            if depth > MAX_JSON_DEPTH:
                _json_refuse(text, name, m.start(), f"arrays and objects nested deeper than {MAX_JSON_DEPTH} levels "
                             "(the limit; a design file nests 4 deep)")
        elif ch in "]}":
            depth -= 1
        elif ch != '"' and len(tok) > MAX_JSON_NUMBER:
            _json_refuse(text, name, m.start(), f"a number of {len(tok)} characters (the limit is {MAX_JSON_NUMBER})")


def _json_refuse(text: str, name: str, pos: int, why: str) -> None:
    line = text.count("\n", 0, pos) + 1
    start = text.rfind("\n", 0, pos) + 1
    col = pos - start + 1
    end = text.find("\n", pos)
    end = len(text) if end < 0 else end
    lo, hi = max(start, pos - 30), min(end, pos + 30)
    snippet = ("…" if lo > start else "") + text[lo:hi] + ("…" if hi < end else "")
    caret = " " * (pos - lo + (1 if lo > start else 0)) + "^"
    raise DesignFileError(f"{name}: {why} at line {line}, column {col}:\n  {snippet}\n  {caret}")


def loads(text: str, name: str = "<text>") -> Design:
    """Parse and validate design-file text (JSON).

    Parameters
    ----------
    text : str
        The file's content.
    name : str
        Where it came from, for error messages.

    Raises
    ------
    DesignFileError
        Not JSON (line and column given), a key given twice, arrays and
        objects nested deeper than :data:`MAX_JSON_DEPTH`, a number longer than
        :data:`MAX_JSON_NUMBER` characters (both with a caret under the
        offending character), or a design that breaks the format.
    """
    if isinstance(text, bytes | bytearray):
        try:
            text = bytes(text).decode("utf-8")
        except UnicodeDecodeError as err:
            raise DesignFileError(f"{name}: not UTF-8 text ({err.reason} at byte {err.start})") from err
    if not isinstance(text, str):
        raise DesignFileError(f"{name}: design-file text must be a string (got {type(text).__name__})")
    _json_limits(text, name)
    try:
        data = json.loads(text, object_pairs_hook=_no_duplicates)
    except json.JSONDecodeError as err:
        raise DesignFileError(f"{name}: not valid JSON: {err.msg} at line {err.lineno}, column {err.colno}") from err
    except DesignFileError:
        raise  # a key given twice, from the object hook
    except (ValueError, RecursionError) as err:  # e.g. an integer beyond sys.get_int_max_str_digits()
        raise DesignFileError(f"{name}: cannot read the JSON: {err}") from err
    return Design.from_dict(data)
