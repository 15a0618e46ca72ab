"""The sections of the report page, each built from the CSV tables read back from the
output folder."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from pondsim.glossary import CAUTION
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
    for note in manifest.get("weather_notes", []):
        body.append(_p(f"Weather note: {note}", "note"))
    return "\n".join(body)


def _headline(out: Path, scenario, manifest: dict, annual, summary, best) -> str:
    lead = manifest["lead_policy"]
    r = annual.loc[lead]
    cards = [("P50_farm_t_yr", 1, "P50 annual biomass, farm [t AFDW yr⁻¹]"),
             ("P90_farm_t_yr", 1, "P90 annual biomass, farm [t AFDW yr⁻¹]"),
             ("mean_g_m2_d", 2, "mean areal productivity [g m⁻² d⁻¹]"),
             ("expected_crashes_yr", 2, "expected crashes per pond per year [yr⁻¹]")]
    body = [_p(f"For the policy or plan with the highest P50, {lead!s} "
               f"({_describe(scenario, lead)}):"),
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


def _monthly(out: Path, manifest: dict, drivers, bands) -> str:
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
    return "\n".join(body)


def _harvest(out: Path, scenario, comparison, best) -> str:
    limit = scenario.crash.max_season_probability
    body = [_p("Each harvest rule and season plan was run on every member of the ensemble. "
               f"For each season the best rule is the one with the most biomass whose "
               f"probability of at least one crash in the season stays within the risk "
               f"limit of {limit:.0%} (crash.max_season_probability). The seasonal winners "
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
                     _td(r["days_at_risk"], 1)])
    body.append(_table(["season", "policy or plan", "yield mean [t ha⁻¹]",
                        "yield 10th pct [t ha⁻¹]", "yield 90th pct [t ha⁻¹]",
                        "productivity [g m⁻² d⁻¹]", "harvests [count]",
                        "harvested volume per pond [m³]", "expected crashes [count]",
                        "P(≥ 1 crash) [%]", "days at risk [d]"], rows,
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
                        "Density through the year by rule, with the ensemble's median K."))
    return "\n".join(body)


def _crash(out: Path, scenario, crash_by_month, calendar) -> str:
    c = scenario.crash
    body = [_p("A culture is at risk when it stands near or above its carrying capacity "
               "while K falls (a cold or dull spell, the end of summer). The daily hazard "
               f"adds up to {c.stress_hazard_per_d:g} d⁻¹ of weather stress to a base of "
               f"{c.base_hazard_per_d:g} d⁻¹; a crash loses {c.loss_fraction:.0%} of the "
               "standing biomass and takes the pond out for "
               f"{scenario.inoculation.restart_days} d. These hazard values are "
               "ASSUMPTIONS until replaced by the site's own crash history."
               + ("" if c.enabled else " Crashes are switched off in this scenario: the "
                  "calendar shows where K falls, but no crash was drawn."))]
    pols = list(pd.unique(crash_by_month.index.get_level_values("policy")))
    months = sorted(set(crash_by_month.index.get_level_values("month")))
    for col, digits, unit, caption, tid in (
            ("expected_crashes", 3, "per month", "Expected crashes per pond by month "
             "(member means)", "crash-months"),
            ("daily_crash_probability_pct", 2, "%", "Mean daily crash probability by month",
             "crash-probability")):
        rows = []
        for m in months:
            rows.append([f'<th scope="row">{_month_name(m)}</th>']
                        + [_td(crash_by_month.loc[(p, m), col], digits) for p in pols])
        body.append(_table(["month"] + [f"{p} [{unit}]" for p in pols], rows,
                           caption=caption, table_id=tid))
    body.append(_figure(out, "risk_calendar.png",
                        "Two panels through the year: the percentage fall of the smoothed "
                        "carrying capacity over the window, and a greyscale strip per "
                        "policy of the daily crash probability in percent.",
                        "Crash-risk calendar: where K falls and how likely a crash is "
                        "(median K over the ensemble; single years see sharper falls)."))
    if len(calendar):
        ratio_cols = [col for col in calendar.columns if col.startswith("X/K ")]
        rows = []
        for _, r in calendar.iterrows():
            rows.append([_text_td(r["date"], nowrap=True), _text_td(r["season"], nowrap=True),
                         _td(r["K_smoothed_g_m3"], 0), _td(r["K_drop_pct"], 1)]
                        + [_td(r[col], 2) for col in ratio_cols])
        headers = ["date", "season", f"K, {c.window_days}-day mean [g m⁻³]",
                   f"fall of K over {c.window_days} d [%]"] + [
            f"X/K, {col[4:]} [–]" for col in ratio_cols]
        body.append(_table(headers, rows, caption="Days of the steepest fall of K and where "
                           "each rule stands then (median member)",
                           table_id="calendar-table"))
    else:
        body.append(_p("K does not fall on any day of the year."))
    return "\n".join(body)


BILL_LABELS = {"biomass_t": "biomass harvested [t AFDW]", "co2_t": "CO₂ supplied [t]",
               "n_t": "nitrogen N [t]", "p_t": "phosphorus P [t]",
               "makeup_water_m3": "makeup water [m³]", "mixing_MWh": "mixing energy [MWh]"}


def _inputs(manifest: dict, bill) -> str:
    lead = manifest["lead_policy"]
    body = [_p(f"What the farm consumes when it runs {lead} (the lead policy), member means "
               "per month. CO₂, nitrogen and phosphorus follow the harvested biomass, so "
               "biomass later lost to crashes or respiration is not counted: these lines "
               "are lower bounds. Makeup water replaces evaporation net of rain plus the "
               "harvested medium that is not recycled. Mixing is the paddlewheel energy of "
               "every pond, every day.")]
    cols = [c for c in bill.columns if not c.endswith("_cost")]
    costs = [c for c in bill.columns if c.endswith("_cost")]
    headers = ["month"] + [BILL_LABELS.get(c, f"{c[:-2]} fertiliser [t product]"
                                           if c.endswith("_t") else c) for c in cols]
    headers += [f"{c[:-5]} cost [currency]" for c in costs] or ["cost [currency]"]
    rows = []
    for month, r in bill.iterrows():
        cells = [f'<th scope="row">{esc(month)}</th>']
        for c in cols:
            digits = {"makeup_water_m3": 0, "mixing_MWh": 1, "biomass_t": 2, "co2_t": 2}.get(
                c, 3)
            cells.append(_td(r[c], digits, col=c))
        cells += [_td(r[c], 0, col=c) for c in costs] or ['<td class="nowrap">not priced</td>']
        rows.append(cells)
    body.append(_table(headers, rows, caption=f"Inputs bill of the farm for {lead} (last "
                       "row: the year)", table_id="bill-table",
                       row_attrs=[f' data-month="{esc(m)}"' for m in bill.index]))
    if not costs:
        body.append(_p("Not priced: scenario files hold no prices yet, so the bill gives "
                       "quantities only. Multiply by local prices for CO₂, fertiliser, water "
                       "and electricity.", "note"))
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


METHODS = (
    ("Sun position", "The NREL solar position algorithm (through pvlib), taken at the "
     "middle of each hour.", "Reda & Andreas (2004) Solar Energy 76:577–589"),
    ("Clear-sky irradiance", "The Ineichen–Perez model with Linke turbidity (pvlib), for "
     "clear-sky site mode and the cloud correction.",
     "Ineichen & Perez (2002) Solar Energy 73:151–157"),
    ("Light entering the culture", "The PAR share of global irradiance and the photon "
     "count per joule, both integrated over 400–700 nm of the ASTM G173 reference "
     "spectrum; surface reflection from Fresnel's equations for water (n = 1.333) for the "
     "beam and a constant 0.066 for sky light.",
     "ASTM G173-03; checked against Szeicz (1974), Thimijan & Heins (1983) and Payne (1972) "
     "J. Atmos. Sci. 29:959–970"),
    ("Water temperature", "An hourly heat balance of one well-mixed layer: absorbed sun, sky "
     "longwave in, longwave out, evaporation, convection, ground conduction and makeup "
     "water.", "Béchet et al. (2011) Environ. Sci. Technol. 45:3702–3709"),
    ("Sky longwave", "The weather file's infrared field where present, else Brutsaert's "
     "clear-sky emissivity with a cloud correction.",
     "Brutsaert (1975) Water Resour. Res. 11:742–744; Crawford & Duchon (1999)"),
    ("Evaporation", "A Penman-type wind function for open water with FAO-56 saturation "
     "vapour pressure.", "Shuttleworth (1993); Allen et al. (1998) FAO-56"),
    ("Light response", "Steele, Monod/Tamiya or Jassby–Platt, averaged over the culture "
     "depth under Beer–Lambert attenuation by biomass and medium.",
     "Steele (1962); Jassby & Platt (1976)"),
    ("Temperature response", "The cardinal temperature model with inflexion.",
     "Rosso, Lobry & Flandrois (1993) J. Theor. Biol. 162:447–463"),
    ("Maintenance", "A respiration loss m = m_ref·θ^(T − T_ref), by day and by night.",
     "common practice (θ form)"),
    ("Carrying capacity K", "Per day, the density at which that day's net growth is zero, "
     "capped by a nutrient limit where one is set.", "pondsim's definition"),
    ("Check of the engine", "With constant forcing the best sustained logistic yield is "
     "r·K/4 at K/2.", "Schaefer (1954)"),
    ("Crash hazard", "A base hazard plus a stress hazard that grows with overshoot above K "
     "while K falls; seeded random draws per member.",
     "pondsim's model; parameters are ASSUMPTIONS"),
    ("Weather years", "Synthetic years resampled from the weather record (or the file's "
     "own real years); they spread the weather but hold no year worse than the record.",
     "pondsim.forcing.years"),
    ("Parameter draws", "Latin hypercube sampling of the uncertain strain parameters.",
     "McKay, Beckman & Conover (1979) Technometrics 21:239–245"),
    ("Sensitivity", "First-order and total Sobol indices (Saltelli/Jansen estimators in "
     "scipy.stats.sobol_indices) with bootstrap intervals.",
     "Sobol' (2001); Saltelli et al. (2010) Comput. Phys. Commun. 181:259–270"),
    ("Inputs bill", "CO₂ from the carbon in harvested biomass; N and P from its element "
     "shares and the fertilisers' formulas (IUPAC atomic weights); mixing power from "
     "Manning friction and bend losses of the raceway channel over the paddlewheel "
     "efficiency.", "Chisti (2007); Redfield (1958); Chow (1959)"),
    ("P-values", "Exceedance convention: P90 is the annual yield reached or exceeded in 90 % "
     "of members (the 10th percentile), P50 the median.", "common practice in project "
     "finance"),
)


def _methods() -> str:
    rows = [[f'<th scope="row">{esc(stage)}</th>', _text_td(what), _text_td(source)]
            for stage, what, source in METHODS]
    return _table(["stage", "method", "published source"], rows,
                  caption="Models used and where they come from", table_id="methods-table")


def _limitations() -> str:
    items = [
        "The pond is one well-mixed layer: no vertical gradients of temperature or light "
        "history (flashing light), no covered ponds or greenhouses.",
        "Growth responds to light and temperature only; nutrients act only as a cap on K; "
        "pH, dissolved oxygen, salinity and contamination dynamics are not modelled.",
        "A typical-year weather file holds no real year-to-year variation. Synthetic years "
        "spread the weather but hold no year worse than the record, so P90 may be "
        "optimistic.",
        "Crash hazards are assumptions, not measurements: replace them with the site's own "
        "crash history before relying on the risk figures.",
        "CO₂, N and P are lower bounds (biomass lost before harvest is not counted); "
        "nothing is priced.",
        "The best rule per season is picked season by season; the combined plan has not "
        "been simulated as a whole until it is written into the scenario.",
        "A demo or invented site, strain or weather file gives numbers for no real "
        "decision.",
    ]
    safety = [
        "These are estimates, not guarantees of yield, cost or safety.",
        "Deep water: ponds and sumps are a drowning hazard; fence them and keep rescue "
        "equipment at hand.",
        "Paddlewheels and pumps: guard rotating parts and lock out power before work.",
        "CO₂: pressurised gas that can collect in pits and low or enclosed spaces and "
        "suffocate; follow the supplier's handling rules.",
        "Chemicals (cleaning agents such as hypochlorite, acids, fertilisers): store and "
        "handle them as their safety data sheets require.",
        "Defer to local codes and permits and to licensed engineers for design, "
        "construction and operation.",
    ]
    return ("<h3>What the model leaves out</h3><ul>"
            + "".join(f"<li>{esc(t)}</li>" for t in items) + "</ul>"
            + f'<div class="caution" id="caution"><p><strong>Caution.</strong> '
            f"{esc(CAUTION)}</p><ul>" + "".join(f"<li>{esc(t)}</li>" for t in safety)
            + "</ul></div>")


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

