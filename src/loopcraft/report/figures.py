"""Static figures for design records (private): Bode and pole-zero plots as PNG bytes.

Built on :class:`matplotlib.figure.Figure` with the Agg canvas directly, so
no pyplot global state is touched and nothing depends on the display
backend. matplotlib is the optional ``report`` dependency; it is imported
only when a figure is drawn.
"""

from __future__ import annotations

import io
import math
from collections.abc import Sequence

import numpy as np

from .._text import mathtext_plain
from ..analysis.analyzer import Analyzer
from ..analysis.band import display_band_hz
from ..errors import LoopcraftError
from ..model.values import format_value

__all__ = ["bode_png", "pole_zero_png", "figure_band_hz", "PNG_SIGNATURE"]

#: The eight bytes every PNG file starts with (ISO/IEC 15948, §5.2).
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"

_DPI = 110
_COLORS = {"stage": "#1f5fa8", "asymptote": "#7fa7d6", "actual": "#c0392b", "loop": "#1e8449",
           "plant": "#8e6c00", "ref": "#808080"}


def _matplotlib():
    try:
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure
        from matplotlib.ticker import EngFormatter
    except ImportError as err:  # pragma: no cover - matplotlib is installed with the report extra
        raise LoopcraftError(
            "figures need matplotlib (install loopcraft with the 'report' extra: pip install 'loopcraft[report]')"
        ) from err
    return Figure, FigureCanvasAgg, EngFormatter


def figure_band_hz(design) -> tuple[float, float]:
    """Frequency band (Hz) of the record's Bode plot.

    The display band (:func:`loopcraft.analysis.band.display_band_hz`): whole decades,
    two beyond the extreme corners of the ideal stage and the plant, the op-amp's
    gain-bandwidth when a real op-amp is given (where the actual response leaves the
    ideal one), the amplifier loop's crossover and every crossover and phase crossover of
    the loop with the plant, so that each margin the record states is drawn. The default
    grid of a Monte Carlo spread (:func:`loopcraft.analysis.tolerance.monte_carlo`) covers
    the same band.
    """
    a = Analyzer(design, f_hz=np.array([1.0, 10.0])).update()  # margins search their own bands
    extra: list[float] = []
    if design.opamp is not None and not design.opamp.is_ideal:
        extra.append(design.opamp.gbw_hz)
        amp = a.actual.amplifier_loop if a.actual is not None else None
        if amp is not None and amp.crossover_hz is not None:
            extra.append(amp.crossover_hz)
    if a.loop is not None:
        extra += [c.f_hz for c in a.loop.margins.crossovers] + [g.f_hz for g in a.loop.margins.gain_margins]
    plant = design.plant.factored() if design.plant is not None else None
    return display_band_hz(a.factored, plant, extra_hz=tuple(extra))


def _png(fig, canvas) -> bytes:
    buf = io.BytesIO()
    canvas.print_png(buf, metadata={"Software": None})
    del fig
    return buf.getvalue()


def equation_png(latex: str, *, fontsize: float = 15.0) -> bytes:
    """A LaTeX formula rendered by matplotlib's mathtext (no TeX install), as PNG bytes.

    Used where no MathJax runs: standalone HTML pages and Markdown files.
    """
    figure_cls, canvas_cls, _ = _matplotlib()
    fig = figure_cls(figsize=(0.1, 0.1))
    canvas = canvas_cls(fig)
    fig.text(0.0, 0.0, f"${latex}$", fontsize=fontsize)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=120, bbox_inches="tight", pad_inches=0.08, facecolor="white",
                metadata={"Software": None})
    del canvas
    return buf.getvalue()


def _limits(curves: Sequence[np.ndarray], floor: float, ceiling: float, pad: float) -> tuple[float, float]:
    data = np.concatenate([np.asarray(c)[np.isfinite(c)] for c in curves]) if curves else np.zeros(1)
    lo = max(float(np.min(data)), floor)
    hi = min(float(np.max(data)), ceiling)
    if hi - lo < 1e-9:
        lo, hi = lo - 1, hi + 1
    return lo - pad, hi + pad


def _envelope_on(grid_hz: np.ndarray, env_f_hz: np.ndarray, env) -> tuple[np.ndarray, np.ndarray]:
    """The p1 and p99 curves of an Envelope, interpolated (in log f) onto ``grid_hz``."""
    u, ue = np.log10(grid_hz), np.log10(np.asarray(env_f_hz, dtype=float))
    return np.interp(u, ue, env.p1), np.interp(u, ue, env.p99)


def bode_png(design, margins=None, amplifier_loop=None, *, spread=None, stable: bool = True, width_in: float = 8.0,
             height_in: float = 6.4) -> bytes:
    """Magnitude and phase of the stage (ideal, asymptotes, actual) and of the loop, as PNG.

    Parameters
    ----------
    design : Design
        The design to draw.
    margins : LoopMargins or None
        The loop margins to annotate (every crossover with its phase margin,
        every phase crossover with its gain margin, those inside the plotted band).
    amplifier_loop : AmplifierLoop or None
        Unused for drawing curves; its crossover (Hz) is marked when inside the band.
    spread : Spread or None
        A Monte Carlo result (:func:`loopcraft.analysis.tolerance.monte_carlo`); its 1 %…99 % band of the
        loop gain (or of the stage, without a plant) is shaded.
    width_in, height_in : float
        Figure size, inches (110 dots per inch).

    Returns
    -------
    bytes
        A PNG image: magnitude in dB and phase in degrees against frequency in Hz (log axis).
    """
    Figure, FigureCanvasAgg, EngFormatter = _matplotlib()
    lo, hi = figure_band_hz(design)
    f = np.logspace(math.log10(lo), math.log10(hi), 800)
    a = design.analyze(f)

    fig = Figure(figsize=(width_in, height_in), dpi=_DPI)
    canvas = FigureCanvasAgg(fig)
    fig.subplots_adjust(left=0.1, right=0.95, top=0.92, bottom=0.09, hspace=0.12)
    ax_m, ax_p = fig.subplots(2, 1, sharex=True)
    mags = [a.exact_mag_db, a.asymptote_mag_db]
    phases = [a.exact_phase_deg, a.asymptote_phase_deg]

    ax_m.semilogx(f, a.asymptote_mag_db, "--", color=_COLORS["asymptote"], lw=1.2, label="stage, asymptotes")
    ax_m.semilogx(f, a.exact_mag_db, color=_COLORS["stage"], lw=1.8, label="stage, ideal op-amp")
    ax_p.semilogx(f, a.asymptote_phase_deg, "--", color=_COLORS["asymptote"], lw=1.2)
    ax_p.semilogx(f, a.exact_phase_deg, color=_COLORS["stage"], lw=1.8)
    if a.actual_mag_db is not None:
        ax_m.semilogx(f, a.actual_mag_db, color=_COLORS["actual"], lw=1.4, label="stage, real op-amp")
        ax_p.semilogx(f, a.actual_phase_deg, color=_COLORS["actual"], lw=1.4)
        mags.append(a.actual_mag_db)
        phases.append(a.actual_phase_deg)
    if a.loop_mag_db is not None:
        ax_m.semilogx(f, a.loop_mag_db, color=_COLORS["loop"], lw=2.0, label="loop gain L")
        ax_p.semilogx(f, a.loop_phase_deg, color=_COLORS["loop"], lw=2.0)
        mags.append(a.loop_mag_db)
        phases.append(a.loop_phase_deg)
        ax_m.axhline(0.0, color=_COLORS["ref"], lw=0.8)

    if spread is not None:
        env_m = spread.loop_mag_db if spread.loop_mag_db is not None else spread.stage_mag_db
        env_p = spread.loop_phase_deg if spread.loop_phase_deg is not None else spread.stage_phase_deg
        inside = (f >= spread.f_hz[0]) & (f <= spread.f_hz[-1])
        what = "loop" if spread.loop_mag_db is not None else "stage"
        color = _COLORS["loop"] if what == "loop" else _COLORS["stage"]
        lo_m, hi_m = _envelope_on(f[inside], spread.f_hz, env_m)
        lo_p, hi_p = _envelope_on(f[inside], spread.f_hz, env_p)
        ax_m.fill_between(f[inside], lo_m, hi_m, color=color, alpha=0.3, lw=0,
                          label=f"{what}, 1–99 % of {spread.samples} samples")
        ax_p.fill_between(f[inside], lo_p, hi_p, color=color, alpha=0.3, lw=0)
    ax_m.set_ylim(*_limits(mags, -120.0, 140.0, 5.0))
    p_lo, p_hi = _limits(phases, -720.0, 720.0, 10.0)

    if margins is not None and a.loop_phase_deg is not None:
        for c in margins.crossovers:
            if not lo <= c.f_hz <= hi:
                continue
            ph = float(np.interp(math.log10(c.f_hz), np.log10(f), a.loop_phase_deg))
            ref = ph - c.phase_margin_deg  # the -180° (mod 360°) line the margin is measured from
            ax_p.axhline(ref, color=_COLORS["ref"], lw=0.8, ls=":")
            ax_p.annotate("", xy=(c.f_hz, ph), xytext=(c.f_hz, ref),
                          arrowprops={"arrowstyle": "<->", "color": _COLORS["loop"], "lw": 1.2})
            ax_p.text(c.f_hz * 1.15, (ph + ref) / 2, f"PM {c.phase_margin_deg:.1f}°" if stable else "UNSTABLE",
                      color=_COLORS["loop"] if stable else "#a12828", fontsize=9, va="center")
            ax_m.plot([c.f_hz], [0.0], "o", color=_COLORS["loop"], ms=5)
            ax_m.annotate(f"fc {format_value(c.f_hz, 'Hz')}", xy=(c.f_hz, 0.0), xytext=(6, 8),
                          textcoords="offset points", color=_COLORS["loop"], fontsize=9)
            p_lo, p_hi = min(p_lo, ref - 10), max(p_hi, ref + 10)
        for g in margins.gain_margins:
            if not lo <= g.f_hz <= hi:
                continue
            m = float(np.interp(math.log10(g.f_hz), np.log10(f), a.loop_mag_db))
            ax_m.annotate("", xy=(g.f_hz, m), xytext=(g.f_hz, 0.0),
                          arrowprops={"arrowstyle": "<->", "color": _COLORS["actual"], "lw": 1.2})
            ax_m.text(g.f_hz * 1.15, m / 2, f"GM {g.gain_margin_db:.1f} dB" if stable else f"|L| {m:.1f} dB",
                      color=_COLORS["actual"], fontsize=9, va="center")
    x = amplifier_loop.crossover_hz if amplifier_loop is not None else None
    if x is not None and lo <= x <= hi:
        ax_m.axvline(x, color=_COLORS["actual"], lw=0.8, ls=":")
        ax_m.text(x / 1.15, ax_m.get_ylim()[1] - 4, f"op-amp loop\ncrossover {format_value(x, 'Hz')}",
                  color=_COLORS["actual"], fontsize=8, ha="right", va="top")
    ax_p.set_ylim(p_lo, p_hi)
    ax_p.yaxis.set_major_locator(_phase_locator(p_hi - p_lo))

    ax_m.set_ylabel("Magnitude (dB)")
    ax_p.set_ylabel("Phase (degrees)")
    ax_p.set_xlabel("Frequency (Hz)")
    ax_p.xaxis.set_major_formatter(EngFormatter(unit="Hz"))
    ax_p.set_xlim(lo, hi)
    for ax in (ax_m, ax_p):
        ax.grid(True, which="major", color="#d0d0d0", lw=0.6)
        ax.grid(True, which="minor", color="#ececec", lw=0.4)
    ax_m.legend(loc="best", fontsize=8, framealpha=0.9)
    title = design.title or "Bode plot"
    title = title if len(title) <= 90 else title[:87] + "…"
    fig.suptitle(mathtext_plain(title), fontsize=11)  # user text: drawn as itself, never as mathtext
    if margins is not None and not stable:
        fig.text(0.5, 0.925, "closed loop UNSTABLE: the numbers on this plot are not margins",
                 ha="center", color="#a12828", fontsize=10, fontweight="bold")
    return _png(fig, canvas)


def _phase_locator(span_deg: float):
    from matplotlib.ticker import MultipleLocator

    step = 45.0 if span_deg <= 360 else 90.0 if span_deg <= 720 else 180.0
    return MultipleLocator(step)


def _roots(fn) -> tuple[np.ndarray, np.ndarray]:
    return np.asarray(fn.zero_roots(), dtype=complex), np.asarray(fn.pole_roots(), dtype=complex)


def _symlog_ticks(axis, linthresh: float, lim: float, *, negative_only: bool = False) -> None:
    """Ticks at 0 and ±10^k outside the linear band only (matplotlib's default crowds the origin)."""
    from matplotlib.ticker import FixedLocator, FuncFormatter, NullLocator

    k0 = math.ceil(math.log10(linthresh * 1.2))
    k1 = round(math.log10(lim))
    ks = list(range(k0, k1 + 1))
    if len(ks) > 6:  # keep the labels apart: every second decade
        ks = ks[len(ks) % 2::2]
    ticks = [0.0] + [-(10.0**k) for k in ks] + ([] if negative_only else [10.0**k for k in ks])

    def label(x: float, _pos: int) -> str:
        if x == 0:
            return "0"
        k = round(math.log10(abs(x)))
        return f"$-10^{{{k}}}$" if x < 0 else f"$10^{{{k}}}$"

    axis.set_major_locator(FixedLocator(sorted(ticks)))
    axis.set_major_formatter(FuncFormatter(label))
    axis.set_minor_locator(NullLocator())


def pole_zero_png(design, *, width_in: float = 6.4, height_in: float = 5.0) -> bytes:
    """Poles (×) and zeros (○) of the stage, and of the plant when present, in the s-plane, as PNG.

    Both axes are in rad/s on a symmetric-log scale (linear near the origin),
    so roots decades apart stay visible; each root (or cluster of roots that
    would overlap) is labelled with its frequency |s|/2π in Hz.

    Parameters
    ----------
    design : Design
    width_in, height_in : float
        Figure size, inches.

    Returns
    -------
    bytes
        A PNG image.
    """
    Figure, FigureCanvasAgg, _ = _matplotlib()
    sets = [("stage", design.transfer().factored, _COLORS["stage"])]
    if design.plant is not None:
        sets.append(("plant", design.plant.factored(), _COLORS["plant"]))
    everything = np.concatenate([np.concatenate(_roots(fn)) for _, fn, _ in sets])
    nonzero = np.abs(np.concatenate([everything.real, everything.imag]))
    nonzero = nonzero[nonzero > 0]
    linthresh = float(np.min(nonzero)) / 3.0 if nonzero.size else 1.0
    big = float(np.max(nonzero)) if nonzero.size else 10.0

    fig = Figure(figsize=(width_in, height_in), dpi=_DPI)
    canvas = FigureCanvasAgg(fig)
    fig.subplots_adjust(left=0.14, right=0.96, top=0.86, bottom=0.12)
    ax = fig.add_subplot(1, 1, 1)
    ax.set_xscale("symlog", linthresh=linthresh)
    ax.set_yscale("symlog", linthresh=linthresh)
    lim = 10.0 ** (math.ceil(math.log10(big)) + 1)
    rhp = bool(np.any(everything.real > 0))
    ax.set_xlim(-lim, lim if rhp else 10.0 * linthresh)
    ax.set_ylim(-lim, lim)
    ax.axhline(0.0, color=_COLORS["ref"], lw=0.8)
    ax.axvline(0.0, color=_COLORS["ref"], lw=0.8)
    _symlog_ticks(ax.xaxis, linthresh, lim, negative_only=not rhp)
    _symlog_ticks(ax.yaxis, linthresh, lim)

    # Clusters of roots that would overlap on screen share one label: [x_px, y_px, [(hz, text)], color].
    clusters: list[list] = []
    for name, fn, color in sets:
        zeros, poles = _roots(fn)
        if zeros.size:
            ax.plot(zeros.real, zeros.imag, "o", mfc="none", mec=color, mew=1.8, ms=9, ls="none",
                    label=f"{name} zeros")
        if poles.size:
            ax.plot(poles.real, poles.imag, "x", color=color, mew=2.0, ms=9, ls="none", label=f"{name} poles")
        for r in np.concatenate([zeros, poles]):
            if r.imag < 0:
                continue
            hz = abs(r) / (2.0 * math.pi)
            text = format_value(hz, "Hz") if hz > 0 else "0 Hz"
            x, y = ax.transData.transform((r.real, r.imag))
            for item in clusters:
                if abs(item[0] - x) < 14 and abs(item[1] - y) < 14:
                    if all(t != text for _, t in item[2]):
                        item[2].append((hz, text))
                    if item[3] != color:
                        item[3] = "#303030"
                    break
            else:
                clusters.append([x, y, [(hz, text)], color])
    inv = ax.transData.inverted()
    placed: list[tuple[float, float, float, int]] = []  # (x_px, y_px, half-width px, level)
    offsets = (9, -19, 20, -30)
    x_axis_px = ax.transData.transform((0.0, 0.0))[1]
    for x, y, items, color in sorted(clusters, key=lambda c: c[0]):
        text = ", ".join(t for _, t in sorted(items))
        if abs(y - x_axis_px) > 1.0:  # a complex pair: label the upper root on its right
            ax.annotate(text, xy=tuple(inv.transform((x, y))), xytext=(9, 0), textcoords="offset points",
                        ha="left", va="center", fontsize=8, color=color)
            continue
        half = 3.4 * len(text) + 4  # about 6.8 px a character at 8 pt, 110 dpi
        used = {lvl for px, py, ph, lvl in placed if abs(py - y) < 30 and abs(px - x) < half + ph}
        level = next((i for i in range(len(offsets)) if i not in used), 0)
        placed.append((x, y, half, level))
        ax.annotate(text, xy=tuple(inv.transform((x, y))), xytext=(0, offsets[level]), textcoords="offset points",
                    ha="center", va="bottom" if offsets[level] > 0 else "top", fontsize=8, color=color)
    ax.set_xlabel("σ, real part (rad/s)")
    ax.set_ylabel("jω, imaginary part (rad/s)")
    ax.grid(True, color="#e0e0e0", lw=0.5)
    if labels_present := [h for h in ax.get_lines() if not h.get_label().startswith("_")]:
        ax.legend(handles=labels_present, loc="lower left", bbox_to_anchor=(0.0, 1.0), ncol=4, fontsize=8,
                  frameon=False, handletextpad=0.3, columnspacing=1.2)
    else:
        ax.text(0.5, 0.5, "no poles or zeros: the stage is a constant gain", transform=ax.transAxes,
                ha="center", va="center", fontsize=10, color=_COLORS["ref"])
    fig.suptitle("Poles (×) and zeros (○) in the s-plane; labels give |s|/2π", fontsize=10)
    return _png(fig, canvas)
