"""Figures of ``pondsim outlook`` and the report: annual-yield exceedance curves with the
P50 and P90 marked, monthly 10th-90th percentile bands as small multiples (one panel per policy, the
other policies' medians in grey behind), the monthly drivers and the Sobol indices.

Exceedance convention (project finance): P90 is the annual yield reached or exceeded
with probability 0.9 (the 10th percentile of the members), P50 the median.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd

from pondsim.glossary import G_M2_TO_T_HA
from pondsim.results import figstyle as fs

#: Exceedance levels marked on the curves [%].
MARKED = (50, 90)


def annual_yield_t_ha(ds):
    """Annual harvested yield per policy and member [t ha-1 yr-1]."""
    # computed here: the outlook's Dataset may be file-backed (one read, not one per use)
    return (ds["harvested"].sum("day") * G_M2_TO_T_HA * 365.0 / ds.sizes["day"]).compute()


def exceedance_value(values, pct: float) -> float:
    """The value reached or exceeded with probability *pct*/100 (P90 = 10th percentile)."""
    return float(np.percentile(np.asarray(values, float), 100 - pct))


def exceedance_figure(ds, path, annual_table=None) -> Path:
    """Annual yield against its probability of exceedance, one curve per policy, with the
    P50 and P90 of each policy marked and their values in the legend; with
    ``annual_table`` (:func:`pondsim.studies.outlook.annual_table`) the marks carry their
    95 % Monte Carlo intervals as error bars."""
    pols = [str(p) for p in ds["policy"].values]
    styles = fs.policy_styles(pols)
    annual = annual_yield_t_ha(ds)
    n = int(annual.sizes.get("member", 1))
    each = " each" if ds.attrs.get("draws_nested") else ""
    ens = (f"{ds.attrs.get('weather_years', 1)} weather years × "
           f"{ds.attrs.get('parameter_draws', 1)} parameter draws{each} × "
           f"{ds.attrs.get('replicates', 1)} crash replicates ({n} members)")
    fig, ax = fs.new_figure("Annual yield: probability of exceedance", fs.context_of(ds, ens),
                            size=(10, 6.2), source=fs.source_of(ds))
    for p in pols:
        st = styles[p]
        a = np.sort(annual.sel(policy=p).values.ravel())[::-1]
        exceed = 100 * (np.arange(1, a.size + 1) - 0.5) / a.size  # Weibull-type positions
        row = annual_table.loc[p] if annual_table is not None and p in annual_table.index \
            else None  # the outlook's own P-values (and intervals) where given
        marks = {q: (exceedance_value(a, q) if row is None else float(row[f"P{q}_t_ha_yr"]))
                 for q in MARKED}
        label = f"{p}: " + ", ".join(f"P{q} {v:,.1f}" for q, v in marks.items())
        line, = ax.plot(exceed, a, lw=1.6, label=label, **fs.line_kw(st))
        pts, = ax.plot(list(marks), list(marks.values()), st["marker"], ms=7,
                       color=st["color"], mec="k", mew=0.6, linestyle="none")
        artists = [line, pts]
        if row is not None:
            for q in MARKED:
                v = marks[q]
                err = np.array([[v - row[f"P{q}_low_t_ha_yr"]],
                                [row[f"P{q}_high_t_ha_yr"] - v]])
                bars = ax.errorbar([q], [v], yerr=np.nan_to_num(err.clip(0)), fmt="none",
                                   capsize=4, color=st["color"], zorder=4)
                artists += list(bars.lines[1]) + list(bars.lines[2])
        fs.tag_policy(artists, p)
    ax.set_xlim(0, 100)
    fs.from_zero(ax, top=1.15 * float(annual.max()) if annual.size else 1.0)
    for q in MARKED:
        ax.axvline(q, color="0.45", lw=0.9, linestyle=":")
        ax.annotate(f"P{q}", (q, 1.0), xycoords=("data", "axes fraction"),
                    xytext=(0, 3), textcoords="offset points", ha="center", va="bottom",
                    fontsize=9, fontweight="bold")
    ax.set_xlabel("probability that the annual yield is reached or exceeded [%]\n"
                  "(P90 = the yield reached or exceeded with probability 0.9)")
    ax.set_ylabel("annual biomass yield [t ha$^{-1}$ yr$^{-1}$ AFDW]")
    ax.grid(alpha=0.3)
    fs.legend_below(fig, ncol=2, title="policy: P50, P90 [t ha$^{-1}$ yr$^{-1}$]",
                    title_fontsize=8)
    return fs.save(fig, path)


def bands_figure(ds, bands: pd.DataFrame, path) -> Path:
    """Monthly harvested productivity, 10th-90th percentile band and median per policy in
    small multiples (shared axes), the other policies' medians in grey behind."""
    pols = [str(p) for p in ds["policy"].values]
    styles = fs.policy_styles(pols)
    months = np.arange(1, 13)
    ncols = 1 if len(pols) == 1 else 2
    nrows = math.ceil(len(pols) / ncols)
    fig, axes = fs.new_figure(
        "Monthly harvested productivity: median and 10th–90th percentile band",
        fs.context_of(ds, "over weather years and parameter draws"),
        nrows=nrows, ncols=ncols, size=(11, 2.7 * nrows + 2.0),
        source=fs.source_of(ds), sharex=True, sharey=True,
        squeeze=False)
    data = {p: bands.xs(p, level="policy").reindex(months) for p in pols}
    top = max(float(np.nanmax(d["pct90_g_m2_d"].to_numpy())) for d in data.values())
    for ax, p in zip(axes.ravel(), pols, strict=False):
        st = styles[p]
        for other in pols:
            if other != p:
                ax.plot(months, data[other]["pct50_g_m2_d"], color="0.7", lw=0.9,
                        label="other policies, P50")
        b = data[p]
        band = ax.fill_between(months, b["pct10_g_m2_d"], b["pct90_g_m2_d"], color=st["color"],
                               alpha=0.3, lw=0, label="10th–90th percentile")
        lims = [ax.plot(months, b[c], color=st["color"], lw=0.8, linestyle=":")[0]
                for c in ("pct10_g_m2_d", "pct90_g_m2_d")]
        line, = ax.plot(months, b["pct50_g_m2_d"], color=st["color"], marker="o", ms=3.5,
                        lw=1.8, label="P50")
        fs.tag_policy([band, line, *lims], p)
        ax.set_title(p, loc="left", fontsize=10)
        ax.grid(alpha=0.3)
        fs.month_axis(ax, label=False)
        ax.set_ylim(0, 1.1 * max(top, 1e-3))
        ax.set_gid("amount")
    for ax in axes.ravel()[len(pols):]:
        ax.set_visible(False)
    for ax in axes[:, 0]:
        ax.set_ylabel("productivity\n[g m$^{-2}$ d$^{-1}$]")
    for ax in axes[-1, :]:
        ax.set_xlabel("month")
    h, lab = axes[0, 0].get_legend_handles_labels()
    seen = dict(zip(lab, h, strict=True))
    fs.legend_below(fig, list(seen.values()), list(seen), ncol=3)
    return fs.save(fig, path)


#: Readable names of the strain parameters that can be uncertain.
PARAMETER_LABELS = {
    "mu_max_per_d": "maximum growth rate µmax",
    "light_param_umol_m2_s": "light response parameter",
    "t_min_c": "minimum temperature",
    "t_opt_c": "optimum temperature",
    "t_max_c": "maximum temperature",
    "maintenance_per_d": "maintenance rate",
    "maintenance_theta": "maintenance temperature coefficient",
    "maintenance_t_ref_c": "maintenance reference temperature",
    "k_biomass_m2_g": "biomass light extinction",
    "k_background_per_m": "background light extinction",
    "nutrient_limit_g_m3": "nutrient cap on K",
}


def parameter_label(key: str) -> str:
    """A readable name with unit for a strain parameter key (``mu_max_per_d`` ->
    ``maximum growth rate µmax [d⁻¹]``); unknown keys are returned as they are."""
    from pondsim.scenario import SCHEMA

    name = PARAMETER_LABELS.get(key)
    if name is None:
        return key
    unit = SCHEMA["strain"][key].unit if key in SCHEMA["strain"] else ""
    unit = {"1": "–", "d-1": "d⁻¹", "umol m-2 s-1": "µmol m⁻² s⁻¹", "degC": "°C",
            "m2 g-1": "m² g⁻¹", "m-1": "m⁻¹", "g m-3": "g m⁻³"}.get(unit, unit)
    return f"{name} [{unit}]" if unit else name


def sensitivity_figure(ds, sens: pd.DataFrame, path, policy: str | None = None) -> Path:
    """First-order and total Sobol indices of annual yield with 95 % bootstrap intervals."""
    sens = sens.sort_values("total", ascending=True)
    y = np.arange(len(sens))
    extra = f"annual yield of {policy}" if policy else "annual yield"
    fig, ax = fs.new_figure("Which uncertain parameters move the annual yield",
                            fs.context_of(ds, extra), size=(10, 0.55 * len(sens) + 2.8),
                            source=fs.source_of(ds))
    for off, col, color, hatch, label in (
            (-0.2, "first_order", fs.OKABE_ITO["blue"], "", "first order"),
            (0.2, "total", fs.OKABE_ITO["orange"], "//", "total (with interactions)")):
        err = np.vstack([sens[col] - sens[f"{col}_low"], sens[f"{col}_high"] - sens[col]])
        ax.barh(y + off, sens[col], 0.4, color=color, hatch=hatch, edgecolor="white",
                label=label, xerr=err.clip(0), error_kw={"lw": 0.9, "capsize": 2.5})
    ax.set_yticks(y, [parameter_label(k) for k in sens.index])
    ax.axvline(0, color="k", lw=0.8)
    ax.set_xlabel("Sobol index of annual yield [–] (whiskers: 95 % bootstrap interval)")
    ax.grid(axis="x", alpha=0.3)
    fs.legend_below(fig, ncol=2)
    return fs.save(fig, path)


def outlook_figures(ds, bands, sens, out_dir, policy: str | None = None,
                    annual_table=None) -> list[Path]:
    """Exceedance curves of annual yield, monthly 10th–90th percentile bands, Sobol indices."""
    out_dir = Path(out_dir)
    written = [exceedance_figure(ds, out_dir / "exceedance.png", annual_table),
               bands_figure(ds, bands, out_dir / "monthly_bands.png")]
    if sens is not None and len(sens):
        written.append(sensitivity_figure(ds, sens, out_dir / "sensitivity.png", policy))
    return written


def drivers_figure(drivers: pd.DataFrame, strain, path, *, context: str = "",
                   source: str | None = None) -> Path:
    """Monthly PAR, water temperature and K with their 10th-90th percentile bands over the ensemble,
    the strain's optimum and maximum temperature marked."""
    months = drivers.index.to_numpy()
    fig, axes = fs.new_figure("What drives growth, month by month", context, nrows=3,
                              size=(10, 9), source=source, sharex=True)
    panels = (("par_mol_m2_d", "daily PAR entering\nthe culture [mol m$^{-2}$ d$^{-1}$]",
               fs.OKABE_ITO["orange"], True),
              ("water_temperature_c", "water temperature,\nmonthly mean [°C]",
               fs.OKABE_ITO["blue"], False),
              ("k_g_m3", "carrying capacity K,\nmonthly mean [g m$^{-3}$]",
               fs.OKABE_ITO["bluish green"], True))
    for ax, (col, ylabel, color, amount) in zip(axes, panels, strict=True):
        ax.fill_between(months, drivers[f"{col}_pct10"], drivers[f"{col}_pct90"], color=color,
                        alpha=0.25, lw=0.0,
                        label="10th–90th percentile over weather years and draws")
        ax.plot(months, drivers[f"{col}_pct50"], color=color, marker="o", ms=4, lw=1.6,
                label="median (P50)")
        ax.set_ylabel(ylabel)
        ax.grid(alpha=0.3)
        if amount:
            fs.from_zero(ax, top=1.12 * float(np.nanmax(drivers[f"{col}_pct90"])))
    ax = axes[1]
    for value, style, name in ((strain.t_opt_c, "--", "strain optimum"),
                               (strain.t_max_c, "-.", "strain maximum")):
        ax.axhline(value, color="k", lw=0.9, linestyle=style, label=f"{name} {value:g} °C")
    low = min(ax.get_ylim()[0], float(np.nanmin(drivers["water_temperature_c_pct10"])) - 2)
    ax.set_ylim(low, max(strain.t_max_c + 3, ax.get_ylim()[1]))
    for ax in axes:
        fs.legend_right(ax)
    fs.month_axis(axes[-1], months)
    return fs.save(fig, path)


__all__ = ["MARKED", "annual_yield_t_ha", "bands_figure", "drivers_figure",
           "exceedance_figure", "exceedance_value", "outlook_figures", "parameter_label",
           "sensitivity_figure"]
