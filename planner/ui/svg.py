"""Charts as SVG drawn in the kernel (vl-convert): nothing in the page loads a script or asks the internet.

The same SVG serves the app, screenshots and records; the first drawing starts vl-convert's engine
(about a second), so the app warms it up on a worker thread while the first step is shown.
"""

from __future__ import annotations

import html
import threading

_LOCK = threading.Lock()


def chart_svg(chart) -> str:
    """SVG text of an altair chart, drawn offline."""
    import vl_convert

    spec = chart.to_json(validate=False) if hasattr(chart, "to_json") else chart
    with _LOCK:
        return vl_convert.vegalite_to_svg(spec)


def chart_html(chart, css_class: str = "cm-chart") -> str:
    return f'<div class="{html.escape(css_class)}">{chart_svg(chart)}</div>'


def warm_up() -> None:
    """Draw one tiny chart so the first real one is quick."""
    import altair as alt

    chart_svg(alt.Chart({"values": [{"x": 0}]}).mark_point().encode(x="x:Q"))


def note_html(text: str) -> str:
    return f'<div class="cm-chart cm-muted">{html.escape(text)}</div>'
