"""Policy comparison by season: yields with their spread over members, harvests, crash
risk, and the best policy per season under the scenario's risk limit.

All functions read a results Dataset (see :mod:`pondsim.results.files`); none simulates.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import xarray as xr

from pondsim.glossary import G_M2_TO_T_HA
from pondsim.operations.crash import CrashModel


def at_risk(ds: xr.Dataset) -> xr.DataArray:
    """Days at risk: the weather-driven stress hazard is at least the base hazard.

    That is, the culture stands above the overshoot onset while the smoothed K falls
    enough to double (or more) the everyday crash hazard. Dims (policy, member, day).
    """
    base = float(ds.attrs.get("crash_base_hazard_per_d", 0.0))
    stress = ds["hazard"] - base
    return (stress > max(base, 1e-9)) & (ds["status"] == 0)


def season_table(ds: xr.Dataset) -> pd.DataFrame:
    """One row per (policy, season): yield, harvests, density and crash risk.

    Yield columns are member means with the 10th and 90th percentiles over members
    (``yield_pct10_t_ha``, ``yield_pct90_t_ha``: percentiles, not exceedance values):
    ``yield_t_ha`` [t ha-1 in the season], ``productivity_g_m2_d`` [g m-2 d-1 over the
    season's days]. ``harvest_volume_m3`` is per pond. ``p_crash`` is the share of
    members with at least one crash in the season; ``days_at_risk`` see :func:`at_risk`.
    """
    volume_m3 = ds.attrs["pond_area_m2"] * ds.attrs["depth_m"]
    rows = []
    seasons = pd.unique(ds["season"].values)
    risk = at_risk(ds)
    for season in seasons:
        sel = ds["season"] == season
        n_days = int(sel.sum())
        sub = ds.sel(day=sel)
        harvested = sub["harvested"].sum("day")  # g m-2 per (policy, member)
        crashes = sub["crashed"].sum("day")
        for pol in ds["policy"].values:
            h = harvested.sel(policy=pol).values
            c = crashes.sel(policy=pol).values
            growing = sub["status"].sel(policy=pol) == 0
            rows.append({
                "policy": str(pol), "season": str(season), "days": n_days,
                "yield_t_ha": h.mean() * G_M2_TO_T_HA,
                "yield_pct10_t_ha": np.percentile(h, 10) * G_M2_TO_T_HA,
                "yield_pct90_t_ha": np.percentile(h, 90) * G_M2_TO_T_HA,
                "productivity_g_m2_d": h.mean() / n_days,
                "harvests": float((sub["harvest_fraction"].sel(policy=pol) > 0)
                                  .sum("day").mean()),
                "harvest_volume_m3": float(sub["harvest_fraction"].sel(policy=pol)
                                           .sum("day").mean()) * volume_m3,
                "mean_density_g_m3": float(sub["density"].sel(policy=pol)
                                           .where(growing).mean()),
                "expected_crashes": c.mean(),
                "p_crash": (c > 0).mean(),
                "days_at_risk": float(risk.sel(day=sel, policy=pol).sum("day").mean()),
                "biomass_lost_g_m2": float(sub["crash_loss"].sel(policy=pol).sum("day")
                                           .mean()),
            })
    return pd.DataFrame(rows).set_index(["season", "policy"])


def best_by_season(table: pd.DataFrame, max_probability: float) -> pd.DataFrame:
    """The highest-yield policy of each season whose crash probability is within limit.

    Where no policy meets the limit, the least risky one is named and flagged.
    """
    rows = []
    for season, group in table.groupby(level="season", sort=False):
        ok = group[group["p_crash"] <= max_probability]
        if len(ok):
            pick = ok["yield_t_ha"].idxmax()
            within = True
        else:
            pick = group["p_crash"].idxmin()
            within = False
        r = group.loc[pick]
        rows.append({"season": season, "best_policy": pick[1], "yield_t_ha": r["yield_t_ha"],
                     "productivity_g_m2_d": r["productivity_g_m2_d"],
                     "p_crash": r["p_crash"], "within_risk_limit": within})
    return pd.DataFrame(rows).set_index("season")


def risk_calendar(ds: xr.Dataset, crash: CrashModel, n_days: int = 12) -> pd.DataFrame:
    """The days on which the smoothed K falls fastest, and where each policy stands then.

    Columns: date, season, K̄ [g m-3], K-drop over the window [%], and per policy the
    median overshoot ratio X/K̄ over members on that day (deterministic given the
    weather; crashes aside).
    """
    k_smooth = crash.smoothed(ds["carrying_capacity"].values)
    drop = crash.drop_index(k_smooth)
    order = np.argsort(-drop)[:n_days]
    order = order[drop[order] > 0]
    rows = []
    for d in sorted(order):
        row = {"date": pd.Timestamp(ds["date"].values[d]).date(),
               "season": str(ds["season"].values[d]),
               "K_smoothed_g_m3": k_smooth[d],
               "K_drop_pct": 100 * (1 - np.exp(-drop[d]))}
        for pol in ds["policy"].values:
            dens = ds["density"].sel(policy=pol).isel(day=d).median("member")
            row[f"X/K {pol}"] = float(dens) / max(k_smooth[d], 1.0)
        rows.append(row)
    return pd.DataFrame(rows)
