"""Tests of loopcraft._text: free text refused on load, and neutralised for terminals, Markdown and matplotlib.

Each check runs against something outside the project: Python's UTF-8 codec (RFC 3629) for what can
be saved, the ``json`` module (RFC 8259 escapes) and ``unicodedata`` categories for terminal text,
the mistune Markdown renderer with BeautifulSoup for Markdown, matplotlib's own mathtext detection
for figure text.
"""

from __future__ import annotations

import json
import unicodedata

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from loopcraft._text import check_text, markdown_code, markdown_text, mathtext_plain, terminal_safe
from loopcraft.errors import DesignFileError

# Any code point, lone surrogates included (hypothesis leaves category Cs out unless asked).
# Surrogates, controls and bidi marks are mixed in explicitly so that every run meets them.
any_text = st.text(alphabet=st.one_of(st.characters(codec=None, exclude_categories=()),
                                      st.sampled_from(["\ud800", "\udbff", "\udc80", "\udfff", "\x1b", "\x9b",
                                                       "\u202e", "\u2028", "\r", "\n", "\t"])), max_size=40)


# --------------------------------------------------------------------------- check_text


@settings(max_examples=200, deadline=None)
@given(any_text)
def test_check_text_refuses_exactly_what_utf8_cannot_encode(text):
    # Outside reference: Python's UTF-8 codec refuses surrogates (RFC 3629, section 3).
    try:
        text.encode("utf-8")
        encodable = True
    except UnicodeEncodeError:
        encodable = False
    if encodable:
        assert check_text(text, "title") == text
    else:
        with pytest.raises(DesignFileError) as exc:
            check_text(text, "title")
        assert exc.value.key_path == "title"


def test_check_text_names_the_position_and_key():
    with pytest.raises(DesignFileError, match=r"lone surrogate '\\ud800' at character 4") as exc:
        check_text("ab \ud800 cd", "notes")
    assert exc.value.key_path == "notes" and str(exc.value).startswith("notes: ")
    with pytest.raises(DesignFileError, match="expected text") as exc:
        check_text(3, "title")
    assert exc.value.key_path == "title"
    # A character outside the BMP is one code point in Python, not a surrogate pair.
    assert check_text("clef \U0001d11e", "title") == "clef \U0001d11e"


# --------------------------------------------------------------------------- terminal_safe

# Bidirectional formatting characters (Unicode Standard Annex #9, table 1; from memory).
BIDI = "\u061c\u200e\u200f\u202a\u202b\u202c\u202d\u202e\u2066\u2067\u2068\u2069"


def _unsafe(ch: str) -> bool:
    cat = unicodedata.category(ch)
    # Cc: C0, DEL and C1 controls; Cs: surrogates; Zl/Zp: line and paragraph separators.
    return (cat == "Cc" and ch not in "\n\t") or cat in ("Cs", "Zl", "Zp") or ch in BIDI


@settings(max_examples=300, deadline=None)
@given(any_text)
def test_terminal_safe_escapes_exactly_the_controls(text):
    out = terminal_safe(text)
    assert out == "".join(f"\\u{ord(c):04x}" if _unsafe(c) else c for c in text)
    assert not any(_unsafe(ch) for ch in out)
    out.encode("utf-8")  # printable on a UTF-8 stream


@settings(max_examples=200, deadline=None)
@given(st.dictionaries(any_text, any_text, max_size=4))
def test_terminal_safe_keeps_json_valid_and_equal(doc):
    # The escapes are JSON's own (RFC 8259, section 7): the printed JSON decodes to the same data.
    text = json.dumps(doc, ensure_ascii=False, indent=2)
    assert json.loads(terminal_safe(text)) == doc


def test_terminal_safe_examples():
    # ECMA-48: ESC [ ... m is a colour sequence, CSI (U+009B) its one-character form; BEL rings; CR returns.
    hostile = "\x1b[31mred\x1b[0m \x9b2J bell\x07 over\rwrite \u202eevil\u202c tab\tnew\nline é 漢"
    out = terminal_safe(hostile)
    assert out == ("\\u001b[31mred\\u001b[0m \\u009b2J bell\\u0007 over\\u000dwrite \\u202eevil\\u202c "
                   "tab\tnew\nline é 漢")
    assert terminal_safe("lone \ud800") == "lone \\ud800"


# --------------------------------------------------------------------------- Markdown

mistune = pytest.importorskip("mistune")
bs4 = pytest.importorskip("bs4")

HOSTILE = [
    "<script>alert(1)</script>",
    "<img src=x onerror=alert(1)>",
    "[x](javascript:alert(1))",
    "[x](JaVaScRiPt:alert(1))",
    "![z](http://example.invalid/a.png)",
    "<javascript:alert(1)>",
    "<https://example.invalid>",
    "[a]: javascript:alert(1)",
    "&#106;avascript:alert(1) &lt;b&gt;",
    "# heading", "1. item", "2) item", "> quote", "- item", "+ item", "---", "===", "    indented code",
    "`code` ``more``", "**bold** _em_ ~~struck~~", "a | b | c", "$x^2$ and $$y$$", "[^1] footnote",
    "back\\slash \\[not a link](javascript:1)", "x<!-- comment -->", "<b>bold</b>",
    "Voltage loop, 48 V to 12 V (Type III, k-factor, E24)",
]


def _render(md: str):
    return bs4.BeautifulSoup(mistune.html(md), "html.parser")


@pytest.mark.parametrize("text", HOSTILE)
def test_markdown_text_renders_as_itself(text):
    # Outside reference: mistune (a CommonMark renderer) turns the escaped text into one plain paragraph.
    soup = _render(markdown_text(text))
    assert [t.name for t in soup.find_all(True)] == ["p"], soup
    assert soup.get_text().strip() == text.strip()


def test_markdown_text_flattens_lines():
    soup = _render(markdown_text("first line\n# not a heading\n- not a list\n<script>x</script>"))
    assert [t.name for t in soup.find_all(True)] == ["p"]
    assert soup.get_text().strip() == "first line # not a heading - not a list <script>x</script>"


@settings(max_examples=150, deadline=None)
@given(st.text(alphabet=st.sampled_from(list("ab1 .:()[]<>!#*_`~|$&\\-+=/;\"'")), max_size=30))
def test_markdown_text_property(text):
    soup = _render(markdown_text(text))
    assert {t.name for t in soup.find_all(True)} <= {"p"}
    assert soup.get_text().strip() == text.strip()


def test_markdown_code_keeps_backticks_and_html():
    for text in ("R1 || (R3 + C3)", "a `b` c", "``x``", "`", "<b>&amp;</b>", " padded "):
        soup = _render("Stage: " + markdown_code(text))
        codes = soup.find_all("code")
        assert len(codes) == 1 and codes[0].get_text() == text, (text, soup)


# --------------------------------------------------------------------------- matplotlib


@pytest.mark.parametrize("text", ["$\\foo$", "$x^$", "$$", "cost $5 and $6", "a \\$ b $x$", "50% _x_ ^y"])
def test_mathtext_plain_is_drawn_as_itself(text):
    # Outside reference: matplotlib's own preprocessing decides math or not, and what is drawn.
    mpl_text = pytest.importorskip("matplotlib.text")
    shown, is_math = mpl_text.Text()._preprocess_math(mathtext_plain(text))
    assert is_math is False and shown == text
