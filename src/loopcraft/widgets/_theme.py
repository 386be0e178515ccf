"""The explorer's look: palette, figure geometry and the page-level CSS classes.

One place for every colour and size, so the figures, legend and panels agree.
The palette is loopcraft's own: a deep teal for the ideal stage, amber for the
stage with its real op-amp, violet for the loop gain, brick red for poles and
annotations of margin, on a near-white plot area with quiet grid lines.
"""

from __future__ import annotations

from types import MappingProxyType

__all__ = [
    "COLORS",
    "FONT_STACK",
    "FIGURE_MARGIN",
    "PZ_MARGIN",
    "AXIS_TICK_STYLE",
    "CSS_CLASS",
]

#: Named colours (CSS hex).
COLORS = MappingProxyType({
    "ideal": "#0f6b73",       # ideal-op-amp stage, exact curve
    "asymptote": "#6d7f99",   # straight-line Bode, dashed
    "actual": "#d0812a",      # stage with the real op-amp
    "loop": "#6e45a3",        # loop gain around the plant
    "zero": "#0f6b73",        # zeros (hollow circles)
    "pole": "#b53a3a",        # poles (crosses)
    "cancelled": "#8a6d1f",   # a zero and a pole that cancel (diamonds), and the note saying so
    "margin": "#b53a3a",      # crossover, phase-margin marks
    "gain_margin": "#2f64a8", # gain-margin marks
    "opamp_loop": "#d0812a",  # the op-amp's own crossover
    "reference": "#9aa5b5",   # 0 dB / -180° references, s-plane axes
    "grid": "#e4e8ef",
    "plot_bg": "#fcfdfe",
    "text": "#1f2933",
    "muted": "#5b6676",
    "highlight": "#fff1c9",   # formula rows moved by the dragged part
    "error": "#a12828",
    "ok": "#1f7a45",          # the STABLE verdict
    "panel_bg": "#f4f6f9",
})

#: Font family of the HTML panels (the figures use the page font).
FONT_STACK = "system-ui, -apple-system, 'Segoe UI', Roboto, 'Helvetica Neue', Arial, sans-serif"

#: bqplot ``fig_margin`` of the Bode figures, px.
FIGURE_MARGIN = MappingProxyType({"top": 14, "bottom": 44, "left": 64, "right": 30})

#: bqplot ``fig_margin`` of the pole-zero map, px.
PZ_MARGIN = MappingProxyType({"top": 14, "bottom": 48, "left": 70, "right": 24})

#: CSS of axis tick labels.
AXIS_TICK_STYLE = MappingProxyType({"font-size": "12px"})

#: CSS classes given to the explorer's parts (browser tests select on them).
CSS_CLASS = MappingProxyType({
    "root": "lc-explorer",
    "bode_mag": "lc-bode-mag",
    "bode_phase": "lc-bode-phase",
    "pzmap": "lc-pzmap",
    "slider": "lc-slider",
    "entry": "lc-entry",
    "formula": "lc-formula",
    "legend": "lc-legend",
    "margins": "lc-margins",
    "picker": "lc-topology",
    "status": "lc-status",
})
