"""Charts as SVG (vl-convert): nothing in the page loads a script or asks the internet.

The same SVG serves the app, screenshots and records. In the app the kernels send their charts to one
shared, already warm renderer (:mod:`planner.renderer`, its socket in ``COLDMARGIN_CHART_SOCKET``);
anywhere else, or when the renderer cannot be reached, the chart is drawn here, and the first drawing
starts vl-convert's engine (about a second).
"""

from __future__ import annotations

import html
import json

from planner.renderer import draw


def chart_svg(chart) -> str:
    """SVG text of an altair chart (or a Vega-Lite spec as JSON text or a mapping), drawn offline."""
    if hasattr(chart, "to_json"):
        spec = chart.to_json(validate=False)
    else:
        spec = chart if isinstance(chart, str) else json.dumps(chart)
    return draw(spec)


def chart_html(chart, css_class: str = "cm-chart") -> str:
    return f'<div class="{html.escape(css_class)}">{chart_svg(chart)}</div>'


def warm_up() -> None:
    """Draw one tiny chart so the first real one is quick (through the shared renderer where there is one,
    which is warm already: this kernel then never starts an engine of its own)."""
    import altair as alt

    chart_svg(alt.Chart({"values": [{"x": 0}]}).mark_point().encode(x="x:Q"))


def note_html(text: str) -> str:
    return f'<div class="cm-chart cm-muted">{html.escape(text)}</div>'
