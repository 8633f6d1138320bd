"""Which chart a step shows, drawn from a snapshot of the model's last valid result.

altair is imported only for the charts built with it (:mod:`planner.ui.stepcharts`); the first step's
map is written without it (:mod:`planner.ui.mapchart`), so a page's first chart needs no chart library in
the kernel. :data:`LIGHT` names the charts that need no altair.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from planner.ui.mapchart import draw_freeze_map
from planner.ui.stepcharts_data import Snapshot, snapshot, with_stale_note

LIGHT: dict[str, Callable[[Any], tuple[Any, str]]] = {"freeze_map": draw_freeze_map}


def chart_for_step(name: str, model) -> str:
    """HTML for the step's chart (inline SVG), or a note saying why there is none.

    ``model`` is a :class:`PlannerModel` or a :class:`Snapshot` of one.
    """
    from planner.ui.svg import chart_html, note_html

    if not isinstance(model, Snapshot):
        model = snapshot(model)
    draw = LIGHT.get(name)
    if draw is None:
        from planner.ui.stepcharts import CHARTS  # altair, for the other steps' charts

        draw = CHARTS.get(name)
    if draw is None:
        return note_html(f"No chart named {name!r}.")
    try:
        chart, note = draw(model)
    except Exception as exc:  # a chart never takes the step down with it
        return note_html(f"No chart ({type(exc).__name__}: {exc}).")
    if chart is None:
        return note_html(note)
    return with_stale_note(chart_html(chart) + (note_html(note) if note else ""), bool(model.stale))
