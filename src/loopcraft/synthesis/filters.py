"""Active-filter synthesis: normalized responses and second-order op-amp sections.

Three layers, each a pure function:

* :func:`normalized_sections` splits an all-pole low-pass prototype
  (Butterworth, Bessel or Chebyshev type I, order 1 to 10) into first- and
  second-order sections, each given by its natural frequency (normalized, the
  prototype edge being 1 rad/s) and its quality factor Q.
* :func:`synthesize_section` turns one section target (f0 in Hz, Q, gain) into
  component values for an op-amp topology, as a loopcraft ``circuit`` stage.
* :func:`synthesize_filter` cascades sections into a whole filter, and
  :func:`cascade_stage` merges the cascade into one ``circuit`` stage.

Topologies (ideal op-amps; node ``gnd`` is ground, ``in`` the input and ``out``
the output; ω0 = 2π·f0 in rad/s):

``sallen_key_lowpass`` (unity gain)
    R1 in→n1, R2 n1→n2, C1 n1→out (feedback), C2 n2→gnd, follower from n2.
    H = 1 / (1 + s·C2·(R1 + R2) + s²·R1·R2·C1·C2); real resistors need
    C1/C2 ≥ 4Q².
``sallen_key_highpass`` (unity gain)
    C1 in→n1, C2 n1→n2, R1 n1→out (feedback), R2 n2→gnd, follower from n2.
    H = s²R1R2C1C2 / (1 + s·R1·(C1 + C2) + s²·R1·R2·C1·C2).
``mfb_lowpass`` (inverting, H(0) = -R2/R1)
    R1 in→n1, R2 n1→out, R3 n1→n2, C1 n1→gnd, C2 n2→out, inverting input n2.
    H = -(R2/R1) / (1 + s·C2·(R2 + R3 + R2·R3/R1) + s²·R2·R3·C1·C2); real
    resistors need C1/C2 ≥ 4Q²·(1 + |H0|).
``mfb_bandpass`` (inverting, centre gain -R2·C1/(R1·(C1 + C2)))
    R1 in→n1, R3 n1→gnd, C1 n1→n2, C2 n1→out, R2 n2→out, inverting input n2.
    H = -(s·C1·R2/R1) / (s²·C1·C2·R2 + s·(C1 + C2) + 1/R1 + 1/R3); with equal
    capacitors R3 > 0 needs |H0| ≤ 2Q² (R3 is left out at equality).
``mfb_highpass`` (inverting, H(∞) = -C1/C3)
    C1 in→n1, C3 n1→out, C2 n1→n2, R1 n1→gnd, R2 n2→out, inverting input n2.
    H = -s²·C1·C2·R2 / (s²·C2·C3·R2 + s·(C1 + C2 + C3) + 1/R1).
``rc_lowpass`` / ``rc_highpass`` (first order, unity gain)
    R1 in→n1 with C1 n1→gnd (or C1 in→n1 with R1 n1→gnd), buffered by a
    follower so that the next section does not load it.

Capacitors are chosen first (optionally rounded to an E-series with
:func:`loopcraft.parts.eseries.nearest`); resistors are then solved exactly, so the
achieved f0 and Q are exact unless capacitor rounding moves a quantity that
only the capacitors set (the high-frequency gain C1/C3 of ``mfb_highpass``).
The achieved targets reported in :class:`FilterStage` are always computed
from the final values by the closed forms above.
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import signal

from ..errors import SynthesisError, TopologyError
from ..parts.eseries import nearest
from .sections import _REL_TOL, _CapPlan, _check_ratio, _fmt, _spread
from .sections import SECTION_TOPOLOGIES as _TOPOLOGY

__all__ = [
    "RESPONSES",
    "TOPOLOGIES",
    "MAX_ORDER",
    "DEFAULT_MAX_C_RATIO",
    "Section",
    "FilterStage",
    "normalized_sections",
    "synthesize_section",
    "synthesize_filter",
    "cascade_stage",
]

#: Response families understood by :func:`normalized_sections`.
RESPONSES: tuple[str, ...] = ("butterworth", "bessel", "chebyshev")

#: Section topologies understood by :func:`synthesize_section`.
TOPOLOGIES: tuple[str, ...] = (
    "sallen_key_lowpass",
    "sallen_key_highpass",
    "mfb_lowpass",
    "mfb_bandpass",
    "mfb_highpass",
    "rc_lowpass",
    "rc_highpass",
)

#: Highest filter order handled.
MAX_ORDER = 10

#: Default largest capacitor ratio (largest / smallest) allowed within one section.
DEFAULT_MAX_C_RATIO = 100.0

#: Capacitor used to find the resistor spread before the capacitors are scaled (F).
_TRIAL_C_F = 1e-9

_FILTER_TOPOLOGIES = ("sallen_key", "mfb")
_FILTER_KINDS = ("lowpass", "highpass")


# --- results -------------------------------------------------------------------------------


@dataclass(frozen=True)
class Section:
    """One section of a normalized low-pass prototype.

    Parameters
    ----------
    f0_norm : float
        Natural frequency of a second-order section, or corner of a first-order
        section, normalized to the prototype edge at 1 rad/s (dimensionless: the
        multiplier of the filter's cutoff).  The edge is the -3 dB frequency for
        Butterworth and Bessel and the end of the ripple band for Chebyshev.
    q : float or None
        Quality factor of a second-order section; None for a first-order section.
    """

    f0_norm: float
    q: float | None


@dataclass(frozen=True)
class FilterStage:
    """A synthesized filter section.

    Parameters
    ----------
    topology : str
        One of :data:`TOPOLOGIES`.
    stage : dict
        A design-file ``stage`` section of kind ``"circuit"``: ``{"kind":
        "circuit", "elements": [[name, node_a, node_b], ...], "opamps": [{"plus":
        ..., "minus": ..., "out": ...}], "input": "in", "output": "out"}``.
    values : dict of str to float
        Component values in SI base units (Ω, F), keyed by designator.
    f0_hz : float
        Achieved natural (centre, corner) frequency, Hz, computed from ``values``.
    q : float or None
        Achieved quality factor (None for a first-order section).
    gain : float
        Achieved gain magnitude (dimensionless): at DC for low-pass sections, at
        the centre frequency for band-pass, at high frequency for high-pass.  The
        ``mfb_*`` sections invert (see :attr:`inverting`).
    """

    topology: str
    stage: dict
    values: dict[str, float]
    f0_hz: float
    q: float | None
    gain: float

    @property
    def inverting(self) -> bool:
        """True when the section's pass-band gain is negative (the ``mfb_*`` topologies)."""
        return self.topology.startswith("mfb_")


# --- validation helpers --------------------------------------------------------------------


def _positive(name: str, value: object, expected: str = "a positive finite number") -> float:
    """Return ``value`` as a float, or raise :class:`SynthesisError` if not positive and finite."""
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise SynthesisError(f"{name}={value!r} is not a number; expected {expected}")
    x = float(value)
    if not math.isfinite(x) or x <= 0.0:
        raise SynthesisError(f"{name}={value!r}; expected {expected}")
    return x


def _check_order(order: object) -> int:
    if isinstance(order, bool) or not isinstance(order, numbers.Integral):
        raise SynthesisError(f"order={order!r} is not an integer; expected 1 .. {MAX_ORDER}")
    n = int(order)
    if not 1 <= n <= MAX_ORDER:
        raise SynthesisError(f"order={order!r} is out of range; expected 1 .. {MAX_ORDER}")
    return n


def _check_choice(name: str, value: object, choices: tuple[str, ...]) -> str:
    if not isinstance(value, str) or value not in choices:
        raise SynthesisError(f"{name}={value!r} is unknown; expected one of {', '.join(choices)}")
    return value


def _check_r_range(r_range_ohm: object) -> tuple[float, float]:
    if (
        not isinstance(r_range_ohm, Sequence)
        or isinstance(r_range_ohm, str)
        or len(r_range_ohm) != 2
    ):
        raise SynthesisError(f"r_range_ohm={r_range_ohm!r}; expected a pair (min_ohm, max_ohm)")
    lo = _positive("r_range_ohm[0]", r_range_ohm[0], "a positive resistance in Ω")
    hi = _positive("r_range_ohm[1]", r_range_ohm[1], "a positive resistance in Ω")
    if hi <= lo:
        raise SynthesisError(f"r_range_ohm={r_range_ohm!r}; expected min_ohm < max_ohm")
    return lo, hi


def _check_c_ratio(max_c_ratio: object) -> float:
    x = _positive("max_c_ratio", max_c_ratio, "a capacitor ratio >= 1")
    if x < 1.0:
        raise SynthesisError(f"max_c_ratio={max_c_ratio!r}; expected a capacitor ratio >= 1")
    return x


# --- normalized prototypes -----------------------------------------------------------------


def normalized_sections(
    response: str, order: int, *, ripple_db: float | None = None
) -> tuple[Section, ...]:
    """Split a normalized all-pole low-pass prototype into sections.

    The prototype poles come from :func:`scipy.signal.buttap`,
    :func:`scipy.signal.besselap` (``norm="mag"``: -3 dB at 1 rad/s) or
    :func:`scipy.signal.cheb1ap` (ripple band ending at 1 rad/s).  Each
    complex-conjugate pair ``p, p*`` gives a second-order section with
    ``f0_norm = |p|`` and ``Q = |p| / (-2·Re p)``; a real pole ``p`` gives a
    first-order section with ``f0_norm = -p``.

    Parameters
    ----------
    response : {"butterworth", "bessel", "chebyshev"}
        Response family.
    order : int
        Filter order, 1 to :data:`MAX_ORDER`.
    ripple_db : float, optional
        Pass-band ripple in dB (> 0); required for ``"chebyshev"`` and not
        accepted for the other responses.

    Returns
    -------
    tuple of Section
        The first-order section (odd orders) first, then the second-order
        sections by increasing Q.

    Raises
    ------
    SynthesisError
        Unknown response, order out of range, ripple missing (Chebyshev),
        ripple not positive, or ripple given for a response without ripple.
    """
    _check_choice("response", response, RESPONSES)
    n = _check_order(order)
    if response == "chebyshev":
        if ripple_db is None:
            raise SynthesisError(
                "ripple_db=None: a chebyshev response needs its pass-band ripple; "
                "expected a positive number of dB such as 0.5 or 1.0"
            )
        rp = _positive("ripple_db", ripple_db, "a positive pass-band ripple in dB")
        _, poles, _ = signal.cheb1ap(n, rp)
    else:
        if ripple_db is not None:
            raise SynthesisError(
                f"ripple_db={ripple_db!r} given for response {response!r}; "
                "expected None (only chebyshev has a ripple)"
            )
        if response == "butterworth":
            _, poles, _ = signal.buttap(n)
        else:
            _, poles, _ = signal.besselap(n, norm="mag")
    return _sections_from_poles(np.asarray(poles, dtype=complex), n, response)


def _sections_from_poles(poles: np.ndarray, order: int, response: str) -> tuple[Section, ...]:
    firsts: list[Section] = []
    seconds: list[Section] = []
    for p in poles:
        mag = abs(p)
        if p.real >= 0.0:  # not reachable for these prototypes; never pass on an unstable one
            raise SynthesisError(
                f"{response} prototype of order {order} has a pole at {complex(p)!r}; "
                "expected left-half-plane poles"
            )
        if abs(p.imag) <= _REL_TOL * mag:
            firsts.append(Section(f0_norm=float(-p.real), q=None))
        elif p.imag > 0.0:
            seconds.append(Section(f0_norm=float(mag), q=float(mag / (-2.0 * p.real))))
    if len(firsts) + 2 * len(seconds) != order or len(firsts) != order % 2:
        raise SynthesisError(  # not reachable: the prototypes have conjugate pairs
            f"{response} prototype of order {order} does not split into sections "
            f"(poles {poles.tolist()!r})"
        )
    seconds.sort(key=lambda s: (s.q, s.f0_norm))
    return tuple(firsts) + tuple(seconds)


# --- capacitor choice ----------------------------------------------------------------------


def _snap_at_least(x_min: float, series: str) -> float:
    """Smallest value returned by ``nearest`` that is not below ``x_min``."""
    x = x_min
    for _ in range(400):
        v = nearest(x, series)
        if v >= x_min * (1.0 - 1e-12):
            return v
        x *= 1.01
    raise SynthesisError(  # not reachable for a series with steps below 1.01**400
        f"no {series} value found at or above {x_min!r} F"
    )


def _capacitors(
    plan: _CapPlan, base_f: float, base_given: bool, series: str | None
) -> dict[str, float]:
    if series is None:
        return {name: r * base_f for name, r in plan.ratios.items()}
    base = base_f if base_given else nearest(base_f, series)
    caps: dict[str, float] = {}
    for name, r in plan.ratios.items():
        if r == 1.0:
            caps[name] = base
        elif name in plan.minimum:
            target = nearest(r * base, series)
            floor = plan.minimum[name] * base
            caps[name] = (
                target if target >= floor * (1.0 - 1e-12) else _snap_at_least(floor, series)
            )
        else:
            caps[name] = nearest(r * base, series)
    return caps


# --- synthesis -----------------------------------------------------------------------------


def synthesize_section(
    topology: str,
    f0_hz: float,
    q: float | None,
    gain: float = 1.0,
    *,
    c_value_f: float | None = None,
    capacitor_series: str | None = None,
    r_range_ohm: tuple[float, float] = (1e3, 1e6),
    max_c_ratio: float = DEFAULT_MAX_C_RATIO,
) -> FilterStage:
    """Choose component values for one filter section.

    Capacitor ratios follow from the target (for example C1/C2 = max(4Q², 1)
    for the unity-gain Sallen-Key low-pass, giving R1 = R2 for Q >= 0.5); the capacitor
    scale is ``c_value_f`` or, when None, the one that centres the resistors
    geometrically in ``r_range_ohm``.  Capacitors are then rounded to
    ``capacitor_series`` (a ratio that has a minimum is rounded up) and the
    resistors solved exactly from the rounded capacitors.

    Parameters
    ----------
    topology : str
        One of :data:`TOPOLOGIES`.
    f0_hz : float
        Target natural frequency (second order), centre frequency (band-pass) or
        corner frequency (first order), Hz, > 0.
    q : float or None
        Target quality factor (> 0) for second-order topologies; None for
        ``rc_lowpass`` and ``rc_highpass``.
    gain : float, optional
        Target gain magnitude |H0| (dimensionless, > 0): DC gain of ``mfb_lowpass``,
        centre gain of ``mfb_bandpass``, high-frequency gain of ``mfb_highpass``.
        The Sallen-Key and RC sections are unity gain and accept only 1.0.
    c_value_f : float, optional
        Base capacitor in F (C2 for the low-pass topologies, all capacitors of
        the equal-capacitor ones, C2 = C3 for ``mfb_highpass``); used as given,
        never rounded.  When None the value is chosen to centre the resistors.
    capacitor_series : str, optional
        E-series name (for example ``"E12"``) to round capacitors to, with
        :func:`loopcraft.parts.eseries.nearest`; None keeps exact capacitors.
    r_range_ohm : tuple of float, optional
        Allowed resistor range (min, max) in Ω.
    max_c_ratio : float, optional
        Largest allowed ratio of two capacitors in the section (dimensionless, >= 1).

    Returns
    -------
    FilterStage
        The circuit stage, its values and the achieved f0 (Hz), Q and |gain|.

    Raises
    ------
    SynthesisError
        An unknown topology or a bad argument, or a target that cannot be met:
        the message names the limit (capacitor ratio ``max_c_ratio``, centre-gain
        limit 2Q² of the band-pass, unity gain of the Sallen-Key/RC sections,
        resistor range ``r_range_ohm``).
    """
    _check_choice("topology", topology, TOPOLOGIES)
    topo = _TOPOLOGY[topology]
    f0 = _positive("f0_hz", f0_hz, "a positive frequency in Hz")
    if topo.order == 1:
        if q is not None:
            raise SynthesisError(
                f"q={q!r} given for the first-order topology {topology!r}; expected None"
            )
        qq: float | None = None
    else:
        qq = _positive("q", q, "a positive quality factor")
    g = _positive("gain", gain, "a positive gain magnitude")
    if topo.unity_gain_only and g != 1.0:
        raise SynthesisError(
            f"{topology}: gain={gain!r} but this topology is unity gain; expected gain=1.0 "
            "(use an mfb topology for other gains)"
        )
    r_lo, r_hi = _check_r_range(r_range_ohm)
    ratio_limit = _check_c_ratio(max_c_ratio)
    w0 = 2.0 * math.pi * f0

    plan = topo.plan(qq, g, ratio_limit)
    if c_value_f is None:
        trial = topo.solve(w0, qq, g, {n: r * _TRIAL_C_F for n, r in plan.ratios.items()})
        spread = _spread(list(trial.values()))
        if spread > (r_hi / r_lo) * (1.0 + _REL_TOL):
            raise SynthesisError(
                f"{topology}: the resistors need a spread of {_fmt(spread)}, wider than "
                f"r_range_ohm={r_range_ohm!r} allows ({_fmt(r_hi / r_lo)}); expected a "
                "target with a smaller spread (lower Q or gain) or a wider range"
            )
        r_mid = math.sqrt(min(trial.values()) * max(trial.values()))
        base = _TRIAL_C_F * r_mid / math.sqrt(r_lo * r_hi)
        base_given = False
    else:
        base = _positive("c_value_f", c_value_f, "a positive capacitance in F")
        base_given = True

    caps = _capacitors(plan, base, base_given, capacitor_series)
    if len(caps) > 1:
        _check_ratio(topology, _spread(list(caps.values())), ratio_limit, "the rounded capacitors")
    res = topo.solve(w0, qq, g, caps)
    for name, r in sorted(res.items()):
        if not r_lo * (1.0 - _REL_TOL) <= r <= r_hi * (1.0 + _REL_TOL):
            hint = "change c_value_f" if base_given else "widen the range"
            raise SynthesisError(
                f"{topology}: {name} = {r!r} Ω is outside r_range_ohm={r_range_ohm!r}; "
                f"expected {r_lo!r} .. {r_hi!r} Ω ({hint})"
            )
    values = {**res, **caps}
    values = {k: float(values[k]) for k in sorted(values, key=_designator_key)}
    w_a, q_a, g_a = topo.closed_form(values)
    stage = {
        "kind": "circuit",
        "elements": topo.elements(values),
        "opamps": [dict(topo.opamp)],
        "input": "in",
        "output": "out",
    }
    return FilterStage(
        topology=topology,
        stage=stage,
        values=values,
        f0_hz=w_a / (2.0 * math.pi),
        q=q_a,
        gain=g_a,
    )


def _designator_key(name: str) -> tuple[str, int, str]:
    digits = name[1:]
    return (name[0], int(digits) if digits.isdigit() else 0, name)


def synthesize_filter(
    response: str,
    order: int,
    f_hz: float,
    *,
    kind: str = "lowpass",
    topology: str = "sallen_key",
    ripple_db: float | None = None,
    gain: float = 1.0,
    capacitor_series: str | None = None,
    r_range_ohm: tuple[float, float] = (1e3, 1e6),
    max_c_ratio: float = DEFAULT_MAX_C_RATIO,
) -> tuple[FilterStage, ...]:
    """Synthesize a whole low-pass or high-pass filter as a cascade of sections.

    Each prototype section (see :func:`normalized_sections`) is scaled to
    ``f_hz``: a low-pass section gets ``f0 = f0_norm·f_hz``, a high-pass one
    ``f0 = f_hz / f0_norm`` (the low-pass to high-pass transformation s → ωc/s,
    which keeps Q).  Odd orders get a buffered first-order RC section.

    Parameters
    ----------
    response : {"butterworth", "bessel", "chebyshev"}
        Response family.
    order : int
        Filter order, 1 to :data:`MAX_ORDER`.
    f_hz : float
        Cutoff frequency in Hz, > 0: the -3 dB frequency for Butterworth and
        Bessel, the ripple-band edge for Chebyshev.
    kind : {"lowpass", "highpass"}, optional
        Filter kind.
    topology : {"sallen_key", "mfb"}, optional
        Second-order section family.  Sallen-Key sections are unity gain; with
        ``"mfb"`` the gain is split equally over the second-order sections and
        the cascade inverts once per second-order section.
    ripple_db : float, optional
        Pass-band ripple in dB; required for ``"chebyshev"`` only.
    gain : float, optional
        Pass-band gain magnitude (dimensionless, > 0): the DC gain of a low-pass
        and the high-frequency gain of a high-pass.  For even-order Chebyshev
        filters the ripple therefore lies above this gain (up to
        ``gain·10**(ripple_db/20)``).  Must be 1.0 with ``"sallen_key"`` and for
        order 1.
    capacitor_series : str, optional
        E-series to round capacitors to (see :func:`synthesize_section`).
    r_range_ohm : tuple of float, optional
        Allowed resistor range (min, max) in Ω.
    max_c_ratio : float, optional
        Largest allowed capacitor ratio within a section (dimensionless, >= 1).

    Returns
    -------
    tuple of FilterStage
        The sections, first-order first, then by increasing Q.

    Raises
    ------
    SynthesisError
        Bad arguments, or a section that cannot be realized (the message names
        the section and the limit hit).
    """
    sections = normalized_sections(response, order, ripple_db=ripple_db)
    f = _positive("f_hz", f_hz, "a positive cutoff frequency in Hz")
    _check_choice("kind", kind, _FILTER_KINDS)
    _check_choice("topology", topology, _FILTER_TOPOLOGIES)
    g = _positive("gain", gain, "a positive gain magnitude")
    n_second = sum(1 for s in sections if s.q is not None)
    if (topology == "sallen_key" or n_second == 0) and g != 1.0:
        why = "unity-gain sallen_key sections" if n_second else "a single unity-gain RC section"
        raise SynthesisError(
            f"gain={gain!r} cannot be realized with {why}; expected gain=1.0 "
            "(use topology='mfb' for other gains)"
        )
    per_section = g ** (1.0 / n_second) if n_second else 1.0
    suffix = "lowpass" if kind == "lowpass" else "highpass"
    out: list[FilterStage] = []
    for i, sec in enumerate(sections):
        f0 = sec.f0_norm * f if kind == "lowpass" else f / sec.f0_norm
        if sec.q is None:
            name, sec_gain = f"rc_{suffix}", 1.0
        else:
            name, sec_gain = f"{topology}_{suffix}", per_section
        try:
            out.append(
                synthesize_section(
                    name,
                    f0,
                    sec.q,
                    sec_gain,
                    capacitor_series=capacitor_series,
                    r_range_ohm=r_range_ohm,
                    max_c_ratio=max_c_ratio,
                )
            )
        except SynthesisError as err:
            q_text = "first order" if sec.q is None else f"Q={sec.q:.6g}"
            raise SynthesisError(
                f"{response} order {order}, section {i + 1} of {len(sections)} "
                f"(f0={f0:.6g} Hz, {q_text}): {err}"
            ) from err
    return tuple(out)


# --- cascading -----------------------------------------------------------------------------


def cascade_stage(stages: Sequence[FilterStage]) -> tuple[dict[str, Any], dict[str, float]]:
    """Merge a cascade of sections into one ``circuit`` stage.

    Each section's output node is joined to the next section's input node.
    Designators are renumbered R1..Rn and C1..Cn in cascade order, and internal
    nodes renamed ``n1``, ``n2``, ... so that they are unique; the merged input
    is ``in``, the output ``out`` and ground ``gnd``.

    Parameters
    ----------
    stages : sequence of FilterStage
        The sections, input side first.

    Returns
    -------
    stage : dict
        The merged design-file ``stage`` section of kind ``"circuit"``.
    values : dict of str to float
        Component values in SI base units (Ω, F), keyed by the new designators.

    Raises
    ------
    TopologyError
        An empty cascade, or a section whose stage is not a circuit stage or
        whose values do not match its elements.
    """
    if isinstance(stages, FilterStage) or not isinstance(stages, Sequence) or not stages:
        raise TopologyError(f"stages={stages!r}; expected a non-empty sequence of FilterStage")
    elements: list[list[str]] = []
    opamps: list[dict[str, str]] = []
    values: dict[str, float] = {}
    counters = {"R": 0, "C": 0, "L": 0}
    node_count = 0
    prev_out = "in"
    last = len(stages) - 1
    for i, st in enumerate(stages):
        if not isinstance(st, FilterStage):
            raise TopologyError(f"stages[{i}]={st!r}; expected a FilterStage")
        d = st.stage
        if not isinstance(d, Mapping) or d.get("kind") != "circuit":
            raise TopologyError(f"stages[{i}].stage is not a circuit stage (got {d!r})")
        s_in, s_out = d["input"], d["output"]
        nodes: dict[str, str] = {"gnd": "gnd", s_in: prev_out}
        if i == last:
            nodes[s_out] = "out"

        def node(name: str, nodes: dict[str, str] = nodes) -> str:
            nonlocal node_count
            if name not in nodes:
                node_count += 1
                nodes[name] = f"n{node_count}"
            return nodes[name]

        for j, (name, a, b) in enumerate(d["elements"]):
            if name not in st.values:
                raise TopologyError(
                    f"stages[{i}].stage.elements[{j}]: {name!r} has no value in stages[{i}].values"
                )
            letter = name[0]
            if letter not in counters:
                raise TopologyError(
                    f"stages[{i}].stage.elements[{j}]: {name!r} is not an R, C or L designator"
                )
            counters[letter] += 1
            new = f"{letter}{counters[letter]}"
            elements.append([new, node(a), node(b)])
            values[new] = float(st.values[name])
        for o in d.get("opamps", []):
            opamps.append({k: node(o[k]) for k in ("plus", "minus", "out")})
        prev_out = node(s_out)
    stage = {
        "kind": "circuit",
        "elements": elements,
        "opamps": opamps,
        "input": "in",
        "output": "out",
    }
    return stage, values
