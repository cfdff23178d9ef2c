"""The report's plot: expected volts (with the healthy band) against measured, along the ladder.

Drawn with matplotlib (the optional ``plot`` extra) on its object API and the Agg canvas, so no
window and no global pyplot state. Without matplotlib the report is made without the plot.
"""

from __future__ import annotations

import io
import logging
from collections.abc import Sequence

from fieldtool.core.report.content import WRONG_RANGE, Expectations, Row

MISSING = "plot left out: matplotlib is not installed (pip install 'fieldtool[plot]')"

# The report's own colours, not the plotting library's defaults: a sea-green band and line for
# what is expected, brick for what was measured, indigo for after the repair. The marker shape
# carries the same meaning (filled circles measured, open squares after repair), so the plot
# reads in grey print and for colour-blind readers; the two colours differ in lightness too.
PALETTE = {
    "band": "#cfe6dc",
    "expected": "#2e6b5e",
    "measured": "#b8482f",
    "after": "#34478f",
    "grid": "#c9c9c9",
}


def plotting_available() -> bool:
    """True when matplotlib can be imported."""
    try:
        import matplotlib  # noqa: F401
    except ImportError:
        return False
    return True


def ladder_plot(
    expectations: Expectations,
    readings: Sequence[Row],
    verifications: Sequence[Row],
    title: str,
) -> bytes | None:
    """A PNG of expected and measured volts at each node, or None without matplotlib."""
    # On a full disk or a read-only home, matplotlib logs that it could not save its font
    # cache: nothing the technician can act on, and the report itself says what failed.
    logging.getLogger("matplotlib.font_manager").setLevel(logging.ERROR)
    try:
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure
    except ImportError:
        return None
    nodes = [e.node for e in expectations.nodes]
    xs = list(range(len(nodes)))
    fig = Figure(figsize=(8.0, 3.8), dpi=100)
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    ax.fill_between(
        xs,
        [e.low for e in expectations.nodes],
        [e.high for e in expectations.nodes],
        color=PALETTE["band"],
        label="healthy band",
    )
    ax.plot(
        xs,
        [e.volts for e in expectations.nodes],
        "-",
        color=PALETTE["expected"],
        linewidth=1.5,
        label="expected",
    )
    top = max((e.high for e in expectations.nodes), default=1.0)
    for rows, marker, colour, fill, name in (
        (readings, "o", PALETTE["measured"], PALETTE["measured"], "measured"),
        (verifications, "s", PALETTE["after"], "none", "after repair"),
    ):
        pts = [
            (nodes.index(r.node), r.volts)
            for r in rows
            if r.node in nodes and r.volts is not None and r.status != WRONG_RANGE
        ]
        if pts:
            ax.plot(
                *zip(*pts, strict=True),
                marker,
                color=colour,
                markerfacecolor=fill,
                markersize=7,
                markeredgewidth=1.5,
                label=name,
                linestyle="none",
            )
        for r in rows:
            if r.volts is None and r.node in nodes:
                ax.annotate("OL", (nodes.index(r.node), top), color=colour, ha="center")
    labels = [f"{e.node}\n{e.label}" if e.label else e.node for e in expectations.nodes]
    ax.set_xticks(xs, labels=labels, fontsize=8)
    ax.set_xlabel("node, along the ladder")
    ax.set_ylabel("DC volts, as the meter reads")
    ax.set_title(title, fontsize=10)
    ax.grid(True, color=PALETTE["grid"], linewidth=0.6)
    ax.legend(fontsize=8, loc="best")
    fig.tight_layout()
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png")
    return buffer.getvalue()
