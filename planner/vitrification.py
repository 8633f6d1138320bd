"""Vitrification: critical cooling and warming rates, rate margins and the glass margin in storage.

A solution vitrifies when it is cooled through the range between its liquidus and its glass transition
faster than its critical cooling rate, and it comes back without ice only when it is warmed through the
same range faster than its critical warming rate, which is usually one to several orders of magnitude
higher. Both rates are measured for binary cryoprotectant-water solutions and fall steeply with
concentration; the published rows live in ``planner/data/critical_rates.yaml``.

Interpolation
-------------
Between published rows of one agent the planner interpolates ``log10(rate)`` in mass percent with a
monotone piecewise cubic Hermite interpolant (PCHIP, Fritsch-Carlson, ``scipy.interpolate.
PchipInterpolator``). PCHIP keeps the interpolant monotone between monotone data, so a richer solution
never gets a higher critical rate than a weaker one; with two rows it is log-linear. Outside the rows:

- above the most concentrated row, the critical rate is at most the value of that row (rates fall with
  concentration): the planner reports that bound and flags it ``extrapolated``, so a margin computed
  from it is a lower bound on the true margin;
- below the least concentrated row, the critical rate is at least that row's value, which bounds nothing
  useful for a margin: the planner refuses (value NaN, flag ``refused``).

All rates here are in K/s in the core (1 K/s = 60 C/min).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import lru_cache
from importlib import resources

import numpy as np
from numpy.typing import ArrayLike
from scipy.interpolate import PchipInterpolator

from planner.errors import InputError, ModelRangeError, choice_error
from planner.results import Flag, Result
from planner.yamlio import load_yaml

PER_MINUTE = 60.0  # s/min: a rate in K/s times 60 is a rate in K/min (= C/min)

QUANTITIES = ("cooling", "warming")
_YAML_KEYS = {"cooling": "critical_cooling_rate_c_per_min", "warming": "critical_warming_rate_c_per_min"}

#: Plausible range of a critical rate entered by a user [K/s]: 1e-3 C/min to 1e11 C/min. Published rates
#: of aqueous solutions span about 0.1 C/min (concentrated cocktails) to 1e10 C/min (warming of 40 % w/w
#: ethylene glycol, [ref:baudot-odagescu-2004]).
ENTERED_RATE_RANGE = (1e-3 / PER_MINUTE, 1e11 / PER_MINUTE)


@dataclass(frozen=True)
class RateRow:
    """One published measurement: an agent at one concentration, its critical rates [K/s] and source."""

    agent: str
    mass_percent: float
    critical_cooling_rate: float | None  # K/s
    critical_warming_rate: float | None  # K/s
    precision: str  # stated | approximate
    conditions: str
    source: str
    note: str = ""

    def rate(self, quantity: str) -> float | None:
        return self.critical_cooling_rate if quantity == "cooling" else self.critical_warming_rate


@lru_cache(maxsize=1)
def _table() -> dict[str, tuple[RateRow, ...]]:
    text = resources.files("planner").joinpath("data/critical_rates.yaml").read_text(encoding="utf-8")
    return parse_rate_table(load_yaml(text, "critical_rates.yaml"))


def parse_rate_table(raw: dict) -> dict[str, tuple[RateRow, ...]]:
    """Rows of a critical-rate document (the layout of ``critical_rates.yaml``), checked and in K/s.

    Refuses a non-positive rate, an unknown precision word, two rows at one concentration, and rates
    that do not fall as the concentration rises (an error naming the agent and the quantity).
    """
    out: dict[str, tuple[RateRow, ...]] = {}
    for agent, rows in raw.items():
        parsed = []
        for i, row in enumerate(rows):
            where = f"critical_rates.yaml {agent}[{i}]"
            cool, warm = row.get(_YAML_KEYS["cooling"]), row.get(_YAML_KEYS["warming"])
            for name, value in ((_YAML_KEYS["cooling"], cool), (_YAML_KEYS["warming"], warm)):
                if value is not None and not (float(value) > 0):
                    raise InputError(f"{where}.{name}", value, "a positive rate in C/min, or null")
            if row.get("precision") not in ("stated", "approximate"):
                raise choice_error(f"{where}.precision", row.get("precision"), ["stated", "approximate"])
            parsed.append(
                RateRow(
                    agent=agent,
                    mass_percent=float(row["mass_percent"]),
                    critical_cooling_rate=None if cool is None else float(cool) / PER_MINUTE,
                    critical_warming_rate=None if warm is None else float(warm) / PER_MINUTE,
                    precision=row["precision"],
                    conditions=" ".join(str(row["conditions"]).split()),
                    source=row["source"],
                    note=row.get("note", ""),
                )
            )
        parsed.sort(key=lambda r: r.mass_percent)
        for quantity in QUANTITIES:
            pts = [(r.mass_percent, r.rate(quantity)) for r in parsed if r.rate(quantity) is not None]
            conc = [p[0] for p in pts]
            if len(set(conc)) != len(conc):
                raise InputError(f"critical_rates.yaml {agent}", conc, "one row per concentration and quantity")
            rates = [p[1] for p in pts]
            if any(b >= a for a, b in zip(rates, rates[1:], strict=False)):
                raise InputError(
                    f"critical_rates.yaml {agent}.{_YAML_KEYS[quantity]}",
                    [r * PER_MINUTE for r in rates],
                    "rates that fall as the concentration rises",
                )
        out[agent] = tuple(parsed)
    return out


def known_agents() -> tuple[str, ...]:
    """Agents with published critical rates in ``planner/data/critical_rates.yaml``."""
    return tuple(sorted(_table()))


def rate_rows(agent: str) -> tuple[RateRow, ...]:
    """The published rows of one agent, by rising concentration; an unknown agent is an error."""
    table = _table()
    if agent not in table:
        raise choice_error("agent", agent, sorted(table))
    return table[agent]


@dataclass
class CriticalRate(Result):
    """A critical cooling or warming rate of a binary solution, with the rows it rests on.

    ``rate`` is in K/s (NaN where refused); ``data_range`` is the span of published concentrations
    [mass percent]; ``bound`` says what the number is: ``interpolated``, ``at-most`` (above the data) or
    ``refused`` (below the data).
    """

    quantity: str = "cooling"
    agent: str = ""
    mass_percent: float | np.ndarray = 0.0
    rate: float | np.ndarray = float("nan")
    bound: str | list[str] = "interpolated"
    data_range: tuple[float, float] = (float("nan"), float("nan"))
    sources: list[str] = field(default_factory=list)

    @property
    def rate_c_per_min(self) -> float | np.ndarray:
        return np.asarray(self.rate) * PER_MINUTE if np.ndim(self.rate) else float(self.rate) * PER_MINUTE


def critical_rate(quantity: str, agent: str, mass_percent: ArrayLike) -> CriticalRate:
    """Critical cooling or warming rate of a binary agent-water solution [K/s].

    Parameters
    ----------
    quantity : {"cooling", "warming"}
        Which critical rate.
    agent : str
        Agent key (``planner/data/critical_rates.yaml``, same keys as ``planner/data/agents.yaml``).
    mass_percent : float or array
        Agent concentration [% w/w of the solution], 0 to 100.

    Returns
    -------
    CriticalRate
        ``rate`` [K/s], scalar for scalar input, array for array input.

    Notes
    -----
    log10 R(w) = PCHIP(w_i, log10 R_i) for w_min <= w <= w_max (R_i the published rows). For w > w_max,
    R <= R(w_max) (reported as that bound, flagged ``extrapolated``); for w < w_min, refused (NaN,
    flagged ``refused``). Validity: the published concentrations of each agent; the rows come from
    calorimetry of small (mg) samples of the binary solution with water.

    References
    ----------
    [ref:baudot-odagescu-2004], [ref:wowk-1999]

    Examples
    --------
    >>> r = critical_rate("warming", "ethylene-glycol", 50.0)
    >>> round(float(r.rate_c_per_min)), r.bound
    (853, 'interpolated')
    """
    if quantity not in QUANTITIES:
        raise choice_error("quantity", quantity, QUANTITIES)
    w = np.asarray(mass_percent, dtype=float)
    if not np.all(np.isfinite(w)) or np.any((w < 0) | (w > 100)):
        raise ModelRangeError("mass_percent", mass_percent, "0 to 100 % w/w", "critical rate table")
    rows = [r for r in rate_rows(agent) if r.rate(quantity) is not None]
    if not rows:
        rate = np.full_like(w, np.nan)
        flags = [Flag("missing-data", f"no published critical {quantity} rate for {agent}", None)]
        return CriticalRate(
            model="critical rate table", source="", parameters={}, flags=flags, quantity=quantity,
            agent=agent, mass_percent=_like(w, mass_percent), rate=_like(rate, mass_percent),
            bound=_like_words(np.full(w.shape, "refused", dtype=object), mass_percent),
        )
    conc = np.array([r.mass_percent for r in rows])
    log_rate = np.log10([r.rate(quantity) for r in rows])
    lo, hi = float(conc[0]), float(conc[-1])
    if len(rows) == 1:
        inside_value = np.where(np.abs(w - lo) <= 0.5, log_rate[0], np.nan)
    else:
        inside_value = PchipInterpolator(conc, log_rate, extrapolate=False)(np.clip(w, lo, hi))
    above = w > hi
    below = w < lo
    value = np.where(above, log_rate[-1], inside_value)
    value = np.where(below, np.nan, value)
    rate = 10.0**value
    bound = np.where(above, "at-most", np.where(below | ~np.isfinite(value), "refused", "interpolated")).astype(object)
    flags: list[Flag] = []
    if np.any(above):
        flags.append(Flag(
            "extrapolated",
            f"{agent} above {hi:g} % w/w (the most concentrated published row): the critical {quantity} "
            f"rate is at most {rows[-1].rate(quantity) * PER_MINUTE:.3g} C/min, so a margin from it is a "
            "lower bound",
            rows[-1].source,
        ))
    if np.any(below) or (len(rows) == 1 and np.any(np.abs(w - lo) > 0.5)):
        flags.append(Flag(
            "refused",
            f"{agent} below {lo:g} % w/w (the least concentrated published row): the critical {quantity} "
            "rate is higher than any published value and is not extrapolated",
            rows[0].source,
        ))
    used = _rows_used(rows, w)
    if any(r.precision == "approximate" for r in used):
        flags.append(Flag(
            "indicative",
            f"the critical {quantity} rate of {agent} here rests on rows the source gives only approximately",
            None,
        ))
    sources = sorted({r.source for r in used})
    return CriticalRate(
        model="published critical rates, PCHIP in log10(rate)",
        source=sources[0] if sources else "",
        parameters={"rows": [(r.mass_percent, r.rate(quantity) * PER_MINUTE, r.source) for r in rows]},
        flags=flags,
        quantity=quantity,
        agent=agent,
        mass_percent=_like(w, mass_percent),
        rate=_like(rate, mass_percent),
        bound=_like_words(bound, mass_percent),
        data_range=(lo, hi),
        sources=sources,
    )


def critical_cooling_rate(agent: str, mass_percent: ArrayLike) -> CriticalRate:
    """Critical cooling rate of a binary agent-water solution [K/s]; see :func:`critical_rate`.

    References
    ----------
    [ref:baudot-odagescu-2004], [ref:wowk-1999]
    """
    return critical_rate("cooling", agent, mass_percent)


def critical_warming_rate(agent: str, mass_percent: ArrayLike) -> CriticalRate:
    """Critical warming rate of a binary agent-water solution [K/s]; see :func:`critical_rate`.

    References
    ----------
    [ref:baudot-odagescu-2004]
    """
    return critical_rate("warming", agent, mass_percent)


def check_entered_rate(field_path: str, rate: float | None) -> None:
    """Refuse a user-entered critical rate [K/s] outside 1e-3 to 1e11 C/min (error names ``field_path``)."""
    if rate is None:
        return
    lo, hi = ENTERED_RATE_RANGE
    if not np.isfinite(rate) or not (lo <= rate <= hi):
        raise InputError(
            field_path, rate * PER_MINUTE if np.isfinite(rate) else rate,
            f"{lo * PER_MINUTE:g} to {hi * PER_MINUTE:g} C/min (published critical rates of aqueous "
            "solutions span about 0.1 to 1e10 C/min)",
        )


def rate_margin(achieved_rate: ArrayLike, critical: ArrayLike) -> float | np.ndarray:
    """Achieved over critical rate (both [K/s], magnitudes): above 1 the rate is enough, below 1 it is not.

    Parameters
    ----------
    achieved_rate : float or array
        Mean rate the slowest point of the sample reaches through the glass-forming range [K/s].
    critical : float or array
        Critical rate of the solution [K/s].

    Returns
    -------
    float or array
        margin = |achieved| / critical [1]; NaN where either is missing or not positive.

    Notes
    -----
    A margin of 1 means the sample reaches exactly the rate at which small calorimetry samples just
    avoid detectable ice; it is not a guarantee. Critical rates are measured at constant rate; a sample
    whose rate varies across the range needs its slowest stretch judged, which the mean rate does not show.

    References
    ----------
    [ref:wowk-2010]
    """
    a = np.abs(np.asarray(achieved_rate, dtype=float))
    c = np.asarray(critical, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        m = np.where((c > 0) & np.isfinite(a) & np.isfinite(c), a / c, np.nan)
    return float(m) if m.ndim == 0 else m


def glass_margin(storage_temperature: ArrayLike, glass_transition: ArrayLike) -> float | np.ndarray:
    """How far storage sits below the glass transition [K]: T_g - T_storage (negative: above T_g).

    Parameters
    ----------
    storage_temperature : float or array
        Storage temperature [K].
    glass_transition : float or array
        Glass transition temperature of the solution [K].

    Returns
    -------
    float or array
        T_g - T_storage [K].

    Notes
    -----
    Above T_g a vitrified sample is a supercooled liquid again: ice can nucleate and grow during storage.
    Below T_g residual molecular mobility still lets the glass relax slowly [ref:wowk-2010].
    """
    m = np.asarray(glass_transition, dtype=float) - np.asarray(storage_temperature, dtype=float)
    return float(m) if m.ndim == 0 else m


def _rows_used(rows: list[RateRow], w: np.ndarray) -> list[RateRow]:
    """Rows that bracket (or bound) the requested concentrations."""
    used: set[int] = set()
    conc = np.array([r.mass_percent for r in rows])
    for x in np.atleast_1d(w):
        if x >= conc[-1]:
            used.add(len(rows) - 1)
        elif x <= conc[0]:
            used.add(0)
        else:
            j = int(np.searchsorted(conc, x))
            used.update({j - 1, j} if conc[j] != x else {j})
    return [rows[i] for i in sorted(used)]


def _like(values: np.ndarray, template: ArrayLike):
    return float(values) if np.ndim(template) == 0 else np.asarray(values, dtype=float)


def _like_words(values: np.ndarray, template: ArrayLike):
    return str(values) if np.ndim(template) == 0 else [str(v) for v in np.atleast_1d(values)]
