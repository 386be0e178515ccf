"""Design specifications: the ``spec`` section of a design file, and the check against it.

The section, every key optional::

    "spec": {
      "phase_margin_min_deg": 45,          # worst phase margin over all crossovers, degrees
      "gain_margin_min_db": 6,             # worst gain margin over all phase crossovers, dB
      "crossover_hz": [20e3, 40e3],        # the highest loop crossover, Hz
      "corners": {"ωz1": [4e3, 6e3],       # corners of the factored form, Hz
                  "Qp1": [0.5, 0.9]},      # Q of a second-order factor (plain number)
      "dc_gain_db": [80, 120],             # |H(0)| of the stage as built, dB
      "yield_min": 0.99,                   # Monte Carlo yield over the tolerances
      "samples": 2000                      # samples for the yield (default 2000)
    }

Definitions (the same at nominal values and per Monte Carlo sample):

* **stable** — an implicit item of every design with a plant, listed first:
  the closed loop must be stable (closed-loop poles counted, cross-checked by
  the Nyquist criterion: :mod:`loopcraft.analysis.stability`). When it is not, every
  margin item fails too, whatever its value: a margin of an unstable loop is
  not a margin;
* **phase margin** — the minimum of ``180° + ∠L`` over *every* gain crossover
  ``|L| = 1`` in the analysed band (``L`` as in :mod:`loopcraft.analysis.loop`, ∠L its
  continuous phase, never wrapped);
* **gain margin** — the smaller of the gain-increase and the gain-reduction
  margin: how far the loop gain may rise (or, for a conditionally stable loop,
  fall) before the closed loop goes unstable, found exactly from the closed-loop
  poles at the gains of every phase crossover ``∠L = -180° (mod 360°)``; when no
  rise or fall makes it unstable the margin is unbounded and the item passes,
  saying so. Per Monte Carlo sample it is the smallest ``|20·log10|L||`` over
  the phase crossovers (never larger than the exact value);
* **crossover** — the *highest* gain crossover (where the loop finally runs
  out of gain: its bandwidth);
* **corners** — labels as in :class:`loopcraft.numeric.factored.FactoredForm`:
  ``ωz1``, ``ωp2`` for real roots, ``ω0p1`` and ``Qp1`` for a second-order
  factor. A label belongs to a corner's formula, fixed once per topology
  (:func:`loopcraft.numeric.evaluator.corner_labels`), not to its rank in
  frequency: ``ωz1`` of a Type III is ``1/(C1·R2)`` whatever the values, at
  nominal values and in every Monte Carlo sample (``loopcraft analyze``
  lists each label with its formula). ASCII spellings ``wz1``, ``w0p1`` are
  accepted. ω ranges are in **Hz** (f = ω/2π), Q ranges are plain numbers;
* **DC gain** — ``20·log10|H(0)|`` of the stage *as built*: with the real
  op-amp when the design has one (finite even for an integrator), else the
  ideal stage (infinite for an integrator, which then fails any finite range);
* **yield** — the fraction of Monte Carlo samples (the design's
  ``tolerances``, :func:`loopcraft.analysis.tolerance.monte_carlo`, seeded) that meet
  every other item.

An item that cannot be evaluated (a margin without a plant, a corner label the
design does not have, a yield without tolerances) fails, and its message says
why; nothing passes silently.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping
from dataclasses import dataclass, field
from numbers import Real
from typing import Any

import numpy as np

from .._numbers import real_float, shown
from ..errors import AnalysisError, ComponentValueError, DesignFileError
from .values import parse_value

__all__ = [
    "Spec",
    "parse_spec",
    "validate_spec",
    "canonical_label",
    "sample_pass",
    "DEFAULT_SAMPLES",
    "MAX_SAMPLES",
]

#: Monte Carlo samples for the yield when ``samples`` is not given.
DEFAULT_SAMPLES = 2000

#: Upper limit of ``samples`` (memory: samples × frequencies doubles are held).
MAX_SAMPLES = 1_000_000

_KEYS = ("phase_margin_min_deg", "gain_margin_min_db", "crossover_hz", "corners", "dc_gain_db",
         "yield_min", "samples")

_LABEL_RE = re.compile(r"(?P<kind>ω0|w0|ω|w|Q)(?P<role>[zp])(?P<n>[1-9][0-9]*)")


# --------------------------------------------------------------------------- parsing


@dataclass(frozen=True)
class Spec:
    """A parsed, validated ``spec`` section.

    Parameters
    ----------
    phase_margin_min_deg : float or None
        Minimum phase margin, degrees.
    gain_margin_min_db : float or None
        Minimum gain margin, dB.
    crossover_hz : (float, float) or None
        Allowed range of the highest loop crossover, Hz.
    corners : mapping of str to (float, float)
        Canonical corner label (``"ωz1"``, ``"ω0p1"``, ``"Qp1"``) to its allowed
        range: Hz for ω labels, plain numbers for Q labels.
    dc_gain_db : (float, float) or None
        Allowed range of the stage's DC gain, dB.
    yield_min : float or None
        Minimum Monte Carlo yield, a fraction in (0, 1].
    samples : int
        Monte Carlo samples for the yield.
    """

    phase_margin_min_deg: float | None = None
    gain_margin_min_db: float | None = None
    crossover_hz: tuple[float, float] | None = None
    corners: Mapping[str, tuple[float, float]] = field(default_factory=dict)
    dc_gain_db: tuple[float, float] | None = None
    yield_min: float | None = None
    samples: int = DEFAULT_SAMPLES

    @property
    def is_empty(self) -> bool:
        """True when the spec has no item at all."""
        return not self.item_names and self.yield_min is None

    @property
    def item_names(self) -> tuple[str, ...]:
        """Names of the per-design items (the yield excluded), in report order."""
        out: list[str] = []
        if self.phase_margin_min_deg is not None:
            out.append("phase_margin_min_deg")
        if self.gain_margin_min_db is not None:
            out.append("gain_margin_min_db")
        if self.crossover_hz is not None:
            out.append("crossover_hz")
        out += [f"corners.{k}" for k in self.corners]
        if self.dc_gain_db is not None:
            out.append("dc_gain_db")
        return tuple(out)


def canonical_label(label: str) -> str | None:
    """The canonical corner label (``"wz1"`` → ``"ωz1"``, ``"w0p1"`` → ``"ω0p1"``), or None if malformed."""
    if not isinstance(label, str):
        return None
    m = _LABEL_RE.fullmatch(label)
    if m is None:
        return None
    kind = {"w": "ω", "w0": "ω0"}.get(m["kind"], m["kind"])
    return f"{kind}{m['role']}{m['n']}"


def _number(value: Any, key_path: str, what: str) -> float:
    if isinstance(value, bool) or not isinstance(value, Real):
        raise DesignFileError(f"{what} must be a number (got {shown(value)})", key_path)
    x = real_float(value)
    if not math.isfinite(x):
        raise DesignFileError(f"{what} must be finite (got {shown(value)})", key_path)
    return x


def _frequency(value: Any, key_path: str) -> float:
    """A frequency in Hz: a number, or engineering text such as ``"20k"`` or ``"20 kHz"``."""
    if isinstance(value, str):
        text = re.sub(r"\s*Hz\s*$", "", value)
        try:
            return parse_value(text, name=key_path)
        except ComponentValueError as err:
            raise DesignFileError(f"expected a frequency in Hz such as 20e3 or '20k' (got {shown(value)})",
                                  key_path) from err
    x = _number(value, key_path, "a frequency (Hz)")
    if x <= 0:
        raise DesignFileError(f"a frequency must be > 0 Hz (got {shown(value)})", key_path)
    return x


def _range(value: Any, key_path: str, *, kind: str) -> tuple[float, float]:
    """``[min, max]``; kind "hz" (positive frequencies), "positive" or "real"."""
    if not isinstance(value, list | tuple) or len(value) != 2:
        raise DesignFileError(f"expected a range [min, max] of two numbers (got {shown(value)})", key_path)
    if kind == "hz":
        lo, hi = (_frequency(v, f"{key_path}[{i}]") for i, v in enumerate(value))
    else:
        lo, hi = (_number(v, f"{key_path}[{i}]", "a range bound") for i, v in enumerate(value))
        if kind == "positive":
            for i, x in enumerate((lo, hi)):
                if x <= 0:
                    raise DesignFileError(f"a Q bound must be > 0 (got {shown(value[i])})", f"{key_path}[{i}]")
    if lo > hi:
        raise DesignFileError(f"range minimum {shown(value[0])} is above its maximum {shown(value[1])} "
                              "(expected [min, max] with min <= max)", key_path)
    return (lo, hi)


def parse_spec(spec: Any, key_path: str = "spec") -> Spec:
    """Parse and validate a ``spec`` section.

    Parameters
    ----------
    spec : mapping
        The section as read from the design file (see the module docstring).
    key_path : str
        Where the section sits, for error messages (``"spec"``).

    Returns
    -------
    Spec

    Raises
    ------
    DesignFileError
        Unknown keys, non-numbers, ranges with min > max, frequencies <= 0,
        malformed or repeated corner labels, a yield outside (0, 1], a sample
        count that is not an integer in 1 … 1 000 000, ``samples`` without
        ``yield_min``, or ``yield_min`` with nothing else to check; the key
        path names the offending key (``"spec.corners.ωz1"``).
    """
    if isinstance(spec, Spec):
        return spec
    if not isinstance(spec, Mapping):
        raise DesignFileError(f"expected an object of spec items (got {type(spec).__name__} {shown(spec)})", key_path)
    for k in spec:
        if k not in _KEYS:
            raise DesignFileError(f"unknown key {shown(k)} (allowed: {', '.join(_KEYS)})", f"{key_path}.{k}")
    kw: dict[str, Any] = {}
    for k in ("phase_margin_min_deg", "gain_margin_min_db"):
        if k in spec:
            kw[k] = _number(spec[k], f"{key_path}.{k}", k)
    if "crossover_hz" in spec:
        kw["crossover_hz"] = _range(spec["crossover_hz"], f"{key_path}.crossover_hz", kind="hz")
    if "dc_gain_db" in spec:
        kw["dc_gain_db"] = _range(spec["dc_gain_db"], f"{key_path}.dc_gain_db", kind="real")
    if "corners" in spec:
        raw = spec["corners"]
        where = f"{key_path}.corners"
        if not isinstance(raw, Mapping):
            raise DesignFileError(f"expected an object of corner label: [min, max] (got {shown(raw)})", where)
        corners: dict[str, tuple[float, float]] = {}
        first_key: dict[str, str] = {}
        for label, rng in raw.items():
            canon = canonical_label(label)
            if canon is None:
                raise DesignFileError(
                    f"corner label {shown(label)} is not of the factored form's kind (expected e.g. 'ωz1', 'ωp2', "
                    "'ω0p1', 'Qp1' or the ASCII 'wz1', 'w0p1')", f"{where}.{label}")
            if canon in corners:
                raise DesignFileError(
                    f"corner {canon} is given twice (as {shown(first_key[canon])} and {shown(label)})",
                    f"{where}.{label}")
            corners[canon] = _range(rng, f"{where}.{label}", kind="positive" if canon[0] == "Q" else "hz")
            first_key[canon] = label
        kw["corners"] = corners
    if "yield_min" in spec:
        y = _number(spec["yield_min"], f"{key_path}.yield_min", "yield_min")
        if not 0.0 < y <= 1.0:
            raise DesignFileError(f"yield_min must be a fraction in (0, 1] (got {shown(spec['yield_min'])}; "
                                  "write 0.99 for 99 %)", f"{key_path}.yield_min")
        kw["yield_min"] = y
    if "samples" in spec:
        n = spec["samples"]
        if isinstance(n, bool) or not isinstance(n, int) or not 1 <= n <= MAX_SAMPLES:
            raise DesignFileError(f"samples must be an integer in 1 … {MAX_SAMPLES} (got {shown(n)})",
                                  f"{key_path}.samples")
        if "yield_min" not in spec:
            raise DesignFileError("samples only applies to the yield check; add yield_min or remove samples",
                                  f"{key_path}.samples")
        kw["samples"] = n
    out = Spec(**kw)
    if out.yield_min is not None and not out.item_names:
        raise DesignFileError("yield_min needs at least one other spec item to count samples against",
                              f"{key_path}.yield_min")
    return out


def validate_spec(spec: Any, key_path: str = "spec") -> None:
    """Validate a ``spec`` section; see :func:`parse_spec` for the errors raised."""
    parse_spec(spec, key_path)


# --------------------------------------------------------------------------- per-sample evaluation


def sample_pass(spec: Spec, quantities: Mapping[str, Any], n: int) -> dict[str, np.ndarray]:
    """Which samples meet each spec item (the yield item excluded).

    Parameters
    ----------
    spec : Spec
    quantities : mapping
        Per-sample arrays of length ``n``: ``"phase_margin_deg"``,
        ``"gain_margin_db"`` (+inf where the phase never reaches -180°),
        ``"crossover_hz"`` (NaN where no crossover; these three are None without
        a plant), ``"dc_gain_db"``, and ``"corners"``: a mapping of canonical
        label to Hz (ω labels) or Q; optionally ``"stable"``: per-sample bool,
        True where the closed loop is stable (None or absent without a plant).
    n : int
        Number of samples.

    Returns
    -------
    dict of str to ndarray of bool
        Item name (as in :attr:`Spec.item_names`) to a per-sample pass mask. An
        item that cannot be evaluated (no plant, unknown corner) fails for every sample.
        When ``"stable"`` is given, an implicit item ``"stable"`` comes first: an
        unstable sample fails it, and so fails the spec whatever its margins; it
        fails the margin items too (a margin of an unstable loop is not a margin).
    """
    none = np.zeros(n, dtype=bool)
    out: dict[str, np.ndarray] = {}
    stable = quantities.get("stable")
    if stable is not None:
        stable = np.asarray(stable)
        if stable.dtype != bool or stable.shape != (n,):
            raise AnalysisError(f"quantities['stable'] must be a bool array of shape ({n},) "
                                f"(got dtype {stable.dtype}, shape {stable.shape!r})")
        out["stable"] = stable.copy()
    pm, gm, fc = (quantities.get(k) for k in ("phase_margin_deg", "gain_margin_db", "crossover_hz"))
    ok = np.ones(n, dtype=bool) if stable is None else stable
    with np.errstate(invalid="ignore"):
        if spec.phase_margin_min_deg is not None:
            out["phase_margin_min_deg"] = none if pm is None else (np.asarray(pm) >= spec.phase_margin_min_deg) & ok
        if spec.gain_margin_min_db is not None:
            out["gain_margin_min_db"] = none if gm is None else (np.asarray(gm) >= spec.gain_margin_min_db) & ok
        if spec.crossover_hz is not None:
            lo, hi = spec.crossover_hz
            out["crossover_hz"] = none if fc is None else (np.asarray(fc) >= lo) & (np.asarray(fc) <= hi)
        corners = quantities.get("corners", {})
        for label, (lo, hi) in spec.corners.items():
            v = corners.get(label)
            out[f"corners.{label}"] = none if v is None else (np.asarray(v) >= lo) & (np.asarray(v) <= hi)
        if spec.dc_gain_db is not None:
            lo, hi = spec.dc_gain_db
            v = np.asarray(quantities["dc_gain_db"])
            out["dc_gain_db"] = (v >= lo) & (v <= hi)
    return out


