"""Tests of the report, check, snap and spread subcommands (loopcraft.cli.tools).

Run through ``loopcraft.cli.main`` with captured output, plus one run of the
installed console script. Engineering numbers are checked against the IEC
60063 tables (by hand) and against an independent numpy evaluation of the loop.
"""

from __future__ import annotations

import json
import math
import subprocess
from pathlib import Path

import numpy as np
import pytest
from scipy.optimize import brentq

from loopcraft.cli import main
from loopcraft.design import Design, load

ROOT = Path(__file__).resolve().parents[1]
EXAMPLES = ROOT / "src" / "loopcraft" / "examples"
GUARDED = EXAMPLES / "bus48_guarded.json"
SCRIPT = ROOT / ".venv" / "bin" / "loopcraft"
TWO_PI = 2.0 * math.pi


def write(tmp_path: Path, name: str, doc: dict) -> Path:
    p = tmp_path / name
    p.write_text(json.dumps(doc, ensure_ascii=False), encoding="utf-8")
    return p


def guarded_doc() -> dict:
    return json.loads(GUARDED.read_text(encoding="utf-8"))


# --------------------------------------------------------------------------- check


def test_check_passes_with_exit_0(capsys):
    assert main(["check", str(GUARDED), "--no-spread"]) == 0
    out = capsys.readouterr().out
    assert "Spec check: PASS" in out
    assert "yield_min was not checked" in out


def test_check_with_yield(capsys):
    assert main(["check", str(GUARDED), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["passed"] is True
    names = [i["name"] for i in doc["items"]]
    assert "yield_min" in names and "phase_margin_min_deg" in names


def _independent_pm(design: Design) -> float:
    """PM of L = Gvc·k_fb·(Zf/Zi)/(1 + (1 + Zf/Zi)/A), recomputed with numpy.

    Buck Gvc: Erickson & Maksimovic, Fundamentals of Power Electronics, 2001, ch. 8; finite-gain
    inverting amplifier: Franco, Design with Operational Amplifiers, 2015, ch. 6; two-pole A(s)
    with ωa = 2π·GBW/A0 (from memory).
    """
    v, p, o = design.values, design.plant.to_dict(), design.opamp.to_dict()

    def par(a, b):
        return a * b / (a + b)

    def loop(f):
        s = 1j * TWO_PI * f
        zi = par(v["R1"], v["R3"] + 1 / (s * v["C3"]))
        zf = par(v["R2"] + 1 / (s * v["C1"]), 1 / (s * v["C2"]))
        a = o["a0"] / ((1 + s / (TWO_PI * o["gbw_hz"] / o["a0"])) * (1 + s / (TWO_PI * o["second_pole_hz"])))
        zo = par(p["load_ohm"], p["esr_ohm"] + 1 / (s * p["c_f"]))
        gvc = p["vin_v"] / p["ramp_v"] * zo / (zo + s * p["l_h"])
        return gvc * design.feedback_gain * (zf / zi) / (1 + (1 + zf / zi) / a)

    fc = 10 ** brentq(lambda u: math.log(abs(loop(10**u))), 3.5, 5.0, xtol=1e-13)
    return (180 + math.degrees(np.angle(loop(fc))) + 180) % 360 - 180


def test_check_reports_the_independent_phase_margin(capsys):
    assert main(["check", str(GUARDED), "--no-spread", "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    pm = next(i for i in doc["items"] if i["name"] == "phase_margin_min_deg")
    assert pm["actual"] == pytest.approx(_independent_pm(load(GUARDED)), abs=1e-4)


def test_check_fails_with_exit_1_and_lists_the_failures(tmp_path, capsys):
    doc = guarded_doc()
    doc["spec"] = {"phase_margin_min_deg": 75, "gain_margin_min_db": 6, "crossover_hz": [40e3, 60e3]}
    del doc["tolerances"]
    path = write(tmp_path, "strict.json", doc)
    assert main(["check", str(path)]) == 1
    out = capsys.readouterr().out
    assert "Spec check: FAIL" in out
    assert "2 spec item(s) failed" in out
    assert "FAILED phase_margin_min_deg" in out and "FAILED crossover_hz" in out
    assert "FAILED gain_margin_min_db" not in out
    assert main(["check", str(path), "--json"]) == 1
    assert json.loads(capsys.readouterr().out)["failures"] == ["phase_margin_min_deg", "crossover_hz"]


def test_check_without_spec_is_an_error(capsys):
    assert main(["check", str(EXAMPLES / "bus48_loop.json")]) == 2
    err = capsys.readouterr().err
    assert "no 'spec' section" in err


def test_check_of_a_broken_file_is_an_error(tmp_path, capsys):
    bad = tmp_path / "bad.json"
    bad.write_text('{"loopcraft": 1, "stage": ', encoding="utf-8")
    assert main(["check", str(bad)]) == 2
    assert "not valid JSON" in capsys.readouterr().err
    assert main(["check", str(tmp_path / "missing.json")]) == 2


# --------------------------------------------------------------------------- report


@pytest.mark.parametrize("suffix", [".html", ".md"])
def test_report_writes_a_record(tmp_path, capsys, suffix):
    out = tmp_path / f"record{suffix}"
    assert main(["report", str(GUARDED), "-o", str(out), "--notes", "Reviewed for bench bring-up.",
                 "--samples", "300"]) == 0
    assert f"wrote {out} (spec PASS)" in capsys.readouterr().out
    text = out.read_text(encoding="utf-8")
    assert "Guarded voltage loop, 48 V to 12 V bus converter" in text
    assert "Reviewed for bench bring-up." in text
    assert "Spec check: PASS" in text
    assert "data:image/png;base64," in text
    assert [p.name for p in tmp_path.iterdir()] == [out.name]


def test_report_refuses_an_unknown_suffix(tmp_path, capsys):
    assert main(["report", str(GUARDED), "-o", str(tmp_path / "record.pdf")]) == 2
    assert "suffix" in capsys.readouterr().err
    assert list(tmp_path.iterdir()) == []


# --------------------------------------------------------------------------- snap


def _off_grid(tmp_path: Path) -> Path:
    doc = json.loads((EXAMPLES / "bus48_loop.json").read_text(encoding="utf-8"))
    doc["values"].update({"R2": "12.34k", "C1": "2.55n", "R3": "333", "C3": "3.1n"})
    return write(tmp_path, "off_grid.json", doc)


def test_snap_prints_moves_and_writes_the_file(tmp_path, capsys):
    src = _off_grid(tmp_path)
    out = tmp_path / "snapped.json"
    assert main(["snap", str(src), "--series", "E24", "-o", str(out)]) == 0
    text = capsys.readouterr().out
    for piece in ("Snapped to E24", "loop phase margin 1", "amplifier-loop phase margin", f"wrote {out}"):
        assert piece in text
    snapped = load(out)
    # IEC 60063 E24 by hand: 12.34k -> 12k (12k/13k, mean 12.49k); 2.55n -> 2.7n (2.4n/2.7n, mean 2.546n);
    # 333 -> 330 (330/360); 3.1n -> 3.0n (3.0n/3.3n, mean 3.146n); 10k and 75p are E24 already.
    expected = {"R1": 10e3, "R2": 12e3, "R3": 330.0, "C1": 2.7e-9, "C2": 75e-12, "C3": 3.0e-9}
    assert dict(snapped.values) == pytest.approx(expected, rel=1e-12)
    assert json.loads(out.read_text(encoding="utf-8"))["values"]["C1"] == "2.7n"
    assert snapped.plant == load(src).plant


def test_snap_json_and_combinations(tmp_path, capsys):
    src = _off_grid(tmp_path)
    assert main(["snap", str(src), "--series", "e12", "--combinations", "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["series"] == "E12" and doc["combinations"] is True
    by_name = {c["name"]: c for c in doc["changes"]}
    assert "combination" in by_name["R2"]
    keys = {m["key"] for m in doc["moves"]}
    assert "loop:crossover:0:pm" in keys
    assert Design.from_dict(doc["design"]).values["R1"] == 10e3


def test_snap_rejects_an_unknown_series(tmp_path, capsys):
    with pytest.raises(SystemExit) as exc:
        main(["snap", str(_off_grid(tmp_path)), "--series", "E25"])
    assert exc.value.code == 2
    assert "E25" in capsys.readouterr().err


# --------------------------------------------------------------------------- spread


def test_spread_json_summary(capsys):
    assert main(["spread", str(GUARDED), "--samples", "400", "--seed", "3", "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["samples"] == 400 and doc["seed"] == 3
    q = doc["quantities"]
    for name in ("ωz1", "crossover_hz", "phase_margin_deg", "gain_margin_db"):
        assert q[name]["min"] <= q[name]["p50"] <= q[name]["max"]
    # ωz1 = 1/(2π R2 C1) with R2 ±1 % and C1 ±5 % (uniform): every sample lies within
    # 1/((1 ± 0.01)(1 ± 0.05)) of nominal (closed form, Venable 1983).
    nominal = 1 / (TWO_PI * 12e3 * 2.7e-9)
    assert q["ωz1"]["nominal"] == pytest.approx(nominal, rel=1e-9)
    assert q["ωz1"]["min"] >= nominal / (1.01 * 1.05) * (1 - 1e-12)
    assert q["ωz1"]["max"] <= nominal / (0.99 * 0.95) * (1 + 1e-12)
    assert doc["yield"] is not None


def test_spread_text_summary(capsys):
    assert main(["spread", str(GUARDED), "--samples", "300"]) == 0
    out = capsys.readouterr().out
    for piece in ("Monte Carlo spread: 300 samples, seed 1", "phase margin", "gain margin", "crossover", "ωz1",
                  "yield against the spec"):
        assert piece in out


def test_spread_without_tolerances_is_an_error(capsys):
    assert main(["spread", str(EXAMPLES / "bus48_loop.json"), "--samples", "100"]) == 2
    assert "no 'tolerances' section" in capsys.readouterr().err


# --------------------------------------------------------------------------- console script


def test_console_script_entry_point(tmp_path):
    ok = subprocess.run([str(SCRIPT), "check", str(GUARDED), "--no-spread"], capture_output=True, text=True,
                        cwd=tmp_path, timeout=300)
    assert ok.returncode == 0, ok.stderr
    assert "Spec check: PASS" in ok.stdout
    doc = guarded_doc()
    doc["spec"] = {"phase_margin_min_deg": 80}
    del doc["tolerances"]
    failing = subprocess.run([str(SCRIPT), "check", str(write(tmp_path, "strict.json", doc))],
                             capture_output=True, text=True, cwd=tmp_path, timeout=300)
    assert failing.returncode == 1
    assert "FAILED phase_margin_min_deg" in failing.stdout
