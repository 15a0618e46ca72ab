"""The hourly pond heat-balance integration, compiled (numba).

:func:`integrate_heat_balance` steps the mixed layer through a year of per-step inputs
(those of :func:`pondsim.pond.thermal.heat_exchange_inputs`) with the exponential
step-mean scheme described in :func:`pondsim.pond.thermal.water_temperature`, including
the ice store. The loop is compiled to machine code (numba, cached on disk after the
first call); it performs the same floating-point operations in the same order as the
former pure-Python loop, kept in ``tests/thermal_step_reference.py``, and a test bounds
the difference (``tests/test_thermal_compiled.py``: below 1e-9 K over pvlib's
Greensboro and Sand Point years; it is not bit for bit only because the compiled
``exp``/``pow`` may round the last bit differently).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from pondsim.pond.longwave import STEFAN_BOLTZMANN

#: Density of the culture taken as that of water at 4-30 °C, within 0.5 % [kg m-3].
WATER_DENSITY = 1000.0
#: Specific heat of water at 20 °C [J kg-1 K-1].
WATER_HEAT_CAPACITY = 4186.0
#: Latent heat of fusion of ice at 0 °C [J kg-1].
LATENT_HEAT_FUSION = 334.0e3
#: Density of ice [kg m-3] and its thermal conductivity near 0 °C [W m-1 K-1] (from
#: memory; the usual values in Stefan-law ice growth).
ICE_DENSITY = 917.0
ICE_CONDUCTIVITY = 2.2
#: Longwave emissivity of a water surface [-] (Béchet et al. 2011 use 0.97).
WATER_EMISSIVITY = 0.97
#: Default heat-transfer coefficient water -> deep ground [W m-2 K-1]: soil conductivity
#: about 1 W m-1 K-1 over 0.5-1 m to the depth of constant temperature gives 1-2
#: (common practice; an assumption, set it from site data where known).
GROUND_CONDUCTANCE = 1.5

#: A step whose water temperature changes by more than this [K] is split into equal
#: sub-steps (at most MAX_SUBSTEPS) so that the flux stays nearly linear over each.
SUBSTEP_K = 4.0
MAX_SUBSTEPS = 8
_MIN_COUPLING = 1e-3  # W m-2 K-1, guards the exponential weights against a = 0
_KELVIN = 273.15


def _jit(fn):
    """Compile *fn* (numba), caching the machine code beside this file when the folder
    is writable; otherwise (a read-only install, another user's checkout) compile once
    per process instead of failing at import."""
    try:
        return njit(cache=True, error_model="python")(fn)
    except RuntimeError:  # numba: "cannot cache function ...: no locator available"
        return njit(cache=False, error_model="python")(fn)


#: Rows of the per-step input matrix the compiled loop reads (see :func:`_input_matrix`).
(_FIXED, _F0, _CFREE, _TVA, _PK, _GAM, _EA, _TA, _G, _TG, _TM, _P, _EPS_SIGMA,
 _QIN) = range(14)
#: Outputs per step: the 8 flux results of :func:`_flux`, then mean, end, ice, frozen,
#: surface temperature.
_N_TERMS = 8


@_jit
def _flux(tw, ts, x, i):
    """Scalar net flux [W m-2] of step *i* and its parts (the loop's copy of
    :func:`heat_flux_terms`): ``(q, lw, latent, convection, ground, makeup heat,
    evaporation, makeup mass)``.

    Surface exchange at the surface temperature *ts* (the water's, or that of the ice);
    floor conduction and mixing at the water temperature *tw*. The transfer function is
    f = f0 + cfree·max(T_v,s − T_v,a, 0)^(1/3) (forced plus free convection, see
    :mod:`pondsim.pond.transfer`). *x* is the input matrix of :func:`_input_matrix`.
    """
    tk = ts + _KELVIN
    es = 0.6108 * math.exp(17.27 * ts / (ts + 237.3))
    lam = (2.501 - 0.002361 * ts) * 1e6
    f = x[_F0, i]
    cfree = x[_CFREE, i]
    if cfree > 0.0:
        ratio = 1.0 - 0.378 * es / x[_PK, i]
        dtv = tk / ratio - x[_TVA, i]
        if dtv > 0.0:
            f = f + cfree * dtv ** (1.0 / 3.0)
    p = x[_P, i]
    lat = f * (es - x[_EA, i])
    evap = lat / lam
    mk = evap - p if evap > p else 0.0
    lw = x[_EPS_SIGMA, i] * tk * tk * tk * tk
    conv = f * x[_GAM, i] * (ts - x[_TA, i])
    grd = x[_G, i] * (tw - x[_TG, i])
    cp = WATER_HEAT_CAPACITY
    mkq = cp * (mk * (x[_TM, i] - tw) + p * (x[_TA, i] - tw))
    q = x[_FIXED, i] - lw - lat - conv - grd + mkq
    return q, lw, lat, conv, grd, mkq, evap, mk


@_jit
def _flux_slope(tw, ts, x, i):
    """``(q, dq/dT)`` of step *i*: for ts != tw the surface balance and its slope in
    ts only (the ice surface), else the whole balance and its slope in T = ts = tw."""
    q, lw, lat, conv, grd, mkq, evap, mk = _flux(tw, ts, x, i)
    tk = ts + _KELVIN
    es = 0.6108 * math.exp(17.27 * ts / (ts + 237.3))
    lam = (2.501 - 0.002361 * ts) * 1e6
    f0, cfree, pk, gam = x[_F0, i], x[_CFREE, i], x[_PK, i], x[_GAM, i]
    f = f0
    des = 4098.0 * es / ((ts + 237.3) * (ts + 237.3))
    df = 0.0
    if cfree > 0.0:
        ratio = 1.0 - 0.378 * es / pk
        dtv = tk / ratio - x[_TVA, i]
        if dtv > 0.0:
            f = f0 + cfree * dtv ** (1.0 / 3.0)
            # d f/dT_s; ΔT_v floored at 0.1 K so the slope of the cube root stays bounded
            dtvs = 1.0 / ratio + tk * 0.378 * des / (pk * ratio * ratio)
            df = cfree / 3.0 * max(dtv, 0.1) ** (-2.0 / 3.0) * dtvs
    dlat = f * des + df * (es - x[_EA, i])
    d_surface = -4.0 * x[_EPS_SIGMA, i] * tk * tk * tk - dlat \
        - gam * (f + df * (ts - x[_TA, i]))
    if ts != tw:
        return q + grd - mkq - x[_QIN, i], d_surface  # surface balance only
    p = x[_P, i]
    dmk = dlat / lam if evap > p else 0.0
    dq = d_surface - x[_G, i] + WATER_HEAT_CAPACITY * (dmk * (x[_TM, i] - tw) - mk - p)
    return q, dq


@_jit
def _step_mean(t, dt, c, x, i):
    """Step-mean temperature of one step of length *dt* from *t* (see the Notes of
    :func:`pondsim.pond.thermal.water_temperature`), by Newton's method."""
    tbar = t
    for _ in range(30):
        q, dq = _flux_slope(tbar, tbar, x, i)
        a = -dq if -dq > _MIN_COUPLING else _MIN_COUPLING
        z = a * dt / c
        phi = -math.expm1(-z) / z
        k = (1.0 - phi) / (a * phi)  # T̄ − T_start = q(T̄) k for linear q
        step = (tbar - t - q * k) / (1.0 + a * k)
        tbar -= step
        if abs(step) < 1e-9:
            break
    return tbar


@_jit
def _ice_surface(x, i, ice0, ice_volumetric_latent):
    """Temperature [°C] of an ice surface losing heat: q_surface(T_s) = k_ice T_s / h."""
    kh = ICE_CONDUCTIVITY / max(ice0 / ice_volumetric_latent, 1e-4)
    # g(T_s) = q_surface(T_s) − k_ice T_s / h falls with T_s and g(0) < 0: Newton's
    # method kept inside a shrinking bracket [lo, hi] (bisection where a Newton step
    # leaves it, e.g. at free convection's kink).
    lo, hi = -150.0, 0.0
    ts = -1e-6
    for _ in range(100):
        q, dq = _flux_slope(0.0, ts, x, i)
        gval = q - kh * ts
        if gval > 0.0:
            lo = ts
        else:
            hi = ts
        new = ts - gval / (dq - kh)
        if not lo < new < hi:
            new = 0.5 * (lo + hi)
        step = ts - new
        ts = new
        if abs(step) < 1e-10:
            break
    return ts


@_jit
def _integrate(x, t_start, ice_start, dt, c, record):
    """The compiled loop; returns ``(t_end, ice_end, out)`` with *out* of shape
    (13, n): the 8 flux results of :func:`_flux` at the reported temperature, then
    step mean, end temperature, ice store, frozen (0/1) and surface temperature (an
    empty array when *record* is False)."""
    n = x.shape[1]
    out = np.empty((_N_TERMS + 5, n if record else 0))
    res = np.empty(_N_TERMS)
    acc = np.empty(_N_TERMS)
    ice_volumetric_latent = ICE_DENSITY * LATENT_HEAT_FUSION  # J m-3
    t = t_start
    ice = ice_start
    for i in range(n):
        ice0 = ice
        if ice0 > 0.0:
            # Water held at 0 °C under the ice: energy first freezes or melts ice.
            tbar = 0.0
            t_end = 0.0
            ts = 0.0
            r = _flux(0.0, 0.0, x, i)
            surface_gain = r[0] + r[4] - r[5] - x[_QIN, i]
            if surface_gain < 0.0:
                ts = _ice_surface(x, i, ice0, ice_volumetric_latent)
                r = _flux(0.0, ts, x, i)
            for j in range(_N_TERMS):
                res[j] = r[j]
            energy = res[0] * dt
            if energy <= ice0:
                ice = ice0 - energy
            else:
                t_end = (energy - ice0) / c
                ice = 0.0
        else:
            tbar = _step_mean(t, dt, c, x, i)
            if tbar < 0.0:
                # The step would cool below freezing: hold the mean at 0 °C.
                tbar = 0.0
            r = _flux(tbar, tbar, x, i)
            for j in range(_N_TERMS):
                res[j] = r[j]
            t_end = t + res[0] * dt / c
            n_sub = int(abs(t_end - t) / SUBSTEP_K) + 1
            if n_sub > 1 and tbar > 0.0 and t_end > 0.0:
                # A large change within the step: the flux is far from linear over it
                # (free convection's cube root, vapour pressure), so take n_sub equal
                # sub-steps and report their means (energy still closes exactly).
                n_sub = min(n_sub, MAX_SUBSTEPS)
                h = dt / n_sub
                tt, acc_t = t, 0.0
                acc[:] = 0.0
                for _ in range(n_sub):
                    tb = _step_mean(tt, h, c, x, i)
                    r = _flux(tb, tb, x, i)
                    tt += r[0] * h / c
                    acc_t += tb
                    for j in range(_N_TERMS):
                        acc[j] += r[j]
                if tt > 0.0 and acc_t > 0.0:
                    tbar = acc_t / n_sub
                    for j in range(_N_TERMS):
                        res[j] = acc[j] / n_sub
                    t_end = t + res[0] * dt / c
            ts = tbar
            if t_end < 0.0:
                ice = -t_end * c
                t_end = 0.0
        t = t_end
        if record:
            for j in range(_N_TERMS):
                out[j, i] = res[j]
            out[_N_TERMS, i] = tbar
            out[_N_TERMS + 1, i] = t_end
            out[_N_TERMS + 2, i] = ice
            out[_N_TERMS + 3, i] = 1.0 if (ice0 > 0.0 or ice > 0.0) else 0.0
            out[_N_TERMS + 4, i] = ts
    return t, ice, out


def _input_matrix(inp) -> np.ndarray:
    """The per-step inputs as one float64 matrix (rows ``_FIXED`` ... ``_QIN``)."""
    col = {k: np.asarray(v, dtype=float) for k, v in inp.items()}
    x = np.empty((14, len(col["q_shortwave"])))
    x[_FIXED] = col["q_shortwave"] + col["q_longwave_in"] + col["heat_input_w_m2"]
    x[_F0] = col["wind_function_w_m2_kpa"]
    x[_CFREE] = col["free_convection_w_m2_kpa_k13"]
    x[_TVA] = col["virtual_temperature_air_k"]
    x[_PK] = col["pressure_kpa"]
    x[_GAM] = col["psychrometric_kpa_c"]
    x[_EA] = col["vapour_pressure_kpa"]
    x[_TA] = col["temp_air_c"]
    x[_G] = col["ground_conductance_w_m2_k"]
    x[_TG] = col["ground_temperature_c"]
    x[_TM] = col["makeup_temperature_c"]
    x[_P] = col["rain_kg_m2_s"]
    x[_EPS_SIGMA] = col["water_emissivity"] * STEFAN_BOLTZMANN
    x[_QIN] = col["heat_input_w_m2"]
    return x


def integrate_heat_balance(inp, t_start, ice_start, step_s, heat_capacity, record=True):
    """Step the pond through *inp* (mapping of column name -> per-step values).

    Each step solves for the step-mean temperature T̄ of the exponential relaxation
    through the step (see :func:`water_temperature`), then closes energy exactly:
    T_end = T_start + q(T̄) Δt / C.

    Parameters
    ----------
    inp : mapping of str -> array_like (n,)
        The columns of :func:`pondsim.pond.thermal.heat_exchange_inputs`.
    t_start : float [°C]
    ice_start : float [J m-2]
    step_s : float [s]
    heat_capacity : float [J m-2 K-1]
    record : bool
        False returns only the end state ``(t_end, ice_end)``.

    Returns
    -------
    dict of str -> ndarray (n,), plus ``t_end`` [°C] and ``ice_end`` [J m-2]
        ``water_temperature`` (step mean), ``water_temperature_end``, ``ice``,
        ``frozen`` (bool), ``lw``, ``lat``, ``conv``, ``grd``, ``mkq`` [W m-2, losses
        positive except the makeup term], ``evap``, ``makeup`` [kg m-2 s-1],
        ``surface`` [°C].
    """
    x = _input_matrix(inp)
    t, ice, out = _integrate(x, float(t_start), float(ice_start), float(step_s),
                             float(heat_capacity), bool(record))
    if not record:
        return t, ice
    k = _N_TERMS
    return {
        "water_temperature": out[k], "water_temperature_end": out[k + 1],
        "ice": out[k + 2], "frozen": out[k + 3] > 0.5, "lw": out[1], "lat": out[2],
        "conv": out[3], "grd": out[4], "mkq": out[5], "evap": out[6], "makeup": out[7],
        "surface": out[k + 4], "t_end": t, "ice_end": ice,
    }
