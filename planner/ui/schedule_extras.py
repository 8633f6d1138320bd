"""What the schedule chart adds when ice matters: the freezing path of a seeded (or freezing) protocol,
and the recalescence jump a supercooled sample would make if it nucleated.

Plain data from the assessment's section states, and altair layers built from it; the schedule step's
chart (``planner.ui.stepcharts``) stacks them under and onto its temperature panel.
"""

from __future__ import annotations

import math
from typing import Any

import altair as alt
import numpy as np

from planner.protocol import CELSIUS_OFFSET

# Draw the recalescence jump when the upper end of the freeze-probability interval reaches this share of
# the protocol's target risk: below it, the jump is a possibility too remote to put on the chart.
MATERIAL_SHARE_OF_TARGET = 0.1
WIDTH = 620
ICE = "#0b5394"
LIQUID = "#a1241b"
JUMP = "#a1241b"


def _section(assessment: Any, name: str) -> Any:
    sections = getattr(assessment, "sections", None) or {}
    return sections.get(name)


def freezing_series(assessment: Any, most: int = 300) -> dict[str, list[float]] | None:
    """The freezing section's path on the schedule's time axis, or None when the protocol does not freeze.

    Returns time [h], centre and surface temperature [°C], the unfrozen fraction of the water at the centre
    and on average (1), and the osmolality of the unfrozen liquid at the centre [osmol/kg].
    """
    section = _section(assessment, "freezing")
    state = getattr(section, "state", None)
    if state is None or getattr(state, "time", None) is None:
        return None
    t = np.asarray(state.time, dtype=float)
    if t.size < 2:
        return None
    idx = np.unique(np.linspace(0, t.size - 1, min(most, t.size)).round().astype(int))

    def column(values, offset=0.0):
        a = np.asarray(values, dtype=float)[idx] - offset
        return [float(x) if math.isfinite(x) else None for x in a]

    return {
        "time_h": (t[idx] / 3600.0).tolist(),
        "centre_c": column(state.centre_temperature, CELSIUS_OFFSET),
        "surface_c": column(state.surface_temperature, CELSIUS_OFFSET),
        "centre_unfrozen": column(state.centre_unfrozen_fraction),
        "mean_unfrozen": column(state.mean_unfrozen_fraction),
        "centre_osmolality": column(state.centre_liquid_osmolality),
        "ice_start_h": float(state.ice_start_time) / 3600.0,
        "liquidus_c": float(state.liquidus) - CELSIUS_OFFSET,
    }


def recalescence_marker(assessment: Any, target: float) -> dict[str, Any] | None:
    """Where and how far the sample would jump if it nucleated, when that risk is material.

    Material: the upper end of the nucleation section's 90 % interval is at least
    ``MATERIAL_SHARE_OF_TARGET`` × ``target`` (the protocol's target freeze probability). The jump is the
    chamber section's adiabatic recalescence (from the supercooled temperature to the final one, with the
    fraction of the water that freezes at once, [ref:rubinsky-perez-carlson-2005]), placed at the time the
    sample's coldest point is coldest.
    """
    nucleation = _section(assessment, "nucleation")
    chamber = _section(assessment, "chamber")
    if nucleation is None or chamber is None:
        return None
    if _section(assessment, "freezing") is not None or _section(assessment, "vitrification") is not None:
        return None  # ice is started (or a glass formed) on purpose: the jump is part of the plan, not a risk
    interval = getattr(nucleation.report, "freeze_probability_interval", None)
    upper = interval[1] if interval else getattr(nucleation.report, "freeze_probability", None)
    if upper is None or upper < MATERIAL_SHARE_OF_TARGET * target:
        return None
    rec = getattr(chamber.state, "recalescence", None)
    if rec is None or not math.isfinite(rec.final_temperature) or not math.isfinite(rec.supercooled_temperature):
        return None
    thermal = _section(assessment, "thermal")
    time_h = None
    if thermal is not None and getattr(thermal.state, "coldest_temperature_history", None) is not None:
        hist = np.asarray(thermal.state.coldest_temperature_history, dtype=float)
        time_h = float(np.asarray(thermal.state.time, dtype=float)[int(np.nanargmin(hist))]) / 3600.0
    if time_h is None:
        return None
    frm = rec.supercooled_temperature - CELSIUS_OFFSET
    to = rec.final_temperature - CELSIUS_OFFSET
    text = (f"if ice forms here: {frm:.1f} → {to:.1f} °C at once, "
            f"{100 * rec.ice_fraction_of_water:.0f} % of the water freezes")
    if rec.rigid and math.isfinite(rec.pressure_step):
        text += f", pressure +{rec.pressure_step / 1e6:.1f} MPa"
    return {"time_h": time_h, "from_c": frm, "to_c": to, "ice_fraction_of_water": float(rec.ice_fraction_of_water),
            "label": text, "upper_probability": float(upper)}


def recalescence_layers(marker: dict[str, Any], end_h: float | None = None) -> list[alt.Chart]:
    """A vertical jump with its label, to lay over the temperature panel (the label on the side with room,
    given the schedule's end ``end_h`` [h])."""
    data = alt.Data(values=[{"t": marker["time_h"], "y": marker["from_c"], "y2": marker["to_c"],
                             "label": marker["label"]}])
    base = alt.Chart(data)
    right_half = end_h is not None and end_h > 0 and marker["time_h"] > 0.5 * end_h
    return [
        base.mark_rule(color=JUMP, strokeWidth=3).encode(x="t:Q", y="y:Q", y2="y2:Q"),
        base.mark_point(color=JUMP, filled=True, size=60).encode(x="t:Q", y="y:Q"),
        base.mark_text(align="right" if right_half else "left", dx=-6 if right_half else 6, dy=12,
                       color=JUMP).encode(x="t:Q", y="y:Q", text="label:N"),
    ]


def freezing_panel(series: dict[str, Any], end_h: float | None = None) -> alt.Chart:
    """Unfrozen fraction of the water (centre and mean) and the unfrozen liquid's osmolality, on the schedule's
    time axis (0 to ``end_h`` [h], the same as the temperature panel's), so the user sees what the cells
    sit in."""
    x_scale = alt.Scale(domain=[0, end_h]) if end_h else alt.Undefined
    rows = []
    for key, name in (("centre_unfrozen", "unfrozen water, centre"), ("mean_unfrozen", "unfrozen water, mean")):
        for t, v in zip(series["time_h"], series[key], strict=True):
            if v is not None:
                rows.append({"t": t, "v": v, "curve": name})
    names = ["unfrozen water, centre", "unfrozen water, mean"]
    fraction = alt.Chart(alt.Data(values=rows)).mark_line(strokeWidth=2).encode(
        x=alt.X("t:Q", title="time (h)", scale=x_scale),
        y=alt.Y("v:Q", title="unfrozen fraction of the water", scale=alt.Scale(domain=[0, 1])),
        color=alt.Color("curve:N", title=None, scale=alt.Scale(domain=names, range=[ICE, "#7f3f98"]),
                        legend=alt.Legend(orient="top")),
        strokeDash=alt.StrokeDash("curve:N", legend=None, scale=alt.Scale(domain=names, range=[[1, 0], [6, 3]])),
    ).properties(width=WIDTH, height=120, title="Unfrozen water during freezing")
    osm_rows = [{"t": t, "v": v} for t, v in zip(series["time_h"], series["centre_osmolality"], strict=True)
                if v is not None]
    osm = alt.Chart(alt.Data(values=osm_rows)).mark_line(color=LIQUID, strokeWidth=2).encode(
        x=alt.X("t:Q", title="time (h)", scale=x_scale),
        y=alt.Y("v:Q", title="osmol/kg"),
    ).properties(width=WIDTH, height=110, title="Osmolality of the unfrozen liquid at the centre")
    return alt.vconcat(fraction, osm)


def replace_sample_curves_after_ice(data: dict[str, Any], series: dict[str, Any]) -> None:
    """After ice starts, the heat-transfer model (liquid, no latent heat) no longer describes the sample:
    draw the freezing section's centre and surface temperatures from then on, and nothing past their end."""
    t = np.asarray(data["time_h"], dtype=float)
    ft = np.asarray(series["time_h"], dtype=float)
    after = t >= series["ice_start_h"]
    for name, key in (("sample centre", "centre_c"), ("sample surface", "surface_c")):
        if name not in data["curves"]:
            continue
        values = np.asarray([np.nan if v is None else v for v in series[key]], dtype=float)
        ok = np.isfinite(values)
        if ok.sum() < 2:
            continue
        drawn = np.interp(t, ft[ok], values[ok])
        inside = after & (t <= ft[ok][-1])
        old = list(data["curves"][name])
        data["curves"][name] = [float(drawn[i]) if inside[i] else (None if after[i] else old[i])
                                for i in range(len(t))]
