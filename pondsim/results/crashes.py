"""Crash tables of a results Dataset: crashes by cause and month, and the line that states
what weather and which hazard values every crash figure stands on."""

from __future__ import annotations

import numpy as np
import pandas as pd
import xarray as xr

from pondsim.operations.crash import CAUSES


def weather_basis(ds: xr.Dataset) -> str:
    """The weather a run stands on, in plain words (Dataset attribute)."""
    return str(ds.attrs.get("weather_basis", "weather not stated"))


def crash_basis_line(ds: xr.Dataset) -> str:
    """One line to print beside crash figures: weather basis, members, hazard basis."""
    n = ds.sizes.get("member", 1)
    if not int(ds.attrs.get("crash_enabled", 1)):
        return f"crashes switched off (weather: {weather_basis(ds)})"
    return (f"crash figures stand on {weather_basis(ds)}, {n} member(s) per policy; "
            f"hazard values: {ds.attrs.get('crash_basis', 'not stated')}")


def crashes_by_cause(ds: xr.Dataset) -> pd.DataFrame:
    """Expected crashes per pond by policy, month and cause (member means).

    Rows ``(policy, month)`` with month 1-12; columns ``<cause>_crashes_per_pond`` for
    each cause of :data:`pondsim.operations.crash.CAUSES` and ``all_crashes_per_pond``
    [crashes per pond in that month of the simulated year, member mean], ``members`` and
    ``weather_basis`` (what the numbers stand on).
    """
    cause = ds["crash_cause"] if "crash_cause" in ds else ds["crashed"]
    if "member" not in cause.dims:
        cause = cause.expand_dims(member=[0])
    # one read of the (small, int8) cause codes; then counts per policy, cause and month
    codes = np.asarray(cause.transpose("policy", "member", "day").values)
    month = np.asarray(ds["date"].dt.month.values)
    rows = []
    for j, pol in enumerate(ds["policy"].values):
        c = codes[j]
        counts = {name: np.array([(c[:, month == m] == i + 1).sum(axis=1).mean()
                                  if (month == m).any() else 0.0 for m in range(1, 13)])
                  for i, name in enumerate(CAUSES)}
        for m in range(1, 13):
            row = {"policy": str(pol), "month": m}
            total = 0.0
            for name, v in counts.items():
                value = float(v[m - 1])
                row[f"{name}_crashes_per_pond"] = value
                total += value
            row["all_crashes_per_pond"] = total
            rows.append(row)
    table = pd.DataFrame(rows).set_index(["policy", "month"])
    table["members"] = int(ds.sizes.get("member", 1))
    table["weather_basis"] = weather_basis(ds)
    return table


def crashes_per_year_by_cause(ds: xr.Dataset) -> pd.DataFrame:
    """Per policy: expected crashes per pond over the simulated year by cause
    [crashes per pond per year, member mean], and the salvage [g m-2 per year]."""
    table = crashes_by_cause(ds)
    cols = [f"{c}_crashes_per_pond" for c in CAUSES] + ["all_crashes_per_pond"]
    out = table[cols].groupby(level="policy", sort=False).sum()
    out.columns = [c.replace("_per_pond", "_per_pond_yr") for c in cols]
    scale = 365.0 / ds.sizes["day"]
    out = out * scale
    if "salvaged" in ds:
        out["salvaged_g_m2_yr"] = (ds["salvaged"].sum("day").mean("member").to_series()
                                   .reindex(out.index).to_numpy() * scale)
    return out


def print_crash_causes(ds: xr.Dataset, file=None) -> None:
    """Print crashes per pond-year by cause for each policy, with their basis line."""
    per_year = crashes_per_year_by_cause(ds)
    print("\ncrashes per pond per year by cause (member mean):", file=file)
    view = per_year[[f"{c}_crashes_per_pond_yr" for c in CAUSES]
                    + ["all_crashes_per_pond_yr"]].copy()
    view.columns = list(CAUSES) + ["all"]
    print(view.to_string(float_format=lambda v: f"{v:,.2f}"), file=file)
    print(crash_basis_line(ds), file=file)


__all__ = ["crash_basis_line", "crashes_by_cause", "crashes_per_year_by_cause",
           "print_crash_causes", "weather_basis"]
