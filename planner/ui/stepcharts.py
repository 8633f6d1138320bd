"""One chart per step: builders that take plain data and return an altair chart, and the adapters that
pull that data from the model's last valid assessment.

Builders (``*_chart``) know nothing of the planner's objects: lists of floats in lab units in, a chart out,
so records, the compare view and tests can call them directly. Adapters (``*_data``) read the assessment's
SI state objects and convert once to lab units. A chart whose data the assessment does not provide is not
drawn; the step says why instead. :data:`CHARTS` maps the names used in :mod:`planner.ui.steps`.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from typing import Any

import altair as alt
import numpy as np

from planner.protocol import CELSIUS_OFFSET
from planner.ui.charting import chart_for_step
from planner.ui.mapchart import HEIGHT, LIMIT, WIDTH, draw_freeze_map, freeze_map_chart  # one size, one red
from planner.ui.stepcharts_data import Snapshot, snapshot

INK = "#1d1d1d"
BATH, CENTRE, SURFACE = "#4d4d4d", "#0b5394", "#7f3f98"
LIQUIDUS = "#1f6f43"


def _finite_rows(**columns: Sequence[float | None]) -> list[dict[str, float]]:
    names = list(columns)
    rows = []
    for values in zip(*columns.values(), strict=True):
        if all(v is not None and math.isfinite(float(v)) for v in values):
            rows.append({n: float(v) for n, v in zip(names, values, strict=True)})
    return rows


def _thin(n: int, most: int = 300) -> np.ndarray:
    """Indices that keep at most ``most`` points of a series (first and last kept)."""
    if n <= most:
        return np.arange(n)
    return np.unique(np.linspace(0, n - 1, most).round().astype(int))


# --- builders ----------------------------------------------------------------------------------------

def schedule_chart(time_h: Sequence[float], curves: dict[str, Sequence[float]], *,
                   liquidus_c: float | None = None, homogeneous_c: float | None = None,
                   probability_time_h: Sequence[float] | None = None,
                   probability: Sequence[float] | None = None,
                   probability_band: tuple[Sequence[float], Sequence[float]] | None = None,
                   title: str = "", extra_layers: Sequence[alt.Chart] = ()) -> alt.Chart:
    """Temperatures against time with the liquidus and the homogeneous-nucleation limit drawn as lines,
    and the cumulative freeze probability below on the same time axis.

    Parameters
    ----------
    time_h : sequence of float
        Time [h].
    curves : dict
        Name ("bath", "sample centre", "sample surface") → temperature [°C] at ``time_h``.
    liquidus_c, homogeneous_c : float, optional
        Horizontal lines [°C].
    probability_time_h, probability : sequences, optional
        Cumulative probability that the sample has frozen (0–1) against time [h].
    """
    rows = []
    for name, values in curves.items():
        for r in _finite_rows(t=time_h, y=values):
            rows.append({**r, "curve": name})
    colours = {"bath": BATH, "sample centre": CENTRE, "sample surface": SURFACE}
    names = list(curves)
    line = alt.Chart(alt.Data(values=rows)).mark_line(strokeWidth=2).encode(
        x=alt.X("t:Q", title="time (h)"),
        y=alt.Y("y:Q", title="temperature (°C)"),
        color=alt.Color("curve:N", title=None, scale=alt.Scale(domain=names, range=[colours.get(n, INK) for n in names]),
                        legend=alt.Legend(orient="top")),
        strokeDash=alt.StrokeDash("curve:N", legend=None,
                                  scale=alt.Scale(domain=names, range=[[1, 0], [6, 3], [2, 2]][: len(names)])),
    )
    layers: list[alt.Chart] = [line]
    for value, label, colour in ((liquidus_c, "liquidus", LIQUIDUS),
                                 (homogeneous_c, "homogeneous-nucleation limit (freezes within ~1 s)", LIMIT)):
        if value is not None and math.isfinite(value):
            base = alt.Chart(alt.Data(values=[{"y": float(value), "label": f"{label} {value:.1f} °C"}]))
            layers.append(base.mark_rule(strokeDash=[4, 3], color=colour).encode(y="y:Q"))
            layers.append(base.mark_text(align="left", dx=4, dy=-6, color=colour).encode(
                y="y:Q", x=alt.value(4), text="label:N"))
    layers.extend(extra_layers)  # e.g. the recalescence jump (planner.ui.schedule_extras)
    top = alt.layer(*layers).properties(width=WIDTH, height=HEIGHT, title=title or "Bath and sample temperature")
    if probability_time_h is None or probability is None:
        return top
    prob_rows = _finite_rows(t=probability_time_h, p=probability)
    highest = max([r["p"] for r in prob_rows] + [0.0])
    layers_p: list[alt.Chart] = []
    band_title = ""
    if probability_band is not None:
        band_rows = _finite_rows(t=probability_time_h, lo=probability_band[0], hi=probability_band[1])
        highest = max([highest] + [r["hi"] for r in band_rows])
        layers_p.append(alt.Chart(alt.Data(values=band_rows)).mark_area(color=LIMIT, opacity=0.18).encode(
            x="t:Q", y="lo:Q", y2="hi:Q"))
        band_title = " (band: 90 % interval)"
    top_p = min(1.0, max(0.02, highest * 1.15))  # the axis follows the numbers; its top is written on it
    layers_p.append(alt.Chart(alt.Data(values=prob_rows)).mark_line(color=LIMIT, strokeWidth=2).encode(
        x=alt.X("t:Q", title="time (h)"),
        y=alt.Y("p:Q", title="P(frozen)", scale=alt.Scale(domain=[0, top_p]))))
    bottom = alt.layer(*layers_p).properties(
        width=WIDTH, height=120, title="Cumulative probability that the sample has frozen" + band_title)
    return alt.vconcat(top, bottom)


def freezing_point_chart(concentration: Sequence[float], freezing_c: Sequence[float], *, unit: str, agent: str,
                         chosen: float | None = None, chosen_freezing_c: float | None = None,
                         hold_c: float | None = None) -> alt.Chart:
    """Freezing point (liquidus) against concentration of one agent, the chosen solution marked."""
    rows = _finite_rows(c=concentration, y=freezing_c)
    layers: list[alt.Chart] = [
        alt.Chart(alt.Data(values=rows)).mark_line(color=LIQUIDUS, strokeWidth=2).encode(
            x=alt.X("c:Q", title=f"{agent} ({unit})"), y=alt.Y("y:Q", title="freezing point (°C)"))
    ]
    if chosen is not None and chosen_freezing_c is not None:
        mark = alt.Chart(alt.Data(values=[{"c": chosen, "y": chosen_freezing_c,
                                           "label": f"this solution: {chosen_freezing_c:.2f} °C"}]))
        layers.append(mark.mark_point(size=140, filled=True, color=INK, shape="diamond").encode(x="c:Q", y="y:Q"))
        layers.append(mark.mark_text(align="left", dx=8, dy=-8, color=INK).encode(x="c:Q", y="y:Q", text="label:N"))
    if hold_c is not None:
        base = alt.Chart(alt.Data(values=[{"y": hold_c, "label": f"coldest hold {hold_c:.1f} °C"}]))
        layers.append(base.mark_rule(strokeDash=[4, 3], color=LIMIT).encode(y="y:Q"))
        layers.append(base.mark_text(align="left", dx=4, dy=-6, color=LIMIT).encode(y="y:Q", x=alt.value(4), text="label:N"))
    return alt.layer(*layers).properties(width=WIDTH, height=HEIGHT, title="Freezing point against concentration")


def chamber_chart(temperature_c: Sequence[float], pressure_mpa: Sequence[float], ice_fraction: Sequence[float], *,
                  hold_c: float | None = None, worst_c: float | None = None) -> alt.Chart:
    """Pressure and ice fraction against temperature in a rigid chamber if ice forms; hold and worst case marked."""
    p_rows = _finite_rows(t=temperature_c, y=pressure_mpa)
    x_rows = _finite_rows(t=temperature_c, y=ice_fraction)

    def marks(y_field: str) -> list[alt.Chart]:
        out = []
        for value, label in ((hold_c, "planned hold"), (worst_c, "worst case")):
            if value is not None and math.isfinite(value):
                base = alt.Chart(alt.Data(values=[{"t": value, "label": f"{label} {value:.1f} °C"}]))
                out.append(base.mark_rule(strokeDash=[4, 3], color=LIMIT if label == "worst case" else INK).encode(x="t:Q"))
                out.append(base.mark_text(angle=270, align="right", dx=-4, dy=-4,
                                          color=LIMIT if label == "worst case" else INK)
                           .encode(x="t:Q", y=alt.value(4), text="label:N"))
        return out

    x_axis = alt.X("t:Q", title="temperature (°C)", scale=alt.Scale(reverse=True))
    pressure = alt.layer(
        alt.Chart(alt.Data(values=p_rows)).mark_line(color=CENTRE, strokeWidth=2).encode(
            x=x_axis, y=alt.Y("y:Q", title="pressure (MPa)")), *marks("y"),
    ).properties(width=WIDTH, height=180, title="Chamber pressure if ice forms")
    ice = alt.layer(
        alt.Chart(alt.Data(values=x_rows)).mark_line(color=SURFACE, strokeWidth=2).encode(
            x=x_axis, y=alt.Y("y:Q", title="ice mass fraction", scale=alt.Scale(domain=[0, 1]))), *marks("y"),
    ).properties(width=WIDTH, height=130, title="Ice fraction at equilibrium")
    return alt.vconcat(pressure, ice)


def cells_chart(time_min: Sequence[float], relative_volume: Sequence[float], phase: Sequence[str], *,
                low: float | None = None, high: float | None = None) -> alt.Chart:
    """Cell volume (relative to isotonic) during loading and unloading, with the tolerance band."""
    rows = [
        {"t": float(t), "v": float(v), "phase": str(p)}
        for t, v, p in zip(time_min, relative_volume, phase, strict=True)
        if t is not None and v is not None and math.isfinite(float(t)) and math.isfinite(float(v))
    ]
    layers: list[alt.Chart] = []
    if low is not None and high is not None:
        layers.append(alt.Chart(alt.Data(values=[{"lo": low, "hi": high}])).mark_rect(
            color="#1f6f43", opacity=0.12).encode(y="lo:Q", y2="hi:Q"))
        for value, label in ((low, "smallest tolerated"), (high, "largest tolerated")):
            base = alt.Chart(alt.Data(values=[{"y": value, "label": f"{label} {value:.2f}"}]))
            layers.append(base.mark_rule(strokeDash=[4, 3], color=LIQUIDUS).encode(y="y:Q"))
            layers.append(base.mark_text(align="left", dx=4, dy=-6, color=LIQUIDUS).encode(y="y:Q", x=alt.value(4), text="label:N"))
    layers.append(alt.Chart(alt.Data(values=rows)).mark_line(strokeWidth=2).encode(
        x=alt.X("t:Q", title="time (min)"), y=alt.Y("v:Q", title="cell volume / isotonic volume"),
        color=alt.Color("phase:N", title=None, legend=alt.Legend(orient="top")),
        strokeDash=alt.StrokeDash("phase:N", legend=None)))
    return alt.layer(*layers).properties(width=WIDTH, height=HEIGHT, title="Cell volume during loading and unloading")


# --- adapters: the model's assessment → plain data -----------------------------------------------------

def _state(model, name: str) -> Any:
    assessment = model.assessment
    sections = getattr(assessment, "sections", None) or {}
    section = sections.get(name)
    return getattr(section, "state", None)


def _liquidus_c(model) -> float | None:
    state = _state(model, "solution")
    fp = getattr(getattr(state, "properties", None), "freezing_point", None)
    if fp is None:
        fp = getattr(state, "freezing_point", None)
    try:
        return float(fp) - CELSIUS_OFFSET if fp is not None else None
    except (TypeError, ValueError):
        return None


def homogeneous_limit(volume: float, liquidus: float) -> float | None:
    """Temperature [K] at which homogeneous nucleation alone would freeze ``volume`` [m3] within about a
    second (J_hom(T)·V = 1/s), from the nucleation model the assessment uses; None if never reached."""
    import planner.nucleation as nuc

    temps = np.linspace(max(liquidus - 80.0, 150.0), liquidus - 0.05, 800)
    rate = np.asarray(nuc.homogeneous_rate(temps, liquidus).rate, dtype=float) * volume
    above = np.nonzero(rate >= 1.0)[0]
    return float(temps[above[-1]]) if above.size else None


def schedule_data(model) -> tuple[dict[str, Any] | None, str]:
    protocol = model.protocol
    if protocol is None:
        return None, "No chart: the protocol has not been assessed yet."
    from planner.schedule import bath_history

    thermal = _state(model, "thermal")
    if thermal is not None and hasattr(thermal, "time") and hasattr(thermal, "centre_temperature"):
        t = np.asarray(thermal.time, dtype=float)
        idx = _thin(len(t))
        time_h = (t[idx] / 3600.0).tolist()
        curves: dict[str, Any] = {
            "bath": (np.asarray(thermal.bath_temperature)[idx] - CELSIUS_OFFSET).tolist(),
            "sample centre": (np.asarray(thermal.centre_temperature)[idx] - CELSIUS_OFFSET).tolist(),
            "sample surface": (np.asarray(thermal.surface_temperature)[idx] - CELSIUS_OFFSET).tolist(),
        }
        note = ""
    else:
        bath = bath_history(protocol.schedule)
        idx = _thin(len(bath.time))
        time_h = (np.asarray(bath.time)[idx] / 3600.0).tolist()
        curves = {"bath": (np.asarray(bath.temperature)[idx] - CELSIUS_OFFSET).tolist()}
        note = "The sample's own temperature is not in this assessment; the bath is shown."
    data: dict[str, Any] = {"time_h": time_h, "curves": curves, "liquidus_c": _liquidus_c(model)}
    nucleation = _state(model, "nucleation")
    if nucleation is not None and getattr(nucleation, "model", None) is not None:
        import planner.nucleation as nuc

        limit = homogeneous_limit(nucleation.volume, nucleation.liquidus)
        if limit is not None:
            data["homogeneous_c"] = limit - CELSIUS_OFFSET
        cum = nuc.cumulative_freeze_probability(nucleation.time, nucleation.temperature, nucleation.volume,
                                                nucleation.model, nucleation.liquidus, nucleation.interface_area,
                                                points=60, draws=400)
        data["probability_time_h"] = (np.asarray(cum["time"]) / 3600.0).tolist()
        data["probability"] = np.asarray(cum["probability"]).tolist()
        data["probability_band"] = (np.asarray(cum["lower"]).tolist(), np.asarray(cum["upper"]).tolist())
        note = (note + " " if note else "") + ("Freeze probability: central estimate (line) of the nucleation "
                                               "model; its 95th percentile at the end is "
                                               f"{float(cum['upper'][-1]):.3g}.")
    return data, note


def _draw_schedule(model):
    from planner.ui import schedule_extras as extras

    data, note = schedule_data(model)
    if data is None:
        return None, note
    freezing = extras.freezing_series(model.assessment)
    if freezing is not None:
        extras.replace_sample_curves_after_ice(data, freezing)
    marker = extras.recalescence_marker(model.assessment, model.protocol.policy.target_freeze_probability)
    chart = schedule_chart(data["time_h"], data["curves"], liquidus_c=data.get("liquidus_c"),
                           homogeneous_c=data.get("homogeneous_c"), probability_time_h=data.get("probability_time_h"),
                           probability=data.get("probability"), probability_band=data.get("probability_band"),
                           extra_layers=extras.recalescence_layers(marker, data["time_h"][-1]) if marker else ())
    if marker:
        note = (note + " " if note else "") + ("The red jump marks what happens if ice forms at the coldest point: "
                                               + marker["label"] + ".")
    if freezing is not None:
        chart = alt.vconcat(chart, extras.freezing_panel(freezing, data["time_h"][-1]))
        note = (note + " " if note else "") + ("From the seed on, the sample curves are the freezing model's "
                                               "(latent heat included); below them, the unfrozen water and "
                                               "what the cells sit in.")
    return chart, note


def _draw_freezing_point(model):
    protocol = model.protocol
    if protocol is None:
        return None, "No chart: the protocol has not been assessed yet."
    try:
        from planner.solution import composition, freezing_point
    except ImportError:
        return None, "No chart: the solution model is not installed."
    agents = protocol.solution.cryoprotectants
    if not agents:
        return None, "No chart: the solution has no cryoprotectant to vary."
    first = agents[0]
    top = max(first.value * 2.0, first.value + 5.0)
    values = np.linspace(0.0, top, 41)
    fps = []
    others = [(a.agent, a.unit, a.value) for a in agents[1:]]
    for v in values:
        try:
            comp = composition(protocol.solution.carrier, [(first.agent, first.unit, float(v)), *others]) \
                if v > 0 else composition(protocol.solution.carrier, others)
            fps.append(float(np.asarray(freezing_point(comp)).ravel()[0]) - CELSIUS_OFFSET)
        except Exception:  # outside the model's range: the curve stops there, nothing is extrapolated
            fps.append(None)
    from planner.ui.fields import CONCENTRATION_WORDS

    chosen_fp = _liquidus_c(model)
    hold = protocol.schedule.coldest_temperature - CELSIUS_OFFSET
    return freezing_point_chart(values.tolist(), fps, unit=CONCENTRATION_WORDS.get(first.unit, first.unit),
                                agent=first.agent, chosen=first.value, chosen_freezing_c=chosen_fp,
                                hold_c=hold if hold < 0 else None), ""


def _draw_chamber(model):
    protocol = model.protocol
    if protocol is None:
        return None, "No chart: the protocol has not been assessed yet."
    if protocol.container.kind != "rigid":
        return None, "No chamber chart: the container is open (at atmospheric pressure)."
    state = _state(model, "chamber")
    curves = getattr(state, "curves", None)
    if not curves:
        return None, "No chart: the chamber section did not give a pressure curve."
    from planner import water_ice

    worst = getattr(water_ice, "TRIPLE_POINT_IH_III_TEMPERATURE", None)
    hold = getattr(state, "temperature", None) or protocol.schedule.coldest_temperature
    return chamber_chart((np.asarray(curves["temperature"]) - CELSIUS_OFFSET).tolist(),
                         (np.asarray(curves["pressure"]) / 1e6).tolist(),
                         np.asarray(curves["ice_fraction_of_water"]).tolist(),
                         hold_c=float(hold) - CELSIUS_OFFSET,
                         worst_c=None if worst is None else float(worst) - CELSIUS_OFFSET), (
        "If the contents froze at equilibrium: pressure follows the melting curve of the freeze-concentrated "
        "liquid. The worst case is the ice Ih–III–liquid triple point.")


def _draw_cells(model):
    protocol = model.protocol
    if protocol is None:
        return None, "No chart: the protocol has not been assessed yet."
    if protocol.cells is None:
        return None, "No cell chart: the protocol has no cells block."
    state = _state(model, "cells")
    t = getattr(state, "time", None)
    v = getattr(state, "relative_volume", None)
    if t is None or v is None:
        return None, "No chart: the cells section did not give a volume history."
    phase = getattr(state, "stage", None)
    phase = [str(p) for p in phase] if phase is not None else ["loading"] * len(t)
    params = getattr(state, "parameters", None)
    low = getattr(params, "min_volume_fraction", None) or protocol.cells.min_volume_fraction
    high = getattr(params, "max_volume_fraction", None) or protocol.cells.max_volume_fraction
    return cells_chart((np.asarray(t) / 60.0).tolist(), np.asarray(v).tolist(), phase, low=low, high=high), ""


__all__ = ["CHARTS", "Snapshot", "chart_for_step", "freeze_map_chart", "snapshot"]

CHARTS: dict[str, Callable[[Any], tuple[alt.Chart | None, str]]] = {
    "schedule": _draw_schedule,
    "freezing_point": _draw_freezing_point,
    "chamber": _draw_chamber,
    "cells": _draw_cells,
    "freeze_map": draw_freeze_map,  # written without altair (planner.ui.mapchart)
}


def overlay_chart(series: list[dict[str, Any]]) -> alt.Chart:
    """Scenarios overlaid: sample temperature against time, and the cumulative freeze probability below.

    ``series``: one dict per scenario with ``label``, ``time_h``, ``temperature_c`` and, optionally,
    ``probability_time_h`` and ``probability``.
    """
    rows, prob = [], []
    for s in series:
        rows += [{**r, "scenario": s["label"]} for r in _finite_rows(t=s["time_h"], y=s["temperature_c"])]
        if s.get("probability") is not None:
            prob += [{**r, "scenario": s["label"]} for r in _finite_rows(t=s["probability_time_h"], p=s["probability"])]
    labels = [s["label"] for s in series]
    dash = alt.StrokeDash("scenario:N", scale=alt.Scale(domain=labels, range=[[1, 0], [6, 3], [2, 2], [8, 2, 2, 2]][: len(labels)]),
                          legend=None)
    colour = alt.Color("scenario:N", title=None, scale=alt.Scale(domain=labels, range=[INK, CENTRE, LIMIT, SURFACE][: len(labels)]),
                       legend=alt.Legend(orient="top", labelLimit=400))
    top = alt.Chart(alt.Data(values=rows)).mark_line(strokeWidth=2).encode(
        x=alt.X("t:Q", title="time (h)"), y=alt.Y("y:Q", title="sample centre (°C)"), color=colour, strokeDash=dash,
    ).properties(width=WIDTH, height=HEIGHT, title="Sample temperature")
    if not prob:
        return top
    bottom = alt.Chart(alt.Data(values=prob)).mark_line(strokeWidth=2).encode(
        x=alt.X("t:Q", title="time (h)"), y=alt.Y("p:Q", title="P(frozen)", scale=alt.Scale(domain=[0, 1])),
        color=colour, strokeDash=dash,
    ).properties(width=WIDTH, height=130, title="Cumulative probability that the sample has frozen")
    return alt.vconcat(top, bottom)


def overlay_data(snap: Snapshot, label: str) -> dict[str, Any] | None:
    """One scenario's series for :func:`overlay_chart` (None before its first valid assessment)."""
    data, _ = schedule_data(snap)
    if data is None:
        return None
    curves = data["curves"]
    temperature = curves.get("sample centre", curves["bath"])
    return {"label": label, "time_h": data["time_h"], "temperature_c": temperature,
            "probability_time_h": data.get("probability_time_h"), "probability": data.get("probability")}
