"""Seeded fuzz tests of the model and loading layers: hostile input never escapes as a foreign exception.

The property under test is loopcraft's own contract (DEVELOPERS.md, "Bad input gets a clear
package error"): whatever a value, a network expression, a design text, a design-file section
or a command line holds, the only exceptions that leave loopcraft are
:class:`loopcraft.errors.LoopcraftError` subclasses, and every result that is returned is
made of finite numbers. The outside references are IEEE 754 (a finite double is at most about
1.8e308; from memory) and RFC 8259, "The JavaScript Object Notation (JSON) Data Interchange
Format", 2017, section 6: NaN and Infinity are not JSON numbers.

Hypothesis runs derandomized (a fixed seed per test) with modest example counts, so the
whole file is reproducible and finishes in well under a minute.
"""

from __future__ import annotations

import contextlib
import copy
import io
import json
import math
from dataclasses import replace
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

from loopcraft.cli import main
from loopcraft.design import Design, loads
from loopcraft.errors import LoopcraftError
from loopcraft.model import opamp as opamp_mod
from loopcraft.model import plant as plant_mod
from loopcraft.model.network import parse_network
from loopcraft.model.values import MAX_VALUE, MIN_VALUE, parse_value

EXAMPLES = Path(__file__).resolve().parents[1] / "src" / "loopcraft" / "examples"
BASE: dict[str, Any] = json.loads((EXAMPLES / "bus48_guarded.json").read_text(encoding="utf-8"))


def fuzz(n: int) -> settings:
    """Fixed-seed settings with ``n`` examples."""
    return settings(
        derandomize=True,
        max_examples=n,
        deadline=None,
        database=None,
        suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large, HealthCheck.filter_too_much],
    )


# --------------------------------------------------------------------------- hostile atoms
HOSTILE_NUMBERS = [
    10**400, -(10**400), 2**1024, 2**1023, 10**308, 5e-324, -5e-324, 1e308, -1e308, 1.7976931348623157e308,
    2.2250738585072014e-308, math.nan, math.inf, -math.inf, 0, 0.0, -0.0, -1, 1, 1e-18, 1e15, 1e16, 1e-19,
]
HOSTILE_TEXTS = [
    "1e400", "-1e400", "5e-324", "1e-400", "nan", "NaN", "inf", "-inf", "Infinity", "10k", "4k7", "R47", "2.2µ",
    "1meg", "-10k", "+10k", "", " ", "1_000", "0x10", "1e", "k", "10kk", "\uff19", "1" * 5000, "1e99999999",
    "(" * 50, "10 Hz", "400 kHz", "1 dB", "240 dB", "5 V/us", "60 deg", "1%", "200%", "1e308", "-0", "\x00",
    "10 mΩ", "22 µF", "6.8u", "48 V", "1 THz", "1e12", "1e-3",
]
hostile = st.one_of(
    st.sampled_from(HOSTILE_NUMBERS),
    st.sampled_from(HOSTILE_TEXTS),
    st.floats(),
    st.integers(min_value=-(10**500), max_value=10**500),
    st.text(max_size=12),
    st.none(),
    st.booleans(),
    st.lists(st.integers(min_value=-3, max_value=3), max_size=3),
    st.dictionaries(st.text(max_size=3), st.integers(min_value=-3, max_value=3), max_size=2),
)


def log_uniform(lo: float, hi: float) -> st.SearchStrategy[float]:
    """Values from lo to hi, spread over the decades, with the ends themselves."""
    if lo <= 0:
        return st.one_of(st.sampled_from([lo, hi]), st.floats(min_value=lo, max_value=hi))
    ends = st.sampled_from([lo, hi, math.sqrt(lo * hi)])
    spread = st.floats(min_value=math.log10(lo), max_value=math.log10(hi)).map(lambda e: 10.0**e)
    return st.one_of(ends, spread)


def in_span(span: Any) -> st.SearchStrategy[float]:
    """Values at the edges of, and inside, a documented range (either sign when the range is signed)."""
    base = log_uniform(span.lo, span.hi)
    if span.signed:
        base = st.tuples(base, st.booleans()).map(lambda t: -t[0] if t[1] else t[0])
    return base


def field_value(span: Any) -> st.SearchStrategy[Any]:
    """Mostly in-range values (so analyses run), sometimes hostile ones."""
    return st.integers(min_value=0, max_value=30).flatmap(lambda k: hostile if k == 0 else in_span(span))


# --------------------------------------------------------------------------- result checks
def assert_finite_analysis(design: Design) -> None:
    """Analyse; a refusal must be a LoopcraftError, a result must be finite everywhere."""
    try:
        a = design.analyze()
    except LoopcraftError as err:
        event(f"analysis refused: {type(err).__name__}")
        return
    event("analysed" + (" with a loop" if a.loop is not None else ""))
    state = a.view_state()
    for key, value in state.items():
        if isinstance(value, np.ndarray) and value.dtype.kind in "fc":
            assert np.all(np.isfinite(value)), f"{key} holds non-finite numbers"
    if a.loop is not None:
        for c in a.loop.margins.crossovers:
            assert math.isfinite(c.f_hz) and math.isfinite(c.phase_margin_deg)
        for g in a.loop.margins.gain_margins:
            assert math.isfinite(g.f_hz) and math.isfinite(g.gain_margin_db)
    assert math.isfinite(a.transfer.gain)


def build_or_refuse(d: Any) -> Design | None:
    try:
        return Design.from_dict(d)
    except LoopcraftError as err:
        event(f"refused on load: {getattr(err, 'key_path', '') or type(err).__name__}".split(".")[0].split("[")[0])
        return None


# --------------------------------------------------------------------------- values
@fuzz(400)
@given(value=st.one_of(hostile, st.from_regex(r"[0-9.eE+\-kKMGTRrpnuµmf ΩFH]{0,12}", fullmatch=True)),
       kind=st.sampled_from([None, "resistor", "capacitor", "inductor"]))
def test_values_accept_in_range_or_refuse(value: Any, kind: str | None) -> None:
    try:
        x = parse_value(value, name="R1", kind=kind)
    except LoopcraftError:
        return
    assert isinstance(x, float) and MIN_VALUE <= x <= MAX_VALUE
    if isinstance(value, str) and value.strip().replace(".", "", 1).isdigit():
        assert x == float(value)  # a plain decimal reads as Python's float() reads it (IEEE 754 rounding)


# --------------------------------------------------------------------------- networks
network_text = st.one_of(
    st.text(alphabet="RCL0123()+| _x", max_size=60),
    st.integers(min_value=0, max_value=400).map(lambda n: "(" * n + "R1" + ")" * n),
    st.integers(min_value=1, max_value=3000).map(lambda n: " + ".join(f"R{i}" for i in range(n))),
    st.integers(min_value=1, max_value=200).map(lambda n: "+".join(f"C{i}" for i in range(n))),
    st.integers(min_value=1, max_value=40).map(
        lambda n: "R0" + "".join(f" || (R{i} + C{i}" for i in range(1, n)) + ")" * (n - 1)),
    hostile,
)


@fuzz(300)
@given(text=network_text)
def test_networks_parse_or_refuse(text: Any) -> None:
    try:
        net = parse_network(text)
    except LoopcraftError:
        return
    assert 1 <= len(net.names) <= 64
    assert parse_network(net.to_text()).names == net.names  # canonical text parses back to the same parts


# --------------------------------------------------------------------------- design texts
BASE_TEXT = json.dumps(BASE, indent=1, ensure_ascii=False)
JSON_BITS = ['[', ']', '{', '}', '"', ',', ':', '1e400', '-', '0', '9' * 40, 'NaN', 'Infinity', 'null', 'true',
             '\\', '\\ud800', ' ', '\n', '1' * 1200, '[' * 40, '(' * 40]


@st.composite
def mutated_text(draw: st.DrawFn) -> str:
    text = BASE_TEXT
    for _ in range(draw(st.integers(min_value=1, max_value=4))):
        pos = draw(st.integers(min_value=0, max_value=len(text)))
        cut = draw(st.integers(min_value=0, max_value=8))
        bit = draw(st.one_of(st.sampled_from(JSON_BITS), st.text(max_size=4)))
        text = text[:pos] + bit + text[pos + cut:]
    return text


@fuzz(200)
@given(text=st.one_of(mutated_text(), st.text(max_size=40),
                      st.integers(min_value=1, max_value=100_000).map(lambda n: "[" * n + "]" * n)))
def test_design_texts_load_or_refuse(text: str) -> None:
    try:
        design = loads(text)
    except LoopcraftError:
        return
    if design.stage.component_names == tuple(BASE["values"]):  # same topology: the derivation is cached
        assert_finite_analysis(design)


# --------------------------------------------------------------------------- structured mutations
OPAMP_FIELDS = {
    "a0": replace(opamp_mod.A0_RANGE, lo=1.0 + 1e-9),  # the ranges are open at 1 V/V and 0 dB
    "a0_db": replace(opamp_mod.A0_DB_RANGE, lo=1e-9),
    "gbw_hz": opamp_mod.FREQUENCY_RANGE,
    "second_pole_hz": opamp_mod.SECOND_POLE_RANGE,
    "output_swing_v": opamp_mod.SWING_RANGE,
    "slew_rate_v_per_us": opamp_mod.SLEW_RANGE,
}
P = plant_mod
PLANT_FIELDS = {
    "buck_vm": {"vin_v": P.VOLTAGE, "l_h": P.INDUCTANCE, "c_f": P.CAPACITANCE, "load_ohm": P.RESISTANCE,
                "ramp_v": P.RAMP, "esr_ohm": P.PARASITIC, "dcr_ohm": P.PARASITIC},
    "boost_vm": {"vin_v": P.VOLTAGE, "l_h": P.INDUCTANCE, "c_f": P.CAPACITANCE, "load_ohm": P.RESISTANCE,
                 "ramp_v": P.RAMP, "esr_ohm": P.PARASITIC, "duty": P.DUTY},
    "peak_current": {"load_ohm": P.RESISTANCE, "c_f": P.CAPACITANCE, "ri_ohm": P.SENSE_GAIN,
                     "esr_ohm": P.PARASITIC, "f_sw_hz": P.FREQUENCY, "duty": P.DUTY, "mc": P.MC_RANGE},
}


@st.composite
def opamp_section(draw: st.DrawFn) -> Any:
    """Op-amp sections with the keys their model needs, values mostly in range, sometimes hostile."""
    model = draw(st.sampled_from(["ideal", "single_pole", "single_pole", "two_pole", "two_pole", "two_pole", "other"]))
    if model == "other":
        return draw(st.one_of(hostile, st.fixed_dictionaries({"model": hostile})))
    keys = ["output_swing_v", "slew_rate_v_per_us"]
    if model != "ideal":
        keys += [draw(st.sampled_from(["a0", "a0_db"])), "gbw_hz"]
    if model == "two_pole":
        keys.append(draw(st.sampled_from(["second_pole_hz", "phase_margin_deg"])))
    out: dict[str, Any] = {"model": model}
    for key in keys:
        if key in ("output_swing_v", "slew_rate_v_per_us") and draw(st.booleans()):
            continue
        if key == "phase_margin_deg":
            k = draw(st.integers(min_value=0, max_value=7))
            out[key] = draw(hostile if k == 0 else st.floats(min_value=-10, max_value=100) if k == 1 else
                            st.floats(min_value=20, max_value=89.9))
        else:
            out[key] = draw(field_value(OPAMP_FIELDS[key]))
    a0_db = out.get("a0_db")
    a0 = out.get("a0", 10 ** (a0_db / 20) if isinstance(a0_db, float) and 0 < a0_db <= 240 else None)
    gbw, f2 = out.get("gbw_hz"), out.get("second_pole_hz")
    if all(isinstance(x, float) for x in (a0, gbw, f2)) and draw(st.integers(0, 3)):
        out["second_pole_hz"] = max(gbw / a0, 1e-3) * 10 ** draw(st.floats(min_value=0, max_value=6))
    if draw(st.integers(min_value=0, max_value=9)) == 0:  # an extra or inapplicable key
        out[draw(st.sampled_from([*OPAMP_FIELDS, "phase_margin_deg", "bogus"]))] = draw(hostile)
    return out


@st.composite
def plant_section(draw: st.DrawFn) -> Any:
    kind = draw(st.sampled_from(["buck_vm", "boost_vm", "peak_current", "general", "polynomial", "other"]))
    if kind in PLANT_FIELDS:
        out: dict[str, Any] = {"kind": kind}
        for key, span in PLANT_FIELDS[kind].items():
            if draw(st.integers(min_value=0, max_value=4)) or key in P._CIRCUIT_KEYS[kind][0]:
                out[key] = draw(field_value(span))
        if kind == "boost_vm" and (draw(st.booleans()) or "duty" not in out):
            out.pop("duty", None)
            out["vout_v"] = draw(field_value(P.VOLTAGE))
        if kind == "peak_current" and "f_sw_hz" not in out:
            out.pop("duty", None)
            out.pop("mc", None)
        return out
    if kind == "general":
        out = {"kind": kind, "gain": draw(field_value(P.GAIN)),
               "origin_order": draw(st.integers(min_value=-6, max_value=6) if draw(st.integers(0, 9)) else hostile)}
        for key in ("zeros_hz", "poles_hz", "rhp_zeros_hz", "rhp_poles_hz"):
            out[key] = draw(st.lists(field_value(P.ROOT_FREQUENCY), max_size=5))
        for key in ("zero_pairs", "pole_pairs"):
            out[key] = draw(st.lists(st.fixed_dictionaries(
                {"f0_hz": field_value(P.ROOT_FREQUENCY), "q": field_value(P.Q_RANGE)}), max_size=3))
        return out
    if kind == "polynomial":
        coeff = st.integers(min_value=0, max_value=12).flatmap(
            lambda k: hostile if k == 0 else st.sampled_from([1e294, 1e-300, 0.0]) if k == 1 else
            st.floats(allow_nan=False, allow_infinity=False) if k == 2 else log_uniform(1e-30, 1e30))
        return {"kind": kind, "num": draw(st.lists(coeff, min_size=1, max_size=6)),
                "den": draw(st.lists(coeff, min_size=1, max_size=8))}
    return draw(hostile)


def values_section(draw: st.DrawFn) -> Any:
    out = dict(BASE["values"])
    for name in draw(st.lists(st.sampled_from(sorted(out)), max_size=3)):
        out[name] = draw(st.one_of(log_uniform(MIN_VALUE, MAX_VALUE), hostile))
    return out


STAGES = [
    BASE["stage"],
    {"kind": 5, "input": "R1", "feedback": "R2"},
    {"kind": ["inverting"], "input": "R1", "feedback": "R2"},
    {"kind": "inverting", "input": "(" * 331 + "R1" + ")" * 331, "feedback": "R2"},
    {"kind": "inverting", "input": "R1", "feedback": " + ".join(f"R{i}" for i in range(2, 3000))},
    {"kind": "inverting", "input": "R1", "feedback": 10**400},
    {"kind": "circuit", "elements": [["R1", "in", "x"]] * 70, "input": "in", "output": "x"},
    {"kind": "circuit", "elements": [[f"R{i}", f"n{i}", f"n{i + 1}"] for i in range(100)], "input": "n0",
     "output": "n100"},
    {"kind": "circuit", "elements": [[1, "a", "b"]], "input": "a", "output": "b"},
    {"kind": "circuit", "elements": "R1 a b", "input": "a", "output": "b"},
    {"kind": "circuit", "elements": [["R1", "in", "out"]], "opamps": [{"plus": "gnd", "minus": "in", "out": "out",
                                                                        1: 2}], "input": "in", "output": "out"},
]


@st.composite
def mutated_design(draw: st.DrawFn) -> dict[str, Any]:
    d = copy.deepcopy(BASE)
    for _ in range(draw(st.integers(min_value=1, max_value=2))):
        section = draw(st.sampled_from(["stage", "values", "values", "opamp", "opamp", "plant", "plant", "plant",
                                        "feedback_gain", "tolerances", "spec", "other"]))
        if section == "stage":
            d["stage"] = draw(st.one_of(st.sampled_from(STAGES), hostile))
        elif section == "values":
            d["values"] = draw(st.one_of(st.just(None), hostile)) if draw(st.integers(0, 5)) == 0 else \
                values_section(draw)
        elif section == "opamp":
            d["opamp"] = draw(st.one_of(opamp_section(), hostile))
        elif section == "plant":
            d["plant"] = draw(plant_section())
        elif section == "feedback_gain":
            d["feedback_gain"] = draw(st.one_of(log_uniform(1e-6, 1e6), hostile))
        elif section == "tolerances":
            tol = dict(BASE["tolerances"])
            tol[draw(st.sampled_from(["R*", "C*", "gbw", "R1", "C[12]", "distribution", "X", "R9"]))] = draw(hostile)
            d["tolerances"] = tol if draw(st.integers(0, 4)) else draw(hostile)
        elif section == "spec":
            spec = dict(BASE["spec"])
            key = draw(st.sampled_from(["phase_margin_min_deg", "gain_margin_min_db", "crossover_hz", "corners",
                                        "dc_gain_db", "yield_min", "samples", "bogus"]))
            spec[key] = draw(st.one_of(hostile, st.lists(hostile, min_size=2, max_size=2),
                                       st.dictionaries(st.sampled_from(["ωz1", "wz1", "Qp1", "x"]),
                                                       st.lists(hostile, min_size=2, max_size=2), max_size=2)))
            d["spec"] = spec if draw(st.integers(0, 4)) else draw(hostile)
        elif draw(st.booleans()):
            return draw(hostile)  # the whole design
        else:
            d[draw(st.sampled_from(["loopcraft", "title", "notes", "stage_sign", "bogus"]))] = draw(hostile)
    return d


@fuzz(300)
@given(d=mutated_design(), new_value=hostile)
def test_design_sections_load_or_refuse_and_results_are_finite(d: Any, new_value: Any) -> None:
    design = build_or_refuse(d)
    if design is None:
        return
    assert_finite_analysis(design)
    with contextlib.suppress(LoopcraftError):
        moved = design.with_values(R2=new_value)
        assert MIN_VALUE <= moved.values["R2"] <= MAX_VALUE
    with contextlib.suppress(LoopcraftError):
        for row in design.sensitivity().rows:
            assert math.isfinite(row.value) and all(math.isfinite(v) for v in row.by_component.values())


@fuzz(300)
@given(opamp=opamp_section(), plant=plant_section())
def test_opamp_and_plant_extremes_give_finite_results_or_refusals(opamp: Any, plant: Any) -> None:
    d = copy.deepcopy(BASE)
    d["opamp"], d["plant"] = opamp, plant
    d.pop("spec")
    design = build_or_refuse(d)
    if design is not None:
        assert_finite_analysis(design)


# --------------------------------------------------------------------------- the command line
def _no_constant(name: str) -> Any:
    raise AssertionError(f"{name} in JSON output (not allowed by RFC 8259)")


def run_cli(args: list[str]) -> tuple[int, str]:
    out = io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(io.StringIO()):
        code = main(args)
    return code, out.getvalue()


@fuzz(40)
@given(d=st.one_of(mutated_design(), st.builds(lambda o, p: {**BASE, "opamp": o, "plant": p}, opamp_section(),
                                                plant_section())))
def test_cli_json_is_valid_or_the_exit_status_is_2(tmp_path_factory: pytest.TempPathFactory, d: Any) -> None:
    path = tmp_path_factory.mktemp("fuzz") / "design.json"
    try:
        path.write_text(json.dumps(d, ensure_ascii=False), encoding="utf-8")
    except (ValueError, UnicodeEncodeError):  # a Python value that JSON cannot hold (NaN is written, huge ints too)
        return
    for args in (["analyze", str(path), "--json"], ["response", str(path), "--hz", "1", "1k", "100k", "--json"],
                 ["check", str(path), "--no-spread", "--json"]):
        code, out = run_cli(args)
        assert code in (0, 1, 2)
        if code in (0, 1) and out:
            json.loads(out, parse_constant=_no_constant)
