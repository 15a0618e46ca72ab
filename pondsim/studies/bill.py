"""The scenario's inputs bill over an ensemble: what each member's ponds consume, priced.

Quantities come from a results Dataset (:mod:`pondsim.operations.dataset`) and the
scenario's ``[inputs]``; prices from ``[prices]``. Every line is computed per member and
day, summed by month, and reported as member means per month and year; the cost per
tonne of product is given per member, so its P50/P90 come from the ensemble.

Bases (each line of the bill states its own):

- carbon follows the biomass photosynthesis fixed (``inputs.carbon_basis``, default
  ``"gross_growth"``: respired carbon leaves as CO2 and is counted as lost), nitrogen and
  phosphorus the biomass the ponds keep (``inputs.nutrient_basis``, default
  ``"net_growth"`` = gross growth less respiration): the growth model's respiration is a
  first-order loss of standing biomass that removes nothing from the pond, so the N and
  P of respired biomass stay dissolved and are taken up again. Net growth equals what is
  harvested, lost in crashes, salvaged or left standing (the engine's ledger). Purchases
  follow the running maximum of cumulative uptake (:func:`purchases`), so what net-loss
  days release offsets later uptake. N and P bought are that uptake less the recycled
  share.
- product (the per-tonne denominator) is the biomass recovered by harvest (``harvested``,
  after the recovery efficiency).
- makeup water = (evaporation − rain, floored at zero day by day) + harvested medium not
  returned + blow-down; the same definition as the thermal stage's ``makeup`` column,
  which is used when the Dataset carries it. Unknown rain counts as none (an upper bound)
  and the bill says so.
- mixing electricity runs every pond every day; harvest electricity follows the harvested
  culture volume.

Exceedance convention (as for yield): P90 is the value exceeded with probability 0.9. For
a COST that is the LOW, optimistic value; the conservative value of a cost is the one
exceeded with probability only 0.1, named here ``P10`` (the 90th percentile).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import xarray as xr

from pondsim.errors import InputError, did_you_mean
from pondsim.scenario.model import Inputs, Prices
from pondsim.scenario.schema import INPUTS_KEYS, PRICES_KEYS
from pondsim.studies.bill_composition import (
    CO2_PER_C,
    biomass_composition,
    fertiliser_plan,
    get_fertiliser,
)
from pondsim.studies.bill_mixing import (
    paddlewheel_power,
    raceway_geometry,
    raceway_head_loss,
)
from pondsim.studies.quantiles import (
    CONFIDENCE,
    exceedance_quantile,
    member_cube,
    nested_bootstrap,
)

_MONTH_ABBR = ("Jan", "Feb", "Mar", "Apr", "May", "Jun", "Jul", "Aug", "Sep", "Oct", "Nov",
               "Dec")

#: Exceedance probabilities of the cost-per-tonne figures: name -> probability that the
#: cost is higher (:func:`pondsim.studies.quantiles.exceedance_quantile` gives the
#: quantile level, 1 - p). P10 is the conservative (high) cost.
COST_EXCEEDANCE = {name: int(name[1:]) / 100.0 for name in ("P90", "P50", "P10")}

#: Stand-in for an infinite cost per tonne (a member without product) inside the
#: quantile machinery, which interpolates and would turn inf - inf into NaN; any
#: interpolated value at or above :data:`_INF_FROM` is reported as infinite again.
_NO_PRODUCT = 1e300
_INF_FROM = 1e250


def _source(section: str, name: str, value) -> str:
    """Where a setting comes from: the schema's own documentation when the scenario kept
    the default, else the scenario."""
    key = {"inputs": INPUTS_KEYS, "prices": PRICES_KEYS}[section][name]
    shown = "not set" if value is None else f"{value:g}" if isinstance(value, float) \
        else str(value)
    if value == key.default:
        return f"{section}.{name} = {shown} (default: {key.doc})"
    return f"{section}.{name} = {shown} (scenario)"


# ---------------------------------------------------------------------------------------
# Mixing power of one pond from the scenario
# ---------------------------------------------------------------------------------------

def pond_mixing(inputs: Inputs, area_m2: float, depth_m: float) -> dict:
    """Hydraulics and electric power of one pond's paddlewheel.

    Parameters
    ----------
    inputs : Inputs
        ``velocity_m_s``, ``manning_n``, ``bends_per_circuit``, ``bend_loss_k``,
        ``length_to_width``, ``channel_width_m``, ``paddlewheel_efficiency``,
        ``drive_efficiency``.
    area_m2, depth_m : float [m2], [m]
        Water surface and culture depth of one pond.

    Returns
    -------
    dict
        ``channel_width_m`` [m], ``channel_length_m`` [m, flow path of one circuit],
        ``velocity_m_s`` [m s-1], ``head_m`` [m], ``flow_m3_s`` [m3 s-1],
        ``hydraulic_power_w`` [W], ``power_w`` [W electric], ``power_w_m2`` [W m-2],
        ``power_w_m3`` [W m-3 of culture].

    Notes
    -----
    Head of one circuit from :func:`~pondsim.studies.bill_mixing.raceway_head_loss`
    (Manning friction over the flow path plus ``bends × k × v²/2g``); electric power
    P = ρ g Q Δh / (η_paddlewheel η_drive). Both losses scale with v² and the flow with
    v, so the power scales with v³.
    """
    width = inputs.channel_width_m
    if width is None:
        width = float(raceway_geometry(area_m2, inputs.length_to_width,
                                       inputs.bends_per_circuit)["channel_width_m"])
    length = area_m2 / width
    v = inputs.velocity_m_s
    head = float(raceway_head_loss(v, width, depth_m, length, inputs.bends_per_circuit,
                                   inputs.manning_n, inputs.bend_loss_k))
    flow = v * width * depth_m
    hydraulic = float(paddlewheel_power(head, flow, 1.0))
    power = hydraulic / (inputs.paddlewheel_efficiency * inputs.drive_efficiency)
    return {"channel_width_m": float(width), "channel_length_m": float(length),
            "velocity_m_s": v, "head_m": head, "flow_m3_s": flow,
            "hydraulic_power_w": hydraulic, "power_w": power,
            "power_w_m2": power / area_m2, "power_w_m3": power / (area_m2 * depth_m)}


# ---------------------------------------------------------------------------------------
# Daily quantities per member
# ---------------------------------------------------------------------------------------

@dataclass(frozen=True)
class Line:
    """One line of the bill: a quantity column, its unit, basis and price."""

    name: str
    column: str
    unit: str
    basis: str
    source: str
    price_key: str | None = None
    price_unit: str = ""
    slug: str = ""  # cost column stem, e.g. "co2" -> co2_cost_<currency>


@dataclass
class Bill:
    """The priced bill of one policy (see :func:`scenario_bill`).

    Attributes
    ----------
    monthly : pandas.DataFrame
        Member means per month (``Jan`` … ``Dec``) and a ``year`` row (the sum); quantity
        columns with units in their names, then ``<line>_cost_<currency>`` columns,
        ``total_cost_<currency>`` and ``cost_per_t_<currency>`` when priced.
    lines : pandas.DataFrame
        One row per line: annual quantity (member mean), unit, basis, source, unit price,
        annual cost (``"not priced"`` where no price is given).
    cost_per_t : pandas.DataFrame or None
        Ensemble statistics of the annual cost per tonne of product: mean, P90 (low
        cost, exceeded in 90 % of members), P50, P10 (conservative high cost, exceeded in
        only 10 %), each with a 95 % interval that respects the ensemble's nesting (see
        :func:`cost_per_tonne_table`); None when not priced.
    member_cost_per_t : numpy.ndarray or None
        Annual cost per tonne of product of the farm in each realisation (one per
        member, its ponds drawn from the member's crash replicates, see
        :func:`farm_cost_per_tonne`) [currency t-1].
    notes : list of str
    mixing : dict
        Hydraulics of one pond (:func:`pond_mixing`).
    """

    policy: str
    currency: str | None
    monthly: pd.DataFrame
    lines: pd.DataFrame
    cost_per_t: pd.DataFrame | None
    member_cost_per_t: np.ndarray | None
    mixing: dict
    notes: list = field(default_factory=list)

    @property
    def priced(self) -> bool:
        return self.currency is not None


def _member_day(da: xr.DataArray, members: int) -> np.ndarray:
    """(member, day) array from a variable over (day,) or (member, day)."""
    values = da.transpose(*[d for d in ("member", "day") if d in da.dims]).values
    values = np.asarray(values, dtype=float)
    return np.broadcast_to(values, (members, values.shape[-1]))


def purchases(uptake: np.ndarray) -> np.ndarray:
    """Daily purchases that meet a daily uptake which may be negative on some days.

    Parameters
    ----------
    uptake : ndarray, shape (member, day)
        Uptake per day (negative where more is released than taken up).

    Returns
    -------
    ndarray, shape (member, day)
        Purchases, never negative: the day-to-day increase of the running maximum of
        cumulative uptake, ``P_t = max(0, U_1, ..., U_t) - max(0, U_1, ..., U_{t-1})``
        with ``U_t`` the cumulative uptake. What a net-loss day releases stays in the
        medium and is used before anything is bought again. For an uptake that is never
        negative, the purchases are the uptake itself.
    """
    cum = np.cumsum(uptake, axis=-1)
    peak = np.maximum.accumulate(np.maximum(cum, 0.0), axis=-1)
    return np.diff(peak, axis=-1, prepend=0.0)


def daily_quantities(ds: xr.Dataset, policy: str, inputs: Inputs, *, area_m2: float,
                     count: int, depth_m: float) -> tuple[dict, list, dict, list]:
    """Whole-farm quantities per member and day for one policy.

    Parameters
    ----------
    ds : xarray.Dataset
        Results with ``gross_growth``, ``respiration``, ``harvested`` [g m-2 d-1],
        ``harvest_fraction`` [1] over (policy, member, day) and ``evaporation``, ``rain``
        [mm d-1] over (day,) or (member, day); ``makeup`` [mm d-1] is used when present.
    policy : str
    inputs : Inputs
    area_m2, count, depth_m : float, int, float
        One pond's water surface [m2], number of ponds, culture depth [m].

    Returns
    -------
    quantities : dict of name -> ndarray (member, day)
        ``product_t``, ``uptake_biomass_t`` (carbon basis), ``nutrient_biomass_t``
        (N and P basis), ``co2_t``, ``n_t``, ``p_t``, one
        ``<fertiliser>_t`` per product, ``makeup_water_m3``, ``harvest_volume_m3``,
        ``mixing_MWh``, ``harvest_MWh``, ``harvests``.
    lines : list of Line
    mixing : dict
    notes : list of str
    """
    for name in ("gross_growth", "respiration", "harvested", "harvest_fraction"):
        if name not in ds:
            raise InputError(f"the results lack {name!r}; rerun the simulation with this "
                             "version of pondsim", field=name)
    policies = [str(p) for p in ds["policy"].values]
    if policy not in policies:
        raise InputError(f"unknown policy {policy!r}{did_you_mean(policy, policies)}; "
                         f"choose one of {', '.join(policies)}", field="policy")
    sel = ds.sel(policy=policy)
    members = sel.sizes["member"]
    farm_m2 = area_m2 * count
    g_to_t = farm_m2 * 1e-6  # g m-2 over the farm -> t
    notes = []

    comp = biomass_composition(inputs.composition_formula, inputs.carbon_fraction,
                               inputs.n_fraction, inputs.p_fraction)
    gross = _member_day(sel["gross_growth"], members)
    net = gross - _member_day(sel["respiration"], members)
    texts = {"gross_growth": "gross growth (all biomass formed, incl. what is later "
                             "respired, lost in crashes or to the harvester)",
             "net_growth": "net growth (gross growth less respiration = biomass "
                           "harvested, lost in crashes or left standing)"}
    carbon_uptake = purchases(net if inputs.carbon_basis == "net_growth" else gross)
    nutrient_uptake = purchases(net if inputs.nutrient_basis == "net_growth" else gross)
    basis = f"{texts[inputs.carbon_basis]}, member mean"
    nutrient_text = texts[inputs.nutrient_basis]
    uptake_t = carbon_uptake * g_to_t
    nutrient_t = nutrient_uptake * g_to_t
    product_t = _member_day(sel["harvested"], members) * g_to_t
    carbon_t = uptake_t * comp["carbon_fraction"]
    co2_t = carbon_t * CO2_PER_C * inputs.co2_supply_fraction / inputs.co2_utilisation
    n_t = nutrient_t * comp["n_fraction"] * (1.0 - inputs.n_recycle_fraction)
    p_t = nutrient_t * comp["p_fraction"] * (1.0 - inputs.p_recycle_fraction)
    products = fertiliser_plan(n_t, p_t, inputs.n_fertiliser, inputs.p_fertiliser)

    frac = _member_day(sel["harvest_fraction"], members)
    pond_m3 = area_m2 * depth_m
    harvest_m3 = frac * pond_m3 * count
    evap = _member_day(ds["evaporation"], members)
    if "makeup" in ds:
        net_mm = _member_day(ds["makeup"], members)
        water_basis = "thermal stage's makeup (evaporation - rain, floored per hour)"
    else:
        rain = _member_day(ds["rain"], members) if "rain" in ds else np.full_like(evap,
                                                                                 np.nan)
        unknown = np.isnan(rain)
        if unknown.all():
            notes.append("rain unknown in the weather file: makeup water counts no rain "
                         "and is an upper bound")
        elif unknown.any():
            notes.append(f"rain unknown on {unknown.any(axis=0).sum()} days: counted as "
                         "none there (makeup water is an upper bound on those days)")
        net_mm = np.maximum(evap - np.where(unknown, 0.0, rain), 0.0)
        water_basis = "evaporation - rain, floored at zero day by day"
    makeup_m3 = (net_mm * 1e-3 * farm_m2
                 + harvest_m3 * (1.0 - inputs.water_recycle_fraction)
                 + inputs.blowdown_per_d * pond_m3 * count)

    mixing = pond_mixing(inputs, area_m2, depth_m)
    mixing_mwh = np.full_like(evap, mixing["power_w"] * count
                              * inputs.mixing_hours_per_day * 1e-6)
    if inputs.harvest_kwh_per_m3 is None:
        harvest_mwh = np.zeros_like(evap)
        notes.append("harvest and dewatering electricity not counted "
                     "(inputs.harvest_kwh_per_m3 not set)")
    else:
        harvest_mwh = harvest_m3 * inputs.harvest_kwh_per_m3 * 1e-3
    harvests = (frac > 0).astype(float) * count

    quantities = {"product_t": product_t, "uptake_biomass_t": uptake_t,
                  "nutrient_biomass_t": nutrient_t, "co2_t": co2_t, "n_t": n_t, "p_t": p_t,
                  **{f"{name}_t": mass for name, mass in products.items()},
                  "makeup_water_m3": makeup_m3, "harvest_volume_m3": harvest_m3,
                  "mixing_MWh": mixing_mwh, "harvest_MWh": harvest_mwh,
                  "harvests": harvests}

    comp_src = comp["source"]
    pf = get_fertiliser(inputs.p_fertiliser)
    lines = [
        Line("product", "product_t", "t AFDW", "biomass recovered by harvest (after "
             "recovery losses), member mean", "simulation: harvested"),
        Line("biomass taken up", "uptake_biomass_t", "t AFDW", f"carbon basis: {basis}",
             _source("inputs", "carbon_basis", inputs.carbon_basis)),
        Line("biomass assimilated (N, P)", "nutrient_biomass_t", "t AFDW",
             f"nutrient basis: {nutrient_text}, member mean",
             _source("inputs", "nutrient_basis", inputs.nutrient_basis)),
        Line("CO2", "co2_t", "t CO2", f"{inputs.carbon_basis.replace('_', ' ')} x C "
             f"{comp['carbon_fraction']:.4f} x "
             f"{CO2_PER_C:.4f} t CO2/t C x supply share {inputs.co2_supply_fraction:g} / "
             f"utilisation {inputs.co2_utilisation:g}",
             f"{comp_src}; {_source('inputs', 'co2_utilisation', inputs.co2_utilisation)}",
             "co2_per_t", "t-1", "co2"),
    ]
    for name in products:
        fert = get_fertiliser(name)
        key = "p_fertiliser_per_t" if name == pf.name else "n_fertiliser_per_t"
        lines.append(Line(
            name, f"{name}_t", "t product",
            f"supplies N {100 * comp['n_fraction']:.2f} % and P "
            f"{100 * comp['p_fraction']:.2f} % of the {nutrient_text.split(' (')[0]}, "
            f"less recycle (N "
            f"{inputs.n_recycle_fraction:g}, P {inputs.p_recycle_fraction:g}); the P "
            "product's N is credited",
            f"{comp_src}; {fert.basis}", key, "t-1", name))
    lines += [
        Line("makeup water", "makeup_water_m3", "m3", f"{water_basis} over "
             f"{farm_m2:g} m2 + harvested medium not returned (recycle "
             f"{inputs.water_recycle_fraction:g}) + blow-down "
             f"{inputs.blowdown_per_d:g} d-1 of the pond volume",
             _source("inputs", "water_recycle_fraction", inputs.water_recycle_fraction),
             "water_per_m3", "m-3", "water"),
        Line("mixing electricity", "mixing_MWh", "MWh", f"{mixing['power_w']:.0f} W per "
             f"pond x {count} ponds x {inputs.mixing_hours_per_day:g} h d-1, every day",
             "Manning friction (Chow 1959) + bend losses over wire-to-water efficiency "
             f"{inputs.paddlewheel_efficiency * inputs.drive_efficiency:.3f}; "
             + _source("inputs", "velocity_m_s", inputs.velocity_m_s),
             "electricity_per_mwh", "MWh-1", "mixing"),
        Line("harvest electricity", "harvest_MWh", "MWh",
             "harvested culture volume x inputs.harvest_kwh_per_m3"
             if inputs.harvest_kwh_per_m3 is not None else
             "NOT COUNTED: inputs.harvest_kwh_per_m3 not set",
             _source("inputs", "harvest_kwh_per_m3", inputs.harvest_kwh_per_m3),
             "electricity_per_mwh", "MWh-1", "harvest_energy"),
        Line("harvest and dewatering", "harvest_volume_m3", "m3", "culture volume sent "
             "to harvest (all ponds), member mean", "simulation: harvest_fraction",
             "dewatering_per_m3", "m-3", "dewatering"),
        Line("labour", "harvests", "pond harvests", "days with a harvest x ponds, member "
             "mean", "simulation: harvest_fraction", "labour_per_harvest", "", "labour"),
    ]
    return quantities, lines, mixing, notes


# ---------------------------------------------------------------------------------------
# The bill
# ---------------------------------------------------------------------------------------

def _by_month(daily: np.ndarray, months: np.ndarray) -> np.ndarray:
    """(member, day) -> (member, 12) sums by calendar month."""
    out = np.zeros((daily.shape[0], 12))
    for m in range(12):  # twelve months, not members
        out[:, m] = daily[:, months == m + 1].sum(axis=1)
    return out


def price_lines(quantities: dict, lines: list, prices: Prices) -> dict:
    """Cost of every priced line: name -> array like the quantity [currency].

    Cost = quantity × unit price, exactly; the mixing and harvest electricity share the
    electricity price. Lines without a price are left out.
    """
    costs = {}
    for line in lines:
        price = getattr(prices, line.price_key) if line.price_key else None
        if price is None:
            continue
        costs[line.slug] = quantities[line.column] * float(price)
    return costs


def scenario_bill(ds: xr.Dataset, scenario, policy: str, *, seed: int = 0) -> Bill:
    """The inputs bill of *policy*, priced with the scenario's ``[prices]``.

    Parameters
    ----------
    ds : xarray.Dataset
        Results of :func:`pondsim.operations.simulate.simulate` or
        :func:`pondsim.studies.outlook.run_outlook` (see :func:`daily_quantities`).
    scenario : Scenario
        Its ``pond``, ``inputs`` and ``prices``.
    policy : str
    seed : int, default 0
        Seed of the bootstrap of the cost-per-tonne intervals.

    Returns
    -------
    Bill
    """
    inputs, prices = scenario.inputs, scenario.prices
    pond = scenario.pond
    qty, lines, mixing, notes = daily_quantities(ds, policy, inputs, area_m2=pond.area_m2,
                                                 count=pond.count, depth_m=pond.depth_m)
    months = pd.DatetimeIndex(ds["date"].values).month.to_numpy()
    present = sorted(set(months))
    monthly = {name: _by_month(v, months) for name, v in qty.items()}
    currency = prices.currency if prices.any else None
    costs = price_lines(monthly, lines, prices) if currency else {}

    table = pd.DataFrame({name: v.mean(axis=0) for name, v in monthly.items()},
                         index=pd.Index(list(_MONTH_ABBR), name="month"))
    cost_cols = {}
    for slug, c in costs.items():
        col = f"{slug}_cost_{currency}"
        cost_cols[col] = c
        table[col] = c.mean(axis=0)
    table = table.iloc[[m - 1 for m in present]]
    table.loc["year"] = table.sum(axis=0)
    member_cost_t, per_t = None, None
    if currency:
        total = sum(cost_cols.values()) if cost_cols else np.zeros_like(monthly["product_t"])
        table[f"total_cost_{currency}"] = np.append(total.mean(axis=0)[
            [m - 1 for m in present]], total.sum(axis=1).mean())
        product = table["product_t"].to_numpy()
        with np.errstate(divide="ignore", invalid="ignore"):
            table[f"cost_per_t_{currency}"] = np.where(
                product > 0, table[f"total_cost_{currency}"] / product, np.inf)
            annual_product = monthly["product_t"].sum(axis=1)
            annual_cost = total.sum(axis=1)
        unc = getattr(scenario, "uncertainty", None)
        farm = farm_cost_per_tonne(annual_cost, annual_product, ds, pond.count,
                                   getattr(unc, "farm_crash_correlation", 0.0), seed=seed)
        member_cost_t = farm.ravel()
        per_t = cost_per_tonne_table(farm, currency, seed=seed)
        unpriced = sorted({line.price_key for line in lines
                           if line.price_key and getattr(prices, line.price_key) is None})
        if unpriced:
            notes.append("not priced: " + ", ".join(f"prices.{k}" for k in unpriced)
                         + " (left out of the total)")
        if np.isinf(member_cost_t).any():
            notes.append(f"{int(np.isinf(member_cost_t).sum())} farm realisation(s) yield "
                         "no product: their cost per tonne is infinite")
    else:
        notes.append("not priced: the scenario has no [prices] section")

    rows = []
    for line in lines:
        price = getattr(prices, line.price_key) if (line.price_key and currency) else None
        cost = costs.get(line.slug)
        rows.append({
            "line": line.name, "quantity_per_yr": float(table.loc["year", line.column]),
            "unit": line.unit, "basis": line.basis, "source": line.source,
            "unit_price": np.nan if price is None else float(price),
            "price_unit": f"{currency} {line.price_unit}".strip() if price is not None
            else "",
            "cost_per_yr": np.nan if cost is None else float(cost.sum(axis=1).mean()),
            "priced": "yes" if cost is not None else "no price applies"
            if not line.price_key else "not priced"})
    return Bill(policy=policy, currency=currency, monthly=table,
                lines=pd.DataFrame(rows).set_index("line"), cost_per_t=per_t,
                member_cost_per_t=member_cost_t, mixing=mixing, notes=notes)


def farm_cost_per_tonne(annual_cost, annual_product, design: xr.Dataset | None,
                        count: int, correlation: float = 0.0, *,
                        seed: int | None = 0) -> np.ndarray:
    """Annual cost per tonne of the whole farm, one realisation per member.

    Parameters
    ----------
    annual_cost, annual_product : array-like, shape (n_member,)
        A member's farm total [currency], [t]: its one pond's trajectory for all
        ``count`` ponds.
    design : xarray.Dataset or None
        Member coordinates (:func:`~pondsim.studies.quantiles.member_cube`); None: all
        members are crash replicates of one weather year and draw.
    count : int
        Ponds in the farm.
    correlation : float [1]
        Crash correlation between ponds (``uncertainty.farm_crash_correlation``).
    seed : int, optional

    Returns
    -------
    ndarray, shape (1, n_years, n_draws, n_replicates) [currency t-1]
        ``sum_i cost_i / sum_i product_i`` over the farm's ponds, each pond taking the
        crash history of one of its cell's replicates exactly as the farm yield does
        (:func:`pondsim.studies.outlook.farm_totals`, the same draws for cost and
        product); ``inf`` where the farm yields nothing.

    Notes
    -----
    A member's bill treats every pond of the farm as that member's pond, i.e. all ponds
    crash together; for means that changes nothing, but for P10/P90 it would stretch the
    cost per tonne as if the ponds' crashes were perfectly correlated, while the farm's
    yield P50/P90 use independent (or ``correlation``-linked) ponds. Without crash
    differences between replicates the farm's value is the member's exactly.
    """
    from pondsim.studies.outlook import farm_totals

    per_pond = np.stack([np.asarray(annual_cost, dtype=float),
                         np.asarray(annual_product, dtype=float)]) / count
    cube = member_cube(per_pond, design) if design is not None else \
        per_pond.reshape(2, 1, 1, -1)
    cost, product = farm_totals(cube, count, correlation, seed=seed)
    with np.errstate(divide="ignore", invalid="ignore"):
        out = np.where(product > 1e-12 * np.abs(cube[1]).max(initial=0.0) * count,
                       cost / product, np.inf)
    return out[None]


def cost_per_tonne_table(member_cost_t, currency: str, design: xr.Dataset | None = None,
                         *, confidence: float = CONFIDENCE,
                         seed: int | None = 0) -> pd.DataFrame:
    """Ensemble statistics of the annual cost per tonne of product, one row.

    Parameters
    ----------
    member_cost_t : array-like, shape (n_member,) or (1, n_years, n_draws, n_replicates)
        [currency t-1]
        Annual cost per tonne of every member (or farm realisation); ``inf`` without
        product. A 4-D array is taken as already arranged by the ensemble's design
        (:func:`farm_cost_per_tonne`).
    currency : str
    design : xarray.Dataset, optional
        The results whose member coordinates ``weather_year``, ``draw`` and
        ``replicate`` give the ensemble's nesting (:func:`~pondsim.studies.quantiles.
        member_cube`). Without it (or without those coordinates) the members are taken
        as independent.
    confidence : float, default 0.95
    seed : int, optional
        Seed of the bootstrap.

    Returns
    -------
    pandas.DataFrame
        Columns ``members``, ``mean_<cur>_per_t``, then for P90, P50 and P10
        (probability 0.9, 0.5 and 0.1 that the cost is HIGHER; P10 is the conservative
        figure) the value and its interval (``*_low``, ``*_high``), then
        ``weather_years``, ``confidence_pct`` and ``interval_method``.

    Notes
    -----
    The same machinery as the yield's P50/P90 (:func:`~pondsim.studies.quantiles.
    nested_bootstrap`): with several weather years, whole weather years (with their
    draws and crash replicates) are resampled, because members sharing a year are not
    independent; with one varying level, the distribution-free order-statistic
    interval. Values are pooled quantiles with linear interpolation; a member without
    product counts as the highest cost, and a figure that falls on or interpolates
    towards such members is infinite.
    """
    x = np.asarray(member_cost_t, dtype=float)
    if x.ndim == 4:
        cube, x = x, x.ravel()
    elif design is not None:
        cube = member_cube(x[None, :], design)
    else:
        cube = x.reshape(1, 1, 1, -1)
    finite = np.where(np.isinf(cube), _NO_PRODUCT, cube)
    levels = [exceedance_quantile(name) for name in COST_EXCEEDANCE]
    point, low, high = (np.where(v >= _INF_FROM, np.inf, v)[0]
                        for v in nested_bootstrap(finite, levels, confidence=confidence,
                                                  seed=seed))
    varying = [n for n in cube.shape[1:] if n > 1]
    method = ("cluster bootstrap over weather years" if cube.shape[1] > 1
              and len(varying) > 1 else
              "bootstrap over parameter draws" if len(varying) > 1 else
              "order statistics (independent members)")
    row = {"members": int(x.size),
           f"mean_{currency}_per_t": float(x.mean()) if np.isfinite(x).all() else np.inf}
    for k, name in enumerate(COST_EXCEEDANCE):
        row[f"{name}_{currency}_per_t"] = float(point[k])
        row[f"{name}_{currency}_per_t_low"] = float(low[k])
        row[f"{name}_{currency}_per_t_high"] = float(high[k])
    row["weather_years"] = int(cube.shape[1])
    row["confidence_pct"] = 100.0 * confidence
    row["interval_method"] = method
    return pd.DataFrame([row], index=pd.Index(["cost per tonne of product"], name="figure"))


def describe(bill: Bill) -> str:
    """Terminal summary of a bill: each line per year with its basis, the costs and the
    cost per tonne (P90 / P50 / P10 with their meaning)."""
    cur = bill.currency
    out = [f"inputs bill for '{bill.policy}' (whole farm, member means per year):"]
    w = max(len(str(n)) for n in bill.lines.index)
    for name, r in bill.lines.iterrows():
        cost = {"yes": f"{r['cost_per_yr']:,.0f} {cur}", "not priced": "not priced"}.get(
            r["priced"], "")
        out.append(f"  {name:>{w}}: {r['quantity_per_yr']:>12,.2f} {r['unit']:<13} "
                   f"{cost:>14}")
        out.append(f"  {'':>{w}}  basis: {r['basis']}")
    if cur:
        year = bill.monthly.loc["year"]
        out.append(f"  {'total':>{w}}: {year[f'total_cost_{cur}']:>12,.0f} {cur} per year")
        row = bill.cost_per_t.iloc[0]
        out.append(f"cost per tonne of product over {int(row['members'])} members "
                   f"[{cur} t-1], {row['confidence_pct']:.0f} % intervals in brackets "
                   f"({row['interval_method']}):")
        meaning = {"P90": "low, optimistic: exceeded in 90 % of members",
                   "P50": "median", "P10": "CONSERVATIVE: exceeded in only 10 %"}
        for name, text in meaning.items():
            col = f"{name}_{cur}_per_t"
            lo, hi = row[f"{col}_low"], row[f"{col}_high"]
            interval = "too few members for an interval" if np.isnan(lo) or np.isnan(hi) \
                else f"{lo:,.0f} to {hi:,.0f}"
            out.append(f"  {name} {row[col]:>10,.0f}  ({text}) [{interval}]")
    for note in bill.notes:
        out.append(f"  note: {note}")
    return "\n".join(out)


def default_inputs() -> Inputs:
    """The ``[inputs]`` of a scenario that gives none (the schema's defaults)."""
    return Inputs(**{k: key.default for k, key in INPUTS_KEYS.items()})


__all__ = ["Bill", "COST_EXCEEDANCE", "Line", "cost_per_tonne_table", "daily_quantities",
           "default_inputs", "describe", "farm_cost_per_tonne", "pond_mixing", "price_lines",
           "purchases",
           "scenario_bill"]
