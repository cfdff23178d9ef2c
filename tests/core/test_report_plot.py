"""The report's plot is drawn in the project's own colours, not the plotting library's default
cycle, and marker shape carries the meaning as well (read from the rendered PNG itself)."""

from __future__ import annotations

import io

import numpy as np
import pytest

from fieldtool.core.report.content import Expectations, Expected, Row
from fieldtool.core.report.plot import PALETTE, ladder_plot

image = pytest.importorskip("matplotlib.image")

# matplotlib's default colour cycle begins C0 #1f77b4, C1 #ff7f0e, C2 #2ca02c (its docs).
DEFAULT_CYCLE = ("#1f77b4", "#ff7f0e", "#2ca02c")


def _rgb(hex_colour: str) -> np.ndarray:
    return np.array([int(hex_colour[i : i + 2], 16) for i in (1, 3, 5)], dtype=float)


def _lightness(hex_colour: str) -> float:
    """Relative luminance (ITU-R BT.709 weights on linearised sRGB, as WCAG 2 defines it)."""
    c = _rgb(hex_colour) / 255.0
    linear = np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)
    return float(linear @ np.array([0.2126, 0.7152, 0.0722]))


def _pixels_near(png: bytes, hex_colour: str, tolerance: float = 6.0) -> int:
    rgb = image.imread(io.BytesIO(png), format="png")[..., :3] * 255.0
    return int((np.abs(rgb - _rgb(hex_colour)).max(axis=-1) <= tolerance).sum())


def test_the_plot_uses_the_report_colours_and_not_the_default_cycle():
    nodes = tuple(Expected(f"S{i}", "", 10.0 * i, 10.0 * i - 1, 10.0 * i + 1) for i in range(1, 6))
    expectations = Expectations(nodes, "test")
    readings = tuple(
        Row(e.node, "", e.volts * 0.8, e, "low", "2026-01-01T00:00:00Z") for e in nodes
    )
    after = tuple(Row(e.node, "", e.volts, e, "in band", "2026-01-01T01:00:00Z") for e in nodes)
    png = ladder_plot(expectations, readings, after, "TG-0042")
    assert png is not None
    for role in ("band", "expected", "measured", "after"):
        assert _pixels_near(png, PALETTE[role]) > 30, role
    for default in DEFAULT_CYCLE:
        assert _pixels_near(png, default, tolerance=3.0) == 0, default
    # Measured and after-repair differ in lightness as well as hue (grey print, colour-blind
    # readers); the markers differ in shape besides (filled circle, open square).
    gap = abs(_lightness(PALETTE["measured"]) - _lightness(PALETTE["after"]))
    assert gap > 0.03
