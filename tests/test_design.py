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
        (lambda d: d.update(feedback_gain=-1), "feedback_gain", "must be a number in 1e-06 V/V"),
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


# --------------------------------------------------------------------------- hostile text and saving


@pytest.mark.parametrize("key", ["title", "notes"])
def test_lone_surrogate_is_refused_on_load_with_key_path(type3_dict, key, tmp_path):
    # "\ud800" is a legal JSON escape (RFC 8259, section 7) but no Unicode scalar value, so UTF-8
    # cannot encode it (RFC 3629, section 3); the reference is Python's own codec.
    with pytest.raises(UnicodeEncodeError):
        "\ud800".encode("utf-8")
    type3_dict.pop(key, None)
    text = json.dumps(type3_dict)[:-1] + f', "{key}": "before \\ud800 after"}}'
    assert json.loads(text)[key] == "before \ud800 after"  # the JSON module accepts it
    with pytest.raises(DesignFileError, match="lone surrogate") as exc:
        lc.loads(text)
    assert exc.value.key_path == key
    p = tmp_path / "s.json"
    p.write_text(text, encoding="utf-8")
    with pytest.raises(DesignFileError) as exc:
        lc.load(p)
    assert exc.value.key_path == key
    d = lc.Design.from_dict(type3_dict)
    with pytest.raises(DesignFileError) as exc:
        d.with_sections(**{key: "x \udc80"})
    assert exc.value.key_path == key
    # A whole character outside the BMP (a surrogate pair in JSON) is fine and round-trips.
    fine = lc.loads(json.dumps(type3_dict)[:-1] + f', "{key}": "clef \\ud834\\udd1e"}}')
    assert getattr(fine, key) == "clef \U0001d11e"
    assert lc.load(fine.save(tmp_path / "fine.json")) == fine


@pytest.mark.skipif(os.name != "posix", reason="POSIX permission bits")
def test_save_keeps_permissions_of_the_file_it_replaces(type3_dict, tmp_path):
    d = lc.Design.from_dict(type3_dict)
    p = tmp_path / "shared.json"
    p.write_text("{}", encoding="utf-8")
    os.chmod(p, 0o644)
    saved = os.umask(0o077)  # a fresh file would be 0600
    try:
        d.save(p)
    finally:
        os.umask(saved)
    assert os.stat(p).st_mode & 0o7777 == 0o644
    assert lc.load(p) == d


@pytest.mark.skipif(os.name != "posix", reason="symbolic links")
def test_save_through_a_symlink_writes_its_target(type3_dict, tmp_path):
    d = lc.Design.from_dict(type3_dict)
    real = tmp_path / "real.json"
    real.write_text("{}", encoding="utf-8")
    link = tmp_path / "current.json"
    link.symlink_to(real.name)
    assert d.save(link) == link
    assert link.is_symlink() and os.readlink(link) == "real.json"
    assert lc.load(real) == d
    assert sorted(x.name for x in tmp_path.iterdir()) == ["current.json", "real.json"]


def test_save_failure_is_a_package_error(type3_dict, tmp_path):
    from loopcraft.errors import FileWriteError, LoopcraftError

    d = lc.Design.from_dict(type3_dict)
    with pytest.raises(FileWriteError, match="cannot write .*no-such-folder") as exc:
        d.save(tmp_path / "no-such-folder" / "x.json")
    assert isinstance(exc.value, LoopcraftError)


# --------------------------------------------------------------------------- hostile files
def test_deeply_nested_json_is_refused_with_line_column_and_caret():
    from loopcraft.design import MAX_JSON_DEPTH

    text = "[" * 100_000 + "]" * 100_000  # exhausts json's recursive decoder without the limit
    with pytest.raises(DesignFileError, match=f"nested deeper than {MAX_JSON_DEPTH} levels") as err:
        lc.loads(text, "deep.json")
    msg = str(err.value)
    assert f"line 1, column {MAX_JSON_DEPTH + 1}" in msg
    snippet, caret = msg.splitlines()[-2:]
    assert snippet[caret.index("^")] == "["


def test_brackets_inside_strings_do_not_count_as_nesting(type3_dict):
    d = dict(type3_dict, notes="[" * 500 + "{" * 500 + '\\"')
    assert lc.loads(json.dumps(d)).notes == d["notes"]


def test_a_number_of_thousands_of_digits_is_refused_where_it_stands(type3_dict):
    text = json.dumps(dict(type3_dict, feedback_gain=12345)).replace("12345", "1" * 5000)
    with pytest.raises(DesignFileError, match="a number of 5000 characters") as err:
        lc.loads(text)
    assert "line 1" in str(err.value)


@pytest.mark.parametrize(
    "section, value, path",
    [
        ("values", {"R1": 10**400}, "values.R1"),
        ("feedback_gain", 10**400, "feedback_gain"),
        ("opamp", {"model": "single_pole", "a0": 10**400, "gbw_hz": 1e6}, "opamp.a0"),
        ("opamp", {"model": "single_pole", "a0_db": 1e308, "gbw_hz": 1e6}, "opamp.a0_db"),
        ("plant", {"kind": "general", "gain": 10**400}, "plant.gain"),
        ("plant", {"kind": "boost_vm", "vin_v": 12, "duty": 0.5, "l_h": 1e-5, "c_f": 1e308, "load_ohm": 10,
                   "ramp_v": 1}, "plant.c_f"),
        ("tolerances", {"R1": 10**400}, "tolerances.R1"),
        ("spec", {"phase_margin_min_deg": 10**400}, "spec.phase_margin_min_deg"),
        ("spec", {"crossover_hz": [1, 10**400]}, "spec.crossover_hz[1]"),
    ],
)
def test_numbers_beyond_the_float_range_are_refused_with_the_key_path(type3_dict, section, value, path):
    # 10**400 exceeds the largest double, about 1.8e308 (IEEE 754; from memory): float() of it raises
    # OverflowError, which must not escape.
    d = dict(type3_dict)
    d[section] = {**d[section], **value} if section == "values" else value
    text = json.dumps(d)
    with pytest.raises(DesignFileError) as err:
        lc.loads(text)
    assert err.value.key_path == path


@pytest.mark.parametrize("kind", [5, ["inverting"], {"a": 1}, None, 1.5])
def test_a_stage_kind_that_is_not_text_is_a_clean_error(type3_dict, kind):
    d = dict(type3_dict, stage={**type3_dict["stage"], "kind": kind})
    with pytest.raises(DesignFileError) as err:
        lc.Design.from_dict(d)
    assert err.value.key_path == "stage.kind"


def test_loads_takes_utf8_bytes_and_refuses_other_types(type3_dict):
    text = json.dumps(type3_dict)
    assert lc.loads(text.encode("utf-8")) == lc.loads(text)
    with pytest.raises(DesignFileError, match="not UTF-8"):
        lc.loads(b"\xff\xfe{")
    with pytest.raises(DesignFileError, match="must be a string"):
        lc.loads(12345)


def test_a_key_given_twice_keeps_its_key_path():
    with pytest.raises(DesignFileError, match="appears twice") as err:
        lc.loads('{"loopcraft": 1, "title": "a", "title": "b"}')
    assert err.value.key_path == "title"
