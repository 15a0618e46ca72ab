"""Annual outlook for a business case: yield distribution over weather years and parameter
draws (P50/P75/P90), monthly bands, Sobol sensitivity and the inputs bill.

P-values follow the finance convention of exceedance: P90 is the annual yield exceeded in
90 % of years (the 10th percentile), P50 the median.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import xarray as xr

from pondsim.errors import InputError
from pondsim.glossary import G_M2_TO_T_HA
from pondsim.operations.simulate import load_forcing, simulate
from pondsim.studies.uncertainty import distributions, sample_draws, sobol

EXCEEDANCE = {"P50": 0.50, "P75": 0.25, "P90": 0.10}  # name -> quantile


def weather_years(scenario, n_years: int, seed: int):
    """Forcing tables for the outlook: the file's own complete years when it holds
    several real years, else ``n_years`` synthetic years resampled from the typical year
    (:func:`pondsim.forcing.years.generate_years`). Returns ``(tables, meta)``."""
    from pondsim.forcing.years import generate_years

    table, meta = load_forcing(scenario)
    real = _real_years(scenario)
    if real is not None:
        meta = dict(meta)
        meta.setdefault("notes", []).append(f"{len(real)} real weather years used as they are")
        return real, meta
    return generate_years(table, n_years, seed=seed), meta


def _real_years(scenario):
    """The complete real years of a multi-year weather file, re-dated onto the study
    year's calendar (Feb 29 dropped or copied from Feb 28), or None."""
    if scenario.weather.source != "file":
        return None
    from pondsim.forcing.weather import read_weather
    from pondsim.forcing.years import split_years

    site = scenario.site
    table, meta = read_weather(scenario.weather.path, fmt=scenario.weather.format,
                               latitude=site.latitude, longitude=site.longitude,
                               elevation_m=site.elevation_m, utc_offset_h=site.utc_offset_h,
                               max_gap_h=scenario.weather.max_gap_h)
    if meta.get("typical_year") or len(set(table.index.year)) < 2:
        return None
    years = split_years(table)
    target, _ = load_forcing(scenario)
    out = []
    for y in years:
        feb29 = (y.index.month == 2) & (y.index.day == 29)
        y = y[~feb29]
        if len(target) == len(y) + 24:  # leap study year: copy Feb 28 as Feb 29
            feb28 = np.flatnonzero((y.index.month == 2) & (y.index.day == 28))
            y = pd.concat([y.iloc[: feb28[-1] + 1], y.iloc[feb28], y.iloc[feb28[-1] + 1:]])
        y = y.copy()
        y.index = target.index
        out.append(y)
    return out


def annual_table(ds: xr.Dataset, farm_area_m2: float) -> pd.DataFrame:
    """Per policy: mean and P50/P75/P90 annual yield [t ha-1 yr-1], the farm's annual
    biomass [t], mean productivity [g m-2 d-1] and expected crashes per year."""
    annual = ds["harvested"].sum("day") * G_M2_TO_T_HA * 365.0 / ds.sizes["day"]
    rows = []
    for pol in ds["policy"].values:
        a = annual.sel(policy=pol).values
        row = {"policy": str(pol), "mean_t_ha_yr": a.mean()}
        for name, q in EXCEEDANCE.items():
            row[f"{name}_t_ha_yr"] = float(np.quantile(a, q))
        for name in EXCEEDANCE:
            row[f"{name}_farm_t_yr"] = row[f"{name}_t_ha_yr"] * farm_area_m2 / 1e4
        row["mean_g_m2_d"] = a.mean() / G_M2_TO_T_HA / 365.0
        row["expected_crashes_yr"] = float(ds["crashed"].sel(policy=pol).sum("day").mean())
        row["members"] = a.size
        rows.append(row)
    return pd.DataFrame(rows).set_index("policy")


def monthly_bands(ds: xr.Dataset) -> pd.DataFrame:
    """Per policy and month: P10, P50, P90 and mean harvested productivity over members
    [g m-2 d-1]."""
    month = ds["date"].dt.month
    monthly = ds["harvested"].groupby(month).mean("day")  # (policy, member, month)
    rows = []
    for pol in ds["policy"].values:
        for m in monthly["month"].values:
            v = monthly.sel(policy=pol, month=m).values
            rows.append({"policy": str(pol), "month": int(m),
                         "p10_g_m2_d": np.quantile(v, 0.1), "p50_g_m2_d": np.median(v),
                         "p90_g_m2_d": np.quantile(v, 0.9), "mean_g_m2_d": v.mean()})
    return pd.DataFrame(rows).set_index(["policy", "month"])


def sensitivity(scenario, policy: str, *, n: int, seed: int, forcing=None) -> pd.DataFrame:
    """Sobol indices of the annual yield of *policy* to the uncertain parameters, on the
    scenario's own weather year, without crashes (so that the indices speak of growth,
    not of random draws)."""
    import dataclasses

    dists = distributions(scenario)
    if not dists:
        raise InputError("no uncertain parameters: give some strain parameters a "
                         "distribution in [uncertainty]", path=scenario.path,
                         field="uncertainty")
    names = list(dists)
    chosen = [p for p in scenario.policies if p.name == policy]
    plans = [p for p in scenario.plans if p.name == policy]
    quiet = scenario.replace(crash=dataclasses.replace(scenario.crash, enabled=False),
                             policies=scenario.policies if plans else tuple(chosen),
                             plans=tuple(plans))
    forcing = load_forcing(scenario) if forcing is None else forcing

    def model(x):
        draws = {name: x[i] for i, name in enumerate(names)}
        ds = simulate(quiet, members=1, seed=seed, forcing=forcing, draws=draws,
                      progress=False)
        return (ds["harvested"].sel(policy=policy).sum("day").values
                * G_M2_TO_T_HA * 365.0 / ds.sizes["day"])

    return sobol(model, dists, n, seed)


def run_outlook(scenario, *, n_years: int, n_draws: int | None = None, members: int = 1,
                seed: int | None = None, progress: bool | None = None):
    """The outlook ensemble: weather years × parameter draws × crash replicates.

    Returns ``(ds, meta)``.
    """
    seed = scenario.run.seed if seed is None else seed
    years, meta = weather_years(scenario, n_years, seed)
    draws = sample_draws(scenario, n_draws or scenario.uncertainty.draws, seed)
    ds = simulate(scenario, members=members, seed=seed, forcing=(years[0], meta),
                  weather_years=years, draws=draws or None, progress=progress,
                  weather_basis=years_basis(scenario, meta, len(years)))
    return ds, meta


def years_basis(scenario, meta: dict, n_years: int) -> str:
    """Plain words for the weather years of :func:`weather_years`: the file's real years,
    or synthetic years resampled from the scenario's weather year."""
    w = scenario.weather
    name = w.path.name if w.source == "file" and w.path is not None else \
        "clear-sky weather from monthly normals"
    if any("real weather years" in str(n) for n in meta.get("notes", [])):
        return f"{n_years} real weather years of {name}"
    return (f"{n_years} synthetic weather years resampled from the scenario's weather "
            f"year ({name})")
