import json
import os

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import loopcraft as lc
from loopcraft.errors import ComponentValueError, DesignFileError


def test_round_trip_keeps_text(type3_dict, tmp_path):
    d = lc.Design.from_dict(type3_dict)
    p = d.save(tmp_path / "x.json")
    again = lc.load(p)
    assert again == d
    assert json.loads(p.read_text(encoding="utf-8")) == type3_dict  # nothing lost, "4k7"-style text kept


def test_with_values_is_immutable(type3_dict):
    d = lc.Design.from_dict(type3_dict)
    d2 = d.with_values(R2="33k", C1=1e-8)
    assert d.values["R2"] == 22e3 and d2.values["R2"] == 33e3 and d2.values["C1"] == 1e-8
    assert d2.to_dict()["values"]["R2"] == "33k"
    with pytest.raises(ComponentValueError, match="R9"):
        d.with_values(R9="1k")
    with pytest.raises(ComponentValueError, match="R2"):
        d.with_values(R2="-3k")


@pytest.mark.parametrize(
    ("mutate", "path", "words"),
    [
        (lambda d: d.update(colour="red"), "colour", "unknown key"),
        (lambda d: d.pop("loopcraft"), "loopcraft", "missing format version"),
        (lambda d: d.update(loopcraft=2), "loopcraft", "newer"),
        (lambda d: d.update(loopcraft="1"), "loopcraft", "positive integer"),
        (lambda d: d["values"].pop("C3"), "values.C3", "missing value"),
        (lambda d: d["values"].update(R9="1k"), "values.R9", "no element"),
        (lambda d: d["values"].update(R1="4k7k"), "values.R1", "cannot read"),
        (lambda d: d["stage"].update(kind="magic"), "stage.kind", "unknown stage kind"),
        (lambda d: d["stage"].update(ground="R5"), "stage.ground", "unknown key"),
        (lambda d: d["stage"].pop("feedback"), "stage.feedback", "missing key"),
        (lambda d: d["stage"].update(input="R1 || (R3 + C3"), "stage.input", "never closed"),
        (lambda d: d["stage"].update(feedback="(R2 + C1) || R1"), "stage", "both"),
        (lambda d: d.update(title=3), "title", "text"),
        (lambda d: d.update(feedback_gain=-1), "feedback_gain", "> 0"),
        (lambda d: d.pop("values"), "values", "missing section"),
    ],
)
def test_loader_errors_carry_key_path(type3_dict, mutate, path, words):
    mutate(type3_dict)
    with pytest.raises(DesignFileError, match=words) as exc:
        lc.Design.from_dict(type3_dict)
    assert exc.value.key_path == path


def test_bad_json_reports_line(tmp_path):
    p = tmp_path / "bad.json"
    p.write_text('{"loopcraft": 1,\n "stage": {,}\n}', encoding="utf-8")
    with pytest.raises(DesignFileError, match="line 2"):
        lc.load(p)


def test_duplicate_keys_rejected(tmp_path):
    p = tmp_path / "dup.json"
    p.write_text('{"loopcraft": 1, "loopcraft": 1}', encoding="utf-8")
    with pytest.raises(DesignFileError, match="twice"):
        lc.load(p)


def test_missing_file():
    with pytest.raises(DesignFileError, match="cannot read"):
        lc.load("/nonexistent/nothing.json")


def test_save_is_atomic(type3_dict, tmp_path, monkeypatch):
    d = lc.Design.from_dict(type3_dict)
    p = d.save(tmp_path / "keep.json")
    before = p.read_bytes()

    def boom(src, dst):
        raise OSError("disk full")

    monkeypatch.setattr(os, "replace", boom)
    with pytest.raises(OSError):
        d.with_values(R2="33k").save(p)
    assert p.read_bytes() == before
    assert [x.name for x in tmp_path.iterdir()] == ["keep.json"]  # no temp file left behind


def test_circuit_stage_round_trip(tmp_path):
    # Unity-gain Sallen-Key low-pass as a circuit stage.
    d = {
        "loopcraft": 1,
        "title": "Anti-alias filter, strain-gauge front end",
        "stage": {
            "kind": "circuit",
            "elements": [["R1", "in", "a"], ["R2", "a", "b"], ["C1", "a", "out"], ["C2", "b", "gnd"]],
            "opamps": [{"plus": "b", "minus": "out", "out": "out"}],
            "input": "in",
            "output": "out",
        },
        "values": {"R1": "10k", "R2": "10k", "C1": "22n", "C2": "10n"},
    }
    design = lc.Design.from_dict(d)
    assert lc.load(design.save(tmp_path / "sk.json")).to_dict() == d


value_text = st.builds(
    lambda m, p: f"{m}{p}",
    st.sampled_from(["1", "2.2", "4.7", "10", "33", "680"]),
    st.sampled_from(["", "k", "M", "n", "p", "u"]),
)


@settings(max_examples=40, deadline=None)
@given(st.fixed_dictionaries({n: value_text for n in ("R1", "R2", "R3", "C1", "C2", "C3")}), st.text(max_size=30))
def test_file_round_trip_property(values, notes):
    d = {
        "loopcraft": 1,
        "stage": {"kind": "inverting", "input": "R1 || (R3 + C3)", "feedback": "(R2 + C1) || C2"},
        "values": values,
    }
    if notes:
        d["notes"] = notes
    design = lc.Design.from_dict(d)
    again = lc.Design.from_dict(json.loads(design.to_json()))
    assert again.to_dict() == d
    assert again.values == design.values
