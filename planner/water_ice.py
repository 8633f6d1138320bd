"""Water and ice Ih: melting curve, equations of state and the chemical potential difference, vectorised.

Three published formulations, each implemented here on numpy arrays in SI units (K, Pa, J/kg):

- the ice Ih melting curve, IAPWS R14-08 [ref:iapws-r14-08];
- the Gibbs energy of ice Ih, IAPWS R10-06 [ref:iapws-r10-06];
- the Gibbs energy of liquid water, stable and supercooled, IAPWS G12-15 [ref:iapws-g12-15] (the two-state
  equation of Holten, Sengers and Anisimov). Its reference state matches IAPWS-95 [ref:iapws-95] and R10-06
  (internal energy and entropy of the liquid zero at the triple point), so Gibbs energies of the two phases
  can be subtracted.

Validity ranges are data (:data:`MELTING_CURVE`, :data:`ICE_IH`, :data:`LIQUID`). Inputs outside the hard
ranges are refused with :class:`planner.errors.ModelRangeError`; the liquid below its homogeneous-nucleation
line (where G12-15 is extrapolated) and ice above 273.16 K (superheated) are computed but flagged: the
functions warn with :class:`planner.errors.ExtrapolationWarning`, and :func:`liquid_flags` /
:func:`ice_flags` return the flags for a result object.

Below the ice Ih - ice III - liquid triple point (:data:`TRIPLE_POINT_IH_III_TEMPERATURE`,
:data:`TRIPLE_POINT_IH_III_PRESSURE`) ice Ih is not the phase that forms under pressure; the Ih melting
curve is refused there, never extrapolated.
"""

from __future__ import annotations

import warnings

import numpy as np
from numpy.typing import ArrayLike

from planner.errors import ExtrapolationWarning, ModelRangeError
from planner.results import Flag
from planner.validity import Range, Validity

# --- constants --------------------------------------------------------------------------------------
TRIPLE_POINT_TEMPERATURE = 273.16  # K, solid-liquid-vapour [ref:iapws-r14-08]
TRIPLE_POINT_PRESSURE = 611.657  # Pa [ref:iapws-r14-08]
TRIPLE_POINT_IH_III_TEMPERATURE = 251.165  # K, ice Ih - ice III - liquid [ref:iapws-r14-08]
TRIPLE_POINT_IH_III_PRESSURE = 208.566e6  # Pa [ref:iapws-r14-08]
STANDARD_PRESSURE = 101325.0  # Pa
SPECIFIC_GAS_CONSTANT = 461.523087  # J/(kg K), water, as used by G12-15 [ref:iapws-g12-15]

# R14-08 evaluated at 251.165 K gives 208.5666 MPa, a little above the rounded published 208.566 MPa: the
# pressure range of the curve ends where the curve itself ends.
_MELT_A = (0.119539337e7, 0.808183159e5, 0.333826860e4)
_MELT_B = (3.00, 0.2575e2, 0.10375e3)
_MELT_P_END = TRIPLE_POINT_PRESSURE * (
    1.0 + sum(a * (1.0 - (TRIPLE_POINT_IH_III_TEMPERATURE / TRIPLE_POINT_TEMPERATURE) ** b) for a, b in zip(_MELT_A, _MELT_B, strict=True))
)
MELTING_CURVE = Validity(
    "IAPWS R14-08 ice Ih melting curve",
    "iapws-r14-08",
    {
        "temperature": Range(TRIPLE_POINT_IH_III_TEMPERATURE, TRIPLE_POINT_TEMPERATURE, "K"),
        "pressure": Range(TRIPLE_POINT_PRESSURE, _MELT_P_END, "Pa"),
    },
)
ICE_IH = Validity(
    "IAPWS R10-06 ice Ih",
    "iapws-r10-06",
    {
        # refused outside; published range 0-273.16 K: 273.16-280 K (superheated ice) is computed and flagged
        "temperature": Range(1.0, 280.0, "K"),
        "pressure": Range(0.0, 210e6, "Pa"),
    },
)
LIQUID = Validity(
    "IAPWS G12-15 liquid water",
    "iapws-g12-15",
    {
        # refused outside; beyond the homogeneous nucleation line (liquid_flags) computed and flagged.
        # Below about 228 K the two-state equation nears its liquid-liquid critical point: not used here.
        "temperature": Range(230.0, 300.0, "K"),
        "pressure": Range(0.0, 400e6, "Pa"),
    },
)


def _as_float(x: ArrayLike) -> np.ndarray:
    return np.asarray(x, dtype=float)


def _out(x: np.ndarray):
    """Return a numpy float for 0-d input, the array otherwise."""
    return x[()] if x.ndim == 0 else x


# --- melting curve (R14-08) --------------------------------------------------------------------------
_MELT_A = np.array(_MELT_A)
_MELT_B = np.array(_MELT_B)


def melting_pressure(temperature: ArrayLike):
    """Pressure on the ice Ih melting curve [Pa].

    Parameters
    ----------
    temperature : array_like
        Temperature [K], 251.165 to 273.16 K.

    Returns
    -------
    numpy.ndarray or float
        Melting pressure [Pa].

    Notes
    -----
    IAPWS R14-08 eq. (1): p/p_t = 1 + sum_i a_i (1 - theta^b_i), theta = T/T_t, with T_t = 273.16 K,
    p_t = 611.657 Pa, a = (1.19539337e6, 8.08183159e4, 3.33826860e3), b = (3.00, 25.75, 103.75).
    Valid from the triple point (273.16 K) to the Ih-III-liquid triple point (251.165 K, 208.566 MPa);
    refused outside (below 251.165 K the liquid is in equilibrium with ice III, not Ih).

    References
    ----------
    [ref:iapws-r14-08]

    Examples
    --------
    >>> round(float(melting_pressure(260.0)) / 1e6, 3)
    138.268
    """
    t = _as_float(temperature)
    MELTING_CURVE.check(temperature=t)
    theta = t / TRIPLE_POINT_TEMPERATURE
    s = 1.0 + np.sum(_MELT_A * (1.0 - theta[..., None] ** _MELT_B), axis=-1)
    return _out(s * TRIPLE_POINT_PRESSURE)


def _melting_pressure_slope(t: np.ndarray) -> np.ndarray:
    """d p_melt / dT [Pa/K] of R14-08."""
    theta = t / TRIPLE_POINT_TEMPERATURE
    return -TRIPLE_POINT_PRESSURE / TRIPLE_POINT_TEMPERATURE * np.sum(
        _MELT_A * _MELT_B * theta[..., None] ** (_MELT_B - 1.0), axis=-1
    )


def melting_temperature(pressure: ArrayLike):
    """Melting temperature of ice Ih at a pressure [K] (inverse of :func:`melting_pressure`).

    Parameters
    ----------
    pressure : array_like
        Pressure [Pa], 611.657 Pa to 208.566 MPa.

    Returns
    -------
    numpy.ndarray or float
        Temperature [K] at which ice Ih and liquid water coexist at that pressure.

    Notes
    -----
    Solves IAPWS R14-08 eq. (1) for T by Newton iteration (to 1e-12 K); refused outside the Ih melting
    curve's pressure range.

    References
    ----------
    [ref:iapws-r14-08]

    Examples
    --------
    >>> round(float(melting_temperature(101325.0)), 4)
    273.1525
    """
    p = _as_float(pressure)
    MELTING_CURVE.check(pressure=p)
    # start from a straight line between the two triple points, then Newton (monotone, convex-ish)
    t = TRIPLE_POINT_TEMPERATURE + (p - TRIPLE_POINT_PRESSURE) * (
        (TRIPLE_POINT_IH_III_TEMPERATURE - TRIPLE_POINT_TEMPERATURE)
        / (_MELT_P_END - TRIPLE_POINT_PRESSURE)
    )
    for _ in range(30):
        theta = t / TRIPLE_POINT_TEMPERATURE
        f = TRIPLE_POINT_PRESSURE * (1.0 + np.sum(_MELT_A * (1.0 - theta[..., None] ** _MELT_B), axis=-1)) - p
        step = f / _melting_pressure_slope(t)
        t = np.clip(t - step, TRIPLE_POINT_IH_III_TEMPERATURE - 1.0, TRIPLE_POINT_TEMPERATURE + 1.0)
        if np.all(np.abs(step) < 1e-12):
            break
    return _out(t)


# --- ice Ih (R10-06) ---------------------------------------------------------------------------------
_ICE_G0 = np.array(
    [-0.632020233335886e6, 0.655022213658955, -0.189369929326131e-7, 0.339746123271053e-14, -0.556464869058991e-21]
)  # J/kg
_ICE_S0 = -0.332733756492168e4  # J/(kg K), absolute entropy constant of the IAPWS-95 convention
_ICE_T1 = complex(0.368017112855051e-1, 0.510878114959572e-1)
_ICE_R1 = complex(0.447050716285388e2, 0.656876847463481e2)  # J/(kg K)
_ICE_T2 = complex(0.337315741065416, 0.335449415919309)
_ICE_R2 = np.array(
    [
        complex(-0.725974574329220e2, -0.781008427112870e2),
        complex(-0.557107698030123e-4, 0.464578634580806e-4),
        complex(0.234801409215913e-10, -0.285651142904972e-10),
    ]
)  # J/(kg K)
_ICE_PI0 = STANDARD_PRESSURE / TRIPLE_POINT_PRESSURE


def _ice_range(t: np.ndarray, p: np.ndarray) -> None:
    ICE_IH.check(temperature=t, pressure=p)


def _ice_derivatives(t: np.ndarray, p: np.ndarray) -> dict[str, np.ndarray]:
    """g and its first and second derivatives [J/kg, J/(kg K), m3/kg, ...] of R10-06 eq. (1)-(6)."""
    tt, pt = TRIPLE_POINT_TEMPERATURE, TRIPLE_POINT_PRESSURE
    tau = t / tt
    dpi = p / pt - _ICE_PI0
    k = np.arange(5)
    g0 = np.sum(_ICE_G0 * dpi[..., None] ** k, axis=-1)
    g0p = np.sum(_ICE_G0[1:] * k[1:] / pt * dpi[..., None] ** (k[1:] - 1), axis=-1)
    g0pp = np.sum(_ICE_G0[2:] * k[2:] * (k[2:] - 1) / pt**2 * dpi[..., None] ** (k[2:] - 2), axis=-1)
    r2 = _ICE_R2[0] + _ICE_R2[1] * dpi + _ICE_R2[2] * dpi**2
    r2p = (_ICE_R2[1] + 2 * _ICE_R2[2] * dpi) / pt
    r2pp = 2 * _ICE_R2[2] / pt**2

    def term(tk):
        return (tk - tau) * np.log(tk - tau) + (tk + tau) * np.log(tk + tau) - 2 * tk * np.log(tk) - tau**2 / tk

    def term_t(tk):
        return -np.log(tk - tau) + np.log(tk + tau) - 2 * tau / tk

    def term_tt(tk):
        return 1 / (tk - tau) + 1 / (tk + tau) - 2 / tk

    t1, t2 = _ICE_T1, _ICE_T2
    c = _ICE_R1 * term(t1) + r2 * term(t2)
    ct = _ICE_R1 * term_t(t1) + r2 * term_t(t2)
    ctt = _ICE_R1 * term_tt(t1) + r2 * term_tt(t2)
    cp = r2p * term(t2)
    ctp = r2p * term_t(t2)
    cpp = r2pp * term(t2)
    return {
        "g": g0 - _ICE_S0 * tt * tau + tt * c.real,
        "gt": -_ICE_S0 + ct.real,
        "gp": g0p + tt * cp.real,
        "gtt": ctt.real / tt,
        "gtp": ctp.real,
        "gpp": g0pp + tt * cpp.real,
    }


def ice_flags(temperature: ArrayLike, pressure: ArrayLike, warn: bool = False) -> list[Flag]:
    """Flags for ice Ih properties at these states: ``extrapolated`` above 273.16 K (superheated ice)."""
    t = _as_float(temperature)
    hot = t > TRIPLE_POINT_TEMPERATURE
    if not np.any(hot):
        return []
    flag = Flag(
        "extrapolated",
        f"{ICE_IH.model}: superheated ice up to {float(np.max(t[hot])):.2f} K, above the published range "
        f"(at most {TRIPLE_POINT_TEMPERATURE} K)",
        ICE_IH.source,
    )
    if warn:
        warnings.warn(flag.message, ExtrapolationWarning, stacklevel=3)
    return [flag]


def _ice(temperature: ArrayLike, pressure: ArrayLike) -> dict[str, np.ndarray]:
    t, p = np.broadcast_arrays(_as_float(temperature), _as_float(pressure))
    _ice_range(t, p)
    ice_flags(t, p, warn=True)
    return _ice_derivatives(t, p)


def ice_gibbs_energy(temperature: ArrayLike, pressure: ArrayLike):
    """Specific Gibbs energy of ice Ih [J/kg].

    Parameters
    ----------
    temperature : array_like
        Temperature [K], up to 273.16 K (up to 280 K flagged as superheated ice).
    pressure : array_like
        Pressure [Pa], 0 to 210 MPa.

    Returns
    -------
    numpy.ndarray or float
        g [J/kg], on the IAPWS-95 reference state (liquid u = s = 0 at the triple point).

    Notes
    -----
    IAPWS R10-06 eq. (1): g(T, p) = g0(p) - s0 T_t tau + T_t Re[sum_k r_k((t_k - tau) ln(t_k - tau)
    + (t_k + tau) ln(t_k + tau) - 2 t_k ln t_k - tau^2/t_k)], tau = T/T_t, with g0 and r_2 polynomials in
    (p - p0)/p_t. Valid 0-273.16 K, 0-210 MPa.

    References
    ----------
    [ref:iapws-r10-06]
    """
    return _out(_ice(temperature, pressure)["g"])


def ice_specific_volume(temperature: ArrayLike, pressure: ArrayLike):
    """Specific volume of ice Ih [m3/kg]: v = (dg/dp)_T of IAPWS R10-06 [ref:iapws-r10-06].

    Parameters
    ----------
    temperature : array_like
        Temperature [K].
    pressure : array_like
        Pressure [Pa].

    Notes
    -----
    Range as :func:`ice_gibbs_energy`.

    References
    ----------
    [ref:iapws-r10-06]
    """
    return _out(_ice(temperature, pressure)["gp"])


def ice_density(temperature: ArrayLike, pressure: ArrayLike):
    """Density of ice Ih [kg/m3], 1/(dg/dp)_T of IAPWS R10-06.

    Parameters
    ----------
    temperature : array_like
        Temperature [K].
    pressure : array_like
        Pressure [Pa].

    Notes
    -----
    Range as :func:`ice_gibbs_energy`.

    References
    ----------
    [ref:iapws-r10-06]

    Examples
    --------
    >>> round(float(ice_density(273.152519, 101325.0)), 3)
    916.721
    """
    return _out(1.0 / _ice(temperature, pressure)["gp"])


def ice_specific_enthalpy(temperature: ArrayLike, pressure: ArrayLike):
    """Specific enthalpy of ice Ih [J/kg], h = g - T (dg/dT)_p (IAPWS R10-06 table 3).

    Parameters
    ----------
    temperature : array_like
        Temperature [K].
    pressure : array_like
        Pressure [Pa].

    Notes
    -----
    Same reference state as :func:`liquid_specific_enthalpy`, so differences are latent heats.

    References
    ----------
    [ref:iapws-r10-06]
    """
    d = _ice(temperature, pressure)
    return _out(d["g"] - _as_float(temperature) * d["gt"])


def ice_specific_entropy(temperature: ArrayLike, pressure: ArrayLike):
    """Specific entropy of ice Ih [J/(kg K)], s = -(dg/dT)_p (IAPWS R10-06 table 3).

    Parameters
    ----------
    temperature : array_like
        Temperature [K].
    pressure : array_like
        Pressure [Pa].

    References
    ----------
    [ref:iapws-r10-06]
    """
    return _out(-_ice(temperature, pressure)["gt"])


def ice_heat_capacity(temperature: ArrayLike, pressure: ArrayLike):
    """Isobaric specific heat capacity of ice Ih [J/(kg K)], c_p = -T (d2g/dT2)_p (IAPWS R10-06).

    Parameters
    ----------
    temperature : array_like
        Temperature [K].
    pressure : array_like
        Pressure [Pa].

    References
    ----------
    [ref:iapws-r10-06]

    Examples
    --------
    >>> round(float(ice_heat_capacity(273.152519, 101325.0)), 3)
    2096.714
    """
    d = _ice(temperature, pressure)
    return _out(-_as_float(temperature) * d["gtt"])


def ice_isothermal_compressibility(temperature: ArrayLike, pressure: ArrayLike):
    """Isothermal compressibility of ice Ih [1/Pa], kappa_T = -(d2g/dp2)_T / (dg/dp)_T (IAPWS R10-06).

    Parameters
    ----------
    temperature : array_like
        Temperature [K].
    pressure : array_like
        Pressure [Pa].

    References
    ----------
    [ref:iapws-r10-06]
    """
    d = _ice(temperature, pressure)
    return _out(-d["gpp"] / d["gp"])


# --- liquid water (G12-15) ---------------------------------------------------------------------------
_LIQ_TLL = 228.2  # K
_LIQ_RHO0 = 1081.6482  # kg/m3
_LIQ_PI0 = 300e6 / (_LIQ_RHO0 * SPECIFIC_GAS_CONSTANT * _LIQ_TLL)
_LIQ_OMEGA0 = 0.5212269
_LIQ_L0 = 0.76317954
_LIQ_K0, _LIQ_K1, _LIQ_K2 = 0.072158686, -0.31569232, 5.2992608
# Table 2 of G12-15: c_i, a_i, b_i, d_i of the background Gibbs energy
_LIQ_C = np.array([
    -8.1570681381655, 1.2875032, 7.0901673598012, -3.2779161e-2, 7.3703949e-1, -2.1628622e-1,
    -5.1782479, 4.2293517e-4, 2.3592109e-2, 4.3773754, -2.9967770e-3, -9.6558018e-1, 3.7595286,
    1.2632441, 2.8542697e-1, -8.5994947e-1, -3.2916153e-1, 9.0019616e-2, 8.1149726e-2, -3.2788213,
])  # fmt: skip
_LIQ_A = np.array([
    0, 0, 1, -0.2555, 1.5762, 1.6400, 3.6385, -0.3828, 1.6219, 4.3287, 3.4763, 5.1556, -0.3593,
    5.0361, 2.9786, 6.2373, 4.0460, 5.3558, 9.0157, 1.2194,
])  # fmt: skip
_LIQ_B = np.array([
    0, 1, 0, 2.1051, 1.1422, 0.9510, 0, 3.6402, 2.0760, -0.0016, 2.2769, 0.0008, 0.3706, -0.3975,
    2.9730, -0.3180, 2.9805, 2.9265, 0.4456, 0.1298,
])  # fmt: skip
_LIQ_D = np.array([
    0, 0, 0, -0.0016, 0.6894, 0.0130, 0.0002, 0.0435, 0.0500, 0.0004, 0.0528, 0.0147, 0.8584,
    0.9924, 1.0041, 1.0961, 1.0228, 1.0303, 1.6180, 0.5213,
])  # fmt: skip


def homogeneous_nucleation_pressure(temperature: ArrayLike):
    """Pressure [Pa] of the homogeneous ice nucleation line at a temperature, as bounding G12-15.

    Parameters
    ----------
    temperature : array_like
        Temperature [K].

    Returns
    -------
    numpy.ndarray or float
        p_H(T) [Pa]: at lower pressure and this temperature the liquid lies beyond the line, where
        G12-15 is an extrapolation. Negative where the whole pressure range is inside.

    Notes
    -----
    p_H/MPa = 0.1 + 228.27 (1 - theta^6.243) + 15.724 (1 - theta^79.81), theta = T/235.15 K, the line
    G12-15 gives as the lower edge of its validity (for p < 198.9 MPa).

    References
    ----------
    [ref:iapws-g12-15]
    """
    theta = _as_float(temperature) / 235.15
    return _out(1e6 * (0.1 + 228.27 * (1 - theta**6.243) + 15.724 * (1 - theta**79.81)))


def liquid_flags(temperature: ArrayLike, pressure: ArrayLike, warn: bool = False) -> list[Flag]:
    """Flags for liquid properties at these states: ``extrapolated`` beyond the homogeneous nucleation line.

    Parameters
    ----------
    temperature : array_like
        Temperature [K].
    pressure : array_like
        Pressure [Pa].
    warn : bool
        Also emit an :class:`planner.errors.ExtrapolationWarning`.
    """
    t, p = np.broadcast_arrays(_as_float(temperature), _as_float(pressure))
    beyond = (p < 198.9e6) & (p < homogeneous_nucleation_pressure(t))
    if not np.any(beyond):
        return []
    coldest = float(np.min(t[beyond]))
    flag = Flag(
        "extrapolated",
        f"{LIQUID.model}: liquid beyond its homogeneous ice nucleation line (down to {coldest:.2f} K at "
        f"{float(np.min(p[beyond])) / 1e6:.3g} MPa), where the equation is extrapolated",
        LIQUID.source,
    )
    if warn:
        warnings.warn(flag.message, ExtrapolationWarning, stacklevel=3)
    return [flag]


def _liquid(temperature: ArrayLike, pressure: ArrayLike) -> dict[str, np.ndarray]:
    """All G12-15 properties at (T, p): dimensionless derivatives turned into SI."""
    t, p = np.broadcast_arrays(_as_float(temperature), _as_float(pressure))
    LIQUID.check(temperature=t, pressure=p)
    liquid_flags(t, p, warn=True)
    rg, tll, rho0 = SPECIFIC_GAS_CONSTANT, _LIQ_TLL, _LIQ_RHO0
    tau = t / tll - 1.0  # eq. (2)
    pr = p / (rho0 * rg * tll)
    tau_ = tau + 1.0
    p_ = pr + _LIQ_PI0
    # background terms, eq. (3), and derivatives
    c, a, b, d = _LIQ_C, _LIQ_A, _LIQ_B, _LIQ_D
    T_ = tau_[..., None]
    P_ = p_[..., None]
    base = c * np.exp(a * np.log(T_) + b * np.log(P_) - d * P_)
    phir = base.sum(-1)
    phirt = (base * a / T_).sum(-1)
    phirp = (base * (b - d * P_) / P_).sum(-1)
    phirtt = (base * a * (a - 1) / T_**2).sum(-1)
    phirtp = (base * a * (b - d * P_) / (T_ * P_)).sum(-1)
    phirpp = (base * ((d * P_ - b) ** 2 - b) / P_**2).sum(-1)
    k0, k1, k2, l0, om0 = _LIQ_K0, _LIQ_K1, _LIQ_K2, _LIQ_L0, _LIQ_OMEGA0
    # eq. (5), (6), (4)
    k1_ = np.sqrt((1 + k0 * k2 + k1 * (pr - k2 * tau)) ** 2 - 4 * k0 * k1 * k2 * (pr - k2 * tau))
    k2_ = np.sqrt(1 + k2**2)
    omega = 2 + om0 * pr
    big_l = l0 * k2_ / (2 * k1 * k2) * (1 + k0 * k2 + k1 * (pr + k2 * tau) - k1_)
    x = _solve_fraction(big_l, omega)
    fi = 2 * x - 1  # eq. (12)
    chi = 1 / (2 / (1 - fi**2) - omega)
    # Table 3: derivatives of L
    lt = l0 * k2_ / 2 * (1 + (1 - k0 * k2 + k1 * (pr - k2 * tau)) / k1_)
    lp = l0 * k2_ * (k1_ + k0 * k2 - k1 * pr + k1 * k2 * tau - 1) / (2 * k2 * k1_)
    ltt = -2 * l0 * k2_ * k0 * k1 * k2**2 / k1_**3
    ltp = 2 * l0 * k2_ * k0 * k1 * k2 / k1_**3
    lpp = -2 * l0 * k2_ * k0 * k1 / k1_**3
    mix = x * big_l + x * np.log(x) + (1 - x) * np.log(1 - x) + omega * x * (1 - x)
    g_hat = phir + tau_ * mix  # eq. (1)
    v_hat = tau_ / 2 * (om0 / 2 * (1 - fi**2) + lp * (fi + 1)) + phirp  # eq. (13): rho0/rho
    s = -rg * (tau_ / 2 * lt * (fi + 1) + mix + phirt)  # eq. (14)
    g = rg * tll * g_hat
    rho = rho0 / v_hat
    kappa = rho / rho0**2 / rg / tll * (tau_ / 2 * (chi * (lp - om0 * fi) ** 2 - (fi + 1) * lpp) - phirpp)  # eq. (15)
    alpha = (
        rho
        / rho0
        / tll
        * (
            ltp / 2 * tau_ * (fi + 1)
            + (om0 * (1 - fi**2) / 2 + lp * (fi + 1)) / 2
            - tau_ * lt / 2 * chi * (lp - om0 * fi)
            + phirtp
        )
    )
    cp = -rg * tau_ * (lt * (fi + 1) + tau_ / 2 * (ltt * (fi + 1) - lt**2 * chi) + phirtt)
    return {"g": g, "s": s, "h": g + t * s, "rho": rho, "kappa": kappa, "alpha": alpha, "cp": cp, "x": x}


def _solve_fraction(big_l: np.ndarray, omega: np.ndarray) -> np.ndarray:
    """Equilibrium fraction x of the low-density state: L + ln(x/(1-x)) + omega (1 - 2x) = 0, eq. (8).

    The bracket of G12-15 table 4 holds the stable root; bisection on ln x inside it narrows it to about
    1e-6, then Newton steps converge to machine precision.
    """
    a = 10 / 9 * (np.log(19) - big_l)
    b = 50 / 49 * (np.log(99) - big_l)
    lo = np.where(omega < a, 0.049, np.where(omega < b, 0.0099, 0.99 * np.exp(-50 / 49 * big_l - omega)))
    hi = np.where(omega < a, 0.5, np.where(omega < b, 0.051, np.minimum(1.1 * np.exp(-big_l - omega), 0.0101)))

    def f(x):
        return big_l + np.log(x / (1 - x)) + omega * (1 - 2 * x)

    llo, lhi = np.log(lo), np.log(hi)
    flo = f(lo)
    for _ in range(24):
        mid = 0.5 * (llo + lhi)
        fm = f(np.exp(mid))
        same = np.sign(fm) == np.sign(flo)
        llo = np.where(same, mid, llo)
        flo = np.where(same, fm, flo)
        lhi = np.where(same, lhi, mid)
    x = np.exp(0.5 * (llo + lhi))
    for _ in range(3):
        x = x - f(x) / (1 / (x * (1 - x)) - 2 * omega)
    return x


def liquid_gibbs_energy(temperature: ArrayLike, pressure: ArrayLike):
    """Specific Gibbs energy of liquid water, stable or supercooled [J/kg].

    Parameters
    ----------
    temperature : array_like
        Temperature [K], 230 to 300 K (below the homogeneous nucleation line flagged as extrapolated).
    pressure : array_like
        Pressure [Pa], 0 to 400 MPa.

    Returns
    -------
    numpy.ndarray or float
        g [J/kg] on the IAPWS-95 reference state.

    Notes
    -----
    IAPWS G12-15 eq. (1): g/(R T_LL) = g_B(tau, pi) + (tau + 1)(x L + x ln x + (1 - x) ln(1 - x)
    + omega x (1 - x)), with x from eq. (8), L from eq. (4), omega = 2 + omega_0 pi (eq. 6), T_LL = 228.2 K.
    Valid from the homogeneous nucleation line to 300 K, up to 400 MPa.

    References
    ----------
    [ref:iapws-g12-15]
    """
    return _out(_liquid(temperature, pressure)["g"])


def liquid_density(temperature: ArrayLike, pressure: ArrayLike):
    """Density of liquid water, stable or supercooled [kg/m3] (IAPWS G12-15 eq. 13).

    Parameters
    ----------
    temperature : array_like
        Temperature [K], 230 to 300 K.
    pressure : array_like
        Pressure [Pa], 0 to 400 MPa.

    References
    ----------
    [ref:iapws-g12-15]

    Examples
    --------
    >>> round(float(liquid_density(235.15, 101325.0)), 3)
    968.1
    """
    return _out(_liquid(temperature, pressure)["rho"])


def liquid_specific_volume(temperature: ArrayLike, pressure: ArrayLike):
    """Specific volume of liquid water [m3/kg], 1/:func:`liquid_density` (IAPWS G12-15).

    Parameters
    ----------
    temperature : array_like
        Temperature [K].
    pressure : array_like
        Pressure [Pa].

    References
    ----------
    [ref:iapws-g12-15]
    """
    return _out(1.0 / _liquid(temperature, pressure)["rho"])


def liquid_specific_enthalpy(temperature: ArrayLike, pressure: ArrayLike):
    """Specific enthalpy of liquid water [J/kg], h = g + T s (IAPWS G12-15 eq. 1 and 14).

    Parameters
    ----------
    temperature : array_like
        Temperature [K].
    pressure : array_like
        Pressure [Pa].

    References
    ----------
    [ref:iapws-g12-15]
    """
    return _out(_liquid(temperature, pressure)["h"])


def liquid_specific_entropy(temperature: ArrayLike, pressure: ArrayLike):
    """Specific entropy of liquid water [J/(kg K)] (IAPWS G12-15 eq. 14).

    Parameters
    ----------
    temperature : array_like
        Temperature [K].
    pressure : array_like
        Pressure [Pa].

    References
    ----------
    [ref:iapws-g12-15]
    """
    return _out(_liquid(temperature, pressure)["s"])


def liquid_heat_capacity(temperature: ArrayLike, pressure: ArrayLike):
    """Isobaric specific heat capacity of liquid water [J/(kg K)] (IAPWS G12-15 eq. 15).

    Parameters
    ----------
    temperature : array_like
        Temperature [K].
    pressure : array_like
        Pressure [Pa].

    References
    ----------
    [ref:iapws-g12-15]

    Examples
    --------
    >>> round(float(liquid_heat_capacity(235.15, 101325.0)), 1)
    5997.6
    """
    return _out(_liquid(temperature, pressure)["cp"])


def liquid_isothermal_compressibility(temperature: ArrayLike, pressure: ArrayLike):
    """Isothermal compressibility of liquid water [1/Pa] (IAPWS G12-15 eq. 15).

    Parameters
    ----------
    temperature : array_like
        Temperature [K].
    pressure : array_like
        Pressure [Pa].

    References
    ----------
    [ref:iapws-g12-15]
    """
    return _out(_liquid(temperature, pressure)["kappa"])


def liquid_thermal_expansion(temperature: ArrayLike, pressure: ArrayLike):
    """Isobaric thermal expansion coefficient of liquid water [1/K] (IAPWS G12-15 eq. 15).

    Parameters
    ----------
    temperature : array_like
        Temperature [K].
    pressure : array_like
        Pressure [Pa].

    References
    ----------
    [ref:iapws-g12-15]
    """
    return _out(_liquid(temperature, pressure)["alpha"])


# --- both phases -------------------------------------------------------------------------------------
def chemical_potential_difference(temperature: ArrayLike, pressure: ArrayLike):
    """Gibbs energy of liquid minus ice Ih per kilogram [J/kg]: positive where ice is the stable phase.

    Parameters
    ----------
    temperature : array_like
        Temperature [K], 230 to 280 K (liquid below its homogeneous nucleation line and ice above
        273.16 K are flagged as extrapolated).
    pressure : array_like
        Pressure [Pa], 0 to 210 MPa.

    Returns
    -------
    numpy.ndarray or float
        Delta mu = g_liquid(T, p) - g_ice(T, p) [J/kg]; multiply by the ice density for the driving force
        per volume of nucleus.

    Notes
    -----
    G12-15 eq. (1) minus R10-06 eq. (1), both on the IAPWS-95 reference state. On the R14-08 melting curve
    it is zero to within 0.03 K of undercooling (Delta mu / Delta s) up to 140 MPa and 0.16 K at the
    Ih-III triple point: the three formulations were fitted separately.

    References
    ----------
    [ref:iapws-g12-15], [ref:iapws-r10-06]

    Examples
    --------
    >>> 0 < float(chemical_potential_difference(263.15, 101325.0)) < 25e3
    True
    """
    return _out(_liquid(temperature, pressure)["g"] - _ice(temperature, pressure)["g"])


def latent_heat(temperature: ArrayLike, pressure: ArrayLike):
    """Specific enthalpy of melting, h_liquid - h_ice [J/kg], at (T, p) (supercooled liquid included).

    Parameters
    ----------
    temperature : array_like
        Temperature [K].
    pressure : array_like
        Pressure [Pa].

    Notes
    -----
    From G12-15 and R10-06 enthalpies on the same reference state; 333.4 kJ/kg near 0 °C, 0.1 MPa.

    References
    ----------
    [ref:iapws-g12-15], [ref:iapws-r10-06]

    Examples
    --------
    >>> round(float(latent_heat(273.152519, 101325.0)) / 1e3, 1)
    333.4
    """
    t = _as_float(temperature)
    ice = _ice(t, pressure)
    return _out(_liquid(t, pressure)["h"] - (ice["g"] - t * ice["gt"]))


def require_ice_ih(temperature: ArrayLike, field: str = "temperature") -> None:
    """Refuse temperatures below the Ih-III-liquid triple point for a sealed rigid chamber.

    Raises :class:`planner.errors.ModelRangeError` naming ``field``; callers that handle protocol input
    turn this into an :class:`planner.errors.InputError` naming the key path.
    """
    t = _as_float(temperature)
    if np.any(t < TRIPLE_POINT_IH_III_TEMPERATURE):
        raise ModelRangeError(
            field,
            float(np.min(t)),
            f"at or above {TRIPLE_POINT_IH_III_TEMPERATURE} K (-21.985 °C), the ice Ih-III-liquid triple point",
            "ice Ih in a rigid chamber",
        )
