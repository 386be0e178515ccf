import json
import math
import subprocess
import sys

import pytest

from loopcraft.cli import main

EXAMPLE = "src/loopcraft/examples/bus48_type3.json"


def run(*args):
    return subprocess.run([sys.executable, "-m", "loopcraft.cli", *args], capture_output=True, text=True, cwd=_root())


def _root():
    from pathlib import Path

    return Path(__file__).resolve().parents[1]


def test_analyze_prints_corners():
    out = run("analyze", EXAMPLE)
    assert out.returncode == 0, out.stderr
    # Type III corners by hand (Venable 1983 formulas): 1/(2 pi R2 C1) = 1.064 kHz,
    # 1/(2 pi (R1+R3) C3) = 4.606 kHz, 1/(2 pi R3 C3) = 102.6 kHz, (C1+C2)/(2 pi R2 C1 C2) = 49.29 kHz.
    for text in ("1.06 kHz", "4.61 kHz", "103 kHz", "49.3 kHz", "1/(C1·R2)", "(C1 + C2)/(C1·C2·R2)"):
        assert text in out.stdout


def test_analyze_json_layout(capsys):
    assert main(["analyze", str(_root() / EXAMPLE), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert [0.0, 0.0] in doc["poles_rad_s"]  # the integrator, listed explicitly
    assert len(doc["zeros_rad_s"]) == 2 and len(doc["poles_rad_s"]) == 3
    fac = doc["factored"]
    assert fac["origin_order"] == -1
    f_z1 = 1 / (2 * math.pi * 22e3 * 6.8e-9)  # closed form, Venable 1983
    assert any(f["role"] == "zero" and f["f_hz"] == pytest.approx(f_z1, rel=1e-12) for f in fac["factors"])
    assert all(set(f) >= {"role", "order", "f_hz", "q", "formula"} for f in fac["factors"])


def test_response_json(capsys):
    assert main(["response", str(_root() / EXAMPLE), "--hz", "10", "1000", "1e5", "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    pts = doc["points"]
    assert [p["f_hz"] for p in pts] == [10.0, 1000.0, 1e5]
    # At 10 Hz the integrator dominates: |H| = 1/(2 pi f R1 (C1 + C2)) (Erickson & Maksimovic 2001, 9.5).
    k = 1 / (2 * math.pi * 10 * 10e3 * (6.8e-9 + 150e-12))
    assert pts[0]["mag_db"] == pytest.approx(20 * math.log10(k), abs=0.01)


def test_response_accepts_engineering_frequencies(capsys):
    assert main(["response", str(_root() / EXAMPLE), "--hz", "1k", "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["points"][0]["f_hz"] == 1000.0


def test_errors_exit_2(tmp_path):
    bad = tmp_path / "bad.json"
    bad.write_text('{"loopcraft": 1, "stage": {"kind": "inverting", "input": "R1 +", "feedback": "R2"}, "values": {}}')
    out = run("analyze", str(bad))
    assert out.returncode == 2
    assert "stage.input" in out.stderr and "^" in out.stderr
    assert out.stdout == ""
    assert run("analyze", str(tmp_path / "missing.json")).returncode == 2
