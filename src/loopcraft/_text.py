r"""Free text from users (private): checks on load, and neutralising for terminals, Markdown and figures.

Titles, notes and other free text come from design files, command-line
arguments and widgets. Three things are done with it here:

* :func:`check_text` refuses, with the key path, text that cannot be written
  back out: a lone surrogate (``"\ud800"`` is legal in JSON but is no
  Unicode character, so UTF-8 cannot encode it).
* :func:`terminal_safe` makes text safe to print: control characters that a
  terminal would act on (C0 and C1 controls except newline and tab, DEL,
  bidirectional overrides and isolates) and lone surrogates become visible
  ``\uXXXX`` escapes. The escapes are also JSON escapes, so JSON text stays
  valid JSON that decodes to the same strings.
* :func:`markdown_text` and :func:`markdown_code` make text inert in
  Markdown; :func:`mathtext_plain` makes text inert in matplotlib's mathtext.
"""

from __future__ import annotations

import re
from typing import Any

from .errors import DesignFileError

__all__ = ["check_text", "terminal_safe", "markdown_text", "markdown_code", "mathtext_plain"]

#: Bidirectional controls: ALM, LRM, RLM, the embeddings and overrides LRE…RLO, the isolates LRI…PDI
#: (Unicode Standard Annex #9, Table 1; from memory).
_BIDI = "\u061c\u200e\u200f\u202a\u202b\u202c\u202d\u202e\u2066\u2067\u2068\u2069"

# C0 controls except tab (0x09) and newline (0x0a), DEL, C1 controls, bidi controls, line and
# paragraph separators, and every surrogate code point (a str holds them only when lone).
_UNSAFE = re.compile("[\x00-\x08\x0b-\x1f\x7f-\x9f" + _BIDI + "\u2028\u2029\ud800-\udfff]")
_SURROGATE = re.compile("[\ud800-\udfff]")


def check_text(value: Any, key_path: str) -> str:
    r"""Check that a free-text field is a string that can be written back out.

    Parameters
    ----------
    value : object
        The value found (a title, notes …).
    key_path : str
        Where it was found, e.g. ``"title"`` or ``"notes"``.

    Returns
    -------
    str
        ``value`` unchanged.

    Raises
    ------
    DesignFileError
        Not a string, or a string holding a lone surrogate (a code point U+D800…U+DFFF, which
        JSON's ``\uXXXX`` escapes can express but UTF-8 cannot encode); the message gives the
        character's position.
    """
    if not isinstance(value, str):
        raise DesignFileError(f"expected text (got {value!r})", key_path)
    m = _SURROGATE.search(value)
    if m is not None:
        raise DesignFileError(
            f"text holds a lone surrogate {m.group()!r} at character {m.start() + 1}; expected valid Unicode "
            "text (a surrogate is only half of a character and cannot be saved as UTF-8)",
            key_path,
        )
    return value


def terminal_safe(text: str) -> str:
    r"""Text safe to print on a terminal: control characters become visible ``\uXXXX`` escapes.

    Escaped: C0 controls except newline and tab (so ESC cannot start an ANSI sequence and CR
    cannot overwrite a line), DEL, C1 controls (U+0080…U+009F, e.g. the single-character CSI),
    bidirectional embeddings, overrides and isolates (which reorder what is shown), line and
    paragraph separators, and lone surrogates (which a UTF-8 stream cannot encode). Everything
    else, including non-ASCII letters and symbols, is kept.

    Applied to JSON text the result is still valid JSON decoding to the same strings: the escapes
    are JSON's own, and these characters occur in JSON text only inside strings.

    Parameters
    ----------
    text : str
        Any text.

    Returns
    -------
    str
    """
    return _UNSAFE.sub(lambda m: f"\\u{ord(m.group()):04x}", str(text))


# Characters with an inline meaning in CommonMark / GitHub Markdown (emphasis, code, links and
# images, raw HTML, entities, strikethrough, table cells, math): each is backslash-escaped, or
# replaced by its HTML entity for <, > and & (CommonMark 0.30, sections 2.4 and 2.5; from memory).
_MD_INLINE = {c: "\\" + c for c in "\\`*_[]~|$"}
_MD_INLINE.update({"<": "&lt;", ">": "&gt;", "&": "&amp;"})
_MD_TABLE = str.maketrans(_MD_INLINE)
# A link scheme that runs code or embeds content: its colon is escaped so no renderer sees a scheme.
_SCHEME = re.compile(r"(?i)\b(java\s*script|vb\s*script|data|file)(\s*):")
# Block markers at the start of a line: ATX heading, block quote, list item, setext underline.
_BLOCK_START = re.compile(r"^([#>+=-]|\d{1,9}(?=[.)]))")


def markdown_text(text: Any) -> str:
    r"""Text made inert in Markdown: it renders as itself, on one line.

    Lines are stripped and joined with single spaces; characters with a Markdown meaning
    (``\ ` * _ [ ] ~ | $``) are backslash-escaped and ``< > &`` become HTML entities, so no
    emphasis, code, link, image, raw HTML, entity, math or table cell can start; a block marker
    at the start (``#``, ``>``, ``-``, ``+``, ``=``, ``1.``) is escaped; and the colon of a
    ``javascript:``, ``vbscript:``, ``data:`` or ``file:`` scheme is escaped so no renderer
    makes a link of it.

    Parameters
    ----------
    text : object
        Any text (``str()`` of anything else).

    Returns
    -------
    str
    """
    flat = " ".join(line.strip() for line in str(text).splitlines()).strip()
    out = flat.translate(_MD_TABLE)
    out = _SCHEME.sub(lambda m: f"{m.group(1)}{m.group(2)}\\:", out)
    m = _BLOCK_START.match(out)
    if m is not None:
        marker = m.group(1)
        out = ("\\" + out) if not marker[0].isdigit() else marker + "\\" + out[len(marker):]
    return out


def markdown_code(text: Any) -> str:
    r"""Text as a Markdown code span, whatever backticks it holds.

    The span's fence is one backtick longer than the longest run of backticks in the text
    (CommonMark 0.30, section 6.1; from memory) and newlines become spaces. Inside a span
    nothing else has a meaning; in a table cell ``|`` must still be written ``\|`` (the
    table writer does that).

    Parameters
    ----------
    text : object

    Returns
    -------
    str
    """
    body = " ".join(str(text).splitlines())
    longest = max((len(r) for r in re.findall(r"`+", body)), default=0)
    fence = "`" * (longest + 1)
    if body.startswith("`") or body.endswith("`") or (body.startswith(" ") and body.endswith(" ") and body.strip()):
        body = f" {body} "
    return f"{fence}{body}{fence}"


def mathtext_plain(text: Any) -> str:
    r"""Text that matplotlib shows as itself, never as mathtext.

    matplotlib treats text holding an even number (≥ 2) of unescaped ``$`` as mathtext, where
    ``\``, ``^``, ``_``, ``{`` … have meanings and a syntax error makes drawing fail. Each
    ``$`` is written ``\$``: then no unescaped ``$`` is left, the text is drawn as plain
    text, and matplotlib turns every ``\$`` back into ``$`` (matplotlib documentation, "Writing
    mathematical expressions"; from memory). Other characters need no escape outside mathtext.

    Parameters
    ----------
    text : object

    Returns
    -------
    str
    """
    return str(text).replace("$", "\\$")
