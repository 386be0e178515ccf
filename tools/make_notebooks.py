"""Write the notebooks under notebooks/ (without outputs) from the cell texts below.

Run: .venv/bin/python tools/make_notebooks.py
"""

from __future__ import annotations

from pathlib import Path

import nbformat as nbf

ROOT = Path(__file__).resolve().parents[1] / "notebooks"


def md(text: str):
    return nbf.v4.new_markdown_cell(text.strip())


def code(text: str):
    return nbf.v4.new_code_cell(text.strip())


def write(name: str, cells: list) -> None:
    nb = nbf.v4.new_notebook()
    nb.cells = cells
    nb.metadata["kernelspec"] = {"name": "python3", "display_name": "Python 3", "language": "python"}
    nb.metadata["language_info"] = {"name": "python"}
    nbf.validate(nb)
    nbf.write(nb, ROOT / name)


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
from loopcraft.opamp import OpAmp

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
from loopcraft.loop import PlantLoop

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

path = files("loopcraft") / "examples" / "bus48_loop.json"
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
    code("lc.Explorer(design)"),
]

if __name__ == "__main__":
    ROOT.mkdir(exist_ok=True)
    write("quickstart.ipynb", QUICKSTART)
    write("integrator_differentiator.ipynb", INTEGRATOR)
    write("colleague_design.ipynb", COLLEAGUE)
    print("wrote", sorted(p.name for p in ROOT.glob("*.ipynb")))
