"""The first step's chart, the freeze-probability map, written as a Vega-Lite spec without altair.

A page's first chart is this map. Building it without altair spares each kernel altair's import (about
0.45 s and 30 MB) before its page shows a chart; with the app's shared renderer (:mod:`planner.renderer`)
that kernel then loads no chart library at all until a person moves to another step. The spec is the
same one the altair builder wrote; ``tests/test_ui_apps.py`` compares them.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np

# the Vega-Lite version the installed altair writes (a test compares); vl-convert reads the version from it
# and fetches nothing
SCHEMA = "https://vega.github.io/schema/vega-lite/v6.4.1.json"
WIDTH, HEIGHT = 620, 240
LIMIT = "#a1241b"
TITLE = "Probability that the sample freezes during the hold"


def nearest(grid: Sequence[float], value: float) -> float:
    g = np.asarray(grid, dtype=float)
    return float(g[np.argmin(np.abs(g - value))])


def freeze_map_chart(volumes_ml: Sequence[float], temperatures_c: Sequence[float], probability: Any, *,
                     marks: Sequence[tuple[float, float, str]] = (), title: str = "") -> dict[str, Any]:
    """Probability of freezing over sample volume × hold temperature, with scenarios marked (a Vega-Lite
    spec, drawn by :func:`planner.ui.svg.chart_svg`).

    ``probability[i][j]`` belongs to ``temperatures_c[i]`` and ``volumes_ml[j]``; ``marks`` are
    (volume [mL], temperature [°C], label). Labels sit inside their boxed cell, above its number (drawn
    above the box they covered the number of the cell above); scenarios in one cell share one box and one
    label ("A B").
    """
    p = np.asarray(probability, dtype=float)
    marked: dict[tuple[float, float], list[str]] = {}
    for v, t, lbl in marks:
        marked.setdefault((nearest(volumes_ml, v), nearest(temperatures_c, t)), []).append(lbl)
    rows = [
        {"v": float(v), "t": float(t), "p": float(p[i, j]),
         "label": " ".join(marked.get((float(v), float(t)), []))}
        for i, t in enumerate(temperatures_c) for j, v in enumerate(volumes_ml) if math.isfinite(p[i, j])
    ]
    x = {"field": "v", "sort": "ascending", "type": "ordinal"}
    y = {"field": "t", "sort": "descending", "type": "ordinal"}
    ink = {"condition": {"test": "datum.p > 0.5", "value": "white"}, "value": "black"}
    number = {"field": "p", "format": ".2f", "type": "quantitative"}
    plain = [r for r in rows if not r["label"]]
    boxed = [r for r in rows if r["label"]]
    layers: list[dict[str, Any]] = [
        {"data": {"values": rows}, "mark": {"type": "rect"},
         "encoding": {"color": {"field": "p", "scale": {"domain": [0, 1], "scheme": "greys"}, "title": "P(frozen)",
                                "type": "quantitative"},
                      "x": {**x, "title": "sample volume (mL)"}, "y": {**y, "title": "hold temperature (°C)"}}},
        {"data": {"values": plain}, "mark": {"type": "text", "fontSize": 11},
         "encoding": {"color": ink, "text": number, "x": x, "y": y}},
    ]
    if boxed:
        layers += [
            # the box is the cell's own outline, so a label as wide as "this plan" stays inside it
            {"data": {"values": boxed}, "mark": {"type": "rect", "fillOpacity": 0, "stroke": LIMIT, "strokeWidth": 3},
             "encoding": {"x": x, "y": y}},
            {"data": {"values": boxed}, "mark": {"type": "text", "dy": 6, "fontSize": 11},
             "encoding": {"color": ink, "text": number, "x": x, "y": y}},
            {"data": {"values": boxed}, "mark": {"type": "text", "dy": -7, "fontSize": 10, "fontWeight": "bold"},
             "encoding": {"color": {"condition": {"test": "datum.p > 0.5", "value": "white"}, "value": LIMIT},
                          "text": {"field": "label", "type": "nominal"}, "x": x, "y": y}},
        ]
    return {"$schema": SCHEMA, "config": {"view": {"continuousWidth": 300, "continuousHeight": 300}},
            "layer": layers, "height": HEIGHT + 40, "title": title or TITLE, "width": WIDTH}


def draw_freeze_map(model) -> tuple[dict[str, Any] | None, str]:
    """The sample step's map from a model's (or snapshot's) last valid result, and its note."""
    protocol = model.protocol
    if protocol is None:
        return None, "No chart: the protocol has not been assessed yet."
    from planner.ui.maps import freeze_map

    result = freeze_map([(protocol, model.assessment)], labels=["this plan"])
    if result is None:
        return None, "No map: the nucleation model is not installed."
    volumes, temps, grid, marks, note = result
    return freeze_map_chart(volumes, temps, grid, marks=marks), note
