"""Write the notebooks under notebooks/ (without outputs) from the cell texts below.

Run: .venv/bin/python tools/make_notebooks.py [OUT_DIR]   (default: notebooks/)

The output is byte-for-byte deterministic, so the committed notebooks can be checked against it
(tests/test_notebook_sources.py): each cell id is made from the notebook name and the cell's
index, the format version is fixed here rather than taken from the installed nbformat, and the
JSON is written by this script (sorted keys, one-space indent, UTF-8, final newline).
"""

from __future__ import annotations

import json
import sys
from pathlib import Path
from typing import Any

import nbformat as nbf

ROOT = Path(__file__).resolve().parents[1] / "notebooks"

#: Notebook format 4.5, the first minor version with cell ids; fixed so an nbformat upgrade changes nothing.
NBFORMAT = 4
NBFORMAT_MINOR = 5
METADATA = {
    "kernelspec": {"name": "python3", "display_name": "Python 3", "language": "python"},
    "language_info": {"name": "python"},
}


def _lines(text: str) -> list[str]:
    """The source as a list of lines, each but the last ending in a newline (the notebook JSON form)."""
    lines = text.split("\n")
    return [line + "\n" for line in lines[:-1]] + [lines[-1]]


def md(text: str) -> dict[str, Any]:
    return {"cell_type": "markdown", "metadata": {}, "source": _lines(text.strip())}


def code(text: str) -> dict[str, Any]:
    return {"cell_type": "code", "execution_count": None, "metadata": {}, "outputs": [],
            "source": _lines(text.strip())}


def cell_id(name: str, index: int) -> str:
    """A stable cell id: the notebook's stem and the cell's index, e.g. ``quickstart-03``."""
    return f"{Path(name).stem}-{index:02d}"


def notebook_text(name: str, cells: list[dict[str, Any]]) -> str:
    """The notebook file's exact text (validated against the nbformat 4.5 schema)."""
    nb = {
        "cells": [dict(cell, id=cell_id(name, i)) for i, cell in enumerate(cells)],
        "metadata": METADATA,
        "nbformat": NBFORMAT,
        "nbformat_minor": NBFORMAT_MINOR,
    }
    nbf.validate(nbf.from_dict(nb))  # from_dict copies, so validation never alters what is written
    return json.dumps(nb, sort_keys=True, indent=1, ensure_ascii=False) + "\n"


def write(name: str, cells: list[dict[str, Any]], out: Path = ROOT) -> None:
    (out / name).write_bytes(notebook_text(name, cells).encode("utf-8"))


QUICKSTART = [
    md("""
# loopcraft quickstart

This notebook opens the explorer on a demo design: the Type III error amplifier of an invented
48 V → 12 V bus converter. Drag a slider (or type a value such as `4k7` or `3.3n` in the box beside
it) and watch the pole-zero map, the factored transfer function and the Bode plot follow.

*Demo data, invented for illustration.*
"""),
    code("""
import loopcraft as lc

demo = lc.Design.from_dict({
    "loopcraft": 1,
    "title": "Error amplifier, 48 V bus converter",
    "stage": {"kind": "inverting", "input": "R1 || (R3 + C3)", "feedback": "(R2 + C1) || C2"},
    "values": {"R1": "10k", "R2": "12k", "R3": "300", "C1": "2.7n", "C2": "75p", "C3": "3n"},
    "opamp": {"model": "two_pole", "a0_db": 100, "gbw_hz": "10M", "second_pole_hz": "30M"},
    "plant": {"kind": "buck_vm", "vin_v": 48, "l_h": "10u", "c_f": "100u", "esr_ohm": "5m",
              "load_ohm": 1.2, "ramp_v": 2},
    "feedback_gain": 0.2083,
})
explorer = lc.Explorer(demo)
explorer
"""),
    md("""
## Read the factored form

`factored()` writes H(s) the way a designer does by hand — K·s^n·Π(1 + s/ωz)/Π(1 + s/ωp) — with
each corner's formula in the component symbols and its value now.
"""),
    code("demo.factored()"),
    code("print(demo.factored())"),
    md("""
## Drag a slider from code

`explorer.sliders` maps each designator to its slider; values are in SI base units (ohms, farads).
`explorer.view_state()` returns exactly what the figures show.
"""),
    code("""
explorer.sliders["R2"].value = 15e3
state = explorer.view_state()
print("zeros (Hz):", [f"{abs(z) / 6.283185307179586:.4g}" for z in state["zeros_rad_s"]])
print("loop crossovers:", state["loop_margins"]["crossovers"])
"""),
    md("""
## Your own network

Pick *my own network* in the topology menu and type Zi and Zf in the expression grammar:
`+` is series, `||` is parallel (binds tighter than `+`), parentheses group, e.g.
`R1 || (R3 + C3)`. Or open any library stage by name:
"""),
    code('lc.Explorer("sallen_key_lowpass")'),
    md("""
**Cautions.** Power converters carry hazardous voltages and stored energy. These are small-signal
models: verify the loop gain on the bench and follow local codes and licensed practice.
"""),
]

INTEGRATOR = [
    md("""
# Integrators and differentiators with a real op-amp

An ideal differentiator is a textbook stage that no bench survives: with a real amplifier its noise
gain rises at +20 dB/decade into the op-amp's −20 dB/decade open-loop gain, the two close at
40 dB/decade and the stage rings. This notebook shows why and how the practical differentiator
fixes it. Scenario: the rate output of an invented vibration sensor.
"""),
    code("""
import numpy as np
import loopcraft as lc
from loopcraft.model.opamp import OpAmp

amp = OpAmp.from_dict({"model": "single_pole", "a0_db": 100, "gbw_hz": "1M"})
integrator = lc.topology("integrator").design().with_sections(opamp=amp)
loop = integrator.amplifier_loop()
print(loop.to_dict())
"""),
    md("""
The integrator is well behaved: its noise gain 1 + Zf/Zi falls toward 1 while the open-loop gain
falls, the rate of closure is 20 dB/decade and the phase margin is close to 90°. Finite A0 caps the
DC gain, so the actual curve leaves the ideal one only far below the unity-gain frequency
(`departs_below_hz`).
"""),
    code("""
diff = lc.topology("differentiator").design().with_sections(opamp=amp)
d_loop = diff.amplifier_loop()
print(d_loop.to_dict())
"""),
    code("""
practical = lc.topology("practical_differentiator").design().with_sections(opamp=amp)
p_loop = practical.amplifier_loop()
print(p_loop.to_dict())
assert p_loop.phase_margin_deg > 45 > d_loop.phase_margin_deg
"""),
    md("""
The series resistor R1 and the feedback capacitor C2 turn the noise gain flat before it meets the
open-loop gain: the rate of closure drops to about 20 dB/decade and the margin comes back.
The step responses of the amplifier loops show the difference:
"""),
    code("""
from loopcraft.analysis.loop import PlantLoop

def overshoot(amp_loop):
    lp = PlantLoop(amp_loop.loop, amp_loop.margins)
    t, y = lp.step()
    return float(y.max() / y[-1] - 1)

print(f"ideal differentiator overshoot: {overshoot(d_loop):.0%}")
print(f"practical differentiator overshoot: {overshoot(p_loop):.0%}")
"""),
    code("lc.Explorer(practical)"),
]

COLLEAGUE = [
    md("""
# Reproducing a colleague's design from its file

A colleague left a design file for the voltage loop of the invented 48 V bus converter. Rerun it,
read the decision, and check it against its own spec — the same check `loopcraft check FILE` runs in CI.
"""),
    code("""
from importlib.resources import files
import loopcraft as lc

path = files("loopcraft") / "examples" / "bus48_guarded.json"
design = lc.load(path)
print(design.title)
print(design.notes)
design.factored()
"""),
    code("""
a = design.analyze()
for c in a.loop.margins.crossovers:
    print(f"crossover {c.f_hz:,.0f} Hz, phase margin {c.phase_margin_deg:.1f}°")
for g in a.loop.margins.gain_margins:
    print(f"phase crossover {g.f_hz:,.0f} Hz, gain margin {g.gain_margin_db:.1f} dB")
print(design.amplifier_loop().to_dict())
"""),
    md("""
The file carries its own `spec` and `tolerances` sections. `check` evaluates every spec item at the
nominal values and the yield over a seeded Monte Carlo run with the stated tolerances — exactly what
`loopcraft check bus48_guarded.json` does in a CI job (exit status 0 when the spec holds).
"""),
    code("""
from loopcraft.checks.spec import check

report = check(design, seed=1)
print(report)
assert report.passed
"""),
    code("lc.Explorer(design)"),
]

BUS = [
    md("""
# Closing the voltage loop of a 48 V bus converter with a Type III stage

Scenario (invented): a 48 V → 12 V, 400 kHz, 10 A buck stage, voltage-mode control with a 2 V PWM
ramp, L = 10 µH, C = 100 µF with 5 mΩ ESR, 12 V → 2.5 V output divider. Target: crossover at 30 kHz
with 60° of phase margin, parts from E24, checked for production spread and recorded.

**Cautions.** This converter works from a 48 V bus with stored energy in L and C. The models here
are small-signal; verify the loop gain on the bench (injection measurement) and follow local codes and
licensed practice before relying on a design.
"""),
    code("""
import numpy as np
import loopcraft as lc
from loopcraft.model.opamp import OpAmp
from loopcraft.plant import plant_from_dict
from loopcraft.synthesis import compensator_design

plant = plant_from_dict({"kind": "buck_vm", "vin_v": 48, "l_h": "10u", "c_f": "100u",
                         "esr_ohm": "5m", "load_ohm": 1.2, "ramp_v": 2})
print(plant.describe())
"""),
    md("## 1. Synthesis: the k factor at 30 kHz, 60° of phase margin"),
    code("""
amp = OpAmp.from_dict({"model": "two_pole", "a0_db": 100, "gbw_hz": "10M", "second_pole_hz": "30M"})
result = compensator_design(plant, 30e3, 60, type=3, feedback_gain=2.5 / 12, opamp=amp,
                            title="Voltage loop, 48 V bus converter")
print(f"k = {result.k:.2f}, boost = {result.boost_deg:.1f}°")
print(f"achieved: crossover {result.achieved_crossover_hz:,.0f} Hz, "
      f"phase margin {result.achieved_phase_margin_deg:.1f}°")
design = result.design
design.factored()
"""),
    md("## 2. Snap to E24 and see what moved"),
    code("""
snapped = design.snap("E24")
print(snapped)
built = snapped.design
"""),
    md("## 3. Margins, the amplifier's own loop and the step response"),
    code("""
a = built.analyze()
for c in a.loop.margins.crossovers:
    print(f"crossover {c.f_hz:,.0f} Hz: phase margin {c.phase_margin_deg:.1f}°")
for g in a.loop.margins.gain_margins:
    print(f"phase crossover {g.f_hz:,.0f} Hz: gain margin {g.gain_margin_db:.1f} dB")
print(built.amplifier_loop().to_dict())
t, y = built.loop().step()
print(f"step overshoot {y.max() / y[-1] - 1:.1%}")
"""),
    md("## 4. Explore it"),
    code("lc.Explorer(built)"),
    md("## 5. Production spread: 1 % resistors, 5 % capacitors, ±30 % GBW"),
    code("""
from loopcraft.analysis.tolerance import monte_carlo

guarded = built.with_sections(
    tolerances={"R*": "1%", "C*": "5%", "gbw": "30%"},
    spec={"phase_margin_min_deg": 45, "gain_margin_min_db": 6, "crossover_hz": [20000, 40000],
          "yield_min": 0.99, "samples": 2000},
)
spread = monte_carlo(guarded, samples=10000, seed=1)
summary = spread.to_dict()
print({k: summary[k] for k in list(summary)[:6]})
"""),
    md("## 6. Check against the spec and record the decision"),
    code("""
from loopcraft.checks.spec import check

report = check(guarded, seed=1)
print(report)
record = guarded.record(notes="Type III from the k factor at 30 kHz / 60°, snapped to E24; "
                              "yield checked with 1 % R, 5 % C, ±30 % GBW.")
record
"""),
    code("""
import tempfile, pathlib
out = pathlib.Path(tempfile.mkdtemp()) / "bus48_record.html"
record.save(out)
print("record written to", out)
"""),
]

FILTER = [
    md("""
# An anti-alias filter for a strain-gauge front end, from f0 and Q

Scenario (invented): the bridge amplifier feeds an ADC sampling at 10 kS/s; a 4th-order Butterworth
low-pass at 1 kHz keeps aliasing down. Two unity-gain Sallen-Key sections with E12 capacitors.
"""),
    code("""
import numpy as np
import scipy.signal as sig
import loopcraft as lc
from loopcraft.synthesis.filters import normalized_sections
from loopcraft.synthesis import filter_design, section_design

for s in normalized_sections("butterworth", 4):
    print(f"section: f0/fc = {s.f0_norm:.4f}, Q = {s.q:.4f}")
"""),
    code("""
aa = filter_design("butterworth", 4, 1e3, topology="sallen_key", capacitor_series="E12",
                   title="Anti-alias filter, strain-gauge front end")
print(aa.notes)
aa.factored()
"""),
    md("Check the built filter against the textbook prototype (scipy.signal.butter, analog):"),
    code("""
f = np.logspace(1, 5, 400)
b, a = sig.butter(4, 2 * np.pi * 1e3, analog=True)
_, h_ref = sig.freqs(b, a, worN=2 * np.pi * f)
h = aa.transfer().response(f)
print("worst difference (dB):", float(np.max(np.abs(20 * np.log10(np.abs(h) / np.abs(h_ref))))))
print("gain at 1 kHz (dB):", float(20 * np.log10(abs(aa.transfer().response([1e3])[0]))))
"""),
    md("A single multiple-feedback section for comparison: f0 = 1 kHz, Q = 0.707, gain 2 (inverting)."),
    code("""
mfb = section_design("mfb_lowpass", 1e3, 0.7071, gain=2.0, capacitor_series="E12")
print(mfb.factored())
lc.Explorer(mfb)
"""),
]

NOTEBOOKS = {
    "quickstart.ipynb": QUICKSTART,
    "integrator_differentiator.ipynb": INTEGRATOR,
    "colleague_design.ipynb": COLLEAGUE,
    "bus_converter_type3.ipynb": BUS,
    "antialias_filter.ipynb": FILTER,
}


def main(argv: list[str]) -> None:
    out = Path(argv[0]) if argv else ROOT
    out.mkdir(exist_ok=True)
    for name, cells in NOTEBOOKS.items():
        write(name, cells, out)
    print("wrote", sorted(NOTEBOOKS), "to", out)


if __name__ == "__main__":
    main(sys.argv[1:])
