"""Calibrate the heterogeneous nucleation rate from the user's own freezing assay.

The assay CSV (our format; full description in ``docs/calibration-csv.md``)
--------------------------------------------------------------------------------
UTF-8 text. Lines starting with ``#`` are comments; a comment of the form ``# key: value`` sets metadata:

- ``liquidus_c`` (required): liquidus of the assayed medium [°C], e.g. ``# liquidus_c: -0.55``;
- ``medium`` (optional): free text describing the medium.

The first other line is the header; it must name exactly these columns, in any order::

    sample_id, kind, volume_ml, cooling_rate_c_per_min, freezing_temperature_c, lowest_temperature_c,
    hold_temperature_c, hours_held, frozen, time_frozen_h

One row per sample. ``kind`` is ``ramp`` or ``hold``; ``frozen`` is ``yes`` or ``no``.

- ``ramp`` rows (cooled at a constant rate from the liquidus): ``volume_ml``, ``cooling_rate_c_per_min``,
  and ``freezing_temperature_c`` when frozen, or ``lowest_temperature_c`` (the coldest temperature reached
  unfrozen) when not. The hold columns stay empty.
- ``hold`` rows (held at one temperature): ``volume_ml``, ``hold_temperature_c``, ``hours_held``,
  ``frozen``, and ``time_frozen_h`` (hours from the start of the hold) when the freezing was seen; a
  frozen sample without a time is an interval-censored observation. The ramp columns stay empty.

A malformed row is refused with an :class:`planner.errors.InputError` naming the file, the line number
(counting every line of the file, comments included), the column and the value.

The fit
-------
Rate per volume w(x) = exp(a + b (x - x_ref)), x the supercooling [K] below ``liquidus_c``, b = exp(c).
Maximum likelihood over (a, c) with scipy.optimize: a frozen sample contributes its event density, an
unfrozen one its survival (right-censored), a frozen hold without a time 1 - survival. The covariance is
the inverse of the observed information (numerical Hessian of the analytic gradient). When every sample
was held at one temperature the slope cannot be estimated: a is fitted and the slope keeps the prior of
the presets (flagged). When no sample froze there is no point estimate: only a one-sided 95 % upper bound
of the rate (exposure-weighted, which for n equal samples is the binomial bound 1 - 0.05^(1/n)).

The calibration file
--------------------
:func:`save_calibration` writes a small YAML file (never over an existing one) carrying the estimates, the
covariance, the measured supercooling range, the goodness-of-fit table, and the SHA-256 of the assay CSV;
:func:`load_calibration` refuses a file whose data file (when present beside it) no longer matches.
"""

from __future__ import annotations

import csv
import hashlib
import io
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from scipy import optimize

from planner.errors import InputError, did_you_mean
from planner.nucleation import NucleationModel, RateTerm, presets
from planner.results import Flag, Result, to_jsonable
from planner.validity import Range
from planner.yamlio import load_yaml

COLUMNS = (
    "sample_id", "kind", "volume_ml", "cooling_rate_c_per_min", "freezing_temperature_c",
    "lowest_temperature_c", "hold_temperature_c", "hours_held", "frozen", "time_frozen_h",
)
RAMP_COLUMNS = ("cooling_rate_c_per_min", "freezing_temperature_c", "lowest_temperature_c")
HOLD_COLUMNS = ("hold_temperature_c", "hours_held", "time_frozen_h")
CALIBRATION_FORMAT = "coldmargin nucleation calibration 1"
CELSIUS = 273.15
UPPER_BOUND_LEVEL = 0.95  # one-sided
EXTRAPOLATION_MARGIN = 2.0  # K beyond the measured supercoolings before a result is flagged
SLOPE_PRIOR_PRESET = "sealed-interface"  # slope prior used when the assay cannot estimate the slope


@dataclass(frozen=True)
class AssaySample:
    """One sample of the assay in SI units: ``volume`` [m3], ``cooling_rate`` [K/s], temperatures [K],
    ``duration`` [s] (hold), ``time_frozen`` [s] or None; ``line`` is the line in the file."""

    sample_id: str
    kind: str
    volume: float
    frozen: bool
    line: int
    cooling_rate: float | None = None
    freezing_temperature: float | None = None
    lowest_temperature: float | None = None
    hold_temperature: float | None = None
    duration: float | None = None
    time_frozen: float | None = None


@dataclass(frozen=True)
class Assay:
    samples: tuple[AssaySample, ...]
    liquidus: float  # K
    medium: str
    sha256: str
    name: str


def _field(name: str, line: int, column: str) -> str:
    return f"{name} row {line}, column {column}"


def _number(raw: str, name: str, line: int, column: str, low: float, high: float, low_open: bool = False) -> float:
    try:
        value = float(raw)
    except ValueError:
        raise InputError(_field(name, line, column), raw, f"a number from {low:g} to {high:g}") from None
    ok = math.isfinite(value) and (value > low if low_open else value >= low) and value <= high
    if not ok:
        words = f"above {low:g} and at most {high:g}" if low_open else f"{low:g} to {high:g}"
        raise InputError(_field(name, line, column), raw, words)
    return value


def parse_assay(text: str, name: str = "assay.csv") -> Assay:
    """Parse and validate an assay CSV (format in the module docstring).

    Parameters
    ----------
    text : str
        The file's text.
    name : str
        The file's name, used in error messages.

    Returns
    -------
    Assay
        Validated samples in SI units, the medium's liquidus [K], and the SHA-256 of the text (UTF-8).
    """
    sha = hashlib.sha256(text.encode("utf-8")).hexdigest()
    meta: dict[str, str] = {}
    lines = text.splitlines()
    body: list[tuple[int, str]] = []
    for i, raw in enumerate(lines, start=1):
        stripped = raw.strip()
        if not stripped:
            continue
        if stripped.startswith("#"):
            content = stripped[1:].strip()
            if ":" in content:
                key, _, value = content.partition(":")
                key = key.strip()
                if key in ("liquidus_c", "medium"):
                    if key in meta:
                        raise InputError(f"{name} row {i}", key, "each metadata key once")
                    meta[key] = value.strip()
            continue
        body.append((i, raw))
    if "liquidus_c" not in meta:
        raise InputError(f"{name} metadata liquidus_c", "missing",
                         "a comment line '# liquidus_c: NUMBER' giving the assayed medium's liquidus [C]")
    liquidus_c = _number(meta["liquidus_c"], name, 0, "liquidus_c", -40.0, 0.01)
    if not body:
        raise InputError(name, "no header", "a header line naming the columns " + ", ".join(COLUMNS))
    header_line, header_raw = body[0]
    header = [h.strip() for h in next(csv.reader([header_raw]))]
    for h in header:
        if h not in COLUMNS:
            raise InputError(_field(name, header_line, h), "unknown column", "one of: " + ", ".join(COLUMNS),
                             did_you_mean(h, COLUMNS))
    for c in COLUMNS:
        if c not in header:
            raise InputError(_field(name, header_line, c), "missing", "every column of the format")
    if len(set(header)) != len(header):
        raise InputError(_field(name, header_line, "header"), header_raw, "each column once")
    samples: list[AssaySample] = []
    seen: dict[str, int] = {}
    liquidus = liquidus_c + CELSIUS
    for line, raw in body[1:]:
        cells = next(csv.reader(io.StringIO(raw)))
        if len(cells) != len(header):
            raise InputError(f"{name} row {line}", f"{len(cells)} cells", f"{len(header)} cells, one per column")
        row = {h: c.strip() for h, c in zip(header, cells, strict=True)}
        samples.append(_sample(row, name, line, liquidus, seen))
    if not samples:
        raise InputError(name, "no samples", "one row per assayed sample after the header")
    return Assay(tuple(samples), liquidus, meta.get("medium", ""), sha, name)


def _sample(row: dict[str, str], name: str, line: int, liquidus: float, seen: dict[str, int]) -> AssaySample:
    sid = row["sample_id"]
    if not sid:
        raise InputError(_field(name, line, "sample_id"), sid, "a non-empty identifier")
    if sid in seen:
        raise InputError(_field(name, line, "sample_id"), sid, f"a unique identifier (also on row {seen[sid]})")
    seen[sid] = line
    kind = row["kind"].lower()
    if kind not in ("ramp", "hold"):
        raise InputError(_field(name, line, "kind"), row["kind"], "one of: ramp, hold", did_you_mean(kind, ("ramp", "hold")))
    frozen_word = row["frozen"].lower()
    if frozen_word not in ("yes", "no"):
        raise InputError(_field(name, line, "frozen"), row["frozen"], "one of: yes, no")
    frozen = frozen_word == "yes"
    volume = _number(row["volume_ml"], name, line, "volume_ml", 0.0, 1e4, low_open=True) * 1e-6
    liquidus_c = liquidus - CELSIUS
    if kind == "ramp":
        for c in HOLD_COLUMNS:
            if row[c]:
                raise InputError(_field(name, line, c), row[c], "empty for a ramp row")
        rate = _number(row["cooling_rate_c_per_min"], name, line, "cooling_rate_c_per_min", 0.0, 1000.0, True) / 60.0
        if frozen:
            if row["lowest_temperature_c"]:
                raise InputError(_field(name, line, "lowest_temperature_c"), row["lowest_temperature_c"],
                                 "empty when the sample froze (give freezing_temperature_c)")
            tf = _number(row["freezing_temperature_c"], name, line, "freezing_temperature_c", -80.0, liquidus_c, True)
            if not tf < liquidus_c:
                raise InputError(_field(name, line, "freezing_temperature_c"), row["freezing_temperature_c"],
                                 f"below the liquidus_c {liquidus_c:g}")
            return AssaySample(sid, kind, volume, True, line, cooling_rate=rate, freezing_temperature=tf + CELSIUS)
        if row["freezing_temperature_c"]:
            raise InputError(_field(name, line, "freezing_temperature_c"), row["freezing_temperature_c"],
                             "empty when the sample did not freeze (give lowest_temperature_c)")
        tl = _number(row["lowest_temperature_c"], name, line, "lowest_temperature_c", -80.0, liquidus_c)
        return AssaySample(sid, kind, volume, False, line, cooling_rate=rate, lowest_temperature=tl + CELSIUS)
    for c in RAMP_COLUMNS:
        if row[c]:
            raise InputError(_field(name, line, c), row[c], "empty for a hold row")
    th = _number(row["hold_temperature_c"], name, line, "hold_temperature_c", -80.0, liquidus_c)
    if not th < liquidus_c:
        raise InputError(_field(name, line, "hold_temperature_c"), row["hold_temperature_c"],
                         f"below the liquidus_c {liquidus_c:g}")
    hours = _number(row["hours_held"], name, line, "hours_held", 0.0, 1e5, low_open=True)
    tfz = None
    if row["time_frozen_h"]:
        if not frozen:
            raise InputError(_field(name, line, "time_frozen_h"), row["time_frozen_h"], "empty when frozen is no")
        tfz = _number(row["time_frozen_h"], name, line, "time_frozen_h", 0.0, hours, low_open=True) * 3600.0
    return AssaySample(sid, kind, volume, frozen, line, hold_temperature=th + CELSIUS, duration=hours * 3600.0,
                       time_frozen=tfz)


def read_assay(path: str | Path) -> Assay:
    """Read an assay CSV from ``path`` (see :func:`parse_assay`)."""
    p = Path(path)
    try:
        data = p.read_bytes()
    except OSError as exc:
        raise InputError("nucleation.calibration", str(path), "a readable assay CSV file", type(exc).__name__) from None
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError:
        raise InputError(str(p.name), "not UTF-8", "a UTF-8 text file") from None
    return parse_assay(text, p.name)


# --- likelihood --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class _Data:
    """Assay in arrays. Holds: supercooling x, exposure V t, event flag, interval flag. Ramps: V/r, final
    supercooling X (freezing or lowest), event flag."""

    hx: np.ndarray
    he: np.ndarray
    hd: np.ndarray
    hi: np.ndarray
    rk: np.ndarray
    rx: np.ndarray
    rd: np.ndarray


def _arrays(assay: Assay) -> _Data:
    hx, he, hd, hi, rk, rx, rd = [], [], [], [], [], [], []
    for s in assay.samples:
        if s.kind == "hold":
            hx.append(assay.liquidus - s.hold_temperature)
            t = s.time_frozen if (s.frozen and s.time_frozen is not None) else s.duration
            he.append(s.volume * t)
            hd.append(s.frozen and s.time_frozen is not None)
            hi.append(s.frozen and s.time_frozen is None)
        else:
            rk.append(s.volume / s.cooling_rate)
            end = s.freezing_temperature if s.frozen else s.lowest_temperature
            rx.append(assay.liquidus - end)
            rd.append(s.frozen)
    f = lambda v, dt=float: np.asarray(v, dtype=dt)  # noqa: E731
    return _Data(f(hx), f(he), f(hd, bool), f(hi, bool), f(rk), f(rx), f(rd, bool))


def _ramp_g(b: float, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """g = expm1(b X)/b and d ln g / d b for the ramp integral."""
    u = b * x
    g = np.where(u > 1e-8, np.expm1(u) / b, x * (1 + u / 2))
    with np.errstate(over="ignore", invalid="ignore"):
        dlng = np.where(u > 1e-6, x * np.exp(u) / np.expm1(u) - 1.0 / b, x / 2)
    return g, dlng


def _loglik(theta: np.ndarray, d: _Data, x_ref: float, slope_fixed: float | None = None) -> tuple[float, np.ndarray]:
    """Log-likelihood and its gradient in (a, c), b = exp(c) (or c fixed when slope_fixed is given)."""
    a = theta[0]
    b = slope_fixed if slope_fixed is not None else math.exp(theta[1])
    ll = 0.0
    ga = 0.0
    gb = 0.0
    if d.hx.size:
        dx = d.hx - x_ref
        h = d.he * np.exp(np.clip(a + b * dx, -700, 700))
        ev, iv = d.hd, d.hi
        cens = ~(ev | iv)
        ll += np.sum(a + b * dx[ev] - h[ev]) - np.sum(h[cens]) + np.sum(np.log(-np.expm1(-h[iv])))
        hs = np.maximum(h, 1e-300)
        w = np.where(iv, hs * np.exp(-hs) / -np.expm1(-hs), -h)  # d ll / d ln H per sample
        ga += np.sum(ev) + np.sum(w)
        gb += np.sum(dx[ev]) + np.sum(w * dx)
    if d.rx.size:
        g, dlng = _ramp_g(b, d.rx)
        h = d.rk * np.exp(np.clip(a - b * x_ref, -700, 700)) * g
        ev = d.rd
        ll += np.sum(a + b * (d.rx[ev] - x_ref)) - np.sum(h)
        dlnh = -x_ref + dlng
        ga += np.sum(ev) - np.sum(h)
        gb += np.sum(d.rx[ev] - x_ref) - np.sum(h * dlnh)
    if slope_fixed is not None:
        return float(ll), np.array([ga])
    return float(ll), np.array([ga, gb * b])


def _hessian(fun, theta: np.ndarray, step: float = 1e-5) -> np.ndarray:
    n = theta.size
    hess = np.empty((n, n))
    for i in range(n):
        e = np.zeros(n)
        e[i] = step
        hess[:, i] = (fun(theta + e)[1] - fun(theta - e)[1]) / (2 * step)
    return 0.5 * (hess + hess.T)


# --- results ------------------------------------------------------------------------------------------------
@dataclass
class Calibration(Result):
    """A heterogeneous rate fitted to (or bounded by) a freezing assay.

    ``kind``: ``fit`` or ``upper-bound``. ``ln_rate_ref`` [ln(1/(m3 s))] at ``reference_supercooling`` [K],
    ``log_slope`` (ln of the slope in 1/K), ``covariance`` of (ln_rate_ref, log_slope), ``slope_fixed``
    True when the slope is the prior's (assay at one temperature). ``measured_supercooling`` [K] is the
    range the assay covers; ``goodness_of_fit`` rows compare observed and predicted fractions frozen.
    """

    kind: str = "fit"
    liquidus: float = 273.15
    medium: str = ""
    reference_supercooling: float = 0.0
    ln_rate_ref: float = 0.0
    log_slope: float = 0.0
    covariance: list[list[float]] = field(default_factory=lambda: [[0.0, 0.0], [0.0, 0.0]])
    slope_fixed: bool = False
    measured_supercooling: tuple[float, float] = (0.0, 0.0)
    samples: int = 0
    frozen: int = 0
    log_likelihood: float | None = None
    goodness_of_fit: list[dict] = field(default_factory=list)
    data_file: str = ""
    data_sha256: str = ""

    @property
    def slope(self) -> float:
        return math.exp(self.log_slope)

    def rate(self, supercooling):
        """Central (or upper-bound) rate per volume [1/(m3 s)] at supercooling [K]."""
        x = np.asarray(supercooling, dtype=float)
        return np.exp(self.ln_rate_ref + self.slope * (x - self.reference_supercooling))

    def log_rate_interval(self, supercooling: float, level: float = 0.90) -> tuple[float, float]:
        """Wald interval of ln(rate) at a supercooling [K] (delta method on the covariance)."""
        from scipy.stats import norm

        grad = np.array([1.0, self.slope * (supercooling - self.reference_supercooling)])
        var = float(grad @ np.asarray(self.covariance) @ grad)
        centre = self.ln_rate_ref + self.slope * (supercooling - self.reference_supercooling)
        z = norm.ppf(0.5 + level / 2)
        return centre - z * math.sqrt(max(var, 0.0)), centre + z * math.sqrt(max(var, 0.0))

    def to_model(self, name: str | None = None) -> NucleationModel:
        """The calibration as a :class:`planner.nucleation.NucleationModel` (volume term only)."""
        lo, hi = self.measured_supercooling
        cov = tuple(tuple(float(v) for v in row) for row in self.covariance)
        term = RateTerm("volume", self.reference_supercooling, (self.ln_rate_ref, self.log_slope), cov)
        label = f"calibration {self.data_file}" + (" (upper bound)" if self.kind == "upper-bound" else "")
        return NucleationModel(
            name=name or f"calibration:{self.data_file}", kind=self.kind, source="vali-1971", label=label,
            volume=term, supercooling_range=Range(max(0.0, lo - EXTRAPOLATION_MARGIN), hi + EXTRAPOLATION_MARGIN, "K"),
            description=f"fitted to {self.samples} samples ({self.frozen} frozen) of {self.medium or 'the assayed medium'}",
            parameters={"data_sha256": self.data_sha256, "slope_fixed": self.slope_fixed},
        )


def _slope_prior() -> tuple[float, float]:
    term = presets()[SLOPE_PRIOR_PRESET].volume
    return term.mean[1], math.sqrt(term.covariance[1][1])


def fit_assay(assay: Assay) -> Calibration:
    """Fit the heterogeneous rate per volume to an assay by maximum likelihood (see module docstring).

    Parameters
    ----------
    assay : Assay
        From :func:`parse_assay` or :func:`read_assay`.

    Returns
    -------
    Calibration
        ``kind`` ``fit`` (estimates and covariance) or ``upper-bound`` (no sample froze).

    References
    ----------
    [ref:vali-1971], [ref:consiglio-2023]
    """
    d = _arrays(assay)
    xs = np.concatenate((d.hx, d.rx))
    n_frozen = int(np.sum(d.hd) + np.sum(d.hi) + np.sum(d.rd))
    x_ref = float(np.round(np.median(xs), 2))
    measured = (float(xs.min()), float(xs.max()))
    prior_mean, prior_sd = _slope_prior()
    single_temperature = d.rx.size == 0 and float(np.ptp(d.hx)) < 0.5
    flags: list[Flag] = []
    base = dict(liquidus=assay.liquidus, medium=assay.medium, reference_supercooling=x_ref,
                measured_supercooling=measured, samples=len(assay.samples), frozen=n_frozen,
                data_file=assay.name, data_sha256=assay.sha256, source="vali-1971",
                model="stochastic rate per volume, exponential in supercooling")
    if n_frozen == 0:
        b0 = math.exp(prior_mean)
        # cumulative hazard at a = 0, per sample
        total = float(np.sum(d.he * np.exp(b0 * (d.hx - x_ref))))
        if d.rx.size:
            g, _ = _ramp_g(b0, d.rx)
            total += float(np.sum(d.rk * np.exp(-b0 * x_ref) * g))
        a_up = math.log(-math.log(1 - UPPER_BOUND_LEVEL) / total)
        flags.append(Flag("indicative", f"no sample froze: only a one-sided {UPPER_BOUND_LEVEL:.0%} upper bound of "
                          "the rate is known; the slope is the presets' prior", "vali-1971"))
        cal = Calibration(kind="upper-bound", ln_rate_ref=a_up, log_slope=prior_mean,
                          covariance=[[0.0, 0.0], [0.0, prior_sd**2]], slope_fixed=True, flags=flags, **base)
        cal.parameters = {"upper_bound_level": UPPER_BOUND_LEVEL}
        cal.goodness_of_fit = goodness_of_fit(assay, cal)
        return cal
    start_a = math.log(max(n_frozen, 0.5) / max(float(np.sum(d.he)) + float(np.sum(d.rk * d.rx)), 1e-300))
    if single_temperature:
        b0 = math.exp(prior_mean)

        def fun(th):
            ll, g = _loglik(th, d, x_ref, slope_fixed=b0)
            return -ll, -g

        res = optimize.minimize(fun, np.array([start_a]), jac=True, method="BFGS")
        hess = _hessian(lambda th: _loglik(th, d, x_ref, slope_fixed=b0), res.x)
        var_a = float(-1.0 / hess[0, 0])
        cov = [[var_a, 0.0], [0.0, prior_sd**2]]
        theta = (float(res.x[0]), prior_mean)
        flags.append(Flag("indicative", "every sample was held at one temperature: the slope of the rate with "
                          "supercooling cannot be fitted and keeps the presets' prior", "vali-1971"))
    else:
        def fun(th):
            ll, g = _loglik(th, d, x_ref)
            return -ll, -g

        best = None
        for c0 in (prior_mean, math.log(0.2), math.log(1.5)):
            r = optimize.minimize(fun, np.array([start_a, c0]), jac=True, method="BFGS")
            if best is None or r.fun < best.fun:
                best = r
        res = best
        hess = _hessian(lambda th: _loglik(th, d, x_ref), res.x)
        try:
            cov_m = np.linalg.inv(-hess)
        except np.linalg.LinAlgError:
            cov_m = np.full((2, 2), np.nan)
        if not np.all(np.isfinite(cov_m)) or np.any(np.linalg.eigvalsh(cov_m) <= 0):
            raise InputError(assay.name, "assay", "data that determine both the rate and its slope "
                             "(several temperatures or a ramp with frozen and unfrozen samples)",
                             "the likelihood is flat in some direction")
        cov = cov_m.tolist()
        theta = (float(res.x[0]), float(res.x[1]))
        if not res.success:
            flags.append(Flag("indicative", f"the optimiser reported: {res.message}", "vali-1971"))
    ll = -float(res.fun)
    cal = Calibration(kind="fit", ln_rate_ref=theta[0], log_slope=theta[1], covariance=cov,
                      slope_fixed=single_temperature, log_likelihood=ll, flags=flags, **base)
    cal.parameters = {"optimiser": "scipy.optimize.minimize BFGS", "converged": bool(res.success)}
    cal.goodness_of_fit = goodness_of_fit(assay, cal)
    cal.flags.extend(misfit_flags(cal.goodness_of_fit))
    return cal


# two-sided exact binomial test level below which a group's observed count is called a misfit
MISFIT_LEVEL = 0.05


def misfit_flags(rows: list[dict], level: float = MISFIT_LEVEL) -> list[Flag]:
    """Flags for hold groups whose frozen count the fit makes improbable (two-sided exact binomial test).

    A fit can have a narrow interval and still not describe its own data (a medium whose rate does not
    follow the exponential form, a batch effect): each hold group's observed count is tested against its
    predicted fraction, and a group below ``level`` is named. With several groups one may fall below 5 %
    by chance; the flag asks for a look, it does not reject the fit. Ramp rows share samples across
    thresholds and are not tested.
    """
    from scipy.stats import binomtest

    out = []
    for row in rows:
        if row.get("kind") != "hold":
            continue
        n, observed, predicted = int(row["samples"]), float(row["observed"]), float(row["predicted"])
        k = int(round(observed * n))
        p_value = binomtest(k, n, min(max(predicted, 0.0), 1.0)).pvalue
        if p_value < level:
            out.append(Flag("indicative", f"the fit does not describe the hold at {row['condition']}: {k} of {n} "
                            f"froze where it predicts {predicted:.0%} (exact binomial test p = {p_value:.2g}); "
                            "check that group, or the medium's rate does not follow the fitted form",
                            "vali-1971"))
    return out


def _survival_ramp(cal: Calibration, k: float, x_end: float) -> float:
    g, _ = _ramp_g(cal.slope, np.array([x_end]))
    h = k * math.exp(cal.ln_rate_ref - cal.slope * cal.reference_supercooling) * float(g[0])
    return math.exp(-h)


def goodness_of_fit(assay: Assay, cal: Calibration) -> list[dict]:
    """Observed against predicted fraction frozen, per hold condition and per ramp condition and temperature.

    Holds are grouped by (hold temperature, volume, hours held); ramps by (volume, cooling rate), judged at
    the quartiles of the observed freezing temperatures among samples that froze above or reached them.
    """
    rows: list[dict] = []
    holds: dict[tuple, list[AssaySample]] = {}
    ramps: dict[tuple, list[AssaySample]] = {}
    for s in assay.samples:
        if s.kind == "hold":
            holds.setdefault((round(s.hold_temperature, 3), s.volume, s.duration), []).append(s)
        else:
            ramps.setdefault((s.volume, s.cooling_rate), []).append(s)
    for (temp, vol, dur), group in sorted(holds.items()):
        x = assay.liquidus - temp
        h = vol * dur * float(cal.rate(x))
        rows.append({"kind": "hold", "condition": f"{temp - CELSIUS:.2f} C, {vol * 1e6:g} mL, {dur / 3600:g} h",
                     "samples": len(group), "observed": sum(s.frozen for s in group) / len(group),
                     "predicted": -math.expm1(-h)})
    for (vol, rate), group in sorted(ramps.items()):
        frozen_t = sorted(s.freezing_temperature for s in group if s.frozen)
        if not frozen_t:
            continue
        thresholds = sorted(set(np.quantile(frozen_t, [0.25, 0.5, 0.75]).round(2).tolist()), reverse=True)
        for tk in thresholds:
            # every frozen sample passed or froze at tk; an unfrozen one counts when it reached tk
            at_risk = [s for s in group if s.frozen or s.lowest_temperature <= tk]
            if not at_risk:
                continue
            obs = sum(1 for s in at_risk if s.frozen and s.freezing_temperature >= tk) / len(at_risk)
            pred = 1.0 - _survival_ramp(cal, vol / rate, assay.liquidus - tk)
            rows.append({"kind": "ramp", "condition": f"{vol * 1e6:g} mL at {rate * 60:g} C/min, frozen by {tk - CELSIUS:.2f} C",
                         "samples": len(at_risk), "observed": obs, "predicted": pred})
    return rows


# --- calibration files --------------------------------------------------------------------------------------
def save_calibration(cal: Calibration, path: str | Path) -> Path:
    """Write the calibration as YAML at ``path``; an existing file is never overwritten.

    The file carries the assay CSV's file name and SHA-256 so :func:`load_calibration` can tell when the
    data changed.
    """
    import yaml

    p = Path(path)
    doc = {"format": CALIBRATION_FORMAT, **to_jsonable(cal)}
    text = "# Nucleation calibration made from a freezing assay; do not edit (the data hash is checked).\n"
    text += yaml.safe_dump(doc, sort_keys=False, allow_unicode=True)
    try:
        with p.open("x", encoding="utf-8") as fh:
            fh.write(text)
    except FileExistsError:
        raise InputError("calibration file", str(p), "a path where no file exists yet (calibrations are never "
                         "overwritten; choose a new name)") from None
    return p


_FLOAT_KEYS = ("liquidus", "reference_supercooling", "ln_rate_ref", "log_slope")


def load_calibration(path: str | Path, verify_data: bool = True) -> Calibration:
    """Read a calibration file written by :func:`save_calibration`.

    When the assay CSV named in the file exists beside it and ``verify_data`` is True, its SHA-256 must
    match the one recorded; a mismatch is refused (the data changed after the calibration was made).
    """
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError("nucleation.calibration", str(path), "a readable calibration file", type(exc).__name__) from None
    doc = load_yaml(text, p.name)
    if not isinstance(doc, dict) or doc.get("format") != CALIBRATION_FORMAT:
        raise InputError("nucleation.calibration", str(p.name), f"a calibration file (format: {CALIBRATION_FORMAT}) "
                         "or an assay CSV")
    try:
        kind = doc["kind"]
        if kind not in ("fit", "upper-bound"):
            raise InputError(f"{p.name} kind", kind, "one of: fit, upper-bound")
        values = {k: float(doc[k]) for k in _FLOAT_KEYS}
        cov = [[float(v) for v in row] for row in doc["covariance"]]
        lo, hi = (float(v) for v in doc["measured_supercooling"])
        if len(cov) != 2 or any(len(r) != 2 for r in cov) or not all(math.isfinite(v) for r in cov for v in r):
            raise InputError(f"{p.name} covariance", doc["covariance"], "a finite 2x2 matrix")
        cal = Calibration(
            model=str(doc.get("model", "")), source=str(doc.get("source", "vali-1971")),
            parameters=dict(doc.get("parameters") or {}),
            flags=[Flag(f["code"], f["message"], f.get("source")) for f in doc.get("flags") or []],
            kind=kind, medium=str(doc.get("medium", "")), covariance=cov, slope_fixed=bool(doc["slope_fixed"]),
            measured_supercooling=(lo, hi), samples=int(doc["samples"]), frozen=int(doc["frozen"]),
            log_likelihood=doc.get("log_likelihood"), goodness_of_fit=list(doc.get("goodness_of_fit") or []),
            data_file=str(doc["data_file"]), data_sha256=str(doc["data_sha256"]), **values,
        )
    except (KeyError, TypeError, ValueError) as exc:
        raise InputError(f"{p.name}", f"missing or malformed {exc}", "a complete calibration file") from None
    data = p.parent / cal.data_file
    if verify_data and cal.data_file and data.is_file():
        actual = hashlib.sha256(data.read_bytes()).hexdigest()
        if actual != cal.data_sha256:
            raise InputError("nucleation.calibration", str(p.name),
                             f"a calibration whose assay {cal.data_file} is unchanged (recorded sha256 "
                             f"{cal.data_sha256[:12]}..., file now {actual[:12]}...)", "refit the assay")
    return cal


def calibration_model(path: str | Path) -> tuple[NucleationModel, Calibration]:
    """A nucleation model from an assay CSV (fitted now) or from a saved calibration file."""
    p = Path(path)
    if p.suffix.lower() == ".csv":
        cal = fit_assay(read_assay(p))
    else:
        cal = load_calibration(p)
    return cal.to_model(), cal
