"""The freeze-probability map: probability that a sample freezes during its hold, over sample volume ×
hold temperature, with each scenario marked where it sits.

The map comes from the nucleation model each assessment used (``planner.nucleation``): its heterogeneous
rates and the homogeneous rate, for an isothermal hold as long as the scenario's holds
(:func:`planner.nucleation.freeze_probability_map`; the ramps to and from the hold are left out). The
liquid–air interface area scales with volume^(2/3) from the scenario's own. When an assessment has no
nucleation state there is no map (never a made-up one).
"""

from __future__ import annotations

from typing import Any

import numpy as np

from planner.protocol import CELSIUS_OFFSET

VOLUMES_ML = (0.1, 0.25, 0.5, 1.0, 2.0, 5.0, 10.0, 20.0, 50.0)


def hold_duration(protocol: Any) -> float:
    """Total time of the schedule's hold steps [s] (0 when it has none)."""
    return float(sum(s.duration or 0.0 for s in protocol.schedule.steps if s.kind == "hold"))


def map_temperatures_c(coldest_c: list[float]) -> list[float]:
    """Hold temperatures [°C] for the map: whole degrees from just below 0 °C to past the coldest hold."""
    low = min(-10.0, min(coldest_c) - 4.0)
    step = 1.0 if low > -13 else 2.0
    return [float(t) for t in np.arange(-1.0, low - 1e-9, -step)]


def freeze_map(scenarios: list[tuple[Any, Any]], labels: list[str] | None = None, quantile: float | None = None
               ) -> tuple[list[float], list[float], np.ndarray, list[tuple[float, float, str]], str] | None:
    """(volumes [mL], hold temperatures [°C], probability grid [temperature, volume], marks, note).

    Parameters
    ----------
    scenarios : list of (Protocol, Assessment)
        The first one's nucleation model and liquidus draw the map; every one is marked at (its volume,
        its coldest point); the longest total hold sets the hold duration.
    labels : list of str, optional
        Names of the marks (default "A", "B", …).
    quantile : float, optional
        None for the central estimate; 0.95 for the upper end of the model's 90 % interval.
    """
    states = [getattr(a, "sections", {}).get("nucleation") for _, a in scenarios]
    if not states or states[0] is None or getattr(states[0].state, "model", None) is None:
        return None
    import planner.nucleation as nuc

    first = states[0].state
    labels = labels or [chr(ord("A") + i) for i in range(len(scenarios))]
    marks = []
    coldest = []
    duration = 0.0
    for label, section in zip(labels, states, strict=True):
        if section is None:
            continue
        st = section.state
        c = float(np.min(st.temperature)) - CELSIUS_OFFSET
        coldest.append(c)
        marks.append((float(st.volume) * 1e6, c, label))
    for protocol, _ in scenarios:
        duration = max(duration, hold_duration(protocol))
    if duration <= 0:
        duration = float(first.time[-1] - first.time[0])
    temps_c = map_temperatures_c(coldest)
    volumes = np.asarray(VOLUMES_ML) * 1e-6
    areas = first.interface_area * (volumes / first.volume) ** (2.0 / 3.0)
    grid = nuc.freeze_probability_map(volumes, np.asarray(temps_c) + CELSIUS_OFFSET, duration, first.model,
                                      first.liquidus, interface_areas=areas, quantile=quantile)
    note = (f"Isothermal hold of {duration / 3600:.3g} h with the nucleation model of the first scenario "
            f"({getattr(first.model, 'name', 'preset')}) and its liquidus {first.liquidus - CELSIUS_OFFSET:.2f} °C; "
            + ("central estimate" if quantile is None else f"{quantile:.0%} quantile of the model's draws")
            + (f". Each volume is taken in a container of the same shape as the first scenario's, so its "
               f"liquid–air interface ({first.interface_area * 1e6:.3g} mm² at {first.volume * 1e6:.3g} mL) "
               "scales as volume^(2/3); a sample in a container of another shape, or without the ramps to and "
               "from the hold, has its own figure." if first.interface_area else "."))
    return list(VOLUMES_ML), temps_c, np.asarray(grid).T, marks, note
