"""Figures of the weather and the forcing: ``pondsim weather`` (monthly light, air and
water temperature, water use, energy budget) and the forcing figure of ``pondsim run``.

Daily weather is shown as monthly values with the spread of the days within the month
(or as a 15-day centred mean with the 10-90 % band of the days), never as raw daily noise:
a real weather file's day-to-day swings would otherwise hide the seasonal picture.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from pondsim.results import figstyle as fs

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
#: Fixed colour and hatch of each heat flux (Okabe & Ito colours; see figstyle).
FLUX_STYLE = {
    "q_shortwave": (fs.OKABE_ITO["orange"], ""),
    "q_longwave_in": (fs.OKABE_ITO["sky blue"], "//"),
    "q_longwave_out": (fs.OKABE_ITO["blue"], ".."),
    "q_evaporation": (fs.OKABE_ITO["bluish green"], "xx"),
    "q_convection": (fs.OKABE_ITO["reddish purple"], "\\\\"),
    "q_ground": (fs.OKABE_ITO["vermillion"], "++"),
    "q_makeup": (fs.OKABE_ITO["yellow"], "oo"),
    "q_input": ("0.35", "--"),
}
#: Days of the centred running mean of daily forcing [d].
SMOOTH_DAYS = 15


def _monthly_spread(daily: pd.Series) -> pd.DataFrame:
    """Per month: mean, 10th and 90th percentile of the daily values."""
    g = daily.groupby(pd.DatetimeIndex(daily.index).month)
    return pd.DataFrame({"mean": g.mean(), "p10": g.quantile(0.1), "p90": g.quantile(0.9)})


def weather_figure(table: pd.DataFrame, water: pd.DataFrame, forcing: pd.DataFrame,
                   title: str, path, *, par=None, source: str | None = None,
                   stress: bool = False) -> Path:
    """Monthly light, air and water temperature, water use, the energy budget, rain and
    (with *stress*: the table has the stress-hour columns) heat and cold stress hours.

    Parameters
    ----------
    table : DataFrame
        :func:`pondsim.results.tables.monthly_forcing_table` (12 months and the year).
    water : DataFrame
        Hourly pond water model output (temperature [degC], heat fluxes [W m-2]).
    forcing : DataFrame
        Hourly weather (``ghi`` [W m-2], ``temp_air`` [degC]).
    title : str
        Title context: the scenario's site, study and strain (second title line).
    path : path-like
        PNG to write.
    par : array-like, optional
        Hourly PAR entering the culture [umol m-2 s-1]; gives the daily spread of light.
    source : str, optional
        Weather source (file and station) for the footer.
    stress : bool
        Draw the strain's stress hours (``pondsim weather`` on a scenario).
    """
    months = np.arange(1, 13)
    fig, axes = fs.new_figure("Weather, light and pond water by month", title, nrows=3,
                              ncols=2, size=(12, 12.6), source=source)
    day = pd.DatetimeIndex(pd.to_datetime(pd.Index(forcing.index.date)))

    ax = axes[0, 0]
    light = table["PAR mol/m2/d"].iloc[:12].to_numpy()
    ax.bar(months, light, 0.7, color=fs.OKABE_ITO["orange"], edgecolor="0.2", lw=0.5,
           label="monthly mean")
    if par is not None:
        daily = pd.Series(np.asarray(par, float) * 3600e-6, index=day).groupby(level=0).sum()
        spread = _monthly_spread(daily)
        ax.errorbar(months, spread["mean"], yerr=np.vstack(
            [spread["mean"] - spread["p10"], spread["p90"] - spread["mean"]]).clip(0),
            fmt="none", ecolor="0.1", capsize=3, lw=1, label="10–90 % of the days")
    ax.set_ylabel("PAR entering the culture [mol m$^{-2}$ d$^{-1}$]")
    ax.set_title("Daily light entering the culture", fontsize=10)
    fs.month_axis(ax)
    fs.from_zero(ax, top=1.12 * max(ax.get_ylim()[1], 1.0))
    fs.legend_below(ax, ncol=2, bbox_to_anchor=(0.5, -0.18))

    ax = axes[0, 1]
    tw = water["water_temperature"].groupby(day).agg(["mean", "min", "max"])
    by_month = tw.groupby(tw.index.month).mean()
    air = forcing["temp_air"].groupby(day).mean()
    air_m = _monthly_spread(air)
    ax.fill_between(months, by_month["min"], by_month["max"], color=fs.OKABE_ITO["blue"],
                    alpha=0.22, lw=0, label="water, mean daily low to high")
    ax.plot(months, by_month["mean"], color=fs.OKABE_ITO["blue"], marker="o", ms=4,
            label="water, monthly mean")
    ax.plot(months, air_m["mean"], color=fs.OKABE_ITO["vermillion"], linestyle="--",
            marker="s", ms=3, label="air, monthly mean")
    ax.errorbar(months + 0.12, air_m["mean"], yerr=np.vstack(
        [air_m["mean"] - air_m["p10"], air_m["p90"] - air_m["mean"]]).clip(0), fmt="none",
        ecolor=fs.OKABE_ITO["vermillion"], capsize=2.5, lw=0.9,
        label="air, 10–90 % of daily means")
    ax.set_ylabel("temperature [°C]")
    ax.set_title("Air and pond water temperature", fontsize=10)
    fs.month_axis(ax)
    ax.grid(alpha=0.3)
    fs.legend_below(ax, ncol=2, bbox_to_anchor=(0.5, -0.18))

    ax = axes[1, 0]
    evap = table["evap mm/d"].iloc[:12].to_numpy()
    ax.bar(months, evap, 0.7, color=fs.OKABE_ITO["bluish green"], label="evaporation (left)")
    ax.set_ylabel("evaporation [mm d$^{-1}$]")
    fs.month_axis(ax)
    fs.from_zero(ax, top=1.15 * max(evap.max(), 0.1))
    ax2 = ax.twinx()
    makeup = table["makeup m3"].iloc[:12].to_numpy()
    ax2.plot(months, makeup, color=fs.REFERENCE, marker="o", ms=4,
             label="makeup water for the farm (right)")
    ax2.set_ylabel("makeup water for the farm [m$^3$ month$^{-1}$]")
    fs.from_zero(ax2, top=1.15 * max(makeup.max(), 1.0))
    ax.set_title("Evaporation and farm makeup water", fontsize=10)
    h1, l1 = ax.get_legend_handles_labels()
    h2, l2 = ax2.get_legend_handles_labels()
    fs.legend_below(ax, h1 + h2, l1 + l2, ncol=2, bbox_to_anchor=(0.5, -0.18))

    ax = axes[1, 1]
    terms = [c for c in FLUX_LABELS if c in water]
    monthly = water[terms].groupby(water.index.month).mean().reindex(months)
    pos = np.zeros(12)
    neg = np.zeros(12)
    for term in terms:
        v = np.nan_to_num(monthly[term].to_numpy())
        color, hatch = FLUX_STYLE[term]
        base = np.where(v >= 0, pos, neg)
        ax.bar(months, v, 0.75, bottom=base, color=color, hatch=hatch, edgecolor="white",
               lw=0.3, label=FLUX_LABELS[term])
        pos += np.where(v >= 0, v, 0)
        neg += np.where(v < 0, v, 0)
    ax.axhline(0, color="k", lw=0.8)
    span = max(pos.max(), -neg.min(), 1.0)
    ax.set_ylim(neg.min() - 0.08 * span, pos.max() + 0.08 * span)  # no bar clipped
    fs.month_axis(ax)
    ax.set_ylabel("mean heat flux into the pond [W m$^{-2}$]")
    ax.set_title("Monthly energy budget (gains up, losses down)", fontsize=10)
    fs.legend_right(ax)

    ax = axes[2, 0]
    rain = table["rain mm"].iloc[:12].to_numpy(dtype=float)
    ax.bar(months, np.nan_to_num(rain), 0.7, color=fs.OKABE_ITO["sky blue"],
           edgecolor="0.2", lw=0.5)
    fs.month_axis(ax)
    ax.set_ylabel("rain [mm month$^{-1}$]")
    if np.isnan(rain).all():
        fs.from_zero(ax, top=1.0)
        ax.text(0.5, 0.5, "no rain data in the weather file\n(makeup water counts no rain)",
                ha="center", va="center", transform=ax.transAxes, fontsize=10)
        ax.set_title("Rain on the pond (the weather file has none)", fontsize=10)
    else:
        fs.from_zero(ax, top=1.15 * max(float(np.nanmax(rain)), 1.0))
        for m in months[np.isnan(rain)]:
            ax.text(m, 0, "no\ndata", ha="center", va="bottom", fontsize=7)
        ax.set_title("Rain on the pond", fontsize=10)

    ax = axes[2, 1]
    if stress:
        from pondsim.results.tables import STRESS_LABELS

        names = {"h > Topt": "above optimum", "h > Tmax": "above maximum",
                 "h < Tmin": "below minimum"}
        colors = [fs.OKABE_ITO["orange"], fs.OKABE_ITO["vermillion"], fs.OKABE_ITO["blue"]]
        top = 1.0
        for i, label in enumerate(STRESS_LABELS.values()):
            v = table[label].iloc[:12].to_numpy(dtype=float)
            top = max(top, float(np.nanmax(v)))
            ax.bar(months + (i - 1) * 0.27, v, 0.27, color=colors[i % 3],
                   hatch=["", "//", ".."][i % 3], edgecolor="white",
                   label=f"water {names.get(label, label)} temperature")
        fs.month_axis(ax)
        fs.from_zero(ax, top=1.15 * top)
        ax.set_ylabel("hours per month [h]")
        ax.set_title("Heat and cold stress of the strain", fontsize=10)
        fs.legend_right(ax)
    else:  # no strain (a bare weather file): a note where the panel would be, no axes
        box = ax.get_position()
        ax.remove()
        fig.text(box.x0 + 0.5 * box.width, box.y0 + 0.5 * box.height,
                 "stress hours need a strain:\nrun `pondsim weather` on a scenario",
                 ha="center", va="center", fontsize=10)
    return fs.save(fig, path)


def _smoothed(values: np.ndarray, dates) -> pd.DataFrame:
    """A centred running mean and the running 10-90 % band of daily values."""
    s = pd.Series(values, index=dates)
    roll = s.rolling(SMOOTH_DAYS, center=True, min_periods=SMOOTH_DAYS // 2)
    return pd.DataFrame({"mean": roll.mean(), "p10": roll.quantile(0.1),
                         "p90": roll.quantile(0.9)})


def _daily(ds, name) -> np.ndarray:
    da = ds[name]
    if "member" in da.dims:
        da = da.median("member")
    return np.asarray(da.values, dtype=float)


def forcing_figure(ds, path) -> Path:
    """Daily light and water temperature of a run: a 15-day centred mean with the 10-90 %
    band of the days around it, one panel per quantity."""
    import matplotlib.dates as mdates

    dates = pd.to_datetime(ds["date"].values)
    fig, axes = fs.new_figure("Light and water temperature driving growth", fs.context_of(ds),
                              nrows=2, size=(11, 6.5), source=fs.source_of(ds), sharex=True)
    panels = ((axes[0], "par_daily", "daily PAR entering the culture\n[mol m$^{-2}$ d$^{-1}$]",
               fs.OKABE_ITO["orange"], True),
              (axes[1], "water_temperature", "water temperature,\ndaily mean [°C]",
               fs.OKABE_ITO["blue"], False))
    for ax, name, ylabel, color, amount in panels:
        sm = _smoothed(_daily(ds, name), dates)
        ax.fill_between(dates, sm["p10"], sm["p90"], color=color, alpha=0.25, lw=0,
                        label=f"10–90 % of the days in a {SMOOTH_DAYS}-day window")
        ax.plot(dates, sm["mean"], color=color, lw=2, label=f"{SMOOTH_DAYS}-day centred mean")
        ax.set_ylabel(ylabel)
        ax.grid(alpha=0.3)
        if amount:
            fs.from_zero(ax, top=1.1 * np.nanmax(sm["p90"].to_numpy()))
        fs.legend_right(ax)
    axes[1].xaxis.set_major_locator(mdates.MonthLocator())
    axes[1].xaxis.set_major_formatter(mdates.DateFormatter("%b"))
    axes[1].set_xlabel(f"date [{dates[0].year}]")
    return fs.save(fig, path)


__all__ = ["FLUX_LABELS", "forcing_figure", "weather_figure"]
