"""The crash section of the report page: crashes by named cause, salvage apart from the
product, the months of risk and the days where K falls, each figure and table with the
weather it stands on. Built from the CSV tables read back from the output folder."""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from pondsim.glossary import G_M2_TO_T_HA
from pondsim.operations.crash import CAUSES
from pondsim.report.html import _figure, _month_name, _p, _table, _td, _text_td, esc

#: What each named cause of the hazard means, in the words the page uses.
CAUSE_TEXT = {
    "background": "background: an everyday risk that grows with water temperature "
                  "(Q10 form)",
    "starvation": "starvation: the culture has been losing net biomass over the last "
                  "days (light or temperature too poor to cover respiration)",
    "heat": "heat: hours of water above the strain's maximum temperature",
    "cold": "cold shock: the water falls well below its mean of the previous days",
}


def basis_text(manifest: dict) -> str:
    """The line every crash figure and table stands on (weather basis, members, hazard
    values)."""
    text = manifest.get("crash_basis")
    if text:
        return str(text)
    return f"weather: {manifest.get('weather_basis') or 'not stated'}"


def method_text(scenario) -> str:
    """The crash model in words, with the scenario's values."""
    c, restart = scenario.crash, scenario.inoculation.restart_days
    text = ("Each day a growing pond may crash. The daily hazard is the sum of four named "
            f"causes: a background of {c.background_per_d:g} d⁻¹ at "
            f"{c.background_t_ref_c:g} °C that grows {c.background_q10:g}-fold per 10 K of "
            f"water temperature; starvation, {c.starvation_hazard_per_d:g} d⁻¹ per 0.1 d⁻¹ "
            f"of mean net loss rate over the last {c.window_days} d; heat, "
            f"{c.heat_hazard_per_d_h:g} d⁻¹ per hour of water above the strain's maximum "
            f"temperature; and cold shock, {c.cold_hazard_per_d_k:g} d⁻¹ per kelvin that the "
            f"water falls more than {c.cold_onset_k:g} K below its mean of the previous "
            f"{c.window_days} d. The probability of a crash that day is 1 − exp(−hazard); a "
            "crash is booked to one cause in proportion to the causes' shares (competing "
            f"risks from the same random draw). A crash loses {c.loss_fraction:.0%} of the "
            "standing biomass, the rest is salvaged"
            + (" and counted with the product (crash.salvage_sellable)" if c.salvage_sellable
               else ", booked apart from the harvest and NOT counted as product")
            + f", and the pond is out of service for {restart} d before it is inoculated "
            "again.")
    return text


def _per_year(per_year: pd.DataFrame, salvage_sellable: bool) -> str:
    rows = []
    for pol, r in per_year.iterrows():
        cells = [f'<th scope="row">{esc(pol)}</th>']
        cells += [_td(r[f"{c}_crashes_per_pond_yr"], 2, col=f"{c}_crashes_per_pond_yr")
                  for c in CAUSES]
        cells.append(_td(r["all_crashes_per_pond_yr"], 2, col="all_crashes_per_pond_yr"))
        if "salvaged_g_m2_yr" in per_year.columns:
            cells.append(_td(r["salvaged_g_m2_yr"] * G_M2_TO_T_HA, 2, col="salvaged_t_ha_yr"))
        rows.append(cells)
    headers = (["policy or plan"] + [f"{c} [pond⁻¹ yr⁻¹]" for c in CAUSES]
               + ["all causes [pond⁻¹ yr⁻¹]"])
    if "salvaged_g_m2_yr" in per_year.columns:
        headers.append("salvaged biomass [t ha⁻¹ yr⁻¹]"
                       + ("" if salvage_sellable else ", not product"))
    return _table(headers, rows, caption="Expected crashes per pond per year by cause, and "
                  "the biomass salvaged from crashed ponds (member means)",
                  table_id="crash-causes",
                  row_attrs=[f' data-policy="{esc(p)}"' for p in per_year.index])


def _lead_by_month(by_cause: pd.DataFrame, lead: str) -> str:
    if lead not in by_cause.index.get_level_values("policy"):
        return ""
    lead_rows = by_cause.xs(lead, level="policy")
    rows = []
    for m, r in lead_rows.iterrows():
        rows.append([f'<th scope="row">{_month_name(m)}</th>']
                    + [_td(r[f"{c}_crashes_per_pond"], 3, col=f"{c}_crashes_per_pond")
                       for c in CAUSES]
                    + [_td(r["all_crashes_per_pond"], 3, col="all_crashes_per_pond")])
    return _table(["month"] + [f"{c} [pond⁻¹ month⁻¹]" for c in CAUSES]
                  + ["all causes [pond⁻¹ month⁻¹]"], rows,
                  caption=f"Expected crashes per pond by month and cause for {lead} (the "
                  "lead policy; member means)", table_id="crash-causes-month",
                  row_attrs=[f' data-month="{int(m)}"' for m in lead_rows.index])


def crash_section(out: Path, scenario, manifest: dict, crash_by_month, calendar) -> str:
    """The crash section: method in words, crashes by cause, salvage, months, calendar."""
    c = scenario.crash
    basis = basis_text(manifest)
    if not c.enabled:
        body = [_p("Crashes are switched off in this scenario (crash.enabled = false): no "
                   "crash is drawn, the tables show none and the calendar shows only where "
                   "K falls. With crashes on, the model is this: " + method_text(scenario))]
    else:
        body = [_p(method_text(scenario)),
                _p("The hazard values are ASSUMPTIONS until fitted to the site's own pond "
                   "log (pondsim hazardfit)." if "assumption" in basis.lower() else
                   "The hazard values are the scenario's [crash] values; their source is "
                   "in crash.basis (section 9).")]
    body.append(_p(f"Basis of every crash number below: {basis}.", "note"))
    body.append(_ul([CAUSE_TEXT[k] for k in CAUSES]))
    per_year_path = out / "crashes_per_year.csv"
    if per_year_path.is_file():
        from pondsim.report.html import read_table

        per_year = read_table(per_year_path, index_col="policy")
        body.append(_per_year(per_year, c.salvage_sellable))
    by_cause_path = out / "crashes_by_cause.csv"
    if by_cause_path.is_file():
        from pondsim.report.html import read_table

        by_cause = read_table(by_cause_path, index_col=["policy", "month"])
        body.append(_lead_by_month(by_cause, manifest["lead_policy"]))
    pols = list(pd.unique(crash_by_month.index.get_level_values("policy")))
    months = sorted(set(crash_by_month.index.get_level_values("month")))
    for col, digits, unit, caption, tid in (
            ("expected_crashes", 3, "per month", "Expected crashes per pond by month, all "
             "causes (member means)", "crash-months"),
            ("daily_crash_probability_pct", 2, "%", "Mean daily crash probability by month",
             "crash-probability")):
        rows = []
        for m in months:
            rows.append([f'<th scope="row">{_month_name(m)}</th>']
                        + [_td(crash_by_month.loc[(p, m), col], digits) for p in pols])
        body.append(_table(["month"] + [f"{p} [{unit}]" for p in pols], rows,
                           caption=caption, table_id=tid))
    first = str(scenario.policies[0].name) if scenario.policies else pols[0]
    body.append(_figure(out, "risk_calendar.png",
                        f"Two panels: stacked monthly bars of expected crashes per pond by "
                        f"cause (background, starvation, heat, cold) for {first}, and a "
                        "greyscale strip per policy of the daily crash probability in "
                        "percent through the year.",
                        f"Crash-risk calendar: crashes by cause for {first} (the scenario's "
                        "first policy) and the daily crash probability of every rule. "
                        f"Basis: {basis}."))
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
        body.append(_p("Where the weather turns: the days on which the carrying capacity "
                       "K (median over the ensemble) falls fastest, and where each rule's "
                       "culture stands against K then. A dense culture under a falling K "
                       "loses net biomass, which is what the starvation cause measures; "
                       "the table describes the weather, not the hazard itself."))
        body.append(_table(headers, rows, caption="Days of the steepest fall of K and where "
                           "each rule stands then (median member)",
                           table_id="calendar-table"))
    else:
        body.append(_p("K does not fall on any day of the year."))
    return "\n".join(body)


def _ul(items) -> str:
    return "<ul>" + "".join(f"<li>{esc(t)}</li>" for t in items) + "</ul>"


__all__ = ["CAUSE_TEXT", "basis_text", "crash_section", "method_text"]
