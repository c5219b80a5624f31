"""Small inline SVG charts as plain coordinates; the template draws them (no script)."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

WIDTH, HEIGHT, PAD = 520, 160, 34
MAX_BAR_STEP = 48  # one day's slot at most, so a young inventory's bar stays a bar


@dataclass(frozen=True)
class Bar:
    x: float
    y: float
    width: float
    height: float
    label: str
    value: int


@dataclass(frozen=True)
class Chart:
    width: int
    height: int
    bars: list[Bar]
    points: str  # polyline "x,y x,y"
    dots: list[tuple[float, float, str]]
    y_max_label: str
    x_min_label: str
    x_max_label: str


def bar_chart(days: Sequence[tuple[str, int]]) -> Chart:
    days = list(days)[-30:]
    top = max((n for _, n in days), default=0) or 1
    inner_w, inner_h = WIDTH - 2 * PAD, HEIGHT - 2 * PAD
    step = min(inner_w / max(1, len(days)), MAX_BAR_STEP)
    bars = [
        Bar(
            x=PAD + i * step + step * 0.15,
            y=PAD + inner_h * (1 - n / top),
            width=step * 0.7,
            height=inner_h * n / top,
            label=day,
            value=n,
        )
        for i, (day, n) in enumerate(days)
    ]
    return Chart(
        WIDTH,
        HEIGHT,
        bars,
        "",
        [],
        str(top),
        days[0][0] if days else "",
        days[-1][0] if days else "",
    )


def line_chart(points: Sequence[tuple[int, float]]) -> Chart:
    """Queue share (0..1, y) against the evidence count (x)."""
    points = list(points)
    inner_w, inner_h = WIDTH - 2 * PAD, HEIGHT - 2 * PAD
    if not points:
        return Chart(WIDTH, HEIGHT, [], "", [], "", "", "")
    xs = [x for x, _ in points]
    lo, hi = min(xs), max(xs)
    span = (hi - lo) or 1
    top = max(max(y for _, y in points), 0.01)
    coords = [
        (
            round(PAD + inner_w * (x - lo) / span, 1),
            round(PAD + inner_h * (1 - y / top), 1),
            f"{x} evidence: {y:.1%} of results in the queue",
        )
        for x, y in points
    ]
    return Chart(
        WIDTH,
        HEIGHT,
        [],
        " ".join(f"{x},{y}" for x, y, _ in coords),
        coords,
        f"{top:.0%}",
        str(lo),
        str(hi),
    )
