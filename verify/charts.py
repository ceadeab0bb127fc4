"""Charts for the PDF summary, drawn with matplotlib and returned as SVG text.

matplotlib is imported inside each function so that importing this module stays
cheap. Figures are built from :class:`matplotlib.figure.Figure` directly (no
pyplot, no global figure registry). The only global state touched is
``matplotlib.rcParams``, and only inside ``matplotlib.rc_context`` which restores
it on exit; ``svg.hashsalt`` has to go through rcParams because the SVG writer
reads it from there. A fixed salt and ``metadata={"Date": None}`` make the SVG
bytes a function of the numbers alone.
"""

from __future__ import annotations

import io
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

SVG_HASH_SALT = "carbon-verify-summary"

INK = "#1f2a30"
MUTED = "#6b767c"
GRID = "#d9dee1"
TOTAL_COLOUR = "#2b4c6f"
DECREASE_COLOUR = "#c0772f"
INCREASE_COLOUR = "#4d8a6a"

def chart_style(svg_hash_salt: str = SVG_HASH_SALT) -> dict[str, object]:
    """Matplotlib settings of every chart; a fixed hash salt keeps the SVG ids, and so the PDF, reproducible."""
    return {
        "svg.hashsalt": svg_hash_salt,
        "svg.fonttype": "path",
        "font.family": "DejaVu Sans",
        "font.size": 7.5,
        "axes.edgecolor": MUTED,
        "axes.labelcolor": INK,
        "xtick.color": INK,
        "ytick.color": INK,
    }


@dataclass(frozen=True)
class WaterfallStep:
    """One bar: a running total (``is_total``) drawn from zero, or a change drawn from the previous total."""

    label: str
    value_tco2e: float
    is_total: bool


def finite_or_zero(value: Any) -> float:
    """A number to draw; anything missing or not finite is drawn as zero rather than failing the report."""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return 0.0
    return float(value) if math.isfinite(value) else 0.0


def waterfall_steps(totals: Mapping[str, Any]) -> list[WaterfallStep]:
    """The accounting chain of accounting.md §1-8 as bars: each deduction is a negative change.

    A negative baseline or a negative deduction becomes a positive change and is
    drawn as an increase, so the bars always add up to the totals shown.
    """
    def get(key: str) -> float:
        return finite_or_zero(totals.get(key))

    return [
        WaterfallStep("Gross\nremovals", get("gross_removals_tco2e"), True),
        WaterfallStep("Baseline", -get("baseline_tco2e"), False),
        WaterfallStep("Project\nemissions", -get("project_emissions_tco2e"), False),
        WaterfallStep("Leakage", -get("leakage_tco2e"), False),
        WaterfallStep("Net\nremovals", get("net_removals_tco2e"), True),
        WaterfallStep("Uncertainty\ndeduction", -get("uncertainty_deduction_tco2e"), False),
        WaterfallStep("Buffer", -get("buffer_tco2e"), False),
        WaterfallStep("Issuable\ncredits", get("issuable_credits"), True),
    ]


def bar_label(step: WaterfallStep, is_credits: bool) -> str:
    """Value printed above a bar: totals as they are, changes with their sign, credits in whole tonnes."""
    value = step.value_tco2e if step.value_tco2e != 0 else 0.0  # no "-0.0"
    if is_credits:
        return f"{value:,.0f}"
    if step.is_total:
        return f"{value:,.1f}"
    return ("+" if value > 0 else "-" if value < 0 else "") + f"{abs(value):,.1f}"


def _svg_text(figure: Any) -> str:
    buffer = io.StringIO()
    figure.savefig(buffer, format="svg", metadata={"Date": None})
    return buffer.getvalue()


def waterfall_svg(totals: Mapping[str, Any]) -> str:
    """SVG waterfall from gross removals through every deduction to issuable credits.

    ``totals`` is the ``totals`` object of results.json. Totals (gross, net,
    issuable) are drawn from zero; changes float between the running totals.
    The last bar is the issuable credits as reported (whole tonnes rounded down
    per vintage), so it may sit up to one tonne per vintage below the previous
    running total.
    """
    import matplotlib
    from matplotlib.figure import Figure
    from matplotlib.ticker import FuncFormatter

    steps = waterfall_steps(totals)
    with matplotlib.rc_context(chart_style()):
        figure = Figure(figsize=(6.9, 2.9))
        axes = figure.add_axes((0.1, 0.2, 0.88, 0.74))
        running = 0.0
        tops: list[float] = []
        for index, step in enumerate(steps):
            if step.is_total:
                bottom, height, colour = 0.0, step.value_tco2e, TOTAL_COLOUR
                running = step.value_tco2e
            else:
                bottom, height = running, step.value_tco2e
                colour = DECREASE_COLOUR if height < 0 else INCREASE_COLOUR
                running += height
            axes.bar(index, height, bottom=bottom, width=0.62, color=colour, linewidth=0)
            tops.append(max(bottom, bottom + height))
            if index < len(steps) - 1:
                axes.plot([index + 0.31, index + 0.69], [running, running], color=MUTED, linewidth=0.6)
        span = max((abs(t) for t in tops), default=0.0) or 1.0
        for index, step in enumerate(steps):
            label = bar_label(step, is_credits=index == len(steps) - 1)
            axes.text(index, tops[index] + span * 0.025, label, ha="center", va="bottom", color=INK, fontsize=7)
        axes.axhline(0.0, color=INK, linewidth=0.7)
        lowest = running_minimum(steps)
        highest = max(max(tops), 0.0)
        axes.set_ylim(lowest - span * 0.06 if lowest < 0 else 0.0, highest + span * 0.14)
        axes.set_xlim(-0.6, len(steps) - 0.4)
        axes.set_xticks(range(len(steps)), [step.label for step in steps])
        axes.tick_params(axis="x", length=0, pad=4)
        axes.tick_params(axis="y", length=2.5, width=0.5)
        axes.yaxis.set_major_formatter(FuncFormatter(lambda value, _pos: f"{value:,.0f}"))
        axes.set_ylabel("tCO2e")
        axes.grid(axis="y", color=GRID, linewidth=0.5)
        axes.set_axisbelow(True)
        for side in ("top", "right", "bottom"):
            axes.spines[side].set_visible(False)
        axes.spines["left"].set_linewidth(0.5)
        return _svg_text(figure)


def running_minimum(steps: Sequence[WaterfallStep]) -> float:
    """Lowest level any bar reaches, so that a negative net result stays inside the axes."""
    running = 0.0
    lowest = 0.0
    for step in steps:
        running = step.value_tco2e if step.is_total else running + step.value_tco2e
        lowest = min(lowest, running)
    return lowest


def check_plot_svg(plots: Sequence[Mapping[str, Any]]) -> str:
    """SVG scatter of the verifier's against the proponent's stock density per check plot, with the 1:1 line."""
    import matplotlib
    from matplotlib.figure import Figure

    pairs = [
        (finite_or_zero(p.get("proponent_tco2e_per_ha")), finite_or_zero(p.get("verifier_tco2e_per_ha")))
        for p in plots
    ]
    with matplotlib.rc_context(chart_style()):
        figure = Figure(figsize=(3.0, 2.7))
        axes = figure.add_axes((0.2, 0.17, 0.75, 0.78))
        limit = max((max(abs(x), abs(y)) for x, y in pairs), default=0.0) * 1.1 or 1.0
        low = min([0.0] + [min(x, y) for x, y in pairs]) * 1.1
        axes.plot([low, limit], [low, limit], color=MUTED, linewidth=0.7, linestyle="--", label="1:1")
        axes.scatter([x for x, _ in pairs], [y for _, y in pairs], s=14, color=TOTAL_COLOUR, linewidths=0)
        axes.set_xlim(low, limit)
        axes.set_ylim(low, limit)
        axes.set_aspect("equal")
        axes.set_xlabel("Proponent (tCO2e/ha)")
        axes.set_ylabel("Verifier (tCO2e/ha)")
        axes.grid(color=GRID, linewidth=0.5)
        axes.set_axisbelow(True)
        for side in ("top", "right"):
            axes.spines[side].set_visible(False)
        return _svg_text(figure)
