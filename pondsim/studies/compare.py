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
from pondsim.pond.capacity import k_drop_index, trailing_mean
from pondsim.results.tables import washout_statistics


def at_risk(ds: xr.Dataset) -> xr.DataArray:
    """Days at risk: the crash hazard is at least twice the background hazard at its
    reference water temperature (warm water, starvation, heat or a cold shock have at
    least doubled the everyday risk). Dims (policy, member, day).
    """
    base = float(ds.attrs.get("crash_background_per_d", 0.0))
    return (ds["hazard"] >= 2.0 * max(base, 1e-9)) & (ds["status"] == 0)


def season_table(ds: xr.Dataset) -> pd.DataFrame:
    """One row per (policy, season): yield, harvests, density, crash and washout risk.

    Column names are the long-standing ones the report reads; for tools and people use
    :func:`comparison_table` (units and "per season" in every name) and
    :func:`comparison_view`. Yield columns are member means with the 10th and 90th
    percentiles over members: ``yield_t_ha`` [t ha-1 in the season],
    ``productivity_g_m2_d`` [g m-2 d-1 over the season's days]. ``harvests`` is the
    member mean and ``harvests_median`` the median number of harvests in the season;
    ``harvest_volume_m3`` is per pond and season. ``p_crash`` is the share of members
    with at least one crash in the season; ``days_at_risk`` see :func:`at_risk`;
    ``p_washout`` the share of members washed out in the season (held at the viable floor
    for more than ``washout_days`` days in a row); ``days_at_floor`` the mean number of
    days at the floor.
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
            n_harvests = (sub["harvest_fraction"].sel(policy=pol) > 0).sum("day").values
            rows.append({
                "policy": str(pol), "season": str(season), "days": n_days,
                "yield_t_ha": h.mean() * G_M2_TO_T_HA,
                "yield_pct10_t_ha": np.percentile(h, 10) * G_M2_TO_T_HA,
                "yield_pct90_t_ha": np.percentile(h, 90) * G_M2_TO_T_HA,
                "productivity_g_m2_d": h.mean() / n_days,
                "harvests": float(n_harvests.mean()),
                "harvests_median": int(np.round(np.median(n_harvests))),
                "harvest_volume_m3": float(sub["harvest_fraction"].sel(policy=pol)
                                           .sum("day").mean()) * volume_m3,
                "mean_density_g_m3": float(sub["density"].sel(policy=pol)
                                           .where(growing).mean()),
                "expected_crashes": c.mean(),
                "p_crash": (c > 0).mean(),
                "days_at_risk": float(risk.sel(day=sel, policy=pol).sum("day").mean()),
                "biomass_lost_g_m2": float(sub["crash_loss"].sel(policy=pol).sum("day")
                                           .mean()),
                **_floor_columns(sub, pol),
            })
    return pd.DataFrame(rows).set_index(["season", "policy"])


def _floor_columns(sub: xr.Dataset, pol) -> dict:
    """Washout share [0-1] and mean days at the floor [d] of one policy in one season's
    days."""
    share, days = washout_statistics(sub, pol)
    return {"p_washout": share, "days_at_floor": days}


#: :func:`season_table` column -> (CSV column of :func:`comparison_table`, terminal
#: header with its unit, statistic). "/season": a total over the season's days.
COMPARISON_COLUMNS = {
    "days": ("days_in_season", "days", "count"),
    "yield_t_ha": ("yield_mean_t_ha_season", "yield t/ha/season", "mean"),
    "yield_pct10_t_ha": ("yield_pct10_t_ha_season", "yield t/ha/season", "pct10"),
    "yield_pct90_t_ha": ("yield_pct90_t_ha_season", "yield t/ha/season", "pct90"),
    "productivity_g_m2_d": ("productivity_mean_g_m2_d", "g/m2/d", "mean"),
    "harvests_median": ("harvests_median_per_season", "harvests/season", "median"),
    "harvest_volume_m3": ("harvest_volume_mean_m3_per_pond_season", "m3/pond/season",
                          "mean"),
    "mean_density_g_m3": ("density_mean_g_m3", "g/m3 growing", "mean"),
    "expected_crashes": ("crashes_mean_per_season", "crashes/season", "mean"),
    "p_crash": ("members_crashed_pct_season", "crashed", "% members"),
    "days_at_risk": ("days_at_risk_mean_per_season", "risk d/season", "mean"),
    "biomass_lost_g_m2": ("crash_loss_mean_g_m2_season", "lost g/m2/season", "mean"),
    "p_washout": ("members_washed_out_pct_season", "washed out", "% members"),
    "days_at_floor": ("days_at_floor_mean_per_season", "floor d/season", "mean"),
}

#: What each terminal header means (printed under the table).
HEADER_NOTE = (
    "yield t/ha/season: harvested biomass in the season; g/m2/d: the same per day of "
    "the season; harvests/season: harvest days; m3/pond/season: culture volume sent to "
    "dewatering per pond; g/m3 growing: density while the pond is growing; crashed: "
    "members with >= 1 crash in the season; risk d/season: days at risk (stress hazard "
    "at least the base hazard); lost g/m2/season: biomass lost to crashes; washed out: "
    "members held at the viable floor on more days in a row than allowed; floor "
    "d/season: days at the floor")

#: What the interval beside each mean means (printed under the tables).
BAND_NOTE = ("mean = member mean; pct10-pct90 = 10th to 90th percentile over members, the "
             "band holding the middle 80 % of members (weather years x parameter draws x "
             "crash draws); not a confidence interval of the mean")


def comparison_table(table: pd.DataFrame) -> pd.DataFrame:
    """The comparison for tools (``comparison.csv``): every column named with its unit
    and, for totals, "per season"; counts as integers; shares in per cent."""
    cols = [c for c in COMPARISON_COLUMNS if c in table]
    out = table[cols].copy()
    for c in ("p_crash", "p_washout"):
        if c in out:
            out[c] = 100.0 * out[c]
    out["days"] = out["days"].astype(int)
    out["harvests_median"] = out["harvests_median"].astype(int)
    return out.rename(columns={c: COMPARISON_COLUMNS[c][0] for c in cols})


def comparison_view(table: pd.DataFrame) -> pd.DataFrame:
    """The comparison for the terminal: two header rows (quantity with its unit; the
    statistic), numbers formatted as text (integers as integers)."""
    cols = [c for c in COMPARISON_COLUMNS if c in table and c != "days"]
    view = pd.DataFrame(index=table.index)
    for c in cols:
        _, label, stat = COMPARISON_COLUMNS[c]
        v = table[c]
        if c in ("p_crash", "p_washout"):
            text = (100 * v).round().astype("Int64").astype(str)
        elif c == "harvests_median":
            text = v.astype(int).astype(str)
        elif c in ("harvest_volume_m3", "mean_density_g_m3", "biomass_lost_g_m2"):
            text = v.map("{:,.0f}".format)
        else:
            text = v.map("{:,.2f}".format)
        view[(label, stat)] = text
    view.columns = pd.MultiIndex.from_tuples(view.columns)
    return view


def best_by_season(table: pd.DataFrame, max_probability: float) -> pd.DataFrame:
    """The highest-yield policy of each season's slice whose crash probability is within
    limit and whose culture never washes out.

    A slice of whole-year runs: the stock each policy hands to the next season is not
    valued here; :func:`pondsim.studies.seasons.coordinate_search` judges season choices
    on whole years. Where no policy meets the limits, the least risky one is named and
    flagged.
    """
    rows = []
    for season, group in table.groupby(level="season", sort=False):
        clean = group["p_washout"].fillna(0) == 0 if "p_washout" in group else True
        ok = group[(group["p_crash"] <= max_probability) & clean]
        if len(ok):
            pick = ok["yield_t_ha"].idxmax()
            within = True
        else:
            pool = group[clean] if np.any(clean) else group
            pick = pool["p_crash"].idxmin()
            within = False
        r = group.loc[pick]
        rows.append({"season": season, "best_policy": pick[1], "yield_t_ha": r["yield_t_ha"],
                     "productivity_g_m2_d": r["productivity_g_m2_d"],
                     "p_crash": r["p_crash"], "within_risk_limit": within})
    return pd.DataFrame(rows).set_index("season")


def risk_calendar(ds: xr.Dataset, crash: CrashModel, n_days: int = 12) -> pd.DataFrame:
    """The days on which the smoothed K falls fastest, and where each policy stands then.

    A description of the weather, not the hazard (starvation is measured by the
    culture's own net loss, :mod:`pondsim.operations.crash`). Columns: date, season, K̄
    [g m-3] (trailing mean over ``crash.window_days``), fall of K̄ over the window [%],
    and per policy the median ratio X/K̄ over members on that day.
    """
    k = ds["carrying_capacity"]
    if "member" in k.dims:
        k = k.median("member")
    k_smooth = trailing_mean(k.values, crash.window_days)
    drop = k_drop_index(k_smooth, crash.window_days)
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
