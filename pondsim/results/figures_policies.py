"""Figures that set policies side by side: ``pondsim run`` (density with K, monthly
productivity) and ``pondsim compare`` (trajectories, seasonal yield, crash-risk calendar).
Each policy keeps its colour, line style and hatch from :mod:`pondsim.results.figstyle`.
"""

from __future__ import annotations

from pathlib import Path

import matplotlib.dates as mdates
import numpy as np
import pandas as pd

from pondsim.glossary import G_M2_TO_T_HA
from pondsim.operations.crash import CAUSES
from pondsim.pond.capacity import trailing_mean
from pondsim.results import figstyle as fs
from pondsim.results.crashes import crashes_by_cause


def _date_axis(ax, dates) -> None:
    ax.xaxis.set_major_locator(mdates.MonthLocator())
    ax.xaxis.set_major_formatter(mdates.DateFormatter("%b"))
    ax.set_xlabel(f"date [{pd.Timestamp(dates[0]).year}]")


def _k_daily(ds) -> np.ndarray:
    k = ds["carrying_capacity"]
    return np.asarray((k.median("member") if "member" in k.dims else k).values, float)


def density_figure(ds, path) -> Path:
    """Median member's density at the end of each day per policy, with K(t)."""
    dates = pd.to_datetime(ds["date"].values)
    pols = [str(p) for p in ds["policy"].values]
    styles = fs.policy_styles(pols)
    fig, ax = fs.new_figure("Culture density through the year with carrying capacity K",
                            fs.context_of(ds), size=(11, 5.6), source=fs.source_of(ds))
    ax.plot(dates, _k_daily(ds), color=fs.LIGHT_REFERENCE, lw=2.5,
            label="carrying capacity K")
    for p in pols:
        line, = ax.plot(dates, ds["density"].sel(policy=p).median("member"), lw=1.3,
                        label=f"{p} (median member)", **fs.line_kw(styles[p]))
        fs.tag_policy(line, p)
    ax.set_ylabel("culture density at the end of the day [g m$^{-3}$ AFDW]")
    fs.from_zero(ax)
    ax.grid(alpha=0.3)
    _date_axis(ax, dates)
    fs.legend_below(fig, ncol=min(len(pols) + 1, 3))
    return fs.save(fig, path)


def _grouped_bars(ax, x, pols, styles, values: dict, errors: dict | None = None):
    width = 0.8 / max(len(pols), 1)
    for i, p in enumerate(pols):
        st = styles[p]
        kw = {}
        if errors is not None:
            kw = {"yerr": errors[p], "capsize": 2.5, "error_kw": {"lw": 0.9, "ecolor": "0.1"}}
        bars = ax.bar(x - 0.4 + width * (i + 0.5), values[p], width, color=st["color"],
                      hatch=st["hatch"], edgecolor="white", lw=0.4, label=p, **kw)
        fs.tag_policy(bars, p)


def productivity_figure(ds, path) -> Path:
    """Mean harvested areal productivity per month and policy (member mean)."""
    pols = [str(p) for p in ds["policy"].values]
    styles = fs.policy_styles(pols)
    month = ds["date"].dt.month
    monthly = ds["harvested"].groupby(month).mean("day").mean("member")  # g m-2 d-1
    x = np.arange(1, 13)
    fig, ax = fs.new_figure("Harvested areal productivity by month and policy",
                            fs.context_of(ds, "member mean"), size=(11, 5.4),
                            source=fs.source_of(ds))
    _grouped_bars(ax, x, pols, styles,
                  {p: monthly.sel(policy=p).reindex(month=x).values for p in pols})
    fs.month_axis(ax)
    ax.set_ylabel("harvested areal productivity [g m$^{-2}$ d$^{-1}$]")
    fs.from_zero(ax)
    ax.grid(axis="y", alpha=0.3)
    fs.legend_below(fig, ncol=min(len(pols), 4))
    return fs.save(fig, path)


def run_figures(ds, out_dir) -> list[Path]:
    """Figures of a simulated year: density with K(t), monthly productivity, forcing."""
    from pondsim.results.figures_weather import forcing_figure

    out_dir = Path(out_dir)
    return [density_figure(ds, out_dir / "density.png"),
            productivity_figure(ds, out_dir / "monthly_productivity.png"),
            forcing_figure(ds, out_dir / "forcing.png")]


def trajectories_figure(ds, crash, path) -> Path:
    """One panel per policy: the 10th-90th percentile band and median of density over members, K
    (daily and smoothed), and a rug of one member's harvest days and crashes below the
    curves, so that daily harvests never hide the median line."""
    dates = pd.to_datetime(ds["date"].values)
    pols = [str(p) for p in ds["policy"].values]
    styles = fs.policy_styles(pols)
    k = _k_daily(ds)
    k_smooth = trailing_mean(k, crash.window_days)
    n = len(pols)
    fig, axes = fs.new_figure("Culture density by policy with carrying capacity K",
                              fs.context_of(ds), nrows=n, size=(11, 2.2 * n + 2.2),
                              source=fs.source_of(ds), sharex=True, squeeze=False)
    top = 1.15 * max(float(np.nanmax(k)), float(ds["density"].quantile(0.9, "member").max()))
    for ax, p in zip(axes[:, 0], pols, strict=True):
        st = styles[p]
        dens = ds["density"].sel(policy=p)
        ax.plot(dates, k, color=fs.LIGHT_REFERENCE, lw=0.8, label="K, daily")
        ax.plot(dates, k_smooth, color=fs.REFERENCE, lw=1.2,
                label=f"K, {crash.window_days}-day mean")
        band = ax.fill_between(dates, dens.quantile(0.1, "member"),
                               dens.quantile(0.9, "member"), color=st["color"], alpha=0.25,
                               lw=0, label="10th–90th percentile of members")
        line, = ax.plot(dates, dens.median("member"), color=st["color"], lw=1.5,
                        label="median member")
        fs.tag_policy([band, line], p)
        # Harvest days and crashes of member 0 as a rug in the bottom strip of the panel.
        harvest = (ds["harvest_fraction"].sel(policy=p).isel(member=0) > 0).values
        rug = ax.get_xaxis_transform()
        ax.vlines(dates[harvest], 0.0, 0.06, transform=rug, color="0.35", lw=0.6,
                  label="harvest day (member 0)")
        crashed = (ds["crashed"].sel(policy=p).isel(member=0) > 0).values
        if crashed.any():
            ax.plot(dates[crashed], np.full(crashed.sum(), 0.12), "v", transform=rug, ms=6,
                    color=fs.OKABE_ITO["vermillion"], mec="k", mew=0.5,
                    label="crash (member 0)")
        ax.set_ylabel("density\n[g m$^{-3}$]")
        ax.set_ylim(0, top)
        ax.set_gid("amount")
        ax.set_title(p, loc="left", fontsize=10, color="k")
        ax.grid(alpha=0.3)
    _date_axis(axes[-1, 0], dates)
    handles, labels = {}, {}
    for ax in axes[:, 0]:
        for h, lab in zip(*ax.get_legend_handles_labels(), strict=True):
            if lab not in labels:
                labels[lab] = lab
                handles[lab] = h
    fs.legend_below(fig, list(handles.values()), list(labels.values()), ncol=3)
    return fs.save(fig, path)


def seasonal_figure(ds, table, path) -> Path:
    """Harvested productivity per season and policy with 10th-90th percentile member whiskers."""
    pols = [str(p) for p in ds["policy"].values]
    styles = fs.policy_styles(pols)
    seasons = list(pd.unique(table.index.get_level_values("season")))
    x = np.arange(len(seasons))
    values, errors = {}, {}
    for p in pols:
        sub = table.xs(p, level="policy").reindex(seasons)
        y = sub["productivity_g_m2_d"].to_numpy()
        per_day = 1.0 / (G_M2_TO_T_HA * sub["days"].to_numpy())  # t ha-1 -> g m-2 d-1
        lo = sub["yield_pct10_t_ha"].to_numpy() * per_day
        hi = sub["yield_pct90_t_ha"].to_numpy() * per_day
        values[p] = y
        errors[p] = np.vstack([y - lo, hi - y]).clip(0)
    fig, ax = fs.new_figure("Harvested productivity by season and policy",
                            fs.context_of(ds, "whiskers: 10th–90th percentile of members"),
                            size=(11, 5.4), source=fs.source_of(ds))
    _grouped_bars(ax, x, pols, styles, values, errors)
    ax.set_xticks(x, seasons)
    ax.set_xlabel("season")
    ax.set_ylabel("harvested productivity [g m$^{-2}$ d$^{-1}$]")
    fs.from_zero(ax)
    ax.grid(axis="y", alpha=0.3)
    fs.legend_below(fig, ncol=min(len(pols), 4))
    return fs.save(fig, path)


def risk_calendar_figure(ds, crash, path) -> Path:
    """Crashes by cause and month for the first policy (member mean), and the daily crash
    probability of every policy through the year; the weather basis is in the title."""
    dates = pd.to_datetime(ds["date"].values)
    pols = [str(p) for p in ds["policy"].values]
    basis = ds.attrs.get("weather_basis", "not stated")
    fig, (ax1, ax2) = fs.new_figure(
        "Crash-risk calendar: crashes by cause and daily crash probability",
        fs.context_of(ds, f"weather: {basis}"),
        nrows=2, size=(11, 2.4 + 2.6 + 0.45 * len(pols)), source=fs.source_of(ds),
        gridspec_kw={"height_ratios": [1.2, max(1.0, 0.35 * len(pols))]})
    lead = pols[0]
    by_cause = crashes_by_cause(ds).xs(lead, level="policy")
    months = by_cause.index.to_numpy()
    bottom = np.zeros(len(months))
    greys = ["0.15", "0.45", "0.65", "0.85"]
    hatches = ["", "//", "..", "xx"]
    for j, cause in enumerate(CAUSES):
        v = by_cause[f"{cause}_crashes_per_pond"].to_numpy()
        ax1.bar(months, v, 0.8, bottom=bottom, color=greys[j % len(greys)],
                hatch=hatches[j % len(hatches)], edgecolor="white", label=cause)
        bottom += v
    ax1.set_xticks(range(1, 13), [pd.Timestamp(2001, m, 1).strftime("%b")
                                  for m in range(1, 13)])
    ax1.set_xlim(0.4, 12.6)
    fs.from_zero(ax1, top=max(float(bottom.max()) * 1.15, 1e-3))
    ax1.set_ylabel(f"crashes per pond\n[month$^{{-1}}$], {lead}")
    ax1.legend(fontsize=8, ncol=1, loc="upper left", bbox_to_anchor=(1.0, 1.0),
               title="cause", title_fontsize=8)
    ax1.grid(axis="y", alpha=0.3)
    prob = -np.expm1(-ds["hazard"].astype(float)).mean("member")  # daily crash probability
    x0, x1 = mdates.date2num(dates[0].to_pydatetime()), mdates.date2num(
        dates[-1].to_pydatetime())
    img = ax2.imshow(100 * prob.transpose("policy", "day").values, aspect="auto",
                     cmap="Greys", interpolation="nearest",
                     extent=[x0, x1, len(pols) - 0.5, -0.5], vmin=0)
    ax2.set_yticks(range(len(pols)), pols, fontsize=8)
    ax2.set_ylabel("policy")
    ax2.xaxis_date()
    _date_axis(ax2, dates)
    cbar = fig.colorbar(img, ax=ax2, pad=0.01)
    cbar.set_label("daily crash probability\n[%] (member mean)", fontsize=8)
    return fs.save(fig, path)


def compare_figures(ds, table, crash, out_dir) -> list[Path]:
    """Figures of `pondsim compare`: trajectories with K and harvests, seasonal yields,
    and the crash-risk calendar."""
    out_dir = Path(out_dir)
    return [trajectories_figure(ds, crash, out_dir / "trajectories.png"),
            seasonal_figure(ds, table, out_dir / "seasonal_yield.png"),
            risk_calendar_figure(ds, crash, out_dir / "risk_calendar.png")]


__all__ = ["compare_figures", "density_figure", "productivity_figure", "risk_calendar_figure",
           "run_figures", "seasonal_figure", "trajectories_figure"]
