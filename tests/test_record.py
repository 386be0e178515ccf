"""Tests of loopcraft.report.record: the HTML/Markdown design record, its figures and atomic saving.

Expected component texts, corner formulas and E-series memberships below are
written out by hand (Venable 1983 corner formulas; IEC 60063:2015 tables);
figures are checked as real PNG files (PNG signature, ISO/IEC 15948:2004 §5.2)
decoded by an independent reader.
"""

from __future__ import annotations

import base64
import html
import io
import json
import os
import re
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import pytest

import loopcraft
from loopcraft.design import Design, load
from loopcraft.errors import LoopcraftError
from loopcraft.report.record import DesignRecord, record, spread_header
from loopcraft.synthesis import filter_design

EXAMPLES = Path(__file__).resolve().parents[1] / "src" / "loopcraft" / "examples"
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # ISO/IEC 15948:2004, section 5.2
STAMP = datetime(2030, 5, 17, 9, 30, tzinfo=UTC)

SPEC_PASS = {"phase_margin_min_deg": 45, "gain_margin_min_db": 6, "crossover_hz": [20e3, 40e3],
             "corners": {"ωz1": [4e3, 6e3]}}
SPEC_FAIL = {"phase_margin_min_deg": 75, "crossover_hz": [20e3, 40e3]}


def loop_design(spec=SPEC_PASS) -> Design:
    d = load(EXAMPLES / "bus48_loop.json").to_dict()
    d["spec"] = spec
    return Design.from_dict(d)


@pytest.fixture(scope="module")
def converter_record() -> DesignRecord:
    return record(loop_design(), "Bench review pending.", created=STAMP)


@pytest.fixture(scope="module")
def filter_record() -> DesignRecord:
    d = filter_design("butterworth", 4, 1e3, capacitor_series="E12", title="Anti-alias filter, strain-gauge front end")
    return record(d, created=STAMP)


def _images(text: str, pattern: str) -> list[bytes]:
    return [base64.b64decode(m) for m in re.findall(pattern, text)]


def html_images(text: str) -> list[bytes]:
    return _images(text, r'<img [^>]*src="data:image/png;base64,([A-Za-z0-9+/=]+)"')


def md_images(text: str) -> list[bytes]:
    return _images(text, r"!\[[^\]]*\]\(data:image/png;base64,([A-Za-z0-9+/=]+)\)")


# --------------------------------------------------------------------------- content


def test_html_has_title_values_formulas_and_verdict(converter_record):
    page = converter_record.to_html()
    assert page.startswith("<!DOCTYPE html>")
    assert html.escape("Voltage loop, 48 V to 12 V bus converter (Type III, k-factor, E24)") in page
    # Every value of bus48_loop.json in engineering form (by hand).
    for text in ("10 kΩ", "12 kΩ", "300 Ω", "2.7 nF", "75 pF", "3 nF"):
        assert f"<td>{text}</td>" in page, text
    # The Type III corners (Venable 1983): 1/(R2 C1), 1/((R1 + R3) C3), 1/(R3 C3), (C1 + C2)/(R2 C1 C2).
    for formula in ("1/(C1·R2)", "1/(C3·(R1 + R3))", "1/(C3·R3)", "(C1 + C2)/(C1·C2·R2)"):
        assert f"<code>{html.escape(formula)}</code>" in page, formula
    assert "Spec check: PASS" in page
    for name in ("phase_margin_min_deg", "gain_margin_min_db", "crossover_hz", "corners.ωz1"):
        assert name in page
    assert "Bench review pending." in page
    assert "2030-05-17T09:30:00+00:00" in page
    assert f"loopcraft {loopcraft.__version__}" in page
    # In a notebook the formula goes to MathJax; a standalone page has no MathJax, so it carries
    # the formula as a rendered image with the LaTeX as its alt text.
    assert "\\[" in converter_record._repr_html_() and "\\]" in converter_record._repr_html_()
    assert f'alt="{html.escape(converter_record.design.factored().symbolic_latex())}"' in page


def test_no_external_resources(converter_record):
    page = converter_record.to_html()
    assert not re.search(r"""(src|href)\s*=\s*["'](https?:)?//""", page)
    assert "<link" not in page and "<script" not in page
    assert "<style>" in page


def test_failing_spec_verdict_is_shown():
    rec = record(loop_design(SPEC_FAIL), created=STAMP)
    page = rec.to_html()
    assert rec.spec_passed is False
    assert "Spec check: FAIL" in page and "1 failed" in page
    assert "**Spec check: FAIL**" in rec.to_markdown()


def test_margins_are_those_of_a_fresh_analysis(converter_record):
    lp = loop_design().analyze().loop
    m = lp.margins
    assert {k: converter_record.loop[k] for k in ("crossovers", "gain_margins")} == m.to_dict()
    # the record carries the closed-loop verdict and shows it before the margins
    assert converter_record.loop["stable"] is True and converter_record.loop["closed_loop_rhp_poles"] == 0
    page = converter_record.to_html()
    assert page.index("STABLE") < page.index("phase margin")
    c = m.crossovers[0]
    assert f"phase margin {c.phase_margin_deg:.2f}°" in converter_record.to_html()
    assert converter_record.amplifier_loop is not None
    assert "Amplifier loop" in converter_record.to_html()


def test_eseries_marks():
    d = loop_design().with_values(R2="12.34k", C2="5.11n")
    rec = record(d, created=STAMP)
    rows = {v.name: v for v in rec.values}
    # IEC 60063:2015 by hand: 12.34k is in no series; 5.11 first appears in E48; 10k is in E3;
    # 300 Ω (3.0) is in E24 only among E3…E24.
    assert rows["R2"].series is None and not rows["R2"].in_chosen
    assert rows["C2"].series == "E48" and not rows["C2"].in_chosen
    assert rows["R1"].series == "E3" and rows["R1"].in_chosen
    assert rows["R3"].series == "E24"
    page = rec.to_html()
    assert "not E24 (nearest 12 kΩ)" in page  # 12.34k lies between 12k and 13k, nearer 12k
    assert "not E24 (nearest 5.1 nF)" in page  # 5.11n lies between 5.1n and 5.6n


# --------------------------------------------------------------------------- cautions


def test_converter_record_carries_the_cautions(converter_record):
    page = converter_record.to_html()
    md = converter_record.to_markdown()
    for text in ("Hazardous voltages and stored energy", "Verify the loop gain on the bench", "injection",
                 "Follow local codes and licensed practice"):
        assert text in page and text in md


def test_plain_filter_record_has_no_cautions(filter_record):
    assert filter_record.cautions == ()
    page = filter_record.to_html()
    assert "Cautions" not in page and "Hazardous" not in page
    assert "Cautions" not in filter_record.to_markdown()
    assert filter_record.loop is None and filter_record.spec is None


# --------------------------------------------------------------------------- embedded design file


def test_embedded_json_round_trips_in_html(converter_record):
    page = converter_record.to_html()
    found = re.findall(r'<pre class="lc-design-file">(.*?)</pre>', page, flags=re.S)
    assert len(found) == 1
    again = Design.from_dict(json.loads(html.unescape(found[0])))
    assert again == converter_record.design


def test_embedded_json_round_trips_in_markdown(converter_record, filter_record):
    for rec in (converter_record, filter_record):
        md = rec.to_markdown()
        found = re.findall(r"^(`{3,})json\n(.*?)\n\1$", md, flags=re.S | re.M)
        assert len(found) == 1
        assert Design.from_dict(json.loads(found[0][1])) == rec.design
        assert md.startswith(f"# {rec.design.title}")


# --------------------------------------------------------------------------- figures


def _decode(png: bytes) -> np.ndarray:
    try:
        from PIL import Image
    except ImportError:
        import matplotlib.image as mpimg

        return np.asarray(mpimg.imread(io.BytesIO(png), format="png"))
    with Image.open(io.BytesIO(png)) as im:
        im.verify()
    with Image.open(io.BytesIO(png)) as im:
        return np.asarray(im.convert("RGB"))


@pytest.mark.parametrize("which", ["converter_record", "filter_record"])
def test_two_real_png_figures_in_html_and_markdown(which, request):
    rec = request.getfixturevalue(which)
    for imgs, n_eq in ((html_images(rec.to_html()), 1), (md_images(rec.to_markdown()), 1),
                       (html_images(rec._repr_html_()), 0)):
        assert len(imgs) == 2 + n_eq  # the formula image where no MathJax runs, then the two figures
        imgs = imgs[n_eq:]
        assert imgs == [rec.bode_png, rec.pole_zero_png]
        for png in imgs:
            assert png[:8] == PNG_SIGNATURE
            pixels = _decode(png)
            h, w = pixels.shape[:2]
            assert w >= 500 and h >= 400
            assert float(np.std(pixels)) > 1e-3  # something is drawn


def test_figures_saved_for_inspection(converter_record):
    out = Path(__file__).resolve().parent / "_artifacts"
    out.mkdir(exist_ok=True)
    (out / "record_bode.png").write_bytes(converter_record.bode_png)
    (out / "record_pole_zero.png").write_bytes(converter_record.pole_zero_png)
    assert (out / "record_bode.png").read_bytes()[:8] == PNG_SIGNATURE


# --------------------------------------------------------------------------- saving


def test_save_picks_the_format_by_suffix(tmp_path, filter_record):
    p_html = filter_record.save(tmp_path / "r.html")
    p_md = filter_record.save(tmp_path / "r.md")
    assert p_html.read_text(encoding="utf-8") == filter_record.to_html()
    assert p_md.read_text(encoding="utf-8") == filter_record.to_markdown()
    with pytest.raises(LoopcraftError, match=r"\.pdf"):
        filter_record.save(tmp_path / "r.pdf")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["r.html", "r.md"]


def test_atomic_save_keeps_the_old_file(tmp_path, monkeypatch, filter_record):
    target = tmp_path / "record.html"
    target.write_text("old record", encoding="utf-8")

    def failing_replace(src, dst):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(os, "replace", failing_replace)
    with pytest.raises(LoopcraftError, match="No space left"):
        filter_record.save(target)
    assert target.read_text(encoding="utf-8") == "old record"
    assert [p.name for p in tmp_path.iterdir()] == ["record.html"]


def test_repr_html_is_a_fragment(converter_record):
    frag = converter_record._repr_html_()
    assert "<html" not in frag and "<!DOCTYPE" not in frag
    assert 'class="lc-record"' in frag and "<style>" in frag


# --------------------------------------------------------------------------- tolerances


def test_record_of_a_guarded_design_has_spread_and_yield():
    d = load(EXAMPLES / "bus48_guarded.json")
    rec = record(d, created=STAMP, samples=300)
    assert rec.spread is not None
    assert rec.spec is not None and any(i["name"] == "yield_min" for i in rec.spec["items"])
    page = rec.to_html()
    assert "Tolerance spread (Monte Carlo)" in page
    skipped = record(d, created=STAMP, spread=False)
    assert skipped.spread is None
    assert any("not run" in r for r in skipped.remarks)
    assert all(i["name"] != "yield_min" for i in skipped.spec["items"])


# --------------------------------------------------------------------------- hostile text

HOSTILE_TITLE = "<script>alert(1)</script> $\\frac$ [x](javascript:alert(1)) **b** `c`"
HOSTILE_NOTES = "<img src=x onerror=alert(1)>\n# not a heading\n![y](javascript:alert(2)) &#106;avascript:z | cell"
HOSTILE_RECORD_NOTES = "<b onmouseover=alert(3)>hi</b> [link](JAVASCRIPT:alert(4)) $x^$"


@pytest.fixture(scope="module")
def hostile_record() -> DesignRecord:
    d = json.loads((EXAMPLES / "bus48_type3.json").read_text(encoding="utf-8"))
    d.update(title=HOSTILE_TITLE, notes=HOSTILE_NOTES)
    # The figure title holds "$\frac$", which matplotlib's mathtext cannot parse: drawing must still work.
    return record(Design.from_dict(d), HOSTILE_RECORD_NOTES, spread=False, created=STAMP)


def _assert_inert(soup) -> None:
    assert soup.find("script") is None and soup.find("a") is None
    for tag in soup.find_all(True):
        assert not any(a.lower().startswith("on") for a in tag.attrs), tag
        assert not any("javascript" in str(v).lower() for v in tag.attrs.values()), tag
    for img in soup.find_all("img"):
        assert img["src"].startswith("data:image/png;base64,"), img


def test_markdown_record_neutralises_user_text(hostile_record):
    # Outside reference: the mistune Markdown renderer (raw HTML passed through) and BeautifulSoup.
    mistune = pytest.importorskip("mistune")
    bs4 = pytest.importorskip("bs4")
    soup = bs4.BeautifulSoup(mistune.html(hostile_record.to_markdown()), "html.parser")
    _assert_inert(soup)
    assert soup.find("h1").get_text() == HOSTILE_TITLE
    assert [h.get_text() for h in soup.find_all("h1")] == [HOSTILE_TITLE]  # "# not a heading" stayed text
    paragraphs = [p.get_text() for p in soup.find_all("p")]
    assert HOSTILE_RECORD_NOTES in paragraphs
    assert "Design notes: " + " ".join(HOSTILE_NOTES.splitlines()) in paragraphs
    assert len(soup.find_all("img")) == 3  # the formula and the two figures, nothing else


def test_html_record_escapes_user_text(hostile_record):
    bs4 = pytest.importorskip("bs4")
    for page in (hostile_record.to_html(), hostile_record._repr_html_()):
        soup = bs4.BeautifulSoup(page, "html.parser")
        _assert_inert(soup)
        assert soup.find("h1").get_text() == HOSTILE_TITLE
        notes = [p.get_text("\n") for p in soup.find_all("p", class_="lc-notes")]
        assert notes == [HOSTILE_RECORD_NOTES, "Design notes:\n " + HOSTILE_NOTES]  # bs4 joins at <em>, <br>
    assert bs4.BeautifulSoup(hostile_record.to_html(), "html.parser").title.get_text() == HOSTILE_TITLE


def test_markdown_spread_header_reads_as_written():
    # Spec item names such as phase_margin_min_deg hold underscores, which Markdown could read as
    # emphasis (CommonMark 0.30, section 6.2); rendered by mistune the lines must read as written.
    mistune = pytest.importorskip("mistune")
    bs4 = pytest.importorskip("bs4")
    rec = record(load(EXAMPLES / "bus48_guarded.json"), created=STAMP, samples=200)
    soup = bs4.BeautifulSoup(mistune.html(rec.to_markdown()), "html.parser")
    text = soup.get_text()
    for line in spread_header(rec.spread):
        assert line in text, line
    assert soup.find("em") is None or all("phase" not in em.get_text() for em in soup.find_all("em"))


def test_record_notes_with_a_lone_surrogate_are_refused():
    from loopcraft.errors import DesignFileError

    d = load(EXAMPLES / "bus48_type3.json")
    with pytest.raises(DesignFileError, match="surrogate") as exc:
        record(d, "bad \udcff notes", spread=False)
    assert exc.value.key_path == "notes"


def test_corner_rows_carry_the_formula_labels_whatever_the_order():
    # bus48_loop places the pole 1/(R3·C3) = 177 kHz below (C1 + C2)/(R2·C1·C2) = 182 kHz; with
    # R2 = 4k the zero 1/(R2·C1) rises above 1/((R1 + R3)·C3). Labels stay with the formulas
    # (Venable 1983 corner formulas, from memory), in the record's corner table as in the form.
    from loopcraft.report.record import _corner_rows

    for r2 in (12e3, 4e3):
        d = loop_design().with_values(R2=r2)
        v = d.values
        rows = {name: (formula, value) for name, formula, value in _corner_rows(d.factored())}
        assert {k: f for k, (f, _v) in rows.items()} == {
            "ωz1": "1/(C1·R2)", "ωz2": "1/(C3·(R1 + R3))", "ωp1": "(C1 + C2)/(C1·C2·R2)", "ωp2": "1/(C3·R3)"}
        assert rows["ωz1"][1].startswith(f"{1 / (v['R2'] * v['C1']):.4g} rad/s")
        assert rows["ωp2"][1].startswith(f"{1 / (v['R3'] * v['C3']):.4g} rad/s")
    page = record(loop_design().with_values(R2=4e3), created=STAMP).to_markdown()
    assert re.search(r"ωz1[^\n]*1/\(C1·R2\)", page)
