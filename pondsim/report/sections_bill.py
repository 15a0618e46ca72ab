"""The inputs-bill section of the report page: each line of the priced bill with its basis
and source, the cost per tonne of product over the ensemble (P90 / P50 / P10) and the
monthly quantities and costs. Built from ``inputs_bill_lines.csv``,
``inputs_cost_per_t.csv`` and ``inputs_bill.csv`` (the files ``pondsim outlook`` writes,
from :func:`pondsim.studies.bill.scenario_bill`)."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pandas as pd

from pondsim.report.html import _num, _p, _table, _td, _text_td, esc, read_table

#: Labels (with units) of the bill's quantity columns; fertiliser products are
#: ``<product>_t`` and labelled from the name.
BILL_LABELS = {"product_t": "product harvested [t AFDW]",
               "uptake_biomass_t": "biomass taken up [t AFDW]",
               "co2_t": "CO₂ supplied [t]", "n_t": "nitrogen to buy [t N]",
               "p_t": "phosphorus to buy [t P]", "makeup_water_m3": "makeup water [m³]",
               "harvest_volume_m3": "culture harvested [m³]",
               "mixing_MWh": "mixing electricity [MWh]",
               "harvest_MWh": "harvest electricity [MWh]", "harvests": "pond harvests [count]"}
#: Decimals shown per quantity column.
DIGITS = {"makeup_water_m3": 0, "harvest_volume_m3": 0, "harvests": 0, "mixing_MWh": 1,
          "harvest_MWh": 1, "product_t": 2, "uptake_biomass_t": 2, "co2_t": 2}
#: Meaning of the cost-per-tonne exceedance figures (a cost: P90 is the LOW value).
COST_MEANING = {"P90": "optimistic: exceeded in 90 % of members",
                "P50": "median",
                "P10": "conservative: exceeded in only 10 % of members"}


def bill_label(col: str) -> str:
    """Column label with its unit (fertiliser products from their names)."""
    if col in BILL_LABELS:
        return BILL_LABELS[col]
    if col.endswith("_t"):
        return f"{col[:-2].replace('_', ' ')} fertiliser [t product]"
    return col


def _currency(bill: pd.DataFrame) -> str | None:
    total = next((c for c in bill.columns if c.startswith("total_cost_")), None)
    return None if total is None else total[len("total_cost_"):]


def unit_text(unit: str) -> str:
    """A unit as printed (m3 -> m³, t-1 -> t⁻¹)."""
    text = str(unit).replace("CO2", "CO₂")
    text = re.sub(r"(?<=[A-Za-z])-([1-3])\b", lambda m: "⁻" + _SUP[m.group(1)], text)
    return re.sub(r"(?<=[A-Za-z])([23])\b", lambda m: _SUP[m.group(1)], text)


_SUP = {"1": "¹", "2": "²", "3": "³"}


def _lines(lines: pd.DataFrame, currency: str | None) -> str:
    rows = []
    for name, r in lines.iterrows():
        priced = str(r["priced"])
        if priced == "yes":
            price = f"{_num(r['unit_price'], 2)} {unit_text(r['price_unit'])}"
            cost = _td(r["cost_per_yr"], 0, col="cost_per_yr")
        else:
            price, cost = "—", _text_td(priced)
        rows.append([f'<th scope="row">{esc(name.replace("_", " "))}</th>',
                     _td(r["quantity_per_yr"], 2, col="quantity_per_yr"),
                     _text_td(unit_text(r["unit"])), _text_td(r["basis"]),
                     _text_td(r["source"]), _text_td(price), cost])
    cur = currency or "currency"
    return _table(["line", "quantity per year", "unit", "basis", "source", "unit price",
                   f"cost per year [{cur}]"], rows,
                  caption="Each line of the bill: what it is billed on and where its "
                  "numbers come from (member means per year)", table_id="bill-lines",
                  row_attrs=[f' data-line="{esc(n)}"' for n in lines.index],
                  widths=(11, 10, 9, 25, 25, 9, 11))


def _cost_per_t(per_t: pd.DataFrame, currency: str) -> str:
    r = per_t.iloc[0]
    rows = []
    for name, meaning in COST_MEANING.items():
        col = f"{name}_{currency}_per_t"
        lo, hi = r[f"{col}_low"], r[f"{col}_high"]
        interval = (f"{_num(lo, 0)} to {_num(hi, 0)}"
                    if np.isfinite(float(lo)) and np.isfinite(float(hi)) else
                    f"open on one side with {int(r['members'])} members (run more)")
        rows.append([f'<th scope="row">{name}</th>', _td(r[col], 0, col=col),
                     _text_td(interval), _text_td(meaning)])
    return _table(["figure", f"cost per tonne of product [{currency} t⁻¹]",
                   "95 % interval", "meaning"], rows,
                  caption=f"Cost of the inputs per tonne of product over "
                  f"{int(r['members'])} members (each member's annual cost over its own "
                  "annual product)", table_id="bill-cost-per-t",
                  row_attrs=[f' data-level="{n}"' for n in COST_MEANING])


#: Quantity columns of the monthly table (the rest of the bill's columns stay in the CSV).
MONTHLY_COLUMNS = ("product_t", "uptake_biomass_t", "co2_t", "n_t", "p_t", "makeup_water_m3",
                   "mixing_MWh", "harvest_MWh")


def _monthly(bill: pd.DataFrame, currency: str | None, lead: str) -> str:
    cols = [c for c in MONTHLY_COLUMNS if c in bill.columns]
    labels = [bill_label(c) for c in cols]
    if currency is not None:
        cols += [f"total_cost_{currency}", f"cost_per_t_{currency}"]
        labels += [f"inputs cost [{currency}]", f"per tonne of product [{currency} t⁻¹]"]
    rows = []
    for month, r in bill.iterrows():
        rows.append([f'<th scope="row">{esc(month)}</th>']
                    + [_td(r[c], DIGITS.get(c, 0 if "cost" in c else 3), col=c)
                       for c in cols])
    return _table(["month"] + labels, rows,
                  caption=f"The bill by month for {lead} (member means; last row: the "
                  "year; each line's monthly cost and the fertiliser products are in "
                  "inputs_bill.csv)", table_id="bill-table",
                  row_attrs=[f' data-month="{esc(m)}"' for m in bill.index])


def inputs_section(out: Path, manifest: dict, bill: pd.DataFrame) -> str:
    """The inputs-bill section from the bill's three CSV files."""
    lead = manifest["lead_policy"]
    currency = _currency(bill)
    lines_path, per_t_path = out / "inputs_bill_lines.csv", out / "inputs_cost_per_t.csv"
    body = [_p(f"What the farm consumes and what it costs when it runs {lead} (the lead "
               "policy), computed member by member and day by day, shown as member means. "
               "Carbon, nitrogen and phosphorus follow the biomass the ponds take up (the "
               "basis of each line says which: gross growth includes what is later "
               "respired or lost in crashes); the cost per tonne divides by the product, "
               "the biomass recovered by harvest. Makeup water replaces evaporation net of "
               "rain, the harvested medium not returned and the blow-down; mixing is the "
               "paddlewheel energy of every pond, every day.")]
    if lines_path.is_file():
        body.append(_lines(read_table(lines_path, index_col="line"), currency))
    if currency is None:
        body.append(_p("Not priced: the scenario has no [prices] section, so the bill gives "
                       "quantities only. Add [prices] (currency and a price per line) to "
                       "get the costs and the cost per tonne.", "note"))
    elif per_t_path.is_file():
        year = bill.loc["year"] if "year" in bill.index else None
        body.append(_cost_per_t(read_table(per_t_path, index_col="figure"), currency))
        if year is not None:
            body.append(_p(f"Priced inputs {_num(year[f'total_cost_{currency}'], 0)} "
                           f"{currency} per year (member mean). The figures per tonne "
                           "above are exceedance values of each member's own ratio; the "
                           "year row below divides the mean cost by the mean product, so "
                           "the two need not agree. For a cost P90 is the LOW value and "
                           "P10 the conservative one."))
    body.append(_monthly(bill, currency, lead))
    for note in manifest.get("bill", {}).get("notes", []):
        body.append(_p(f"Note: {note}.", "note"))
    return "\n".join(body)


__all__ = ["BILL_LABELS", "COST_MEANING", "bill_label", "inputs_section"]
