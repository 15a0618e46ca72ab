"""Summary tables of a results Dataset and of the forcing (``pondsim run`` and
``pondsim weather``)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import xarray as xr

from pondsim.glossary import G_M2_TO_T_HA

#: Energy content of algal biomass [kJ g-1]; Weyer et al. (2010) BioEnergy Res. 3:204-213
#: use 21.9 kJ g-1 (via REFERENCES.md, secondary); 20-25 kJ g-1 is the usual range.
BIOMASS_ENERGY_KJ_G = 21.9

#: Highest published solar-to-biomass conversion efficiency of photosynthesis, total solar
#: radiation basis: 4.6 % for C3 plants (Zhu, Long & Ort 2008, Curr. Opin. Biotechnol.
#: 19:153-159). Microalgae use the C3 pathway; a result above it is not credible.
MAX_SOLAR_EFFICIENCY = 0.046


def policy_summary(ds: xr.Dataset) -> pd.DataFrame:
    """One row per policy: annual and monthly yield, harvests, density and efficiency.

    Member means. ``washed_out_pct``: share of members whose culture was held at its
    viable floor on more than ``washout_days`` days in a row at least once [%];
    ``days_at_floor``: mean days at the floor in the year. Photosynthetic efficiency is
    the energy of the harvested biomass (:data:`BIOMASS_ENERGY_KJ_G`) over the incident
    PAR (converted with the photon conversion used by the light stage) and over total
    solar (GHI).
    """
    n_days = ds.sizes["day"]
    harvested = ds["harvested"]  # g m-2 d-1
    annual_g_m2 = harvested.sum("day").mean("member")
    month = ds["date"].dt.month
    monthly = harvested.groupby(month).sum().mean("member")  # g m-2 per month
    n_harvests = (ds["harvest_fraction"] > 0).sum("day").mean("member")
    mean_density = ds["density"].where(ds["status"] == 0).mean(("member", "day"))
    energy_kj_m2 = annual_g_m2 * BIOMASS_ENERGY_KJ_G
    # Per weather year when there are several: the mean annual incident energy.
    solar_kj_m2 = float(ds["ghi_daily"].sum("day").mean()) * 1e3
    par_j = float(ds["par_daily"].sum("day").mean()) \
        / ds.attrs.get("photons_per_joule_umol", 4.57) * 1e6
    rows = []
    for p in ds["policy"].values:
        e = float(energy_kj_m2.sel(policy=p))
        eff_solar = e / solar_kj_m2 if solar_kj_m2 > 0 else np.nan
        row = {
            "policy": str(p),
            "yield_t_ha_yr": float(annual_g_m2.sel(policy=p)) * G_M2_TO_T_HA * 365 / n_days,
            "productivity_g_m2_d": float(annual_g_m2.sel(policy=p)) / n_days,
            "harvests": float(n_harvests.sel(policy=p)),
            "mean_density_g_m3": float(mean_density.sel(policy=p)),
            "crashes": float(ds["crashed"].sel(policy=p).sum("day").mean()),
            "efficiency_par_pct": 100 * e * 1e3 / par_j if par_j > 0 else np.nan,
            "efficiency_solar_pct": 100 * eff_solar,
            "plausible": bool(not eff_solar > MAX_SOLAR_EFFICIENCY),
            **_washout_columns(ds, p),
        }
        for m in monthly["month"].values:
            row[f"m{int(m):02d}_g_m2"] = float(monthly.sel(policy=p, month=m))
        rows.append(row)
    return pd.DataFrame(rows).set_index("policy")


def washout_statistics(ds: xr.Dataset, policy) -> tuple[float, float]:
    """Share of members washed out at least once in *ds*'s days [0-1] and mean days at
    the viable floor [d] of one policy (NaN, NaN for results written before the floor
    existed)."""
    if "washed_out" not in ds:
        return np.nan, np.nan
    washed = ds["washed_out"].sel(policy=policy).max("day") > 0
    return (float(washed.mean()),
            float(ds["at_floor"].sel(policy=policy).sum("day").mean()))


def _washout_columns(ds: xr.Dataset, policy) -> dict:
    """Share of members washed out at least once in the year [%] and mean days at the
    viable floor [d per year]."""
    share, days = washout_statistics(ds, policy)
    return {"washed_out_pct": 100.0 * share, "days_at_floor": days}


def lead_policy(annual: pd.DataFrame, ds: xr.Dataset, column: str = "P50_t_ha_yr") -> str:
    """The policy or plan a business case leads with: the highest *column* (P50 annual
    yield) among those whose culture washes out in no member (held at the viable floor,
    see :func:`policy_summary`), the rule ``compare`` applies per season; when every one
    washes out, the highest *column* of all (the washout is flagged where it is shown)."""
    washed = pd.Series({p: washout_statistics(ds, p)[0] for p in annual.index})
    clean = annual[~(washed.reindex(annual.index) > 0)]
    return str((clean if len(clean) else annual)[column].idxmax())


def monthly_forcing_table(forcing: pd.DataFrame, par, water: pd.DataFrame,
                          pond, stress: pd.DataFrame | None = None) -> pd.DataFrame:
    """Monthly weather, light and pond water table (the ``pondsim weather`` output).

    Columns: mean daily GHI [kWh m-2 d-1], mean daily PAR entering the culture
    [mol m-2 d-1], air temperature mean, mean daily max, mean daily min [degC], wind
    [m s-1], relative humidity [%], water temperature mean [degC], evaporation
    [mm d-1], rain [mm per month; NaN = no data in the weather file], makeup water for
    the farm [m3 per month: the thermal stage's hourly max(evaporation - rain, 0),
    unknown rain counted as none], and with *stress* (from
    :func:`pondsim.pond.stress.monthly_stress_hours`) the hours with the water above the
    strain's optimum and maximum and below its minimum [h per month].
    """
    idx = forcing.index
    day = pd.Index(idx.date, name="date")
    daily = pd.DataFrame({
        "ghi": forcing["ghi"].to_numpy() / 1000.0,  # Wh -> kWh per hour
        "par": np.asarray(par, dtype=float) * 3600e-6,  # umol m-2 s-1 over 1 h -> mol m-2
        "evap": water["evaporation"].to_numpy(),
        "makeup": water["makeup"].to_numpy(),
    }, index=day).groupby(level=0).sum()
    rain_h = water["rain"].to_numpy() if "rain" in water else np.full(len(idx), np.nan)
    daily["rain"] = pd.Series(rain_h, index=day).groupby(level=0).sum(min_count=1)
    temps = pd.DataFrame({"t": forcing["temp_air"].to_numpy()}, index=day).groupby(level=0)
    daily["tmax"] = temps["t"].max()
    daily["tmin"] = temps["t"].min()
    month = pd.DatetimeIndex(daily.index).month
    by_m = daily.groupby(month)
    hour_m = idx.month
    # hour by hour (rain beyond an hour's evaporation overflows), as the thermal stage
    makeup_mm = daily["makeup"]
    table = pd.DataFrame({
        "GHI kWh/m2/d": by_m["ghi"].mean(),
        "PAR mol/m2/d": by_m["par"].mean(),
        "Tair mean C": forcing["temp_air"].groupby(hour_m).mean(),
        "Tair max C": by_m["tmax"].mean(),
        "Tair min C": by_m["tmin"].mean(),
        "wind m/s": forcing["wind_speed"].groupby(hour_m).mean(),
        "RH %": forcing["relative_humidity"].groupby(hour_m).mean(),
        "Twater mean C": water["water_temperature"].groupby(hour_m).mean(),
        "evap mm/d": by_m["evap"].mean(),
        "rain mm": by_m["rain"].sum(min_count=1),
        "makeup m3": makeup_mm.groupby(month).sum() * 1e-3 * pond.farm_area_m2,
    })
    year = [
        daily["ghi"].mean(), daily["par"].mean(), forcing["temp_air"].mean(),
        daily["tmax"].mean(), daily["tmin"].mean(), forcing["wind_speed"].mean(),
        forcing["relative_humidity"].mean(), water["water_temperature"].mean(),
        daily["evap"].mean(), daily["rain"].sum(min_count=1),
        makeup_mm.sum() * 1e-3 * pond.farm_area_m2]
    if stress is not None:
        for col, label in STRESS_LABELS.items():
            table[label] = stress[col].reindex(table.index, fill_value=0)
            year.append(stress[col].sum())
    table.index = pd.Index([pd.Timestamp(2000, m, 1).strftime("%b") for m in table.index],
                           name="month")
    table.loc["year"] = year
    return table


#: Column labels of the stress hours in the monthly tables.
STRESS_LABELS = {"hours_above_t_opt": "h > Topt", "hours_above_t_max": "h > Tmax",
                 "hours_below_t_min": "h < Tmin"}


def monthly_pond_water(ds) -> pd.DataFrame:
    """Monthly pond water of a run: temperature, evaporation, rain and stress hours.

    Parameters
    ----------
    ds : xarray.Dataset
        Result of :func:`pondsim.operations.simulate.simulate`; member-dependent daily
        variables are averaged over members first.

    Returns
    -------
    pandas.DataFrame
        Index month 1-12, columns ``water_temperature_mean_c`` [degC],
        ``evaporation_mm`` [mm per month], ``rain_mm`` [mm per month, empty = no data],
        ``hours_above_t_opt``, ``hours_above_t_max``, ``hours_below_t_min`` [h per
        month, for the strain's nominal cardinal temperatures]; a last row ``year``.
    """
    month = pd.DatetimeIndex(ds["date"].values).month

    def daily(name):
        v = ds[name]
        if "member" in v.dims:
            v = v.mean("member")
        return pd.Series(np.asarray(v.values, dtype=float), index=month)

    table = pd.DataFrame({
        "water_temperature_mean_c": daily("water_temperature").groupby(level=0).mean(),
        "evaporation_mm": daily("evaporation").groupby(level=0).sum(),
        "rain_mm": daily("rain").groupby(level=0).sum(min_count=1),
        **{k: daily(k).groupby(level=0).sum() for k in STRESS_LABELS if k in ds},
    })
    table.index.name = "month"
    year = table.sum(min_count=1)
    year["water_temperature_mean_c"] = float(daily("water_temperature").mean())
    table.loc["year"] = year
    return table
