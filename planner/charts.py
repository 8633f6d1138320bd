"""Chart builders: altair charts from plain data, and offline export to SVG and PNG (vl-convert).

Every builder takes plain Python data (lists, dicts, floats) and returns an ``altair.Chart``, so the
record renderings and the app draw the same charts. :func:`to_svg` and :func:`to_png` render a chart
without a browser or network (vl-convert bundles the Vega engine).

State colours are chosen to differ in lightness, so they stay apart in grey-scale print, and every state
is also written out as a word: ``fine`` (light), ``watch`` (mid), ``do not proceed`` (dark).
"""

from __future__ import annotations

import json
import math
from collections.abc import Sequence
from typing import Any

import altair as alt

from planner.renderer import draw

STATE_WORDS = {"fine": "fine", "watch": "watch", "do-not-proceed": "do not proceed", "not-judged": "not judged"}
# fill, text colour; relative luminance roughly 0.90, 0.45, 0.05 and white for "not judged"
STATE_COLOURS = {
    "fine": ("#cdebc5", "#000000"),
    "watch": ("#e39b00", "#000000"),
    "do-not-proceed": ("#6b0000", "#ffffff"),
    "not-judged": ("#ffffff", "#000000"),
}
POSITION_LOW, POSITION_HIGH = -1.0, 3.0  # display range of the margin position


def margin_position(value: float | None, watch: float | None, stop: float | None) -> float | None:
    """Where a value sits between its thresholds: 0 at ``stop``, 1 at ``watch``, more is better.

    ``(value - stop) / (watch - stop)`` works for both directions ("higher is better" has watch > stop,
    "lower is better" watch < stop). None when the margin has no value or no thresholds.
    """
    if value is None or watch is None or stop is None:
        return None
    if watch == stop:
        return POSITION_HIGH if value != stop else 0.0
    return (value - stop) / (watch - stop)


def margins_chart(margins: Sequence[dict[str, Any]], width: int = 300) -> alt.Chart | None:
    """Horizontal bars: each judged margin's position between its thresholds, coloured and labelled by state.

    Parameters
    ----------
    margins : list of dict
        Each with ``label``, ``value``, ``watch``, ``stop``, ``state`` (the assessment's margin entries).
    width : int
        Chart width in pixels.

    Returns None when no margin has a value and thresholds.
    """
    rows = []
    for m in margins:
        pos = margin_position(m.get("value"), m.get("watch"), m.get("stop"))
        if pos is None or not math.isfinite(pos):
            continue
        state = m.get("state", "not-judged")
        shown = min(max(pos, POSITION_LOW), POSITION_HIGH)
        word = STATE_WORDS.get(state, state)
        rows.append({
            # the state is written next to the name, so the chart reads without colour
            "margin": f"{m.get('label') or m.get('name')}: {word}" + (" (off scale)" if shown != pos else ""),
            "position": shown,
            "state": word,
        })
    if not rows:
        return None
    words = [STATE_WORDS[s] for s in STATE_COLOURS]
    colour = alt.Color(
        "state:N",
        scale=alt.Scale(domain=words, range=[c[0] for c in STATE_COLOURS.values()]),
        legend=alt.Legend(title="state", orient="bottom", direction="horizontal"),
    )
    base = alt.Chart(alt.Data(values=rows))
    bars = base.mark_bar(stroke="#000000", strokeWidth=0.6).encode(
        x=alt.X("position:Q", scale=alt.Scale(domain=[POSITION_LOW, POSITION_HIGH]),
                title="position between thresholds (0 = stop, 1 = watch; right is better)"),
        y=alt.Y("margin:N", title=None, sort=None, axis=alt.Axis(labelLimit=380)),
        color=colour,
    )
    rules = alt.Chart(alt.Data(values=[{"x": 0.0, "what": "stop"}, {"x": 1.0, "what": "watch"}])).mark_rule(
        strokeDash=[4, 3], color="#000000"
    ).encode(x="x:Q")
    return (bars + rules).properties(width=width, height=max(40, 28 * len(rows)), title="Margins")


def series_chart(
    x: Sequence[float],
    y: Sequence[float],
    x_title: str,
    y_title: str,
    title: str = "",
    width: int = 420,
    height: int = 220,
) -> alt.Chart:
    """A line chart of one curve (e.g. chamber pressure against temperature, freeze probability in time).

    Points whose ``x`` or ``y`` is missing (None or not finite) are left out, not drawn as zero.
    """
    if len(x) != len(y):
        from planner.errors import InputError

        raise InputError("series", f"{len(x)} x and {len(y)} y values", "as many y values as x values")
    rows = [
        {"x": float(a), "y": float(b)}
        for a, b in zip(x, y, strict=True)
        if a is not None and b is not None and math.isfinite(float(a)) and math.isfinite(float(b))
    ]
    return (
        alt.Chart(alt.Data(values=rows))
        .mark_line(point=True, color="#000000")
        .encode(x=alt.X("x:Q", title=x_title), y=alt.Y("y:Q", title=y_title))
        .properties(width=width, height=height, title=title)
    )


def to_svg(chart: alt.Chart) -> str:
    """The chart as a self-contained SVG document (no scripts, no external links)."""
    return draw(json.dumps(chart.to_dict()))


def to_png(chart: alt.Chart, scale: float = 2.0) -> bytes:
    """The chart as PNG bytes, ``scale`` times its nominal pixel size (2 prints sharply at 150 dpi)."""
    return draw(json.dumps(chart.to_dict()), "png", scale)
