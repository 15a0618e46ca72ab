"""Figures (PNG) for the command line. Every axis carries its quantity and unit; colours
and line styles are chosen to survive greyscale printing."""

from __future__ import annotations

from pathlib import Path

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402

from pondsim.glossary import CAUTION, G_M2_TO_T_HA  # noqa: E402
from pondsim.results.files import atomic_write  # noqa: E402

STYLES = ["-", "--", "-.", ":"]
COLORS = ["#1b4f72", "#b9770e", "#1e8449", "#7d3c98", "#a93226", "#5d6d7e"]

FLUX_LABELS = {
    "q_shortwave": "absorbed solar",
    "q_longwave_in": "sky longwave",
    "q_longwave_out": "emitted longwave",
    "q_evaporation": "evaporation",
    "q_convection": "convection",
    "q_ground": "ground",
    "q_makeup": "makeup water",
    "q_input": "heat input",
}


def _save(fig, path) -> Path:
    fig.text(0.995, 0.998, "pondsim estimates, not guarantees", fontsize=7, color="0.4",
             ha="right", va="top")
    path = Path(path)
    out = atomic_write(path, lambda tmp: fig.savefig(tmp, dpi=110, format="png"))
    plt.close(fig)
    return out


def _style(i):
    return {"color": COLORS[i % len(COLORS)], "linestyle": STYLES[i % len(STYLES)]}


def weather_figure(table: pd.DataFrame, water: pd.DataFrame, forcing: pd.DataFrame,
                   title: str, path, stress: bool = False) -> Path:
    """Monthly light, air vs water temperature, evaporation, the energy budget, rain and
    (with *stress*: the table has the stress-hour columns) heat and cold stress hours."""
    months = table.index[:-1]
    x = np.arange(len(months))
    fig, axes = plt.subplots(3, 2, figsize=(12, 11.5), constrained_layout=True)
    fig.suptitle(f"{title}: weather, light and pond water")

    ax = axes[0, 0]
    ax.bar(x - 0.2, table["GHI kWh/m2/d"].iloc[:-1], 0.4, color=COLORS[0],
           label="GHI [kWh m$^{-2}$ d$^{-1}$]")
    ax.set_ylabel("GHI [kWh m$^{-2}$ d$^{-1}$]")
    ax2 = ax.twinx()
    ax2.bar(x + 0.2, table["PAR mol/m2/d"].iloc[:-1], 0.4, color=COLORS[1], hatch="//",
            label="PAR [mol m$^{-2}$ d$^{-1}$]")
    ax2.set_ylabel("PAR entering the culture [mol m$^{-2}$ d$^{-1}$]")
    ax.set_xticks(x, months)
    ax.set_title("Mean daily irradiation")
    h1, l1 = ax.get_legend_handles_labels()
    h2, l2 = ax2.get_legend_handles_labels()
    ax.legend(h1 + h2, l1 + l2, loc="upper left", fontsize=8)

    ax = axes[0, 1]
    day = pd.Index(forcing.index.date)
    air = forcing["temp_air"].groupby(day).mean()
    tw = water["water_temperature"].groupby(day).agg(["mean", "min", "max"])
    dates = pd.to_datetime(tw.index)
    ax.fill_between(dates, tw["min"], tw["max"], color=COLORS[0], alpha=0.25,
                    label="water, daily range")
    ax.plot(dates, tw["mean"], color=COLORS[0], label="water, daily mean")
    ax.plot(dates, air.to_numpy(), color=COLORS[1], linestyle="--", lw=1,
            label="air, daily mean")
    ax.set_ylabel("temperature [°C]")
    ax.set_title("Air and pond water temperature")
    ax.legend(fontsize=8)
    ax.grid(alpha=0.3)

    ax = axes[1, 0]
    ax.bar(x, table["evap mm/d"].iloc[:-1], color=COLORS[2], label="evaporation")
    ax.set_ylabel("evaporation [mm d$^{-1}$]")
    ax.set_xticks(x, months)
    ax.set_title("Evaporation and farm makeup water")
    ax2 = ax.twinx()
    ax2.plot(x, table["makeup m3"].iloc[:-1], "k-o", ms=4, label="makeup water")
    ax2.set_ylabel("makeup water for the farm [m$^3$ month$^{-1}$]")
    ax.set_ylim(bottom=0)
    ax2.set_ylim(bottom=0)
    h1, l1 = ax.get_legend_handles_labels()
    h2, l2 = ax2.get_legend_handles_labels()
    ax.legend(h1 + h2, l1 + l2, loc="upper left", fontsize=8)

    ax = axes[1, 1]
    terms = [c for c in FLUX_LABELS if c in water]
    monthly = water[terms].groupby(water.index.month).mean()
    pos = np.zeros(len(monthly))
    neg = np.zeros(len(monthly))
    hatches = ["", "//", "..", "xx", "\\\\", "++", "oo", "--"]
    for i, term in enumerate(terms):
        v = monthly[term].to_numpy()
        base = np.where(v >= 0, pos, neg)
        ax.bar(x[: len(v)], v, bottom=base, color=COLORS[i % len(COLORS)],
               hatch=hatches[i % len(hatches)], edgecolor="white", lw=0.3,
               label=FLUX_LABELS[term])
        pos += np.where(v >= 0, v, 0)
        neg += np.where(v < 0, v, 0)
    ax.axhline(0, color="k", lw=0.8)
    ax.set_xticks(x, months)
    ax.set_ylabel("mean heat flux into the pond [W m$^{-2}$]")
    ax.set_title("Monthly energy budget (gains up, losses down)")
    ax.legend(fontsize=7, ncol=4, loc="upper center", bbox_to_anchor=(0.5, -0.07),
              frameon=False)

    ax = axes[2, 0]
    rain = table["rain mm"].iloc[:-1].to_numpy(dtype=float)
    ax.bar(x, np.nan_to_num(rain), color=COLORS[0])
    if np.isnan(rain).all():
        ax.set_yticks([])
        ax.text(0.5, 0.5, "no rain data in the weather file\n(makeup water counts no rain)",
                ha="center", va="center", transform=ax.transAxes, fontsize=10)
    else:
        for i in np.flatnonzero(np.isnan(rain)):
            ax.text(x[i], 0, "no\ndata", ha="center", va="bottom", fontsize=7)
        ax.set_ylim(bottom=0)
    ax.set_xticks(x, months)
    ax.set_ylabel("rain [mm month$^{-1}$]")
    ax.set_title("Rain on the pond" + (" (the weather file has none)"
                                       if np.isnan(rain).all() else ""))

    ax = axes[2, 1]
    if stress:
        from pondsim.results.tables import STRESS_LABELS

        names = {"h > Topt": "above optimum", "h > Tmax": "above maximum",
                 "h < Tmin": "below minimum"}
        for i, label in enumerate(STRESS_LABELS.values()):
            ax.bar(x + (i - 1) * 0.27, table[label].iloc[:-1], 0.27,
                   color=COLORS[(i + 3) % len(COLORS)], hatch=["", "//", ".."][i],
                   label=f"water {names[label]} temperature")
        ax.set_xticks(x, months)
        ax.set_ylim(bottom=0)
        ax.set_ylabel("hours per month [h]")
        ax.set_title("Heat and cold stress of the strain")
        ax.legend(fontsize=8, loc="upper left")
    else:
        ax.axis("off")
        ax.text(0.5, 0.5, "stress hours need a strain:\nrun `pondsim weather` on a "
                "scenario", ha="center", va="center", fontsize=10)
    return _save(fig, path)


def run_figures(ds, out_dir) -> list[Path]:
    """Figures of a simulated year: density with K(t), monthly productivity, forcing."""
    out_dir = Path(out_dir)
    dates = pd.to_datetime(ds["date"].values)
    written = []

    fig, ax = plt.subplots(figsize=(11, 5), constrained_layout=True)
    ax.plot(dates, ds["carrying_capacity"], color="k", lw=2, alpha=0.5,
            label="carrying capacity K")
    for i, p in enumerate(ds["policy"].values):
        dens = ds["density"].sel(policy=p)
        ax.plot(dates, dens.median("member"), lw=1.2, label=f"{p} (median member)",
                **_style(i))
    ax.set_ylabel("culture density [g m$^{-3}$ AFDW]")
    ax.set_title(f"{ds.attrs['site']}: density at the end of each day and K(t)")
    ax.grid(alpha=0.3)
    ax.legend(fontsize=8)
    written.append(_save(fig, out_dir / "density.png"))

    fig, ax = plt.subplots(figsize=(11, 5), constrained_layout=True)
    month = ds["date"].dt.month
    monthly = ds["harvested"].groupby(month).mean("day").mean("member")  # g m-2 d-1
    pols = list(ds["policy"].values)
    width = 0.8 / max(len(pols), 1)
    x = np.arange(1, 13)
    hatches = ["", "//", "..", "xx", "\\\\", "++"]
    for i, p in enumerate(pols):
        ax.bar(x - 0.4 + width * (i + 0.5), monthly.sel(policy=p), width,
               color=COLORS[i % len(COLORS)], hatch=hatches[i % len(hatches)],
               edgecolor="white", label=str(p))
    ax.set_xticks(x, [pd.Timestamp(2000, m, 1).strftime("%b") for m in x])
    ax.set_ylabel("areal productivity, harvested [g m$^{-2}$ d$^{-1}$]")
    ax.set_title("Monthly areal productivity by policy")
    ax.legend(fontsize=8)
    ax.grid(axis="y", alpha=0.3)
    written.append(_save(fig, out_dir / "monthly_productivity.png"))

    fig, ax = plt.subplots(figsize=(11, 4.5), constrained_layout=True)
    ax.plot(dates, ds["par_daily"], color=COLORS[1], lw=0.8,
            label="PAR entering the culture")
    ax.set_ylabel("daily PAR [mol m$^{-2}$ d$^{-1}$]")
    ax2 = ax.twinx()
    ax2.plot(dates, ds["water_temperature"], color=COLORS[0], linestyle="--", lw=1.2,
             label="water temperature (daily mean)")
    ax2.set_ylabel("water temperature [°C]")
    h1, l1 = ax.get_legend_handles_labels()
    h2, l2 = ax2.get_legend_handles_labels()
    ax.legend(h1 + h2, l1 + l2, fontsize=8, loc="upper left")
    ax.set_title("Daily light and water temperature driving growth")
    written.append(_save(fig, out_dir / "forcing.png"))
    return written


__all__ = ["weather_figure", "run_figures", "CAUTION"]


def compare_figures(ds, table, crash, out_dir) -> list[Path]:
    """Figures of `pondsim compare`: trajectories with K and harvests, seasonal yields,
    and the crash-risk calendar."""
    out_dir = Path(out_dir)
    dates = pd.to_datetime(ds["date"].values)
    pols = list(ds["policy"].values)
    written = []
    k_smooth = crash.smoothed(ds["carrying_capacity"].values)

    fig, axes = plt.subplots(len(pols), 1, figsize=(11, 2.4 * len(pols) + 1), sharex=True,
                             constrained_layout=True, squeeze=False)
    for i, (ax, p) in enumerate(zip(axes[:, 0], pols, strict=True)):
        dens = ds["density"].sel(policy=p)
        ax.plot(dates, ds["carrying_capacity"], color="0.6", lw=0.8, label="K (daily)")
        ax.plot(dates, k_smooth, color="k", lw=1.2, label=f"K, {crash.window_days}-day mean")
        ax.fill_between(dates, dens.quantile(0.1, "member"), dens.quantile(0.9, "member"),
                        color=COLORS[i % len(COLORS)], alpha=0.25,
                        label="10th–90th percentile of members")
        ax.plot(dates, dens.median("member"), color=COLORS[i % len(COLORS)], lw=1.2,
                label="median member")
        first = dens.isel(member=0)
        harvest_days = (ds["harvest_fraction"].sel(policy=p).isel(member=0) > 0).values
        ax.plot(dates[harvest_days], first.values[harvest_days], "v", ms=3, color="k",
                label="harvest (member 0)")
        crash_days = (ds["crashed"].sel(policy=p).isel(member=0) > 0).values
        if crash_days.any():
            ax.plot(dates[crash_days], np.zeros(crash_days.sum()), "x", ms=7, color="#a93226",
                    mew=2, label="crash (member 0)")
        ax.set_ylabel("density [g m$^{-3}$]")
        ax.set_title(str(p), loc="left", fontsize=10)
        ax.grid(alpha=0.3)
        if i == 0:
            ax.legend(fontsize=7, ncol=3, loc="upper right")
    fig.suptitle(f"{ds.attrs['site']}: density by policy with carrying capacity")
    written.append(_save(fig, out_dir / "trajectories.png"))

    fig, ax = plt.subplots(figsize=(11, 5), constrained_layout=True)
    seasons = list(pd.unique(table.index.get_level_values("season")))
    width = 0.8 / max(len(pols), 1)
    x = np.arange(len(seasons))
    hatches = ["", "//", "..", "xx", "\\\\", "++"]
    for i, p in enumerate(pols):
        sub = table.xs(p, level="policy").reindex(seasons)
        y = sub["productivity_g_m2_d"].to_numpy()
        per_day = 1.0 / (G_M2_TO_T_HA * sub["days"].to_numpy())  # t ha-1 -> g m-2 d-1
        lo = sub["yield_pct10_t_ha"].to_numpy() * per_day
        hi = sub["yield_pct90_t_ha"].to_numpy() * per_day
        ax.bar(x - 0.4 + width * (i + 0.5), y, width, color=COLORS[i % len(COLORS)],
               hatch=hatches[i % len(hatches)], edgecolor="white", label=str(p),
               yerr=np.vstack([y - lo, hi - y]).clip(0), capsize=3)
    ax.set_xticks(x, seasons)
    ax.set_ylabel("harvested productivity [g m$^{-2}$ d$^{-1}$]\n(bars: 10th–90th "
                  "percentile over members)")
    ax.set_title("Seasonal yield by policy")
    ax.legend(fontsize=8)
    ax.grid(axis="y", alpha=0.3)
    written.append(_save(fig, out_dir / "seasonal_yield.png"))

    fig, (ax1, ax2) = plt.subplots(2, 1, figsize=(11, 6.5), sharex=True,
                                   constrained_layout=True,
                                   gridspec_kw={"height_ratios": [1, 1.2]})
    drop = crash.drop_index(k_smooth)
    ax1.plot(dates, 100 * (1 - np.exp(-np.maximum(drop, 0))), color="k", lw=1)
    ax1.set_ylabel(f"fall of K over {crash.window_days} d [%]")
    ax1.set_title("Crash-risk calendar: where K falls and how likely a crash is")
    ax1.grid(alpha=0.3)
    prob = -np.expm1(-ds["hazard"].astype(float)).mean("member")  # daily crash probability
    img = ax2.imshow(100 * prob.values, aspect="auto", cmap="Greys", interpolation="nearest",
                     extent=[mdates_num(dates[0]), mdates_num(dates[-1]), len(pols) - 0.5,
                             -0.5])
    ax2.set_yticks(range(len(pols)), pols)
    ax2.xaxis_date()
    import matplotlib.dates as mdates

    ax2.xaxis.set_major_locator(mdates.MonthLocator())
    ax2.xaxis.set_major_formatter(mdates.DateFormatter("%b"))
    cbar = fig.colorbar(img, ax=ax2, pad=0.01)
    cbar.set_label("daily crash probability [%] (member mean)")
    written.append(_save(fig, out_dir / "risk_calendar.png"))
    return written


def mdates_num(ts):
    import matplotlib.dates as mdates

    return mdates.date2num(pd.Timestamp(ts).to_pydatetime())


def outlook_figures(ds, bands, sens, out_dir, annual_table=None) -> list[Path]:
    """Exceedance curves of annual yield (with the 95 % intervals of P50 and P90 where
    ``annual_table`` is given), monthly 10th–90th percentile bands, Sobol indices."""
    out_dir = Path(out_dir)
    written = []
    pols = list(ds["policy"].values)
    annual = ds["harvested"].sum("day") * G_M2_TO_T_HA * 365.0 / ds.sizes["day"]

    fig, ax = plt.subplots(figsize=(9, 5.5), constrained_layout=True)
    for i, p in enumerate(pols):
        a = np.sort(annual.sel(policy=p).values)[::-1]
        exceed = 100 * (np.arange(1, a.size + 1) - 0.5) / a.size
        ax.plot(exceed, a, label=str(p), **_style(i))
        if annual_table is not None and str(p) in annual_table.index:
            r = annual_table.loc[str(p)]
            for q in (50, 90):
                v = r[f"P{q}_t_ha_yr"]
                err = np.array([[v - r[f"P{q}_low_t_ha_yr"]], [r[f"P{q}_high_t_ha_yr"] - v]])
                ax.errorbar([q], [v], yerr=np.nan_to_num(err.clip(0)), fmt="o", ms=4,
                            capsize=4, color=_style(i)["color"], zorder=4)
    for q in (50, 75, 90):
        ax.axvline(q, color="0.5", lw=0.8, linestyle=":")
        ax.text(q, ax.get_ylim()[1], f" P{q}", va="top", fontsize=8, color="0.3")
    ax.set_xlabel("probability of exceedance [%] (P90: exceeded with probability 0.9)")
    if annual_table is not None:
        ax.errorbar([], [], yerr=[], fmt="o", ms=4, capsize=4, color="0.3",
                    label="P50, P90 with 95 % CI")
    ax.set_ylabel("annual biomass yield [t ha$^{-1}$ yr$^{-1}$ AFDW]")
    per_year = " each" if ds.attrs.get("draws_nested") else ""
    ax.set_title(f"{ds.attrs['site']}: annual yield over {ds.attrs.get('weather_years', 1)} "
                 f"weather years × {ds.attrs.get('parameter_draws', 1)} parameter "
                 f"draws{per_year} × {ds.attrs.get('replicates', 1)} crash replicates")
    ax.grid(alpha=0.3)
    ax.legend(fontsize=8)
    written.append(_save(fig, out_dir / "exceedance.png"))

    fig, ax = plt.subplots(figsize=(11, 5), constrained_layout=True)
    months = np.arange(1, 13)
    for i, p in enumerate(pols):
        b = bands.xs(str(p), level="policy").reindex(months)
        st = _style(i)
        ax.fill_between(months, b["pct10_g_m2_d"], b["pct90_g_m2_d"], color=st["color"],
                        alpha=0.2)
        ax.plot(months, b["pct50_g_m2_d"], marker="o", ms=3,
                label=f"{p}: median (band: 10th–90th percentile)", **st)
    ax.set_xticks(months, [pd.Timestamp(2000, m, 1).strftime("%b") for m in months])
    ax.set_ylabel("harvested productivity [g m$^{-2}$ d$^{-1}$]")
    ax.set_title("Monthly productivity across weather years and parameter draws")
    ax.grid(alpha=0.3)
    ax.legend(fontsize=8)
    written.append(_save(fig, out_dir / "monthly_bands.png"))

    if sens is not None and len(sens):
        fig, ax = plt.subplots(figsize=(8, 0.6 * len(sens) + 2), constrained_layout=True)
        y = np.arange(len(sens))
        ax.barh(y - 0.2, sens["first_order"], 0.4, color=COLORS[0], label="first order",
                xerr=np.vstack([sens["first_order"] - sens["first_order_low"],
                                sens["first_order_high"] - sens["first_order"]]).clip(0))
        ax.barh(y + 0.2, sens["total"], 0.4, color=COLORS[1], hatch="//", label="total",
                xerr=np.vstack([sens["total"] - sens["total_low"],
                                sens["total_high"] - sens["total"]]).clip(0))
        ax.set_yticks(y, sens.index)
        ax.set_xlabel("Sobol index of annual yield [-] (bars: 95 % bootstrap interval)")
        ax.set_title("Which uncertain parameters move the annual yield")
        ax.grid(axis="x", alpha=0.3)
        ax.legend(fontsize=8)
        written.append(_save(fig, out_dir / "sensitivity.png"))
    return written
