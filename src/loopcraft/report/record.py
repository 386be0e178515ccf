"""Design records: one self-contained document per design, for a notebook, a file or a review.

:func:`record` gathers everything a reviewer needs about a design at one
moment: the title, the date, the loopcraft version, the factored form with
each corner's formula and value, the component values with the E-series each
belongs to, the loop and amplifier-loop margins, the spec verdicts, the
Monte Carlo spread when the design has tolerances, static Bode and
pole-zero figures, the design file itself and free notes. A
:class:`DesignRecord` renders inline in a notebook (``_repr_html_``), as a
standalone HTML page (inline CSS and base64 images, no external resources)
and as Markdown, and saves atomically.

Loops around a plant (a power converter, in practice) carry safety cautions:
the model is small-signal only, and the hardware holds hazardous voltages
and stored energy.
"""

from __future__ import annotations

import base64
import html
import math
import os
import re
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path
from typing import TYPE_CHECKING, Any

from .._files import atomic_write
from .._text import check_text, markdown_code, markdown_text
from ..errors import LoopcraftError
from ..model.values import format_value, unit_for

if TYPE_CHECKING:  # the facade imports this module; no import back at run time
    from ..design import Design

from ..parts.eseries import is_standard, nearest, series_of, series_values
from ..symbolic.symbols import element_kind

__all__ = ["DesignRecord", "ValueRow", "record", "spread_rows", "spread_header", "CONVERTER_CAUTIONS"]

#: Cautions carried by every record of a loop around a plant (power-converter loops).
CONVERTER_CAUTIONS: tuple[str, ...] = (
    "Hazardous voltages and stored energy: a power converter's input, switch node and output "
    "capacitors can hold dangerous voltage and energy even after the supply is removed; "
    "discharge and verify before touching the hardware.",
    "Verify the loop gain on the bench: these margins come from a small-signal model; measure "
    "the loop gain by injection (a small signal injected into the loop at a low-impedance point) "
    "over load and line before relying on them.",
    "Follow local codes and licensed practice for the power stage, its wiring and its protection.",
)

_SUFFIXES = {".html": "html", ".htm": "html", ".md": "markdown", ".markdown": "markdown"}


@dataclass(frozen=True)
class ValueRow:
    """One component value with its E-series marks.

    Parameters
    ----------
    name : str
        Designator.
    kind : {"resistor", "capacitor", "inductor"}
    value : float
        Value in SI base units (Ω, F, H).
    formatted : str
        Engineering form with unit, e.g. ``"12 kΩ"``.
    given : str
        The value as written in the design file.
    series : str or None
        The coarsest E-series holding the value (:func:`loopcraft.parts.eseries.series_of`), or None.
    in_chosen : bool
        Whether the value belongs to the record's chosen series.
    nearest_in_chosen : float
        The nearest value of the chosen series, SI base units.
    """

    name: str
    kind: str
    value: float
    formatted: str
    given: str
    series: str | None
    in_chosen: bool
    nearest_in_chosen: float

    def mark(self, chosen: str) -> str:
        """The E-series mark in words (``"E24 ✓"``, ``"not E24 (nearest 12 kΩ)"``)."""
        if self.in_chosen:
            return f"{chosen} ✓"
        return f"not {chosen} (nearest {format_value(self.nearest_in_chosen, unit_for(self.kind), digits=4)})"


@dataclass(frozen=True, eq=False)
class DesignRecord:
    """Everything recorded about one design at one moment.

    Parameters
    ----------
    design : Design
        The design recorded.
    notes : str
        Free notes added with the record (the design's own notes are shown too).
    created : str
        When the record was made, ISO 8601 (UTC).
    version : str
        The loopcraft version that made it.
    series : str
        The E-series the values are marked against.
    values : tuple of ValueRow
    loop : dict or None
        The plant loop's margins (:meth:`LoopMargins.to_dict`: crossovers in Hz with phase
        margins in degrees, phase crossovers in Hz with gain margins in dB), None without a plant.
    amplifier_loop : dict or None
        The op-amp's own loop (:meth:`AmplifierLoop.to_dict`), None with an ideal op-amp.
    spec : dict or None
        :meth:`SpecReport.to_dict` of the spec check, None without a spec section.
    spec_text : str
        ``str(SpecReport)``, the verdict in words ("" without a spec).
    spread : dict or None
        The Monte Carlo summary (``Spread.to_dict()``), None without tolerances or with ``spread=False``.
    bode_png, pole_zero_png : bytes
        The figures, PNG.
    cautions : tuple of str
        Safety cautions (those of :data:`CONVERTER_CAUTIONS` for a loop around a plant).
    remarks : tuple of str
        What was left out and why (e.g. a Monte Carlo run that failed).
    """

    design: Design
    notes: str
    created: str
    version: str
    series: str
    values: tuple[ValueRow, ...]
    loop: dict | None
    amplifier_loop: dict | None
    spec: dict | None
    spec_text: str
    spread: dict | None
    bode_png: bytes
    pole_zero_png: bytes
    cautions: tuple[str, ...]
    remarks: tuple[str, ...] = ()

    # -- pieces --------------------------------------------------------------
    @property
    def title(self) -> str:
        """The design's title, or a placeholder."""
        return self.design.title or "Untitled design"

    @property
    def spec_passed(self) -> bool | None:
        """The spec verdict (None without a spec section)."""
        return None if self.spec is None else bool(self.spec["passed"])

    def _figures(self) -> list[tuple[str, str, bytes]]:
        return [("bode", "Bode plot: magnitude (dB) and phase (degrees) against frequency (Hz)", self.bode_png),
                ("pole-zero", "Poles (×) and zeros (○) in the s-plane (rad/s)", self.pole_zero_png)]

    # -- HTML ----------------------------------------------------------------
    def _html_body(self, *, standalone: bool = False) -> str:
        d = self.design
        esc = html.escape
        parts: list[str] = ['<div class="lc-record">']
        parts.append(f"<h1>{esc(self.title)}</h1>")
        parts.append(
            '<p class="lc-meta">'
            f"Recorded <time datetime=\"{esc(self.created)}\">{esc(self.created)}</time> "
            f"with loopcraft {esc(self.version)} · stage: {esc(d.stage.kind)}"
            + (f" · plant: {esc(d.plant.kind)}" if d.plant is not None else "")
            + "</p>"
        )
        if self.cautions:
            items = "".join(f"<li>{esc(c)}</li>" for c in self.cautions)
            parts.append(f'<div class="lc-cautions"><h2>Cautions</h2><ul>{items}</ul></div>')
        if self.notes or d.notes:
            parts.append("<h2>Notes</h2>")
            if self.notes:
                parts.append(f'<p class="lc-notes">{_html_lines(self.notes)}</p>')
            if d.notes:
                parts.append(f'<p class="lc-notes"><em>Design notes:</em> {_html_lines(d.notes)}</p>')
        parts.append("<h2>Transfer function</h2>")
        parts.append(f"<p>Stage: <code>{esc(_stage_text(d))}</code></p>")
        if standalone:
            # No MathJax in a standalone page: the formula as an image, the corners as a table.
            from .figures import equation_png

            ff = d.factored()
            eq = base64.b64encode(equation_png(ff.symbolic_latex())).decode("ascii")
            html_form = ff._repr_html_()
            table = html_form[html_form.index("<p>K ="):]
            parts.append(f'<div class="lc-factored"><img alt="{esc(ff.symbolic_latex())}" '
                         f'src="data:image/png;base64,{eq}">{table}')
        else:
            parts.append(d.factored()._repr_html_())
        parts.append("<h2>Component values</h2>")
        rows = "".join(
            f"<tr><td>{esc(v.name)}</td><td>{esc(v.formatted)}</td><td><code>{esc(v.given)}</code></td>"
            f"<td>{esc(v.series or 'none')}</td>"
            f'<td class="{"lc-ok" if v.in_chosen else "lc-warn"}">{esc(v.mark(self.series))}</td></tr>'
            for v in self.values
        )
        parts.append(
            "<table><thead><tr><th>part</th><th>value</th><th>as written</th><th>coarsest E-series</th>"
            f"<th>in {esc(self.series)}</th></tr></thead><tbody>{rows}</tbody></table>"
        )
        margin_html = self._margins_html()
        if margin_html:
            parts.append("<h2>Margins</h2>" + margin_html)
        if self.spec is not None:
            verdict = "PASS" if self.spec["passed"] else "FAIL"
            cls = "lc-ok" if self.spec["passed"] else "lc-bad"
            rows = "".join(
                f"<tr><td>{esc(i['name'])}</td><td>{esc(i['required'])}</td>"
                f'<td class="{"lc-ok" if i["passed"] else "lc-bad"}">{"pass" if i["passed"] else "FAIL"}</td>'
                f"<td>{esc(i['message'])}</td></tr>"
                for i in self.spec["items"]
            )
            notes = "".join(f"<li>{esc(n)}</li>" for n in self.spec.get("notes", []))
            parts.append(
                f'<h2>Spec</h2><p class="lc-verdict {cls}">Spec check: {verdict} '
                f"({len(self.spec['items'])} items, {len(self.spec['failures'])} failed)</p>"
                "<table><thead><tr><th>item</th><th>required</th><th>result</th><th>found</th></tr></thead>"
                f"<tbody>{rows}</tbody></table>" + (f"<ul>{notes}</ul>" if notes else "")
            )
        if self.spread is not None:
            parts.append("<h2>Tolerance spread (Monte Carlo)</h2>" + _spread_html(self.spread))
        for r in self.remarks:
            parts.append(f'<p class="lc-remark">{esc(r)}</p>')
        parts.append("<h2>Figures</h2>")
        for key, alt, png in self._figures():
            parts.append(f'<figure class="lc-figure lc-{key}"><img alt="{esc(alt)}" '
                         f'src="data:image/png;base64,{_b64(png)}"><figcaption>{esc(alt)}</figcaption></figure>')
        parts.append("<h2>Design file</h2>")
        parts.append(f'<pre class="lc-design-file">{esc(d.to_json(), quote=False)}</pre>')
        parts.append("</div>")
        return "\n".join(parts)

    def _margins_html(self) -> str:
        esc = html.escape
        out = []
        if self.loop is not None:
            ok = self.loop.get("stable", True)
            color = "#1f7a45" if ok else "#a12828"
            head = self.loop.get("headline")
            if head:
                word, _, rest = head.partition(":")
                notes = "".join(f"<br><small>{esc(n)}</small>" for n in self.loop.get("notes", []))
                out.append(f'<p class="lc-verdict" style="color:{color}"><b>{esc(word)}</b>:{esc(rest)}{notes}</p>')
            pm_word = "phase margin" if ok else "180° + ∠L (not a margin: unstable)"
            gm_word = "gain margin" if ok else "−20·log10|L| (not a margin: unstable)"
            rows = "".join(
                f"<tr><td>crossover {i + 1}</td><td>{esc(format_value(c['f_hz'], 'Hz', digits=4))}</td>"
                f"<td>{pm_word} {c['phase_margin_deg']:.2f}°</td></tr>"
                for i, c in enumerate(self.loop["crossovers"])
            ) or '<tr><td colspan="3">the loop gain never crosses 0 dB in the analysed band</td></tr>'
            rows += "".join(
                f"<tr><td>phase crossover {i + 1}</td><td>{esc(format_value(g['f_hz'], 'Hz', digits=4))}</td>"
                f"<td>{gm_word} {g['gain_margin_db']:.2f} dB</td></tr>"
                for i, g in enumerate(self.loop["gain_margins"])
            )
            out.append(f"<h3>Loop around the plant</h3><table><tbody>{rows}</tbody></table>")
        if self.amplifier_loop is not None:
            amp_rows = "".join(f"<tr><td>{esc(k)}</td><td>{esc(v)}</td></tr>"
                               for k, v in _amp_rows(self.amplifier_loop))
            out.append(f"<h3>Amplifier loop</h3><table><tbody>{amp_rows}</tbody></table>")
        return "".join(out)

    def _repr_html_(self) -> str:
        return f"<style>{_CSS}</style>\n{self._html_body()}"

    def to_html(self) -> str:
        """A complete standalone HTML page (inline CSS, images as base64 data URIs, no external resources)."""
        return (
            "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
            f"<meta name=\"generator\" content=\"loopcraft {html.escape(self.version)}\">\n"
            f"<title>{html.escape(self.title)}</title>\n<style>{_CSS}</style>\n</head>\n<body>\n"
            f"{self._html_body(standalone=True)}\n</body>\n</html>\n"
        )

    # -- Markdown ------------------------------------------------------------
    def to_markdown(self) -> str:
        """The record as Markdown (pipe tables, math in ``$$``, figures as data-URI images).

        Every piece of user text (title, notes, values as written, spec names and messages,
        remarks) is made inert: HTML-escaped, its Markdown syntax escaped, ``javascript:``
        and similar link schemes broken (:func:`loopcraft._text.markdown_text`), or written
        as a code span (:func:`loopcraft._text.markdown_code`).
        """
        d = self.design
        ff = d.factored()
        out: list[str] = [f"# {_md_text(self.title)}", ""]
        meta = f"Recorded {self.created} with loopcraft {self.version} · stage: {_md_text(d.stage.kind)}"
        if d.plant is not None:
            meta += f" · plant: {_md_text(d.plant.kind)}"
        out += [meta, ""]
        if self.cautions:
            out += ["## Cautions", ""] + [f"- **{_md_text(c)}**" for c in self.cautions] + [""]
        if self.notes or d.notes:
            out += ["## Notes", ""]
            if self.notes:
                out += [_md_text(self.notes), ""]
            if d.notes:
                out += [f"*Design notes:* {_md_text(d.notes)}", ""]
        from .figures import equation_png

        eq = base64.b64encode(equation_png(ff.symbolic_latex())).decode("ascii")
        out += ["## Transfer function", "", f"Stage: {markdown_code(_stage_text(d))}", "",
                "$$", ff.symbolic_latex(), "$$", "", f"![H(s)](data:image/png;base64,{eq})", ""]
        out += [f"K = {markdown_code(ff.gain_formula)} = {ff.gain:.6g}", ""]
        rows = [("corner", "formula (rad/s)", "value")]
        rows += [(name, formula, value) for name, formula, value in _corner_rows(ff)]
        out += _md_table(rows) + [""]
        out += ["## Component values", ""]
        rows = [("part", "value", "as written", "coarsest E-series", f"in {self.series}")]
        rows += [(v.name, v.formatted, _Md(markdown_code(v.given)), v.series or "none", v.mark(self.series))
                 for v in self.values]
        out += _md_table(rows) + [""]
        if self.loop is not None or self.amplifier_loop is not None:
            out += ["## Margins", ""]
            if self.loop is not None:
                ok = self.loop.get("stable", True)
                if self.loop.get("headline"):
                    word, _, rest = self.loop["headline"].partition(":")
                    out += [f"**{_md_text(word)}**:{_md_text(rest)}", ""]
                    out += [f"- {_md_text(n)}" for n in self.loop.get("notes", [])]
                    out += [""] if self.loop.get("notes") else []
                pm_word = "phase margin" if ok else "180° + ∠L (not a margin: unstable)"
                gm_word = "gain margin" if ok else "−20·log10|L| (not a margin: unstable)"
                rows = [("loop around the plant", "frequency", "margin")]
                rows += [(f"crossover {i + 1}", format_value(c["f_hz"], "Hz", digits=4),
                          f"{pm_word} {c['phase_margin_deg']:.2f}°") for i, c in enumerate(self.loop["crossovers"])]
                rows += [(f"phase crossover {i + 1}", format_value(g["f_hz"], "Hz", digits=4),
                          f"{gm_word} {g['gain_margin_db']:.2f} dB") for i, g in enumerate(self.loop["gain_margins"])]
                if not self.loop["crossovers"]:
                    rows.append(("crossover", "none", "the loop gain never crosses 0 dB in the analysed band"))
                out += _md_table(rows) + [""]
            if self.amplifier_loop is not None:
                out += _md_table([("amplifier loop", "")] + list(_amp_rows(self.amplifier_loop))) + [""]
        if self.spec is not None:
            verdict = "PASS" if self.spec["passed"] else "FAIL"
            counts = f"({len(self.spec['items'])} items, {len(self.spec['failures'])} failed)"
            out += ["## Spec", "", f"**Spec check: {verdict}** {counts}", ""]
            rows = [("item", "required", "result", "found")]
            rows += [(i["name"], i["required"], "pass" if i["passed"] else "FAIL", i["message"])
                     for i in self.spec["items"]]
            out += _md_table(rows) + [""]
            out += [f"- {_md_text(n)}" for n in self.spec.get("notes", [])]
            if self.spec.get("notes"):
                out.append("")
        if self.spread is not None:
            out += ["## Tolerance spread (Monte Carlo)", ""]
            out += [f"{_md_text(t)}  " for t in spread_header(self.spread)] + [""]
            out += _md_table(spread_rows(self.spread)) + [""]
        out += [f"*{_md_text(r)}*" for r in self.remarks]
        if self.remarks:
            out.append("")
        out += ["## Figures", ""]
        for _key, alt, png in self._figures():
            out += [f"![{alt}](data:image/png;base64,{_b64(png)})", ""]
        text = d.to_json()
        fence = "`" * max(3, _longest_backtick_run(text) + 1)
        out += ["## Design file", "", f"{fence}json", text.rstrip("\n"), fence, ""]
        return "\n".join(out)

    # -- saving --------------------------------------------------------------
    def save(self, path: str | os.PathLike[str]) -> Path:
        """Write the record atomically, HTML or Markdown by the file suffix.

        Parameters
        ----------
        path : str or path-like
            ``.html``/``.htm`` for the standalone page, ``.md``/``.markdown`` for Markdown.

        Returns
        -------
        Path
            The path written.

        Raises
        ------
        LoopcraftError
            An unknown suffix.
        FileWriteError
            The file cannot be written (the old file, if any, is left intact and no temporary
            file remains). An overwritten file keeps its permission bits; a symbolic link at
            ``path`` is followed and the file it leads to is replaced (see
            :func:`loopcraft._files.atomic_write`).
        """
        p = Path(path)
        fmt = _SUFFIXES.get(p.suffix.lower())
        if fmt is None:
            raise LoopcraftError(
                f"cannot tell the record format from the file name {str(p)!r} (suffix {p.suffix!r}); "
                f"expected one of {', '.join(_SUFFIXES)}"
            )
        text = self.to_html() if fmt == "html" else self.to_markdown()
        return atomic_write(p, text)


# --------------------------------------------------------------------------- helpers


_CSS = """
.lc-record{font-family:system-ui,-apple-system,"Segoe UI",Roboto,Helvetica,Arial,sans-serif;color:#1b1b1b;
max-width:960px;line-height:1.45}
.lc-record h1{font-size:1.5em;margin:0.3em 0}
.lc-record h2{font-size:1.2em;border-bottom:1px solid #d6d6d6;padding-bottom:2px;margin-top:1.4em}
.lc-record h3{font-size:1.05em}
.lc-record table{border-collapse:collapse;margin:0.5em 0}
.lc-record th,.lc-record td{border:1px solid #d6d6d6;padding:3px 8px;text-align:left;vertical-align:top}
.lc-record th{background:#f3f5f8}
.lc-record code{font-family:ui-monospace,Menlo,Consolas,monospace;font-size:0.92em}
.lc-record pre{background:#f7f7f7;border:1px solid #e1e1e1;padding:8px;overflow-x:auto;font-size:0.88em}
.lc-record .lc-meta{color:#555}
.lc-record .lc-cautions{border:2px solid #c0392b;background:#fdf1ef;padding:4px 14px;margin:1em 0}
.lc-record .lc-cautions h2{border:none;color:#a02a1e;margin-top:0.4em}
.lc-record .lc-ok{color:#1e7a3c}
.lc-record .lc-warn{color:#9a6700}
.lc-record .lc-bad{color:#b42318;font-weight:600}
.lc-record .lc-verdict{font-size:1.1em;font-weight:600}
.lc-record figure{margin:1em 0}
.lc-record img{max-width:100%;height:auto;border:1px solid #e6e6e6}
.lc-record figcaption{color:#555;font-size:0.9em}
"""


def _b64(png: bytes) -> str:
    return base64.b64encode(png).decode("ascii")


def _html_lines(text: str) -> str:
    return "<br>".join(html.escape(line) for line in text.splitlines())


class _Md(str):
    """A Markdown fragment made here (already inert): a table cell keeps it as it is."""


def _md_text(text: str) -> str:
    """User or model text made inert in Markdown, on one line (see :func:`loopcraft._text.markdown_text`)."""
    return markdown_text(text)


def _md_cell(text: str) -> str:
    if isinstance(text, _Md):
        return " ".join(text.splitlines()).replace("|", "\\|")
    return markdown_text(text)  # escapes | too


def _md_table(rows: list[tuple[str, ...]]) -> list[str]:
    head, *body = rows
    lines = ["| " + " | ".join(_md_cell(c) for c in head) + " |", "|" + "|".join("---" for _ in head) + "|"]
    lines += ["| " + " | ".join(_md_cell(c) for c in r) + " |" for r in body]
    return lines


def _longest_backtick_run(text: str) -> int:
    return max((len(m) for m in re.findall(r"`+", text)), default=0)


def _stage_text(d: Design) -> str:
    s = d.stage.to_dict()
    if s["kind"] == "inverting":
        return f"inverting: input {s['input']}, feedback {s['feedback']}"
    if s["kind"] == "noninverting":
        return f"non-inverting: ground {s['ground']}, feedback {s['feedback']}"
    return (f"circuit: {len(s['elements'])} elements, {len(s.get('opamps', []))} op-amp(s), "
            f"input {s['input']}, output {s['output']}")


def _corner_rows(ff) -> list[tuple[str, str, str]]:
    rows = []
    for c in ff.corners:  # each row's own label, fixed per topology: ωz1, ωp1, ω0p1 (Qp1)
        if c.cancelled:
            continue  # shown as a cancellation line, not as a corner
        name = c.label
        value = f"{c.omega_rad_s:.4g} rad/s ({format_value(c.f_hz, 'Hz')})"
        if c.order == 2:
            value += f", {c.q_label} = {c.q_text}" + (f" (Q = {c.q_formula})" if c.q_formula else "")
            if c.q_infinite:
                value += ", on the jω axis"
        if c.rhp:
            value += ", right half plane"
        rows.append((name, c.formula or "numeric at current values", value))
    return rows


def _amp_rows(amp: dict) -> list[tuple[str, str]]:
    rows: list[tuple[str, str]] = []
    if amp.get("crossover_hz") is not None:
        rows.append(("crossover", format_value(amp["crossover_hz"], "Hz", digits=4)))
    if amp.get("phase_margin_deg") is not None:
        rows.append(("phase margin", f"{amp['phase_margin_deg']:.2f}°"))
    if amp.get("rate_of_closure_db_per_decade") is not None:
        rows.append(("rate of closure", f"{amp['rate_of_closure_db_per_decade']:.0f} dB/decade"))
    if amp.get("departs_hz") is not None:
        rows.append(("actual departs from ideal (> 1 dB) above", format_value(amp["departs_hz"], "Hz", digits=4)))
    if amp.get("departs_below_hz") is not None:
        rows.append(("actual departs from ideal (> 1 dB) below",
                     format_value(amp["departs_below_hz"], "Hz", digits=4)))
    rows += [("warning", w) for w in amp.get("warnings", [])]
    if not rows:
        rows.append(("crossover", "none found"))
    return rows


def _quantity_text(x: Any, unit: str) -> str:
    if x is None:
        return "—"
    x = float(x)
    if not math.isfinite(x):
        return str(x)
    if unit == "Hz":
        return format_value(x, "Hz", digits=4)
    if unit == "deg":
        return f"{x:.2f}°"
    if unit == "dB":
        return f"{x:.2f} dB"
    return f"{x:.4g}"


_QUANTITY_NAMES = {"crossover_hz": "crossover", "phase_margin_deg": "phase margin", "gain_margin_db": "gain margin",
                   "dc_gain_db": "DC gain"}


def spread_rows(spread: dict) -> list[tuple[str, ...]]:
    """Table rows of a Monte Carlo summary (``Spread.to_dict()``), header first.

    Parameters
    ----------
    spread : dict
        The summary: ``quantities`` maps a name (corner label ``"ωz1"``, ``"Qp1"``,
        ``"crossover_hz"``, ``"phase_margin_deg"``, ``"gain_margin_db"``, ``"dc_gain_db"``) to
        its ``unit``, ``nominal``, ``min``, ``p1``, ``p50``, ``p99``, ``max``, ``std``.

    Returns
    -------
    list of tuple of str
        ``(quantity, nominal, min, 1 %, median, 99 %, max, std)``; frequencies in Hz, margins in
        degrees and dB, Q plain; undefined or infinite samples are counted in the quantity name.
    """
    rows: list[tuple[str, ...]] = [("quantity", "nominal", "min", "1 %", "median", "99 %", "max", "std")]
    for name, q in spread.get("quantities", {}).items():
        unit = q.get("unit", "")
        label = _QUANTITY_NAMES.get(name, name)
        extra = []
        if q.get("n_undefined"):
            extra.append(f"{q['n_undefined']} undefined")
        if q.get("n_infinite"):
            extra.append(f"{q['n_infinite']} infinite")
        if extra:
            label += f" ({', '.join(extra)})"
        rows.append(tuple([label] + [_quantity_text(q.get(k), unit)
                                     for k in ("nominal", "min", "p1", "p50", "p99", "max", "std")]))
    return rows


def spread_header(spread: dict) -> list[str]:
    """Lines describing a Monte Carlo summary: samples, seed, distribution, tolerances, yield."""
    tol = ", ".join(f"{k} ±{100 * v:g} %" for k, v in spread.get("tolerances", {}).items())
    lines = [f"{spread.get('samples')} samples, seed {spread.get('seed')}, {spread.get('distribution')} distribution; "
             f"tolerances: {tol or 'none'}"]
    if spread.get("unstable_fraction") is not None:
        u = float(spread["unstable_fraction"])
        if u > 0:
            lines.append(f"closed loop: UNSTABLE in {100 * u:.2f} % of samples (each fails every spec item)")
        else:
            lines.append("closed loop: stable in every sample (closed-loop poles counted per sample)")
    if spread.get("yield") is not None:
        y = float(spread["yield"])
        per = spread.get("item_yield") or {}
        detail = ", ".join(f"{k} {100 * v:.2f} %" for k, v in per.items())
        lines.append(f"yield against the spec: {100 * y:.2f} %" + (f" (per item: {detail})" if detail else ""))
    return lines


def _spread_html(spread: dict) -> str:
    head, *body = spread_rows(spread)
    lines = "".join(f"<p>{html.escape(t)}</p>" for t in spread_header(spread))
    th = "".join(f"<th>{html.escape(c)}</th>" for c in head)
    tb = "".join("<tr>" + "".join(f"<td>{html.escape(c)}</td>" for c in r) + "</tr>" for r in body)
    return f"{lines}<table><thead><tr>{th}</tr></thead><tbody>{tb}</tbody></table>"


def _value_rows(design: Design, series: str) -> tuple[ValueRow, ...]:
    rows = []
    for name in design.stage.component_names:
        kind = element_kind(name)
        v = float(design.values[name])
        given = design.given.get(name, v)
        rows.append(ValueRow(name, kind, v, format_value(v, unit_for(kind), digits=4), str(given), series_of(v),
                             is_standard(v, series), nearest(v, series)))
    return tuple(rows)


def record(
    design: Design,
    notes: str = "",
    *,
    series: str = "E24",
    spread: bool = True,
    seed: int = 1,
    samples: int = 2000,
    created: datetime | None = None,
) -> DesignRecord:
    """Make the record of a design.

    Parameters
    ----------
    design : Design
        The design.
    notes : str
        Free notes for the record (the design's own notes are included as well).
    series : str
        E-series the values are marked against (``"E24"``).
    spread : bool
        Run the Monte Carlo spread (and the spec's yield item) when the design has tolerances.
    seed : int
        Seed of the Monte Carlo draw, so the record is reproducible.
    samples : int
        Monte Carlo samples for the spread summary (the spec's yield uses the spec's own ``samples``).
    created : datetime or None
        The record's time stamp (now, UTC, when None).

    Returns
    -------
    DesignRecord

    Raises
    ------
    DesignFileError
        ``notes`` is not text or holds a lone surrogate (key path ``notes``).
    ComponentValueError
        An unknown series name.
    LoopcraftError
        The design cannot be analysed (the analysis error passes through).
    """
    check_text(notes, "notes")
    series_values(series)
    canon = series.strip().upper()
    from .._version import __version__

    stamp = (created or datetime.now(UTC)).replace(microsecond=0)
    if stamp.tzinfo is None:
        stamp = stamp.replace(tzinfo=UTC)
    a = design.analyze()
    loop = a.loop.to_dict() if a.loop is not None else None
    amp = a.actual.amplifier_loop if a.actual is not None else None
    amp_dict = amp.to_dict() if amp is not None else None
    remarks: list[str] = []

    spec_dict = None
    spec_text = ""
    if design.spec is not None:
        from ..checks.spec import check

        rep = check(design, spread=spread, seed=seed)
        spec_dict = rep.to_dict()
        spec_text = str(rep)

    spread_dict = None
    spread_obj = None
    if design.tolerances is not None:
        if spread:
            from ..analysis.tolerance import monte_carlo

            spec_obj = None
            if design.spec is not None:
                from ..checks.spec import parse_spec

                spec_obj = parse_spec(design.spec, "spec")
            try:
                spread_obj = monte_carlo(design, samples, seed=seed, spec=spec_obj)
                spread_dict = spread_obj.to_dict()
            except LoopcraftError as err:
                remarks.append(f"The Monte Carlo spread could not be computed: {err}")
        else:
            remarks.append("The Monte Carlo spread was not run (spread=False).")

    from .figures import bode_png, pole_zero_png

    bode = bode_png(design, a.loop.margins if a.loop is not None else None, amp, spread=spread_obj,
                    stable=a.loop.stability.stable if a.loop is not None else True)
    pz = pole_zero_png(design)
    cautions = CONVERTER_CAUTIONS if design.plant is not None else ()
    return DesignRecord(
        design=design,
        notes=notes,
        created=stamp.isoformat(),
        version=__version__,
        series=canon,
        values=_value_rows(design, canon),
        loop=loop,
        amplifier_loop=amp_dict,
        spec=spec_dict,
        spec_text=spec_text,
        spread=spread_dict,
        bode_png=bode,
        pole_zero_png=pz,
        cautions=cautions,
        remarks=tuple(remarks),
    )
