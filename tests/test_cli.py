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


def _twin_t_file(tmp_path):
    from test_factors import twin_t

    path = tmp_path / "twin_t.json"
    path.write_text(json.dumps(twin_t().to_dict()), encoding="utf-8")
    return path


def _strict(text):
    def bad(name):
        raise AssertionError(f"non-JSON constant {name} in the output")

    return json.loads(text, parse_constant=bad)


def test_analyze_json_twin_t_reduced_roots_and_cancellation(tmp_path, capsys):
    # Balanced twin-T notch at f0 = 1/(2π·R·C) = 60.06 Hz (Franco, "Design with Operational
    # Amplifiers and Analog Integrated Circuits", 2002; section from memory): the reduced
    # function has one zero pair on the jω axis; the real zero/pole pair at -1/(R·C) cancels.
    assert main(["analyze", str(_twin_t_file(tmp_path)), "--json"]) == 0
    out = capsys.readouterr().out
    doc = _strict(out)
    w0 = 1 / (26.5e3 * 100e-9)
    assert len(doc["zeros_rad_s"]) == 2 and len(doc["poles_rad_s"]) == 2
    for re, im in doc["zeros_rad_s"]:
        assert re == 0.0 and abs(im) == pytest.approx(w0, rel=1e-9)
    (c,) = doc["cancelled_rad_s"]
    assert c[0] == pytest.approx(-w0, rel=1e-9) and c[1] == 0.0
    (pair,) = [f for f in doc["factored"]["factors"] if f["order"] == 2]
    assert pair["q"] is None and pair["q_infinite"] is True
    assert pair["f_hz"] == pytest.approx(w0 / (2 * math.pi), rel=1e-9)
    assert len(doc["factored"]["factors"]) == 3  # the cancelled pair is left out
    assert "e+15" not in out and "e+16" not in out


def test_analyze_json_without_cancellation_lists_an_empty_cancelled(capsys):
    assert main(["analyze", str(_root() / EXAMPLE), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["cancelled_rad_s"] == []
    assert all(f["q_infinite"] is False for f in doc["factored"]["factors"])


def test_analyze_text_twin_t_prints_infinite_q_and_the_cancellation(tmp_path, capsys):
    assert main(["analyze", str(_twin_t_file(tmp_path))]) == 0
    out = capsys.readouterr().out
    assert "Q = ∞" in out
    assert "pole-zero cancellation at 60.06 Hz at these values" in out
    assert "cancelled (rad/s): -377.358 (60.1 Hz)" in out  # -1/(R·C), R = 26.5 kΩ, C = 100 nF
    assert "e+15" not in out and "e+16" not in out


# --------------------------------------------------------------------------- hostile text on the terminal

# ECMA-48 control functions: ESC [ 2 J clears the screen, ESC ] 0 ; … BEL sets the window title,
# CSI (U+009B) is the one-character form of ESC [; U+202E (RLO) reverses what follows (UAX #9).
HOSTILE = "Loop \x1b[2J\x1b]0;owned\x07 \x9b31m \u202eevil\u202c\rfake"


def _hostile_file(tmp_path, **extra):
    d = json.loads((_root() / EXAMPLE).read_text(encoding="utf-8"))
    d.update(title=HOSTILE, **extra)
    p = tmp_path / "hostile.json"
    p.write_text(json.dumps(d), encoding="utf-8")
    return p


def _no_controls(text: str) -> None:
    import unicodedata

    bad = [c for c in text if (unicodedata.category(c) == "Cc" and c not in "\n\t") or c in "\u202a\u202b\u202d\u202e"]
    assert bad == [], bad


def test_analyze_prints_no_control_characters(tmp_path, capsys):
    assert main(["analyze", str(_hostile_file(tmp_path))]) == 0
    out = capsys.readouterr().out
    _no_controls(out)
    assert out.splitlines()[0] == ("Loop \\u001b[2J\\u001b]0;owned\\u0007 \\u009b31m \\u202eevil\\u202c\\u000dfake")


def test_spread_and_snap_print_no_control_characters(tmp_path, capsys):
    p = _hostile_file(tmp_path, tolerances={"R*": "1%", "C*": "5%"})
    assert main(["spread", str(p), "--samples", "50"]) == 0
    out = capsys.readouterr().out
    _no_controls(out)
    assert "\\u001b[2J" in out.splitlines()[0]
    assert main(["spread", str(p), "--samples", "50", "--json"]) == 0
    out = capsys.readouterr().out
    _no_controls(out)
    json.loads(out)  # still JSON: the escapes are JSON's own (RFC 8259, section 7)
    target = tmp_path / "out\x1b[2J.json"
    assert main(["snap", str(p), "-o", str(target)]) == 0
    out = capsys.readouterr().out
    _no_controls(out)
    assert "wrote " in out and "out\\u001b[2J.json" in out and target.exists()


def test_error_messages_print_no_control_characters(tmp_path, capsys):
    d = json.loads((_root() / EXAMPLE).read_text(encoding="utf-8"))
    d["\x1b[2Jbad"] = 1
    p = tmp_path / "bad.json"
    p.write_text(json.dumps(d), encoding="utf-8")
    assert main(["analyze", str(p)]) == 2
    err = capsys.readouterr().err
    _no_controls(err)
    assert "unknown key" in err and "\\u001b[2Jbad" in err


def test_lone_surrogate_title_is_a_clean_error(tmp_path):
    d = json.loads((_root() / EXAMPLE).read_text(encoding="utf-8"))
    d.pop("title", None)
    p = tmp_path / "s.json"
    p.write_text(json.dumps(d)[:-1] + ', "title": "x \\ud800 y"}', encoding="utf-8")  # ASCII JSON escape
    out = run("analyze", str(p))
    assert out.returncode == 2 and out.stdout == ""
    assert "title: text holds a lone surrogate" in out.stderr and "Traceback" not in out.stderr


@pytest.mark.skipif(sys.platform == "win32", reason="POSIX argv bytes")
def test_undecodable_notes_argument_is_a_clean_error(tmp_path):
    # Bytes that are not UTF-8 reach Python as lone surrogates (PEP 383, surrogateescape).
    out = subprocess.run([sys.executable, "-m", "loopcraft.cli", "report", EXAMPLE, "-o",
                          str(tmp_path / "r.md"), "--notes", b"bad \xff notes"],
                         capture_output=True, cwd=_root())
    assert out.returncode == 2
    assert b"notes: text holds a lone surrogate" in out.stderr and b"Traceback" not in out.stderr
    assert not (tmp_path / "r.md").exists()


# --------------------------------------------------------------------------- strict JSON output
def _refuse_constant(name):
    raise AssertionError(f"{name} is not a JSON number (RFC 8259, section 6)")


def test_json_safe_maps_non_finite_numbers_to_null():
    # RFC 8259, "The JavaScript Object Notation (JSON) Data Interchange Format", 2017, section 6:
    # NaN and Infinity are not permitted; json.dumps(allow_nan=False) enforces it.
    import numpy as np

    from loopcraft._numbers import json_safe

    doc = {"a": math.nan, "b": [math.inf, 1.5, np.float64(-np.inf)], "c": np.array([2.0, np.nan]),
           "d": (np.int64(3), np.bool_(True), "inf", None)}
    with pytest.raises(ValueError):
        json.dumps(doc, allow_nan=False, default=lambda x: x.tolist())
    text = json.dumps(json_safe(doc), allow_nan=False)
    assert json.loads(text) == {"a": None, "b": [None, 1.5, None], "c": [2.0, None], "d": [3, True, "inf", None]}


@pytest.mark.parametrize(
    "args",
    [
        ["analyze", "{f}", "--json"],
        ["response", "{f}", "--hz", "1", "1k", "1M", "--json"],
        ["check", "{f}", "--no-spread", "--json"],
        ["spread", "{f}", "--samples", "50", "--json"],
        ["snap", "{f}", "--json"],
    ],
)
def test_every_json_output_is_strict_json(capsys, args):
    f = str(_root() / "src/loopcraft/examples/bus48_guarded.json")
    assert main([a.format(f=f) for a in args]) in (0, 1)
    json.loads(capsys.readouterr().out, parse_constant=_refuse_constant)
