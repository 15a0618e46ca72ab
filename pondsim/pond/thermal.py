"""Pond water temperature and evaporation from an hourly surface energy balance.

The pond is one well-mixed layer of constant depth (makeup water replaces what
evaporates). Its heat balance follows the structure of Béchet et al. (2011):

    ρ c_p d dT/dt = q_shortwave + q_longwave_in + q_longwave_out + q_evaporation
                    + q_convection + q_ground + q_makeup + q_input

with every term signed as a gain to the water [W m-2]. Latent and sensible exchange use a
surface transfer model chosen by name (:mod:`pondsim.pond.transfer`; default the
cooling-pond formula of Ryan, Harleman & Stolzenbach 1974) with the sensible heat by the
Bowen ratio; the sky longwave comes from :mod:`pondsim.pond.longwave`; vapour pressures,
the psychrometric constant and the 2 m wind follow FAO-56 (Allen et al. 1998).

References
----------
Béchet, Q., Shilton, A., Park, J. B. K., Craggs, R. J. & Guieysse, B. (2011) Universal
temperature model for shallow algal ponds provides improved accuracy. *Environ. Sci.
Technol.* 45:3702-3709. doi:10.1021/es1040706

Allen, R. G., Pereira, L. S., Raes, D. & Smith, M. (1998) *Crop evapotranspiration:
guidelines for computing crop water requirements*. FAO Irrigation and Drainage Paper 56.

Shuttleworth, W. J. (1993) Evaporation. In Maidment, D. R. (ed.) *Handbook of
Hydrology*, ch. 4. McGraw-Hill.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from pondsim.errors import InputError
from pondsim.pond.light import WATER_REFRACTIVE_INDEX, transmitted_shortwave
from pondsim.pond.longwave import STEFAN_BOLTZMANN, sky_longwave  # noqa: F401
from pondsim.pond.thermal_step import (  # noqa: F401
    GROUND_CONDUCTANCE,
    ICE_CONDUCTIVITY,
    ICE_DENSITY,
    LATENT_HEAT_FUSION,
    WATER_DENSITY,
    WATER_EMISSIVITY,
    WATER_HEAT_CAPACITY,
    integrate_heat_balance,
)
from pondsim.pond.transfer import (  # noqa: F401
    HARBECK_AREA_EXPONENT,
    HARBECK_PREFACTOR,
    RYAN_HARLEMAN_FREE,
    RYAN_HARLEMAN_WIND,
    latent_heat_vaporisation,
    surface_transfer,
    virtual_temperature_k,
    wind_at_2m,
    wind_function,
)

_KELVIN = 273.15
#: Surface transfer model used when the pond names none (see
#: :func:`pondsim.pond.transfer.surface_transfer` for why).
DEFAULT_TRANSFER = "ryan_harleman"
_REQUIRED = ("ghi", "dhi", "temp_air", "wind_speed", "relative_humidity", "pressure",
             "solar_zenith")
_DEPTH_RANGE_M = (0.05, 1.0)


# FAO-56 vapour-pressure and pressure relations live in pondsim.forcing.psychrometry (shared with
# the weather readers); they are re-exported here for the thermal stage's users.
from pondsim.forcing.psychrometry import (  # noqa: E402, F401
    pressure_from_elevation,
    psychrometric_constant,
    saturation_vapour_pressure,
    slope_saturation_vapour_pressure,
)

# ---------------------------------------------------------------------------------------
# Flux terms
# ---------------------------------------------------------------------------------------

def heat_flux_terms(t_water_c, *, q_shortwave, q_longwave_in, temp_air_c,
                    vapour_pressure_kpa, wind_function_w_m2_kpa, psychrometric_kpa_c,
                    ground_temperature_c, ground_conductance_w_m2_k, makeup_temperature_c,
                    rain_kg_m2_s, heat_input_w_m2=0.0, water_emissivity=WATER_EMISSIVITY,
                    free_convection_w_m2_kpa_k13=0.0, virtual_temperature_air_k=None,
                    pressure_kpa=101.3, t_surface_c=None):
    """Heat flux terms of the pond surface for a given water temperature.

    Parameters
    ----------
    t_water_c : float or array-like [°C]
        Water temperature.
    q_shortwave : [W m-2]
        Shortwave entering the water, all absorbed in the culture.
    q_longwave_in : [W m-2]
        Absorbed sky longwave, ε_w L↓.
    temp_air_c : [°C]
    vapour_pressure_kpa : [kPa]
        Actual vapour pressure of the air.
    wind_function_w_m2_kpa : [W m-2 kPa-1]
        Forced (wind-driven) transfer, from
        :func:`pondsim.pond.transfer.surface_transfer`.
    psychrometric_kpa_c : [kPa °C-1]
    ground_temperature_c : [°C]
    ground_conductance_w_m2_k : [W m-2 K-1]
    makeup_temperature_c : [°C]
    rain_kg_m2_s : [kg m-2 s-1]
        Rain rate (1 kg m-2 = 1 mm).
    heat_input_w_m2 : [W m-2], default 0
    water_emissivity : [-], default 0.97
    free_convection_w_m2_kpa_k13 : [W m-2 kPa-1 K-1/3], default 0
        Free-convection coefficient (Ryan et al. 1974); 0 for none.
    virtual_temperature_air_k : [K], optional
        Virtual temperature of the air; needed when the free-convection coefficient
        is not 0.
    pressure_kpa : [kPa], default 101.3
        Air pressure, for the virtual temperature of saturated air at the surface.
    t_surface_c : float or array-like, optional [°C]
        Temperature of the exchanging surface when it differs from the water (the
        surface of an ice cover); default *t_water_c*.

    Returns
    -------
    dict of ndarray
        ``q_shortwave``, ``q_longwave_in``, ``q_longwave_out``, ``q_evaporation``,
        ``q_convection``, ``q_ground``, ``q_makeup``, ``q_input`` [W m-2, gains positive]
        and ``evaporation`` and ``makeup`` [kg m-2 s-1].

    Notes
    -----
    With f the wind function, e_s at the water temperature and λ from
    :func:`latent_heat_vaporisation`:

    - q_longwave_out = −ε_w σ (T_w + 273.15)⁴
    - f = f_forced + f_free max(T_v,s − T_v,a, 0)^(1/3), T_v,s the virtual temperature
      of saturated air at the surface (see :mod:`pondsim.pond.transfer`)
    - q_evaporation = −f (e_s(T_w) − e_a); E = −q_evaporation/λ, negative
      (condensation) when the air's vapour pressure exceeds e_s(T_w)
    - q_convection = −f γ (T_w − T_a): the same transfer coefficient scaled by the
      Bowen ratio, free of the 0/0 of the ratio form
    - q_ground = −G (T_w − T_g)
    - q_makeup = c_p [M (T_m − T_w) + P (T_a − T_w)], M = max(E − P, 0): makeup water
      enters at T_m, rain at air temperature, and overflow (when P > E) leaves at T_w.
      Evaporated water leaves at T_w, so it carries no further sensible heat.
    """
    a = np.asarray
    q_shortwave, q_longwave_in, temp_air_c = a(q_shortwave, float), a(q_longwave_in, float), \
        a(temp_air_c, float)
    vapour_pressure_kpa, psychrometric_kpa_c = a(vapour_pressure_kpa, float), \
        a(psychrometric_kpa_c, float)
    ground_temperature_c, ground_conductance_w_m2_k = a(ground_temperature_c, float), \
        a(ground_conductance_w_m2_k, float)
    makeup_temperature_c, rain_kg_m2_s = a(makeup_temperature_c, float), \
        a(rain_kg_m2_s, float)
    heat_input_w_m2, water_emissivity = a(heat_input_w_m2, float), a(water_emissivity, float)
    t = a(t_water_c, dtype=float)
    ts = t if t_surface_c is None else a(t_surface_c, dtype=float)
    es = saturation_vapour_pressure(ts)
    f = np.asarray(wind_function_w_m2_kpa, dtype=float)
    c_free = np.asarray(free_convection_w_m2_kpa_k13, dtype=float)
    if np.any(c_free > 0):
        if virtual_temperature_air_k is None:
            raise InputError("virtual_temperature_air_k is needed with free convection",
                             field="virtual_temperature_air_k")
        tvs = virtual_temperature_k(ts, es, pressure_kpa)
        f = f + c_free * np.cbrt(np.maximum(tvs - np.asarray(virtual_temperature_air_k,
                                                             dtype=float), 0.0))
    latent = f * (es - vapour_pressure_kpa)
    evap = latent / (latent_heat_vaporisation(ts) * 1e6)
    makeup = np.maximum(evap - rain_kg_m2_s, 0.0)
    zeros = np.zeros(np.broadcast(t, ts, f).shape)
    return {
        "q_shortwave": zeros + q_shortwave,
        "q_longwave_in": zeros + q_longwave_in,
        "q_longwave_out": -water_emissivity * STEFAN_BOLTZMANN * (ts + _KELVIN) ** 4 + zeros,
        "q_evaporation": -latent + zeros,
        "q_convection": -f * psychrometric_kpa_c * (ts - temp_air_c) + zeros,
        "q_ground": -ground_conductance_w_m2_k * (t - ground_temperature_c) + zeros,
        "q_makeup": WATER_HEAT_CAPACITY * (makeup * (makeup_temperature_c - t)
                                           + rain_kg_m2_s * (temp_air_c - t)) + zeros,
        "q_input": zeros + heat_input_w_m2,
        "evaporation": evap + zeros,
        "makeup": makeup + zeros,
    }


FLUX_TERMS = ("q_shortwave", "q_longwave_in", "q_longwave_out", "q_evaporation",
              "q_convection", "q_ground", "q_makeup", "q_input")


def net_heat_flux(t_water_c, **inputs):
    """Net heat gain of the pond [W m-2]: the sum of :func:`heat_flux_terms`.

    Parameters
    ----------
    t_water_c : float or array-like [°C]
    **inputs
        The keyword arguments of :func:`heat_flux_terms`, e.g. one row of
        :func:`heat_exchange_inputs` as a dict.

    Returns
    -------
    float or ndarray [W m-2]
    """
    terms = heat_flux_terms(t_water_c, **inputs)
    total = sum(terms[k] for k in FLUX_TERMS)
    return float(total) if np.ndim(total) == 0 else total


# ---------------------------------------------------------------------------------------
# Inputs, checks
# ---------------------------------------------------------------------------------------

def _pond_value(pond, name, default=None):
    value = getattr(pond, name, default)
    return default if value is None else value


def _check_inputs(forcing, pond):
    if not isinstance(forcing, pd.DataFrame):
        raise InputError("forcing must be a pandas DataFrame", field="forcing")
    missing = [c for c in _REQUIRED if c not in forcing.columns]
    if missing:
        raise InputError(f"forcing lacks column(s): {', '.join(missing)}",
                         field=",".join(missing))
    if not isinstance(forcing.index, pd.DatetimeIndex) or len(forcing) < 1:
        raise InputError("forcing needs a non-empty DatetimeIndex", field="index")
    for col in _REQUIRED:
        bad = int(forcing[col].isna().sum())
        if bad:
            raise InputError(f"{bad} missing value(s); fill gaps before the thermal model",
                             field=col)
    rh = forcing["relative_humidity"]
    if (rh < 0).any() or (rh > 100).any():
        raise InputError(f"relative humidity must be in 0-100 %, found "
                         f"{rh.min():g}-{rh.max():g}", field="relative_humidity")
    p = forcing["pressure"]
    if (p < 40_000).any() or (p > 110_000).any():
        raise InputError(f"pressure must be in 40000-110000 Pa, found {p.min():g}-"
                         f"{p.max():g} (mbar or kPa given?)", field="pressure")
    if (forcing["wind_speed"] < 0).any():
        raise InputError("wind speed must be >= 0 m s-1", field="wind_speed")
    if "precipitation" in forcing.columns and (forcing["precipitation"] < 0).any():
        raise InputError("precipitation must be >= 0 mm", field="precipitation")
    depth = getattr(pond, "depth_m", None)
    lo, hi = _DEPTH_RANGE_M
    if depth is None or not (lo <= float(depth) <= hi):
        raise InputError(f"pond depth must be in {lo}-{hi} m, got {depth!r}",
                         field="depth_m")
    g = float(_pond_value(pond, "ground_conductance_w_m2_k", GROUND_CONDUCTANCE))
    if not 0.0 <= g <= 100.0:
        raise InputError(f"ground conductance must be in 0-100 W m-2 K-1, got {g}",
                         field="ground_conductance_w_m2_k")
    eps = float(_pond_value(pond, "water_emissivity", WATER_EMISSIVITY))
    if not 0.5 <= eps <= 1.0:
        raise InputError(f"water emissivity must be in 0.5-1.0, got {eps}",
                         field="water_emissivity")


def _step_seconds(index):
    if len(index) < 2:
        return 3600.0
    steps = np.asarray((index[1:] - index[:-1]).total_seconds(), dtype=float)
    if steps[0] <= 0 or not np.allclose(steps, steps[0]):
        raise InputError("forcing time steps must be uniform and increasing", field="index")
    return float(steps[0])


def heat_exchange_inputs(forcing, pond, *, wind_height_m=10.0):
    """Per-step inputs of :func:`heat_flux_terms` that do not depend on the water.

    Parameters
    ----------
    forcing : pandas.DataFrame
        Forcing table (see :mod:`pondsim.glossary`).
    pond : object
        With ``depth_m`` and optionally ``ground_temperature_c``,
        ``ground_conductance_w_m2_k``, ``makeup_temperature_c``, ``heat_input_w_m2``,
        ``water_emissivity``, ``refractive_index``, ``area_m2`` [m2, one pond],
        ``surface_transfer`` (model name, default ``"ryan_harleman"``), its coefficients
        ``harbeck_prefactor``, ``harbeck_area_exponent``, ``ryan_harleman_wind_w_m2_hpa``,
        ``free_convection_w_m2_hpa_k13``, and ``sky_emissivity`` (None or absent →
        defaults).
    wind_height_m : float, default 10 [m]

    Returns
    -------
    pandas.DataFrame
        One column per keyword of :func:`heat_flux_terms`, indexed like *forcing*, so
        ``net_heat_flux(t, **row)`` works for any row.

    Notes
    -----
    Defaults: ground temperature = mean of ``temp_air`` over the forcing (the deep-soil
    temperature approaches the annual mean air temperature; common practice); makeup
    temperature = ground temperature (water drawn from a well or buried main); missing
    ``precipitation`` (or a missing value) → no rain in the balance (the output's
    ``rain`` column says "no data", NaN).
    """
    _check_inputs(forcing, pond)
    t_air = forcing["temp_air"].to_numpy(dtype=float)
    n = len(forcing)
    ea = forcing["relative_humidity"].to_numpy(dtype=float) / 100.0 \
        * saturation_vapour_pressure(t_air)
    u2 = wind_at_2m(forcing["wind_speed"].to_numpy(dtype=float), wind_height_m)
    eps = float(_pond_value(pond, "water_emissivity", WATER_EMISSIVITY))
    n_ref = float(_pond_value(pond, "refractive_index", WATER_REFRACTIVE_INDEX))
    t_ground = float(_pond_value(pond, "ground_temperature_c", float(np.mean(t_air))))
    t_makeup = float(_pond_value(pond, "makeup_temperature_c", t_ground))
    step_s = _step_seconds(forcing.index)
    if "precipitation" in forcing.columns:
        # A missing rain value counts as no rain.
        rain = forcing["precipitation"].fillna(0.0).to_numpy(dtype=float) / step_s
    else:
        rain = np.zeros(n)
    p_kpa = forcing["pressure"].to_numpy(dtype=float) / 1000.0
    forced, free = surface_transfer(
        str(_pond_value(pond, "surface_transfer", DEFAULT_TRANSFER)), u2,
        area_m2=float(_pond_value(pond, "area_m2", 1000.0)),
        harbeck_prefactor=float(_pond_value(pond, "harbeck_prefactor", HARBECK_PREFACTOR)),
        harbeck_exponent=float(_pond_value(pond, "harbeck_area_exponent",
                                           HARBECK_AREA_EXPONENT)),
        ryan_harleman_wind=float(_pond_value(pond, "ryan_harleman_wind_w_m2_hpa",
                                             RYAN_HARLEMAN_WIND)),
        free_convection_coefficient=float(_pond_value(
            pond, "free_convection_w_m2_hpa_k13", RYAN_HARLEMAN_FREE)))
    q_sw = transmitted_shortwave(forcing["ghi"].to_numpy(dtype=float),
                                 forcing["dhi"].to_numpy(dtype=float),
                                 forcing["solar_zenith"].to_numpy(dtype=float), n_ref)
    data = {
        "q_shortwave": q_sw,
        "q_longwave_in": eps * sky_longwave(
            forcing, str(_pond_value(pond, "sky_emissivity", "brutsaert"))).to_numpy(),
        "temp_air_c": t_air,
        "vapour_pressure_kpa": ea,
        "wind_function_w_m2_kpa": forced,
        "free_convection_w_m2_kpa_k13": np.full(n, free),
        "virtual_temperature_air_k": virtual_temperature_k(t_air, ea, p_kpa),
        "pressure_kpa": p_kpa,
        "psychrometric_kpa_c": psychrometric_constant(p_kpa),
        "ground_temperature_c": np.full(n, t_ground),
        "ground_conductance_w_m2_k": np.full(
            n, float(_pond_value(pond, "ground_conductance_w_m2_k", GROUND_CONDUCTANCE))),
        "makeup_temperature_c": np.full(n, t_makeup),
        "rain_kg_m2_s": rain,
        "heat_input_w_m2": np.full(n, float(_pond_value(pond, "heat_input_w_m2", 0.0))),
        "water_emissivity": np.full(n, eps),
    }
    return pd.DataFrame(data, index=forcing.index)


def water_temperature(forcing, pond, *, wind_height_m=10.0, upper_limit_c=None,
                      spinup_years=1):
    """Hourly pond water temperature, evaporation and heat budget.

    Parameters
    ----------
    forcing : pandas.DataFrame
        Uniform-step forcing (normally hourly) in local standard time, timestamps at the
        start of each step, values step means. Required columns ``ghi``, ``dhi``
        [W m-2], ``temp_air`` [°C], ``wind_speed`` [m s-1 at *wind_height_m*],
        ``relative_humidity`` [%], ``pressure`` [Pa], ``solar_zenith`` [deg, mid-step];
        ``ghi_clear`` [W m-2] unless ``ir_horizontal`` is complete; optional
        ``precipitation`` [mm per step] and ``ir_horizontal`` [W m-2].
    pond : object
        Attributes ``depth_m`` [m, 0.05-1.0] and optionally ``ground_temperature_c``
        [°C], ``ground_conductance_w_m2_k`` [W m-2 K-1, default 1.5],
        ``makeup_temperature_c`` [°C], ``heat_input_w_m2`` [W m-2, default 0],
        ``water_emissivity`` [-, default 0.97], ``refractive_index`` [-, 1.333].
    wind_height_m : float, default 10 [m]
        Height of the wind measurement.
    upper_limit_c : float, optional [°C]
        Temperature above which a step is flagged in ``above_limit`` (no cooling is
        applied).
    spinup_years : int, default 1
        Number of passes over the first year of the forcing (or all of it, if shorter)
        before the reported run; the first starts from the first air temperature, each
        next one from the end state of the previous one, so the start of the reported run
        hardly depends on the guess. 0 starts the reported run at the air temperature.

    Returns
    -------
    pandas.DataFrame
        Indexed like *forcing*:

        - ``water_temperature`` [°C]: mean over the step;
        - ``water_temperature_end`` [°C]: state at the end of the step;
        - ``surface_temperature`` [°C]: of the exchanging surface, the water's or, under
          ice, that of the ice surface;
        - ``evaporation`` [mm per step]: negative when vapour condenses on cold water;
        - ``rain`` [mm per step], NaN ("no data") where the forcing has no
          ``precipitation`` value; ``makeup`` [mm per step] = max(evaporation − rain,
          0), rain counted as 0 where unknown (the makeup is then an upper bound);
        - ``q_*`` [W m-2, gains positive, step means] — see :func:`heat_flux_terms`;
        - ``ice`` [J m-2]: latent heat store of ice at the end of the step, ≥ 0;
        - ``frozen`` [bool]: ice present during the step;
        - ``above_limit`` [bool]: step-mean temperature above *upper_limit_c*.

        ``attrs`` holds ``heat_capacity_j_m2_k``, ``step_s``, ``water_temperature_start_c``,
        ``ice_start_j_m2``, ``water_temperature_end_c`` and ``ice_end_j_m2`` so the
        energy ledger can be closed: Σ q Δt = C (T_end − T_start) − (ice_end − ice_start).

    Notes
    -----
    The pond is one mixed layer with heat capacity C = ρ c_p d. All transmitted shortwave
    is absorbed in the culture (dense cultures absorb nearly all PAR and near-infrared
    within centimetres; the pond floor's reflection is neglected).

    *Time stepping.* Within a step the forcing is constant. Linearising the net flux
    about the step-mean temperature, q(T) ≈ q(T̄) − a (T − T̄) with a = −dq/dT, the
    exact solution relaxes exponentially, and its mean over the step is T̄ when

    .. math:: T̄ − T_0 = q(T̄)\\,\\frac{1 − φ(z)}{a\\,φ(z)},\\quad
              φ(z) = \\frac{1 − e^{−z}}{z},\\quad z = a Δt / C,

    solved by Newton's method; then T_1 = T_0 + q(T̄) Δt / C, so the reported flux terms
    (evaluated at T̄) close the energy budget exactly. The scheme is exact for a linear
    flux, tends to the Crank-Nicolson rule for small z and to the quasi-steady
    temperature for large z, and does not oscillate. A step in which the temperature
    changes by more than 4 K (shallow ponds in the morning) is split into up to 8 equal
    sub-steps, since the flux (free convection's cube root, e_s(T)) is then far from
    linear over it; the step reports the sub-steps' means. Against a 1-minute RK4 reference on
    synthetic diurnal forcing, the step-mean temperature differs by less than 0.1 K at
    depths 0.05-1 m (tests/test_thermal.py).

    *Freezing.* Water does not cool below 0 °C: the deficit goes into the ice store
    (J m-2 of latent heat; thickness h = ice / (ρ_ice L_f)) and later surplus melts it
    before the water warms. While the surface loses heat over ice, the ice surface
    temperature T_s < 0 °C is the one at which conduction through the ice supplies the
    net surface loss (shortwave, longwave, latent, sensible), q_surface(T_s) =
    k_ice T_s / h (quasi-steady linear profile, the ice's own sensible heat neglected;
    Stefan's classical ice-growth model), so the ice thickens ever more slowly; while
    the surface gains heat it melts at 0 °C. Floor conduction, makeup, rain and heat
    input act on the 0 °C water under the ice. The surface fluxes over ice are those
    of a water surface at T_s (same reflectance, emissivity and vapour-pressure formula;
    snow is not modelled) and the store is not bounded by the pond's water content.
    The reported flux terms of a frozen step are these, so the ledger still closes.

    *Water.* Depth is constant: makeup water replaces evaporation net of rain, step by
    step; when rain exceeds evaporation the surplus overflows at the water temperature.
    Rain enters at the air temperature (the wet-bulb temperature would be closer).
    """
    inputs = heat_exchange_inputs(forcing, pond, wind_height_m=wind_height_m)
    if not (isinstance(spinup_years, int | np.integer) and 0 <= spinup_years <= 10):
        raise InputError(f"spinup_years must be an integer in 0-10, got {spinup_years!r}",
                         field="spinup_years")
    step_s = _step_seconds(forcing.index)
    heat_capacity = WATER_DENSITY * WATER_HEAT_CAPACITY * float(pond.depth_m)
    columns = {k: inputs[k].to_numpy(dtype=float) for k in inputs.columns}

    t0 = float(forcing["temp_air"].iloc[0])
    ice0 = 0.0
    steps_per_year = int(round(365 * 86400 / step_s))
    if spinup_years:
        first_year = {k: v[:steps_per_year] for k, v in columns.items()}
        for _ in range(spinup_years):
            t0, ice0 = integrate_heat_balance(first_year, t0, ice0, step_s, heat_capacity,
                                  record=False)
    run = integrate_heat_balance(columns, t0, ice0, step_s, heat_capacity)

    step_mm = step_s  # kg m-2 s-1 × s = kg m-2 = mm
    if "precipitation" in forcing.columns:  # NaN where the file does not know
        rain_mm = inputs["rain_kg_m2_s"].to_numpy() * step_mm
        rain_mm[np.isnan(forcing["precipitation"].to_numpy(dtype=float))] = np.nan
    else:
        rain_mm = np.full(len(forcing), np.nan)
    t_mean = np.asarray(run["water_temperature"])
    out = pd.DataFrame({
        "water_temperature": t_mean,
        "water_temperature_end": run["water_temperature_end"],
        "surface_temperature": run["surface"],
        "evaporation": np.asarray(run["evap"]) * step_mm,
        "rain": rain_mm,
        "makeup": np.asarray(run["makeup"]) * step_mm,
        "q_shortwave": inputs["q_shortwave"].to_numpy(),
        "q_longwave_in": inputs["q_longwave_in"].to_numpy(),
        "q_longwave_out": -np.asarray(run["lw"]),
        "q_evaporation": -np.asarray(run["lat"]),
        "q_convection": -np.asarray(run["conv"]),
        "q_ground": -np.asarray(run["grd"]),
        "q_makeup": np.asarray(run["mkq"]),
        "q_input": inputs["heat_input_w_m2"].to_numpy(),
        "ice": run["ice"],
        "frozen": np.asarray(run["frozen"], dtype=bool),
        "above_limit": (t_mean > float(upper_limit_c)) if upper_limit_c is not None
        else np.zeros(len(t_mean), dtype=bool),
    }, index=forcing.index)
    out.attrs.update({
        "heat_capacity_j_m2_k": heat_capacity,
        "step_s": step_s,
        "water_temperature_start_c": t0,
        "ice_start_j_m2": ice0,
        "water_temperature_end_c": run["t_end"],
        "ice_end_j_m2": run["ice_end"],
    })
    return out


def daily_thermal_summary(df, pond):
    """Daily water temperature, water use and alarms by local day.

    Parameters
    ----------
    df : pandas.DataFrame
        Output of :func:`water_temperature`.
    pond : object
        With ``area_m2`` (water surface of one pond [m2]) and ``count``.

    Returns
    -------
    pandas.DataFrame
        Indexed by local midnight, columns ``water_temperature_mean``,
        ``water_temperature_min``, ``water_temperature_max`` [°C, of step means],
        ``evaporation`` [mm d-1], ``rain`` [mm d-1, over the hours with a known value;
        NaN for a day without any], ``makeup_m3`` [m3 d-1 for the farm,
        area_m2 × count], ``freezing_hours`` [h], ``hours_above_limit`` [h].
        ``attrs`` holds totals over the record: ``evaporation_mm``, ``rain_mm``,
        ``makeup_m3``, ``freezing_hours``, ``hours_above_limit`` and ``days``.
    """
    farm_area = float(pond.area_m2) * int(pond.count)
    step_h = df.attrs.get("step_s", _step_seconds(df.index)) / 3600.0
    grouped = df.groupby(df.index.floor("D"))
    temp = grouped["water_temperature"]
    out = pd.DataFrame({
        "water_temperature_mean": temp.mean(),
        "water_temperature_min": temp.min(),
        "water_temperature_max": temp.max(),
        "evaporation": grouped["evaporation"].sum(),
        "rain": grouped["rain"].sum(min_count=1),
        "makeup_m3": grouped["makeup"].sum() / 1000.0 * farm_area,
        "freezing_hours": grouped["frozen"].sum().astype(float) * step_h,
        "hours_above_limit": grouped["above_limit"].sum().astype(float) * step_h,
    })
    out.attrs.update({
        "evaporation_mm": float(out["evaporation"].sum()),
        "rain_mm": float(out["rain"].sum(min_count=1)),
        "makeup_m3": float(out["makeup_m3"].sum()),
        "freezing_hours": float(out["freezing_hours"].sum()),
        "hours_above_limit": float(out["hours_above_limit"].sum()),
        "days": len(out),
    })
    return out
