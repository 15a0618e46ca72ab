"""The report's one-page summary: the question, the answer (P50/P90 with their intervals
when the run computed them), the plan per season, the crash risk, the bill's headline,
the three assumptions that matter most and the cautions.

Every item reads from the study's output files; an item whose numbers the run did not
produce says "not available in this run" instead of showing a number. The section is
written to print on one A4 or Letter page (the tests print it in headless Chromium).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from pondsim.report.html import SECTIONS, _num, _table, esc, read_table, section_number

NOT_AVAILABLE = "not available in this run"


def _optional(out: Path, name: str, **kw) -> pd.DataFrame | None:
    path = out / name
    return read_table(path, **kw) if path.is_file() else None


def _cell(value, digits: int, col: str, *, pct: bool = False) -> str:
    """A number with its CSV value in ``data-value`` (as in the detail tables)."""
    return (f'<td class="num" data-col="{esc(col)}" data-value="{esc(repr(float(value)))}">'
            f"{_num(value, digits, pct=pct)}</td>")


def _interval(row, name: str, suffix: str, digits: int) -> str | None:
    """``"95 % interval 41.0 to 44.2"`` when the table carries the interval columns."""
    low, high = f"{name}_low_{suffix}", f"{name}_high_{suffix}"
    if low not in row.index or high not in row.index:
        return None
    lo, hi = row[low], row[high]
    if not (np.isfinite(float(lo)) and np.isfinite(float(hi))):
        return None
    conf = row["confidence_pct"] if "confidence_pct" in row.index else None
    level = f"{float(conf):g} % interval" if conf is not None and np.isfinite(
        float(conf)) else "interval"
    return f"{level} {_num(lo, digits)} to {_num(hi, digits)}"


def _converged(manifest: dict) -> str:
    value = manifest.get("ensemble", {}).get("converged")
    if value is None:
        return f"convergence of the ensemble: {NOT_AVAILABLE}"
    return ("the ensemble converged (the P90's interval is within the target)" if value
            else "the ensemble did NOT converge: the P90 is uncertain, run more members")


def _answer(annual: pd.DataFrame, manifest: dict, farm_ha: float) -> list[str]:
    lead = manifest["lead_policy"]
    r = annual.loc[lead]
    rows, attrs = [], []
    for name in ("P50", "P90"):
        farm = f"{name}_farm_t_yr"
        area = f"{name}_t_ha_yr"
        interval = _interval(r, name, "farm_t_yr", 1) or f"interval: {NOT_AVAILABLE}"
        meaning = ("median: half of the years give more" if name == "P50" else
                   "reached or exceeded with probability 0.9")
        rows.append([f'<th scope="row">{name}</th>', _cell(r[farm], 1, farm),
                     _cell(r[area], 1, area), f"<td>{esc(interval)}</td>",
                     f"<td>{esc(meaning)}</td>"])
        attrs.append(f' data-level="{name}"')
    table = _table(["level", "farm [t AFDW yr⁻¹]", "per area [t ha⁻¹ yr⁻¹]",
                    "interval of the estimate (farm)", "meaning"], rows,
                   caption=f"Annual biomass of {lead} on {farm_ha:,.2f} ha of water",
                   table_id="summary-answer", row_attrs=attrs)
    return [table, f'<p class="note">{esc(_converged(manifest))}.</p>']


def _plan(best: pd.DataFrame | None) -> str:
    if best is None or not len(best):
        return f"<p>Recommended plan per season: {NOT_AVAILABLE}.</p>"
    rows, attrs = [], []
    for season, r in best.iterrows():
        ok = str(r["within_risk_limit"]).strip().lower() in ("true", "1", "yes")
        rows.append([f'<th scope="row">{esc(season)}</th>', f"<td>{esc(r['best_policy'])}</td>",
                     _cell(r["productivity_g_m2_d"], 1, "productivity_g_m2_d"),
                     _cell(r["p_crash"], 0, "p_crash", pct=True),
                     f"<td>{'yes' if ok else 'no: least risky shown'}</td>"])
        attrs.append(f' data-season="{esc(season)}"')
    return _table(["season", "run this rule", "productivity [g m⁻² d⁻¹]",
                   "P(≥ 1 crash) [%]", "within the risk limit"], rows,
                  caption="Recommended plan per season", table_id="summary-plan",
                  row_attrs=attrs)


def _crash_risk(annual: pd.DataFrame, manifest: dict, scenario, out: Path) -> str:
    from pondsim.operations.crash import CAUSES

    lead = manifest["lead_policy"]
    r = annual.loc[lead]
    if not scenario.crash.enabled:
        return "crashes are switched off in this scenario"
    text = (f"{_num(r['expected_crashes_yr'], 2)} expected crashes per pond per year "
            f"under {lead}")
    per_year = _optional(out, "crashes_per_year.csv", index_col="policy")
    if per_year is not None and lead in per_year.index:
        causes = sorted(((float(per_year.loc[lead, f"{c}_crashes_per_pond_yr"]), c)
                         for c in CAUSES), reverse=True)
        text += " (" + ", ".join(f"{c} {_num(v, 2)}" for v, c in causes if v > 0) + ")"
        if "salvaged_g_m2_yr" in per_year.columns:
            from pondsim.glossary import G_M2_TO_T_HA

            salvage = float(per_year.loc[lead, "salvaged_g_m2_yr"]) * G_M2_TO_T_HA
            text += (f"; salvage {_num(salvage, 2)} t ha⁻¹ yr⁻¹, "
                     + ("counted as product" if scenario.crash.salvage_sellable
                        else "not product"))
    basis = manifest.get("weather_basis")
    if basis:
        text += f"; on {basis}"
    assumed = "assumption" in str(manifest.get("crash_basis", "assumption")).lower()
    return text + ("; hazards are ASSUMPTIONS until fitted to the site's own pond log"
                   if assumed else "")


def _washout(summary: pd.DataFrame | None, lead: str) -> str:
    if summary is None or "washed_out_pct" not in summary.columns:
        return NOT_AVAILABLE
    washed = [p for p in summary.index if float(summary.loc[p, "washed_out_pct"]) > 0]
    if not washed:
        return "no rule holds the culture at its viable floor long enough to wash it out"
    if len(washed) == len(summary.index) and len(washed) > 1:
        share = summary["washed_out_pct"].astype(float)
        text = (f"every rule and plan, in {_num(share.min(), 0)} to {_num(share.max(), 0)} "
                "% of members")
    else:
        text = "; ".join(f"{p} in {_num(summary.loc[p, 'washed_out_pct'], 0)} % of members"
                         for p in washed)
    return ("WASHED OUT (held at the viable floor too long): " + text
            + (f"; the lead {lead} is one of them, see the plan per season"
               if lead in washed and len(washed) < len(summary.index) else ""))


def _water_and_dewatering(out: Path, scenario) -> str:
    parts = []
    water = _optional(out, "pond_water_monthly.csv", index_col="month")
    if water is not None and "year" in water.index and "hours_above_t_max" in water:
        y = water.loc["year"]
        parts.append(f"{_num(y['hours_above_t_max'], 0)} h a year above the strain's "
                     f"maximum {scenario.strain.t_max_c:g} °C, "
                     f"{_num(y.get('hours_below_t_min', np.nan), 0)} h below its minimum")
    check = _optional(out, "dewatering_check.csv", index_col=["policy", "season"])
    if check is not None:
        over = sorted({p for (p, _), r in check.iterrows()
                       if str(r["within_capacity"]) == "no"})
        cap = scenario.harvest.dewatering_capacity_m3_per_d
        parts.append("dewatering: no plant capacity set" if cap is None else
                      f"dewatering over the plant's {cap:,.0f} m³ d⁻¹: " + ", ".join(over)
                      if over else f"dewatering within the plant's {cap:,.0f} m³ d⁻¹")
    return "; ".join(parts) if parts else NOT_AVAILABLE


def _bill(bill: pd.DataFrame | None, lead: str, per_t: pd.DataFrame | None = None) -> str:
    if bill is None or "year" not in bill.index:
        return f"inputs bill: {NOT_AVAILABLE}"
    y = bill.loc["year"]
    parts = []
    for col, digits, label in (("co2_t", 1, "t CO₂"), ("n_t", 2, "t N"), ("p_t", 2, "t P"),
                               ("makeup_water_m3", 0, "m³ makeup water"),
                               ("mixing_MWh", 1, "MWh mixing")):
        if col in y.index:
            parts.append(f"{_num(y[col], digits)} {label}")
    text = f"for {lead}, per year: " + ", ".join(parts)
    total = next((c for c in bill.columns if c.startswith("total_cost_")), None)
    cost_t = next((c for c in bill.columns if c.startswith("cost_per_t_")), None)
    if total is not None:  # the priced bill: <line>_cost_<currency>, total, per tonne
        currency = total[len("total_cost_"):]
        text += f"; priced inputs {_num(y[total], 0)} {currency} per year"
        p50 = f"P50_{currency}_per_t"
        if per_t is not None and p50 in per_t.columns:
            r = per_t.iloc[0]
            text += (f"; per tonne of product P50 {_num(r[p50], 0)} {currency}, "
                     f"conservative P10 {_num(r[f'P10_{currency}_per_t'], 0)}")
        elif cost_t is not None and np.isfinite(float(y[cost_t])):
            text += f", {_num(y[cost_t], 0)} {currency} per tonne of product"
    else:
        text += f"; cost: {NOT_AVAILABLE} (not priced)"
    return text


def _top_assumptions(sens: pd.DataFrame | None) -> str:
    from pondsim.results.figures_outlook import parameter_label

    if sens is None or not len(sens):
        return (f"<p>The three assumptions that matter most: {NOT_AVAILABLE} (no uncertain "
                "strain parameters declared, so no sensitivity analysis was run).</p>")
    top = sens.sort_values("total", ascending=False).head(3)
    items = "".join(f"<li>{esc(parameter_label(k))}: total Sobol index "
                    f"{_num(r['total'], 2)}</li>" for k, r in top.iterrows())
    return ("<p>The assumptions that matter most (Sobol total index of the annual yield, "
            f"section {section_number('sensitivity')}):</p>"
            f'<ol id="summary-assumptions">{items}</ol>')


def summary_section(out: Path, scenario, manifest: dict) -> str:
    """The body of the summary section, from the output files in *out*."""
    annual = read_table(out / "annual_yield.csv", index_col="policy")
    best = _optional(out, "best_by_season.csv", index_col="season")
    bill = _optional(out, "inputs_bill.csv", index_col="month")
    sens = _optional(out, "sensitivity.csv", index_col="parameter") \
        if manifest["options"].get("sensitivity") else None
    pond, site = scenario.pond, scenario.site
    farm_ha = pond.farm_area_m2 / 1e4
    lead = manifest["lead_policy"]
    body = [f'<p class="lede"><strong>Question.</strong> How much algal biomass will '
            f"{pond.count} raceway pond(s) of {pond.area_m2:,.0f} m² at {esc(site.name)} "
            f"give growing {esc(scenario.strain.name)} in {scenario.year}, which harvest "
            "rule should run in each season, how often will cultures crash and what will "
            "the ponds consume?</p>",
            f'<p class="lede"><strong>Answer.</strong> Of the rules and plans compared, '
            f"{esc(lead)} gives the highest P50 of those that never wash the culture "
            "out; the best rule season by season is in the "
            f"plan below. Over {manifest['ensemble']['members']} members (weather years × "
            "parameter draws × crash draws):</p>"]
    body += _answer(annual, manifest, farm_ha)
    body.append(_plan(best))
    summary = _optional(out, "summary.csv", index_col="policy")
    per_t = _optional(out, "inputs_cost_per_t.csv", index_col="figure")
    check = manifest.get("site_check")
    facts = [("Site check", ("WARNING: " if str(check).startswith("FAILED") else "")
              + str(check) if check else NOT_AVAILABLE),
             ("Washout", _washout(summary, lead)),
             ("Crash risk", _crash_risk(annual, manifest, scenario, out)),
             ("Pond water", _water_and_dewatering(out, scenario)),
             ("Inputs bill", _bill(bill, lead, per_t))]
    body.append('<dl class="facts">' + "".join(
        f"<dt>{esc(k)}</dt><dd>{esc(v)}.</dd>" for k, v in facts) + "</dl>")
    body.append(_top_assumptions(sens))
    notes = [str(n) for n in manifest.get("weather_notes", [])]
    cautions = ["Estimates from a model, not guarantees of yield or cost; weather, strain, "
                "contamination and operations at a real site will differ.",
                "Synthetic weather years cannot hold a year worse than the record, so the "
                "P90 may be optimistic.",
                "Defer to local codes, permits and licensed engineers; ponds, paddlewheels, "
                f"CO₂ and chemicals are hazards (section {section_number('limitations')})."]
    if notes:
        cautions.insert(1, f"Weather: {notes[-1]}")
    body.append('<div class="caution" id="summary-cautions"><strong>Cautions.</strong><ul>'
                + "".join(f"<li>{esc(c)}</li>" for c in cautions) + "</ul></div>")
    body.append(f'<p class="note">Details follow in sections 2 to {len(SECTIONS)}.</p>')
    return "\n".join(body)


__all__ = ["NOT_AVAILABLE", "summary_section"]
