"""REFERENCE for tests only: the pond heat-balance loop as it was before it was compiled.

Frozen copy of ``pondsim/pond/thermal_step.py`` at commit f5b8396 (pure Python over
plain floats). ``tests/test_thermal_compiled.py`` runs it beside the compiled loop and
bounds their difference; do not edit it to follow later model changes (change the
test's expectation instead, and say why).

Original docstring: the hourly pond heat-balance integration, one pure function.

:func:`integrate_heat_balance` steps the mixed layer through a year of per-step inputs
(those of :func:`pondsim.pond.thermal.heat_exchange_inputs`) with the exponential
step-mean scheme described in :func:`pondsim.pond.thermal.water_temperature`, including
the ice store. It is kept free of pandas so that it can be compiled later.
"""

from __future__ import annotations

import math

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


def _flux(tw, ts, slope, fixed, f0, cfree, tva, pk, gam, e_a, t_a, g, t_g, t_m, p,
          eps_sigma, q_in):
    """Scalar net flux [W m-2] of one step (the loop's copy of :func:`heat_flux_terms`).

    Surface exchange at the surface temperature *ts* (the water's, or that of the ice);
    floor conduction and mixing at the water temperature *tw*. The transfer function is
    f = f0 + cfree·max(T_v,s − T_v,a, 0)^(1/3) (forced plus free convection, see
    :mod:`pondsim.pond.transfer`). With *slope* returns (q, dq/dT) — for ts != tw the
    surface balance and its slope in ts only — else (q, lw, latent, convection, ground,
    makeup heat, evaporation, makeup mass).
    """
    tk = ts + _KELVIN
    es = 0.6108 * math.exp(17.27 * ts / (ts + 237.3))
    lam = (2.501 - 0.002361 * ts) * 1e6
    f = f0
    dtv = 0.0
    if cfree > 0.0:
        ratio = 1.0 - 0.378 * es / pk
        dtv = tk / ratio - tva
        if dtv > 0.0:
            f = f0 + cfree * dtv ** (1.0 / 3.0)
    lat = f * (es - e_a)
    evap = lat / lam
    mk = evap - p if evap > p else 0.0
    lw = eps_sigma * tk * tk * tk * tk
    conv = f * gam * (ts - t_a)
    grd = g * (tw - t_g)
    cp = WATER_HEAT_CAPACITY
    mkq = cp * (mk * (t_m - tw) + p * (t_a - tw))
    q = fixed - lw - lat - conv - grd + mkq
    if not slope:
        return q, lw, lat, conv, grd, mkq, evap, mk
    des = 4098.0 * es / ((ts + 237.3) * (ts + 237.3))
    df = 0.0
    if dtv > 0.0:
        # d f/dT_s; ΔT_v floored at 0.1 K so the slope of the cube root stays bounded
        dtvs = 1.0 / ratio + tk * 0.378 * des / (pk * ratio * ratio)
        df = cfree / 3.0 * max(dtv, 0.1) ** (-2.0 / 3.0) * dtvs
    dlat = f * des + df * (es - e_a)
    d_surface = -4.0 * eps_sigma * tk * tk * tk - dlat - gam * (f + df * (ts - t_a))
    if ts != tw:
        return q + grd - mkq - q_in, d_surface  # surface balance only
    dmk = dlat / lam if evap > p else 0.0
    dq = d_surface - g + cp * (dmk * (t_m - tw) - mk - p)
    return q, dq


def _step_mean(t, dt, c, prm):
    """Step-mean temperature of one step of length *dt* from *t* (see the Notes of
    :func:`pondsim.pond.thermal.water_temperature`), by Newton's method."""
    expm1 = math.expm1
    tbar = t
    for _ in range(30):
        q, dq = _flux(tbar, tbar, True, *prm)
        a = -dq if -dq > _MIN_COUPLING else _MIN_COUPLING
        z = a * dt / c
        phi = -expm1(-z) / z
        k = (1.0 - phi) / (a * phi)  # T̄ − T_start = q(T̄) k for linear q
        step = (tbar - t - q * k) / (1.0 + a * k)
        tbar -= step
        if abs(step) < 1e-9:
            break
    return tbar


def integrate_heat_balance(inp, t_start, ice_start, step_s, heat_capacity, record=True):
    """Step the pond through *inp* (dict of lists); pure Python floats for speed.

    Each step solves for the step-mean temperature T̄ of the exponential relaxation
    through the step (see :func:`water_temperature`), then closes energy exactly:
    T_end = T_start + q(T̄) Δt / C.
    """
    sw, lwin = inp["q_shortwave"], inp["q_longwave_in"]
    ta, ea = inp["temp_air_c"], inp["vapour_pressure_kpa"]
    fw, gam = inp["wind_function_w_m2_kpa"], inp["psychrometric_kpa_c"]
    fc, tva, pk = (inp["free_convection_w_m2_kpa_k13"], inp["virtual_temperature_air_k"],
                   inp["pressure_kpa"])
    tg, gg = inp["ground_temperature_c"], inp["ground_conductance_w_m2_k"]
    tm, rain = inp["makeup_temperature_c"], inp["rain_kg_m2_s"]
    qin, emis = inp["heat_input_w_m2"], inp["water_emissivity"]
    sigma = STEFAN_BOLTZMANN
    ice_volumetric_latent = ICE_DENSITY * LATENT_HEAT_FUSION  # J m-3
    n = len(sw)
    if record:
        out_mean = [0.0] * n
        out_end = [0.0] * n
        out_ice = [0.0] * n
        out_frozen = [False] * n
        out_terms = [[0.0] * n for _ in range(6)]  # lw_out, evap, conv, ground, makeup, E
        out_makeup = [0.0] * n
        out_surface = [0.0] * n
    t = float(t_start)
    ice = float(ice_start)
    dt = float(step_s)
    c = float(heat_capacity)

    for i in range(n):
        fixed = sw[i] + lwin[i] + qin[i]
        f = fw[i]
        e_a = ea[i]
        t_a = ta[i]
        g = gg[i]
        t_g = tg[i]
        t_m = tm[i]
        p = rain[i]
        eps_sigma = emis[i] * sigma
        ice0 = ice

        prm = (fixed, f, fc[i], tva[i], pk[i], gam[i], e_a, t_a, g, t_g, t_m, p,
               eps_sigma, qin[i])

        if ice0 > 0.0:
            # Water held at 0 °C under the ice: energy first freezes or melts ice.
            tbar = 0.0
            t_end = 0.0
            ts = 0.0
            res = _flux(0.0, 0.0, False, *prm)
            surface_gain = res[0] + res[4] - res[5] - qin[i]
            if surface_gain < 0.0:
                # The ice surface cools below 0 °C until conduction through the ice
                # supplies its net loss: q_surface(T_s) = k_ice T_s / h.
                kh = ICE_CONDUCTIVITY / max(ice0 / ice_volumetric_latent, 1e-4)
                # g(T_s) = q_surface(T_s) − k_ice T_s / h falls with T_s and g(0) < 0:
                # Newton's method kept inside a shrinking bracket [lo, hi] (bisection
                # where a Newton step leaves it, e.g. at free convection's kink).
                lo, hi = -150.0, 0.0
                ts = -1e-6
                for _ in range(100):
                    q, dq = _flux(0.0, ts, True, *prm)
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
                res = _flux(0.0, ts, False, *prm)
            energy = res[0] * dt
            if energy <= ice0:
                ice = ice0 - energy
            else:
                t_end = (energy - ice0) / c
                ice = 0.0
        else:
            tbar = _step_mean(t, dt, c, prm)
            if tbar < 0.0:
                # The step would cool below freezing: hold the mean at 0 °C.
                tbar = 0.0
            res = _flux(tbar, tbar, False, *prm)
            t_end = t + res[0] * dt / c
            n_sub = int(abs(t_end - t) / SUBSTEP_K) + 1
            if n_sub > 1 and tbar > 0.0 and t_end > 0.0:
                # A large change within the step: the flux is far from linear over it
                # (free convection's cube root, vapour pressure), so take n_sub equal
                # sub-steps and report their means (energy still closes exactly).
                n_sub = min(n_sub, MAX_SUBSTEPS)
                h = dt / n_sub
                tt, acc_t, acc = t, 0.0, [0.0] * 8
                for _ in range(n_sub):
                    tb = _step_mean(tt, h, c, prm)
                    r = _flux(tb, tb, False, *prm)
                    tt += r[0] * h / c
                    acc_t += tb
                    for j in range(8):
                        acc[j] += r[j]
                if tt > 0.0 and acc_t > 0.0:
                    tbar = acc_t / n_sub
                    res = tuple(v / n_sub for v in acc)
                    t_end = t + res[0] * dt / c
            ts = tbar
            if t_end < 0.0:
                ice = -t_end * c
                t_end = 0.0
        t = t_end
        if record:
            out_mean[i] = tbar
            out_end[i] = t_end
            out_ice[i] = ice
            out_frozen[i] = ice0 > 0.0 or ice > 0.0
            for j in range(6):
                out_terms[j][i] = res[1 + j]
            out_makeup[i] = res[7]
            out_surface[i] = ts
    if not record:
        return t, ice
    return {
        "water_temperature": out_mean, "water_temperature_end": out_end, "ice": out_ice,
        "frozen": out_frozen, "lw": out_terms[0], "lat": out_terms[1],
        "conv": out_terms[2], "grd": out_terms[3], "mkq": out_terms[4],
        "evap": out_terms[5], "makeup": out_makeup, "surface": out_surface,
        "t_end": t, "ice_end": ice,
    }
