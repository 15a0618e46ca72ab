"""Screening outputs: the combined Dataset with a ``site`` dimension, the ranking table,
the files of a screening run and its figure."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from pondsim.glossary import CAUTION
from pondsim.results.files import save, write_csv
from pondsim.scenario import Scenario


@dataclass
class ScreenReport:
    """What :func:`screen` did: the combined Dataset, the tables, the files."""

    dataset: xr.Dataset | None
    ranking: pd.DataFrame
    failures: pd.DataFrame
    computed: list[str] = field(default_factory=list)
    skipped: list[str] = field(default_factory=list)
    written: list[Path] = field(default_factory=list)
    seconds: float = 0.0
    task_seconds: dict = field(default_factory=dict)



def combine(parts: Sequence[xr.Dataset], scenario: Scenario) -> xr.Dataset:
    """Concatenate per-site Datasets (in site order) along ``site``."""
    seeds = {}
    for name in ("weather_seed", "crash_seed"):
        seeds[name] = [int(p.attrs.get(name, -1)) for p in parts]
    ds = xr.concat(list(parts), dim="site", combine_attrs="drop_conflicts",
                   data_vars="minimal", coords="minimal", compat="override")
    for name, values in seeds.items():
        ds[name] = (("site",), np.asarray(values, dtype=np.int64),
                    {"long_name": f"per-site {name.replace('_', ' ')}", "units": "1"})
    first = parts[0].attrs
    ds.attrs = {
        "title": f"pondsim site screening: {scenario.study_name}",
        "strain": scenario.strain.name,
        "growth_form": scenario.strain.growth_form,
        "depth_m": scenario.pond.depth_m,
        "year": scenario.year,
        "weather_years": first.get("weather_years"),
        "replicates": first.get("replicates"),
        "full": first.get("full", 0),
        "p90_definition": "annual yield exceeded in 90 % of member years (10th percentile)",
        "best_plan_rule": "highest P50 annual yield",
        "caution": CAUTION,
        "Conventions": "CF-1.10",
        "source": f"pondsim {_version()}",
    }
    return ds


def _version() -> str:
    from pondsim import __version__

    return __version__


RANKING_COLUMNS = ["rank", "site", "latitude", "longitude", "best_plan",
                   "yield_p50_t_ha_yr", "yield_p90_t_ha_yr", "crash_risk_per_yr",
                   "evaporation_m3_per_t", "insolation_kwh_m2_yr", "status", "error",
                   "site_check"]


def ranking_table(ds: xr.Dataset | None, names: Sequence[str],
                  errors: dict[str, str] | None = None) -> pd.DataFrame:
    """Sites ranked by the P50 annual yield of their best plan; failed sites last.

    Columns: rank, site, latitude, longitude, best_plan, ``yield_p50_t_ha_yr``,
    ``yield_p90_t_ha_yr`` (exceedance P90), ``crash_risk_per_yr`` (expected crashes per
    year of the best plan), ``evaporation_m3_per_t`` (of the best plan),
    ``insolation_kwh_m2_yr``, status (``ok`` or ``failed``), error and ``site_check``
    (:mod:`pondsim.forcing.sitecheck`: ``passed: ...`` or ``FAILED: ...``).
    """
    errors = errors or {}
    rows = []
    if ds is not None:
        for name in ds["site"].values:
            s = ds.sel(site=name)
            p50 = s["yield_p50"].values
            best = int(np.nanargmax(p50)) if np.isfinite(p50).any() else 0
            rows.append({
                "site": str(name), "latitude": float(s["latitude"]),
                "longitude": float(s["longitude"]),
                "best_plan": str(s["policy"].values[best]),
                "yield_p50_t_ha_yr": float(p50[best]),
                "yield_p90_t_ha_yr": float(s["yield_p90"].values[best]),
                "crash_risk_per_yr": float(s["crash_rate"].values[best]),
                "evaporation_m3_per_t": float(s["evaporation_per_biomass"].values[best]),
                "insolation_kwh_m2_yr": float(s["insolation"]),
                "status": "ok", "error": "",
                "site_check": str(s["site_check"].values) if "site_check" in s else ""})
    table = pd.DataFrame(rows, columns=RANKING_COLUMNS[1:])
    table = table.sort_values("yield_p50_t_ha_yr", ascending=False, kind="stable")
    table.insert(0, "rank", np.arange(1, len(table) + 1))
    failed = pd.DataFrame([{"site": n, "status": "failed", "error": errors[n]}
                           for n in names if n in errors], columns=RANKING_COLUMNS)
    if len(failed):
        table = pd.concat([table, failed], ignore_index=True) if len(table) else failed
    table = table.reset_index(drop=True)[RANKING_COLUMNS]
    table["rank"] = table["rank"].astype("Int64")  # failed sites have no rank
    return table


def write_outputs(report: ScreenReport, out: Path) -> list[Path]:
    """screen.nc, ranking.csv, failures.csv (if any failed) and ranking.png."""
    written = []
    if report.dataset is not None:
        written.append(save(report.dataset, out / "screen.nc"))
    written.append(write_csv(report.ranking, out / "ranking.csv", index=False))
    if len(report.failures):  # (a failures.csv of an earlier set goes with that set)
        written.append(write_csv(report.failures, out / "failures.csv", index=False))
    if report.dataset is not None:
        written.append(screen_figure(report.ranking, out / "ranking.png"))
    return written


def screen_figure(ranking: pd.DataFrame, path) -> Path:
    """Ranked horizontal bars of P50 with the P50-P90 spread, and P50 against latitude."""
    import matplotlib.pyplot as plt

    from pondsim.results.figures import COLORS, _save

    ok = ranking[ranking["status"] == "ok"]
    n = len(ok)
    fig, (ax, ax2) = plt.subplots(1, 2, figsize=(12, max(3.5, 0.35 * n + 1.5)),
                                  constrained_layout=True,
                                  gridspec_kw={"width_ratios": [3, 2]})
    y = np.arange(n)[::-1]
    p50 = ok["yield_p50_t_ha_yr"].to_numpy(float)
    p90 = ok["yield_p90_t_ha_yr"].to_numpy(float)
    ax.barh(y, p50, color=COLORS[0], alpha=0.85, label="P50 (best plan)")
    ax.errorbar(p50, y, xerr=[np.clip(p50 - p90, 0, None), np.zeros(n)], fmt="none",
                ecolor="k", capsize=3, lw=1.2, label="down to P90 (exceeded in 90 %)")
    ax.set_yticks(y, [f"{s}\n{b}" for s, b in zip(ok["site"], ok["best_plan"],
                                                    strict=True)], fontsize=7)
    ax.set_xlabel("annual harvested biomass [t ha$^{-1}$ yr$^{-1}$ AFDW]")
    ax.set_title("Sites ranked by P50 annual yield of the best plan")
    ax.grid(axis="x", alpha=0.3)
    ax.legend(fontsize=8, loc="lower right")
    ax2.scatter(ok["latitude"], p50, color=COLORS[1], marker="o", zorder=3, label="P50")
    ax2.scatter(ok["latitude"], p90, color=COLORS[2], marker="v", zorder=3, label="P90")
    for lat, v, s in zip(ok["latitude"], p50, ok["site"], strict=True):
        ax2.annotate(str(s), (lat, v), fontsize=6, xytext=(3, 3),
                     textcoords="offset points")
    ax2.set_xlabel("latitude [deg, north positive]")
    ax2.set_ylabel("annual yield [t ha$^{-1}$ yr$^{-1}$]")
    ax2.set_title("Yield against latitude")
    ax2.grid(alpha=0.3)
    ax2.legend(fontsize=8)
    return _save(fig, path)
