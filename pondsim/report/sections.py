"""The sections of the report page, each built from the CSV tables read back from the
output folder."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from pondsim.report.assemble import _format_value
from pondsim.report.html import (
    _describe,
    _figure,
    _month_name,
    _num,
    _p,
    _table,
    _td,
    _text_td,
    _unit,
    esc,
    section_number,
)


def _question(scenario, manifest: dict, drivers: pd.DataFrame) -> str:
    pond, strain, site = scenario.pond, scenario.strain, scenario.site
    lat = site.latitude if site.latitude is not None else manifest["site"]["latitude"]
    lon = site.longitude if site.longitude is not None else manifest["site"]["longitude"]
    farm_ha = pond.farm_area_m2 / 1e4
    where = f"{site.name}"
    if lat is not None and lon is not None:
        where += f" (latitude {lat:.3f}°, longitude {lon:.3f}°"
        if site.elevation_m is not None:
            where += f", {site.elevation_m:g} m above sea level"
        where += ")"
    body = [_p(f"If {pond.count} open raceway pond(s) of {pond.area_m2:,.0f} m² each "
               f"({farm_ha:,.2f} ha of water) are run at {pond.depth_m:g} m depth at "
               f"{where}, growing {strain.name}: how much algal biomass will they give "
               "each month and each year, which harvest rule should run in each season, "
               "how often will cultures crash, and what will the ponds consume?")]
    ens = manifest["ensemble"]
    w = scenario.weather
    weather = (f"weather file {manifest['weather_file']} (format {w.format})"
               if w.source == "file" else "clear-sky weather built from monthly normals")
    rows = [
        ("study", scenario.study_name),
        ("study year", f"{scenario.year} ({ens['days']} days)"),
        ("site", where),
        ("weather", weather),
        ("weather basis", manifest.get("weather_basis") or "not stated"),
        ("site check", _site_check_text(manifest)),
        ("ensemble", f"{ens['weather_years']} weather year(s) × {ens['parameter_draws']} "
                     f"parameter draw(s) × {ens['replicates']} crash replicate(s) = "
                     f"{ens['members']} members per policy"),
        ("ponds", f"{pond.count} × {pond.area_m2:,.0f} m², depth {pond.depth_m:g} m, "
                  f"{pond.volume_m3:,.0f} m³ of culture per pond; farm water surface "
                  f"{pond.farm_area_m2:,.0f} m²"),
        ("harvest", f"decisions at {scenario.harvest.hour:02d}:00 local standard time; "
                    f"recovery {scenario.harvest.recovery_efficiency:.0%}; capacity "
                    + ("unlimited" if scenario.harvest.capacity_m3_per_d is None else
                       f"{scenario.harvest.capacity_m3_per_d:,.0f} m³ d⁻¹ per pond")),
        ("strain", f"{strain.name}: {strain.growth_form.replace('_', '-')} growth, "
                   f"µmax {strain.mu_max_per_d:g} d⁻¹, {strain.light_model.replace('_', '–')}"
                   f" light response with parameter {strain.light_param_umol_m2_s:g} "
                   f"µmol m⁻² s⁻¹, cardinal temperatures {strain.t_min_c:g} / "
                   f"{strain.t_opt_c:g} / {strain.t_max_c:g} °C, maintenance "
                   f"{strain.maintenance_per_d:g} d⁻¹ at {strain.maintenance_t_ref_c:g} °C"),
        ("inoculation", f"{scenario.inoculation.density_g_m3:g} g m⁻³ on "
                        + (str(scenario.inoculation.start_date)
                           if scenario.inoculation.start_date else f"1 January {scenario.year}")
                        + f"; {scenario.inoculation.restart_days} d out of service after a "
                          "crash"),
    ]
    body.append(_table(["item", "value"], [[f'<th scope="row">{esc(k)}</th>', _text_td(v)]
                                           for k, v in rows],
                       caption="Who, what and where", table_id="study-table"))
    par = drivers["par_mol_m2_d_pct50"]
    tw = drivers["water_temperature_c_pct50"]
    body.append(_p(f"Across the year the median month brings {par.min():.1f} to "
                   f"{par.max():.1f} mol m⁻² d⁻¹ of PAR into the culture, and the pond's "
                   f"monthly mean water temperature runs from {tw.min():.1f} to "
                   f"{tw.max():.1f} °C (section {section_number('monthly')})."))
    check = manifest.get("site_check")
    if check and str(check).startswith("FAILED"):
        body.append(_p(f"WARNING: the site check failed ({check}). The scenario's site and "
                       "the weather file disagree (coordinates, time zone or the hour of "
                       "the irradiance peak); a wrong offset or longitude sign shifts the "
                       "sun against the clock and can ruin every number in this report.",
                       "note"))
    for note in manifest.get("weather_notes", []):
        body.append(_p(f"Weather note: {note}", "note"))
    return "\n".join(body)


def _site_check_text(manifest: dict) -> str:
    """The site check's result (scenario site vs weather header and solar noon)."""
    check = manifest.get("site_check")
    if not check:
        return "not run"
    return ("WARNING: " if str(check).startswith("FAILED") else "") + str(check)


def _headline(out: Path, scenario, manifest: dict, annual, summary, best) -> str:
    lead = manifest["lead_policy"]
    r = annual.loc[lead]
    cards = [("P50_farm_t_yr", 1, "P50 annual biomass, farm [t AFDW yr⁻¹]"),
             ("P90_farm_t_yr", 1, "P90 annual biomass, farm [t AFDW yr⁻¹]"),
             ("mean_g_m2_d", 2, "mean areal productivity [g m⁻² d⁻¹]"),
             ("expected_crashes_yr", 2, "expected crashes per pond per year [yr⁻¹]")]
    body = [_p("For the lead policy or plan (the highest P50 among those that never "
               f"wash the culture out), {lead!s} ({_describe(scenario, lead)}):"),
            '<div class="cards" id="headline-cards">']
    for col, digits, label in cards:
        body.append(f'<div class="card"><span class="value" data-col="{esc(col)}" '
                    f'data-value="{esc(repr(float(r[col])))}">{_num(r[col], digits)}</span>'
                    f'<span class="label">{esc(label)}</span></div>')
    body.append("</div>")
    headers = ["policy or plan", "mean [t ha⁻¹ yr⁻¹]", "P50 [t ha⁻¹ yr⁻¹]",
               "P90 [t ha⁻¹ yr⁻¹]", "P50 farm [t AFDW yr⁻¹]", "P90 farm [t AFDW yr⁻¹]",
               "mean productivity [g m⁻² d⁻¹]", "expected crashes [yr⁻¹]",
               "solar efficiency [%]"]
    cols = [("mean_t_ha_yr", 1), ("P50_t_ha_yr", 1), ("P90_t_ha_yr", 1),
            ("P50_farm_t_yr", 1), ("P90_farm_t_yr", 1), ("mean_g_m2_d", 2),
            ("expected_crashes_yr", 2)]
    rows, attrs = [], []
    for pol, row in annual.iterrows():
        cells = [f'<th scope="row">{esc(pol)}{" (lead)" if pol == lead else ""}</th>']
        cells += [_td(row[c], d, col=c) for c, d in cols]
        eff = summary.loc[pol, "efficiency_solar_pct"] if pol in summary.index else np.nan
        cells.append(_td(eff, 2, col="efficiency_solar_pct"))
        rows.append(cells)
        attrs.append(f' data-policy="{esc(pol)}"' + (' class="lead"' if pol == lead else ""))
    body.append(_table(headers, rows, caption="Annual yield over the ensemble (P90 = yield "
                       "exceeded in 90 % of members)", table_id="headline-table",
                       row_attrs=attrs))
    if manifest.get("crash_basis"):
        body.append(_p(f"Basis of these numbers: {manifest['crash_basis']}.", "note"))
    implausible = [p for p in summary.index if not bool(summary.loc[p, "plausible"])]
    for p in implausible:
        body.append(_p(f"Warning: {p} converts more than 4.6 % of total solar radiation "
                       "into biomass, above the published maximum for C3 photosynthesis "
                       "(Zhu, Long & Ort 2008); check the strain parameters."))
    rows = []
    for season, row in best.iterrows():
        rows.append([f'<th scope="row">{esc(season)}</th>', _text_td(row["best_policy"]),
                     _td(row["productivity_g_m2_d"], 2, col="productivity_g_m2_d"),
                     _td(row["p_crash"], 0, col="p_crash", pct=True),
                     _text_td("yes" if _truthy(row["within_risk_limit"]) else
                              "no: least risky shown")])
    body.append(_table(["season", "best policy or plan", "productivity [g m⁻² d⁻¹]",
                        "P(≥ 1 crash in the season) [%]", "within the risk limit"], rows,
                       caption="Best plan per season", table_id="headline-seasons",
                       row_attrs=[f' data-season="{esc(s)}"' for s in best.index]))
    body.append(_figure(out, "exceedance.png",
                        "Line chart of annual biomass yield in tonnes per hectare per year "
                        "against the probability of exceedance in percent, one line per "
                        "policy, with each policy's P50 and P90 marked and their values in "
                        "the legend.",
                        "Exceedance curves: the share of ensemble members whose annual "
                        "yield reaches at least the value on the vertical axis."))
    return "\n".join(body)


def _truthy(v) -> bool:
    return v is True or str(v).strip().lower() in ("true", "1", "yes")


def _pond_water(out: Path, scenario) -> list[str]:
    """Monthly pond water and the hours beyond the strain's cardinal temperatures."""
    path = out / "pond_water_monthly.csv"
    if not path.is_file():
        return []
    from pondsim.report.html import read_table

    water = read_table(path, index_col="month")
    st = scenario.strain
    cols = [("water_temperature_mean_c", 1, "water temperature, mean [°C]"),
            ("evaporation_mm", 0, "evaporation [mm]"), ("rain_mm", 0, "rain [mm]"),
            ("hours_above_t_opt", 0, f"hours above the optimum {st.t_opt_c:g} °C [h]"),
            ("hours_above_t_max", 0, f"hours above the maximum {st.t_max_c:g} °C [h]"),
            ("hours_below_t_min", 0, f"hours below the minimum {st.t_min_c:g} °C [h]")]
    cols = [c for c in cols if c[0] in water.columns]
    rows = []
    for m, r in water.iterrows():
        label = "year" if str(m) == "year" else _month_name(m)
        cells = [f'<th scope="row">{label}</th>']
        for col, digits, _ in cols:
            v = r[col]
            cells.append('<td class="nowrap">no data</td>' if col == "rain_mm" and
                         not np.isfinite(float(v)) else _td(v, digits, col=col))
        rows.append(cells)
    year = water.loc["year"] if "year" in water.index else None
    text = ("The pond water month by month (means over the ensemble's members; rain as "
            "the weather file gives it, \"no data\" where it has none) and the hours the "
            "water spends beyond the strain's cardinal temperatures: above the optimum "
            "growth slows, above the maximum it stops and the heat cause of the crash "
            "hazard acts, below the minimum it stops.")
    if year is not None and "hours_above_t_max" in water.columns:
        text += (f" Over the year: {_num(year['hours_above_t_max'], 0)} h above the "
                 f"maximum, {_num(year.get('hours_below_t_min', np.nan), 0)} h below the "
                 "minimum.")
    return [_p(text), _table(["month"] + [c[2] for c in cols], rows,
                             caption="Pond water and stress hours by month",
                             table_id="pond-water-table",
                             row_attrs=[f' data-month="{esc(m)}"' for m in water.index])]


def _monthly(out: Path, manifest: dict, drivers, bands, scenario=None) -> str:
    lead = manifest["lead_policy"]
    lead_bands = bands.xs(lead, level="policy") if lead in bands.index.get_level_values(0) \
        else None
    rows = []
    for m, r in drivers.iterrows():
        cells = [f'<th scope="row">{_month_name(m)}</th>',
                 _td(r["ghi_MJ_m2_d_pct50"], 1, col="ghi_MJ_m2_d_pct50"),
                 _td(r["par_mol_m2_d_pct50"], 1, col="par_mol_m2_d_pct50"),
                 _td(r["water_temperature_c_pct50"], 1, col="water_temperature_c_pct50"),
                 _td(r["k_g_m3_pct50"], 0, col="k_g_m3_pct50"),
                 _td(r["evaporation_mm_d_pct50"], 1, col="evaporation_mm_d_pct50")]
        if lead_bands is not None:
            b = lead_bands.loc[m]
            cells += [_td(b["pct10_g_m2_d"], 2, col="pct10_g_m2_d"),
                      _td(b["pct50_g_m2_d"], 2, col="pct50_g_m2_d"),
                      _td(b["pct90_g_m2_d"], 2, col="pct90_g_m2_d")]
        rows.append(cells)
    headers = ["month", "GHI [MJ m⁻² d⁻¹]", "PAR [mol m⁻² d⁻¹]", "water temperature [°C]",
               "K [g m⁻³]", "evaporation [mm d⁻¹]", f"{lead} 10th pct [g m⁻² d⁻¹]",
               f"{lead} median [g m⁻² d⁻¹]", f"{lead} 90th pct [g m⁻² d⁻¹]"]
    body = [_p("Medians over the ensemble of monthly means; the yield columns are the "
               "harvested productivity of the lead policy, 10th to 90th percentile over "
               "members."),
            _table(headers, rows, caption="Month by month", table_id="monthly-table"),
            _figure(out, "monthly_drivers.png",
                    "Three stacked monthly charts: daily PAR entering the culture in mol "
                    "per square metre per day, monthly mean water temperature in degrees "
                    "Celsius with the strain's optimum and maximum marked, and the "
                    "carrying capacity K in grams per cubic metre; each a median line "
                    "with a hatched 10th to 90th percentile band.",
                    "Light, water temperature and carrying capacity by month (median and "
                    "10th–90th percentile over weather years and parameter draws)."),
            _figure(out, "monthly_bands.png",
                    "Small multiples, one panel per policy: harvested productivity in grams "
                    "per square metre per day by month, the median line with a shaded 10th "
                    "to 90th percentile band, the other policies' medians in grey behind.",
                    "Yield by month: harvested productivity, median with the 10th–90th "
                    "percentile band "
                    "over ensemble members.")]
    if scenario is not None:
        body += _pond_water(out, scenario)
    return "\n".join(body)


def _washout(scenario, summary) -> list[str]:
    """Which rules wash the culture out (held at the viable floor too long)."""
    from pondsim.operations.harvest import floor_of

    if "washed_out_pct" not in summary.columns:
        return []
    h = scenario.harvest
    rows = []
    for pol, r in summary.iterrows():
        rows.append([f'<th scope="row">{esc(pol)}</th>',
                     _td(r["washed_out_pct"], 0, col="washed_out_pct"),
                     _td(r["days_at_floor"], 1, col="days_at_floor"),
                     _text_td("WASHED OUT in some members" if float(r["washed_out_pct"]) > 0
                              else "no")])
    washed = [p for p in summary.index if float(summary.loc[p, "washed_out_pct"]) > 0]
    text = (f"No harvest leaves less than the viable floor of {floor_of(scenario):g} g m⁻³ "
            f"in a pond; a member held at the floor for more than {h.washout_days} days "
            "in a row is washed out: the rule dilutes faster than the culture grows, or "
            "the culture cannot grow there at that time of year.")
    text += (" Washed out in some members: " + ", ".join(washed) + "; the best plan per "
             "season avoids a rule in a season where it washes out." if washed else
             " No rule washes out.")
    return [_p(text), _table(["policy or plan", "members washed out [%]",
                              "days at the floor [d yr⁻¹]", "washout"], rows,
                             caption="Washout over the year (member means)",
                             table_id="washout-table",
                             row_attrs=[f' data-policy="{esc(p)}"' for p in summary.index])]


def _dewatering(out: Path, scenario, manifest: dict) -> list[str]:
    """The farm's dewatering load per season against the plant's capacity."""
    path = out / "dewatering_check.csv"
    if not path.is_file():
        return []
    from pondsim.operations.plan_runs import DEWATERING_WINDOW_D
    from pondsim.report.html import read_table

    check = read_table(path, index_col=["policy", "season"])
    cap = scenario.harvest.dewatering_capacity_m3_per_d
    periods = list(pd.unique(check.index.get_level_values("season")))
    seasons = [p for p in periods if p != "year"]
    rows, attrs = [], []
    for pol in pd.unique(check.index.get_level_values("policy")):
        part = check.xs(pol, level="policy")
        cells = [f'<th scope="row">{esc(pol)}</th>']
        for season in seasons:
            r = part.loc[season]
            cell = _td(r["peak_7d_mean_farm_m3_d"], 0, col="peak_7d_mean_farm_m3_d")
            if str(r["within_capacity"]) == "no":
                cell = cell.replace('class="num"', 'class="num over"').replace(
                    "</td>", " (over)</td>")
            cells.append(cell)
        year = part.loc["year"]
        ok = str(year["within_capacity"])
        cells += [_td(year["dewatering_farm_m3"], 0, col="dewatering_farm_m3"),
                  _text_td("OVER CAPACITY" if ok == "no" else ok)]
        rows.append(cells)
        attrs.append(f' data-policy="{esc(pol)}"')
    over = sorted({p for (p, s), r in check.iterrows()
                   if str(r["within_capacity"]) == "no"})
    text = (f"The dewatering check that pondsim tune applies: the farm's daily culture "
            f"volume sent to dewatering, as a {DEWATERING_WINDOW_D}-day running mean "
            "(ponds on a schedule of a few days are staggered), peak per season")
    if cap is None:
        text += (", against no capacity: harvest.dewatering_capacity_m3_per_d is not set, "
                 "so the plant is assumed to take any load.")
    else:
        text += (f", against the plant's {cap:,.0f} m³ d⁻¹ "
                 "(harvest.dewatering_capacity_m3_per_d). "
                 + ("Over capacity in some season: " + ", ".join(over) + "."
                    if over else "Every rule stays within it."))
    headers = (["policy or plan"]
               + [f"{s}: peak {DEWATERING_WINDOW_D}-day mean [m³ d⁻¹]" for s in seasons]
               + ["dewatering per year [m³ farm⁻¹]", "within capacity all year"])
    return [_p(text), _table(headers, rows, caption="Dewatering load of the farm by season "
                             "(member means)", table_id="dewatering-table",
                             row_attrs=attrs)]


def _harvest(out: Path, scenario, comparison, best, summary=None, manifest=None) -> str:
    limit = scenario.crash.max_season_probability
    body = [_p("Each harvest rule and season plan was run on every member of the ensemble. "
               f"For each season the best rule is the one with the most biomass whose "
               f"probability of at least one crash in the season stays within the risk "
               f"limit of {limit:.0%} (crash.max_season_probability) and whose culture "
               "never washes out there; where no rule meets both, the least risky is "
               "named and flagged. The seasonal winners "
               "together make a plan; to get its annual numbers, write it as a [[plan]] "
               "in the scenario (or run pondsim tune) and run the report again.")]
    names = list(pd.unique(comparison.index.get_level_values("policy")))
    body.append(_table(["policy or plan", "rule"],
                       [[f'<th scope="row">{esc(n)}</th>', _text_td(_describe(scenario, n))]
                        for n in names], caption="Rules compared"))
    months = {s.name: ", ".join(_month_name(m) for m in s.months) for s in scenario.seasons}
    rows = []
    for season, r in best.iterrows():
        rows.append([f'<th scope="row">{esc(season)}</th>', _text_td(months.get(season, "")),
                     _text_td(r["best_policy"]),
                     _td(r["yield_t_ha"], 2, col="yield_t_ha"),
                     _td(r["productivity_g_m2_d"], 2, col="productivity_g_m2_d"),
                     _td(r["p_crash"], 0, col="p_crash", pct=True),
                     _text_td("yes" if _truthy(r["within_risk_limit"]) else
                              "no: least risky shown")])
    body.append(_table(["season", "months", "best policy or plan",
                        "yield in the season [t ha⁻¹]", "productivity [g m⁻² d⁻¹]",
                        "P(≥ 1 crash) [%]", "within the risk limit"], rows,
                       caption="The harvest plan by season", table_id="plan-table"))
    rows = []
    for (season, pol), r in comparison.iterrows():
        rows.append([_text_td(season, nowrap=True), _text_td(pol),
                     _td(r["yield_t_ha"], 2), _td(r["yield_pct10_t_ha"], 2),
                     _td(r["yield_pct90_t_ha"], 2), _td(r["productivity_g_m2_d"], 2),
                     _td(r["harvests"], 1), _td(r["harvest_volume_m3"], 0),
                     _td(r["expected_crashes"], 2), _td(r["p_crash"], 0, pct=True),
                     _td(r["days_at_risk"], 1),
                     _td(r.get("p_washout", np.nan), 0, pct=True, col="p_washout")])
    body.append(_table(["season", "policy or plan", "yield mean [t ha⁻¹]",
                        "yield 10th pct [t ha⁻¹]", "yield 90th pct [t ha⁻¹]",
                        "productivity [g m⁻² d⁻¹]", "harvests [count]",
                        "harvested volume per pond [m³]", "expected crashes [count]",
                        "P(≥ 1 crash) [%]", "days at risk [d]", "P(washout) [%]"], rows,
                       caption="Every rule in every season (member means; 10th/90th "
                               "percentiles over "
                               "members)", table_id="comparison-table"))
    body.append(_figure(out, "seasonal_yield.png",
                        "Grouped bar chart of harvested productivity in grams per square "
                        "metre per day for each season and policy, with 10th to 90th "
                        "percentile error "
                        "bars; bars are told apart by hatching.",
                        "Seasonal yield by rule (bars: 10th–90th percentile over members)."))
    body.append(_figure(out, "trajectories.png",
                        "One panel per policy: culture density in grams per cubic metre "
                        "through the year with the carrying capacity K, the 10th to 90th "
                        "percentile "
                        "band over members, harvest days and crashes of one member.",
                        "Density through the year by rule, with the ensemble's median K; "
                        "harvests and crashes of one member on "
                        f"{(manifest or {}).get('weather_basis') or 'the study weather'}."))
    if summary is not None:
        body += _washout(scenario, summary)
    body += _dewatering(out, scenario, manifest or {})
    return "\n".join(body)


def _sensitivity(out: Path, scenario, manifest: dict, sens) -> str:
    from pondsim.scenario import SCHEMA

    if sens is None:
        return _p("Not computed: the scenario gives no strain parameter a distribution in "
                  "[uncertainty]. Add some (for example mu_max_per_d = { distribution = "
                  "\"normal\", sd = 0.2 }) to learn which assumptions move the answer.")
    lead = manifest["lead_policy"]
    ranked = sens.sort_values("total", ascending=False)
    top = ranked.index[0]
    body = [_p(f"Sobol indices of the annual yield of {lead} on the study year's weather, "
               f"without crashes, from {manifest['options']['sobol_samples']} base samples. "
               "The first-order index is the share of the yield's variance that a parameter "
               "explains alone; the total index adds its interactions with the others. "
               f"Here {top} moves the answer most (total index "
               f"{ranked.loc[top, 'total']:.2f}). Indices near zero, or with intervals "
               "that reach below zero, mean the parameter hardly matters at its stated "
               "spread."),
            ]
    dists = {u.parameter: u for u in scenario.uncertainty.parameters}
    rows = []
    for name, r in ranked.iterrows():
        u = dists.get(name)
        spread = "" if u is None else u.distribution + ": " + _format_value(
            {k: getattr(u, k) for k in ("sd", "sigma", "low", "high")
             if getattr(u, k) is not None})
        unit = SCHEMA["strain"][name].unit if name in SCHEMA["strain"] else ""
        rows.append([f'<th scope="row">{esc(name)}</th>', _text_td(_unit(unit)),
                     _text_td(spread),
                     _td(r["first_order"], 2, col="first_order"),
                     _text_td(f"{_num(r['first_order_low'], 2)} to "
                              f"{_num(r['first_order_high'], 2)}"),
                     _td(r["total"], 2, col="total"),
                     _text_td(f"{_num(r['total_low'], 2)} to {_num(r['total_high'], 2)}")])
    body.append(_table(["parameter", "unit", "distribution", "first order [–]",
                        "95 % interval [–]", "total [–]", "95 % interval [–]"], rows,
                       caption="Sobol indices of annual yield, largest total first",
                       table_id="sensitivity-table"))
    body.append(_figure(out, "sensitivity.png",
                        "Horizontal bar chart of first-order and total Sobol indices of "
                        "annual yield for each uncertain parameter, with 95 % bootstrap "
                        "intervals; total bars hatched.",
                        "Which uncertain parameters move the annual yield."))
    return "\n".join(body)


def _assumptions(assumptions) -> str:
    body = [_p("Every value the study used. Source: scenario = set in the scenario file; "
               "default = pondsim's default, with the reason or reference in the note "
               "(ASSUMPTION marks a value to replace with site data); derived = computed "
               "from other values; run option = the report's command line.")]
    rows = []
    for _, r in assumptions.iterrows():
        unit = _unit(r["unit"]) if isinstance(r["unit"], str) else ""
        rows.append([f'<td class="key"><code>{esc(r["group"])}.{esc(r["key"])}</code></td>',
                     f'<td class="unit">{esc(unit)}</td>',
                     _text_td(r["value"]), _text_td(r["source"]),
                     _text_td(r["note"] if isinstance(r["note"], str) else "")])
    body.append(_table(["key", "unit", "value", "source", "meaning and source of the value"],
                       rows, caption="Assumptions and parameters",
                       table_id="assumptions-table",
                       widths=(30, 11, 17, 10, 32)))
    return "\n".join(body)


def _reproduce(manifest: dict, run_date: str) -> str:
    opt = manifest["options"]
    command = (f"pondsim report {manifest['scenario_file']} --years {opt['weather_years']} "
               f"--draws {opt['parameter_draws']} --members {opt['crash_replicates']} "
               f"--seed {opt['seed']}")
    rows = [("pondsim version", manifest["pondsim_version"]),
            ("scenario file", manifest["scenario_file"]),
            ("scenario file SHA-256", manifest["scenario_sha256"]),
            ("weather file", manifest["weather_file"] or "none (clear-sky mode)"),
            ("weather file SHA-256", manifest["weather_sha256"] or "—"),
            ("inputs hash (scenario + weather + version + options)",
             manifest["inputs_sha256"]),
            ("to reproduce", command)]
    table = _table(["item", "value"], [[f'<th scope="row">{esc(k)}</th>',
                                        f"<td><code>{esc(v)}</code></td>"] for k, v in rows],
                   caption="Reproducibility", table_id="reproduce-table")
    return (f'<p class="meta" id="run-date">Run date: page written {esc(run_date)} from '
            f"results computed {esc(manifest['computed'])}</p>\n" + table)

