"""The inputs bill: what the ponds consume.

Carbon dioxide, nitrogen and phosphorus (as elements and as fertiliser products), makeup
water and the electricity of paddlewheel mixing, for the whole farm, month by month.

The kernels live by topic: :mod:`pondsim.studies.bill_composition` (stoichiometry,
fertilisers), :mod:`pondsim.studies.bill_mixing` (raceway hydraulics, paddlewheel power),
:mod:`pondsim.studies.bill_water` (makeup water). :func:`inputs_bill` aggregates them into
one table; :func:`bill_from_results` feeds it from a simulation's results Dataset.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np
import pandas as pd

from pondsim.errors import InputError, did_you_mean
from pondsim.studies.bill_composition import (
    DEFAULT_COMPOSITION,
    co2_demand,
    fertiliser_plan,
    get_fertiliser,
    nutrient_demand,
)
from pondsim.studies.bill_mixing import (
    BEND_LOSS_K,
    DEFAULT_MANNING_N,
    DESIGN_VELOCITY_M_S,
    PADDLEWHEEL_EFFICIENCY,
    paddlewheel_power,
    raceway_geometry,
    raceway_head_loss,
)
from pondsim.studies.bill_water import makeup_water

_MONTH_ABBR = ("Jan", "Feb", "Mar", "Apr", "May", "Jun", "Jul", "Aug", "Sep", "Oct", "Nov",
               "Dec")


# ---------------------------------------------------------------------------------------
# Parameters and farm
# ---------------------------------------------------------------------------------------

@dataclass(frozen=True)
class InputsParams:
    """Coefficients of the inputs bill, with documented defaults.

    Attributes
    ----------
    carbon_fraction : float, default 0.5136 [kg C kg-1]
        From the default biomass formula (:func:`co2_demand`).
    co2_utilisation : float, default 0.7 [-]
        See :func:`co2_demand` (common practice).
    n_fraction : float, default 0.0659 [kg N kg-1]
        From the default biomass formula (:func:`nutrient_demand`).
    p_fraction : float, default 0.01324 [kg P kg-1]
        From the default biomass formula (:func:`nutrient_demand`).
    n_fertiliser : str, default "urea"
    p_fertiliser : str, default "dap_18_46_0"
        Products; see :data:`FERTILISERS` and :func:`fertiliser_plan`.
    recycle_fraction : float, default 0.9 [-]
        Share of harvested medium returned to the ponds after dewatering. Farm designs
        commonly recycle most of it (assumption);
        set 0 for the conservative case of no recycling.
    harvest_density_g_m3 : float, default 500 [g m-3]
        Culture density at harvest, used only to turn a harvested mass into a harvested
        volume when no volume is given; raceways are run at about 0.3-1 g L-1
        (common practice).
    manning_n : float, default 0.015 [s m-1/3]
        See :data:`MANNING_N`.
    bend_k : float, default 2.0 [-]
        See :data:`BEND_LOSS_K` (assumption).
    paddlewheel_efficiency : float, default 0.17 [-]
        See :data:`PADDLEWHEEL_EFFICIENCY` (assumption).
    mixing_hours_per_day : float, default 24 [h d-1]
        Paddlewheels usually run around the clock to keep cells suspended (common
        practice); fewer hours scale the energy linearly.
    length_to_width : float, default 10 [-]
        Pond proportion when the channel width is not given; see
        :func:`raceway_geometry` (common practice).
    n_channels : int, default 2
    """

    carbon_fraction: float = DEFAULT_COMPOSITION["carbon_fraction"]
    co2_utilisation: float = 0.7
    n_fraction: float = DEFAULT_COMPOSITION["n_fraction"]
    p_fraction: float = DEFAULT_COMPOSITION["p_fraction"]
    n_fertiliser: str = "urea"
    p_fertiliser: str = "dap_18_46_0"
    recycle_fraction: float = 0.9
    harvest_density_g_m3: float = 500.0
    manning_n: float = DEFAULT_MANNING_N
    bend_k: float = BEND_LOSS_K
    paddlewheel_efficiency: float = PADDLEWHEEL_EFFICIENCY
    mixing_hours_per_day: float = 24.0
    length_to_width: float = 10.0
    n_channels: int = 2

    def __post_init__(self):
        ranges = {
            "carbon_fraction": (0.0, 1.0, False),
            "co2_utilisation": (0.0, 1.0, False),
            "n_fraction": (0.0, 1.0, True),
            "p_fraction": (0.0, 1.0, True),
            "recycle_fraction": (0.0, 1.0, True),
            "paddlewheel_efficiency": (0.0, 1.0, False),
            "mixing_hours_per_day": (0.0, 24.0, True),
        }
        for name, (lo, hi, lo_ok) in ranges.items():
            v = getattr(self, name)
            ok = (v >= lo if lo_ok else v > lo) and v <= hi
            if not ok:
                bracket = "[" if lo_ok else "("
                raise InputError(f"must be in {bracket}{lo:g}, {hi:g}], got {v!r}",
                                 field=f"inputs.{name}")
        for name in ("harvest_density_g_m3", "manning_n", "length_to_width"):
            if not getattr(self, name) > 0:
                raise InputError(f"must be > 0, got {getattr(self, name)!r}",
                                 field=f"inputs.{name}")
        if not self.bend_k >= 0:
            raise InputError(f"must be >= 0, got {self.bend_k!r}", field="inputs.bend_k")
        get_fertiliser(self.n_fertiliser)
        get_fertiliser(self.p_fertiliser)


@dataclass(frozen=True)
class RacewayFarm:
    """The ponds of a farm, as the inputs bill needs them.

    Any object with ``area_m2``, ``count`` and ``depth_m`` (such as the scenario's pond)
    works in :func:`inputs_bill`; the channel attributes are then optional.

    Attributes
    ----------
    area_m2 : float [m2]
        Water surface of one pond.
    count : int
        Number of ponds.
    depth_m : float [m]
        Culture depth.
    channel_width_m : float, optional [m]
        Default from :func:`raceway_geometry`.
    channel_length_m : float, optional [m]
        Flow path of one circuit; default area / channel width.
    velocity_m_s : float, default 0.25 [m s-1]
        Design mean channel velocity (common practice 0.2-0.3).
    """

    area_m2: float
    count: int = 1
    depth_m: float = 0.25
    channel_width_m: float | None = None
    channel_length_m: float | None = None
    velocity_m_s: float = DESIGN_VELOCITY_M_S


def mixing_power(farm, params: InputsParams | None = None) -> dict:
    """Paddlewheel power of one pond of a farm, from its channel hydraulics.

    Parameters
    ----------
    farm : RacewayFarm or object with ``area_m2``, ``depth_m`` (optional
        ``channel_width_m``, ``channel_length_m``, ``velocity_m_s``)
    params : InputsParams, optional

    Returns
    -------
    dict
        ``power_w`` [W per pond], ``head_m`` [m], ``flow_m3_s`` [m3 s-1],
        ``channel_width_m`` [m], ``channel_length_m`` [m], ``n_bends``,
        ``velocity_m_s`` [m s-1], ``power_w_m2`` [W per m2 of pond].
    """
    params = params or InputsParams()
    area = float(farm.area_m2)
    depth = float(farm.depth_m)
    v = float(getattr(farm, "velocity_m_s", None) or DESIGN_VELOCITY_M_S)
    width = getattr(farm, "channel_width_m", None)
    length = getattr(farm, "channel_length_m", None)
    n_bends = params.n_channels
    if width is None:
        geom = raceway_geometry(area, params.length_to_width, params.n_channels)
        width = float(geom["channel_width_m"])
    if length is None:
        length = area / float(width)
    head = raceway_head_loss(v, width, depth, length, n_bends, params.manning_n,
                             params.bend_k)
    flow = v * width * depth
    power = paddlewheel_power(head, flow, params.paddlewheel_efficiency)
    return {"power_w": float(power), "head_m": float(head), "flow_m3_s": float(flow),
            "channel_width_m": float(width), "channel_length_m": float(length),
            "n_bends": n_bends, "velocity_m_s": v, "power_w_m2": float(power) / area}


# ---------------------------------------------------------------------------------------
# The bill
# ---------------------------------------------------------------------------------------

#: Unit prices understood by :func:`inputs_bill` (any one currency).
PRICE_KEYS = ("co2_per_t", "n_fertiliser_per_t", "p_fertiliser_per_t", "water_per_m3",
              "electricity_per_MWh")


def _month_keys(series: pd.Series, name: str):
    """Month key per row: Period('YYYY-MM') for dated rows, int 1-12 for month numbers."""
    idx = series.index
    if isinstance(idx, pd.DatetimeIndex):
        return idx.tz_localize(None).to_period("M") if idx.tz is not None \
            else idx.to_period("M")
    if isinstance(idx, pd.PeriodIndex):
        return idx.asfreq("M")
    values = np.asarray(idx)
    if values.dtype.kind in "iu" and values.size and values.min() >= 1 and values.max() <= 12:
        return pd.Index(values.astype(int))
    raise InputError("index must be dates (DatetimeIndex or PeriodIndex) or month numbers "
                     f"1-12, got {type(idx).__name__}", field=name)


def _as_series(x, name):
    if not isinstance(x, pd.Series):
        raise InputError(f"must be a pandas Series indexed by date or month, got "
                         f"{type(x).__name__}", field=name)
    return x.astype(float)


def _by_month(series: pd.Series, name: str) -> pd.Series:
    return series.groupby(_month_keys(series, name)).sum()


def _days_in(keys) -> np.ndarray:
    if isinstance(keys, pd.PeriodIndex):
        return keys.days_in_month.to_numpy(dtype=float)
    # month numbers without a year: a non-leap calendar
    return np.array([pd.Period(f"2001-{m:02d}", "M").days_in_month for m in keys], float)


def _operating_days(series: pd.Series, months) -> np.ndarray:
    """Days of operation per month: the distinct dates seen when rows are finer than a
    month (daily, hourly), else the calendar days of the month."""
    idx = series.index
    if isinstance(idx, pd.DatetimeIndex):
        keys = _month_keys(series, "evaporation_mm_by_month")
        if keys.duplicated().any():
            local = idx.tz_localize(None) if idx.tz is not None else idx
            per_month = pd.Series(local.normalize(), index=keys).groupby(level=0).nunique()
            return per_month.reindex(months, fill_value=0).to_numpy(dtype=float)
    return _days_in(months)


def _labels(months) -> list[str]:
    if isinstance(months, pd.PeriodIndex):
        if len(set(months.year)) == 1:
            return [_MONTH_ABBR[m - 1] for m in months.month]
        return [str(p) for p in months]
    return [_MONTH_ABBR[int(m) - 1] for m in months]


def inputs_bill(harvested_kg_by_month, evaporation_mm_by_month, rain_mm_by_month, farm, *,
                params: InputsParams | None = None, prices: dict | None = None,
                harvest_volume_m3_by_month=None) -> pd.DataFrame:
    """Monthly and annual inputs of the whole farm, with costs when prices are given.

    Parameters
    ----------
    harvested_kg_by_month : pandas.Series [kg ash-free dry weight per row, whole farm]
        Indexed by dates (daily or monthly rows; a DatetimeIndex or PeriodIndex) or by
        month numbers 1-12. Rows are summed into calendar months.
    evaporation_mm_by_month : pandas.Series [mm per row]
        Same kind of index. Daily rows are best: see :func:`makeup_water`.
    rain_mm_by_month : pandas.Series or None [mm per row]
        On the same index as evaporation; None means no rain.
    farm : RacewayFarm or an object with ``area_m2``, ``count``, ``depth_m``
        See :class:`RacewayFarm` and :func:`mixing_power`.
    params : InputsParams, optional
    prices : dict, optional
        Unit prices, any keys of :data:`PRICE_KEYS`: ``co2_per_t`` [per t CO2],
        ``n_fertiliser_per_t`` and ``p_fertiliser_per_t`` [per t of product],
        ``water_per_m3`` [per m3], ``electricity_per_MWh`` [per MWh]; one currency.
    harvest_volume_m3_by_month : pandas.Series, optional [m3 per row, whole farm]
        Culture volume harvested; default harvested mass / ``params.harvest_density_g_m3``.

    Returns
    -------
    pandas.DataFrame
        One row per month (``Jan`` … ``Dec``, or ``YYYY-MM`` over several years) and a
        last row ``year`` (``total`` over several years) that is the sum of the months.
        Columns: ``biomass_t``, ``co2_t``, ``n_t``, ``p_t``, one ``<fertiliser>_t`` per
        product, ``makeup_water_m3``, ``mixing_MWh``; with prices a ``*_cost`` column per
        priced line and ``total_cost``. ``attrs`` hold ``units``, the ``params`` used and
        the ``mixing`` hydraulics of one pond.

    Notes
    -----
    CO2, N and P follow the harvested biomass (:func:`co2_demand`,
    :func:`nutrient_demand`, :func:`fertiliser_plan`): carbon fixed into biomass that was
    later lost to crashes, respiration or the harvester is not counted, so these lines
    are lower bounds. Mixing runs on every operating day (the distinct dates of daily
    rows, else the calendar days) for every pond, ``params.mixing_hours_per_day`` hours a
    day, at the power of :func:`mixing_power`.
    """
    params = params or InputsParams()
    harvested = _as_series(harvested_kg_by_month, "harvested_kg_by_month")
    evap = _as_series(evaporation_mm_by_month, "evaporation_mm_by_month")
    if rain_mm_by_month is None:
        rain = pd.Series(0.0, index=evap.index)
    else:
        rain = _as_series(rain_mm_by_month, "rain_mm_by_month")
        if not rain.index.equals(evap.index):
            raise InputError("rain must be on the same index as evaporation (the floor at "
                             "zero net evaporation is applied row by row)",
                             field="rain_mm_by_month")
    if harvest_volume_m3_by_month is None:
        volume = harvested * 1e3 / params.harvest_density_g_m3
    else:
        volume = _as_series(harvest_volume_m3_by_month, "harvest_volume_m3_by_month")
    prices = dict(prices or {})
    for key in prices:
        if key not in PRICE_KEYS:
            raise InputError(f"unknown price {key!r}{did_you_mean(key, PRICE_KEYS)}; "
                             f"choose from {', '.join(PRICE_KEYS)}", field=f"prices.{key}")

    farm_area = float(farm.area_m2) * int(farm.count)
    water_rows = makeup_water(evap, rain, farm_area)  # evaporation part, floored per row
    h_m = _by_month(harvested, "harvested_kg_by_month")
    w_m = _by_month(water_rows, "evaporation_mm_by_month")
    v_m = _by_month(volume, "harvest_volume_m3_by_month")
    kinds = {type(s.index) for s in (h_m, w_m, v_m)}
    if len(kinds) > 1:
        raise InputError("inputs mix dated rows and month numbers; use one kind of index",
                         field="harvested_kg_by_month")
    months = h_m.index.union(w_m.index).union(v_m.index).sort_values()
    h_m, w_m, v_m = (s.reindex(months, fill_value=0.0) for s in (h_m, w_m, v_m))

    biomass_kg = h_m.to_numpy()
    co2_kg = co2_demand(biomass_kg, params.carbon_fraction, params.co2_utilisation)
    n_kg, p_kg = nutrient_demand(biomass_kg, params.n_fraction, params.p_fraction)
    products = fertiliser_plan(n_kg, p_kg, params.n_fertiliser, params.p_fertiliser)
    makeup_m3 = w_m.to_numpy() + v_m.to_numpy() * (1.0 - params.recycle_fraction)
    mixing = mixing_power(farm, params)
    days = _operating_days(evap, months)
    mixing_mwh = mixing["power_w"] * int(farm.count) * params.mixing_hours_per_day \
        * days * 1e-6

    table = pd.DataFrame({
        "biomass_t": biomass_kg * 1e-3,
        "co2_t": co2_kg * 1e-3,
        "n_t": n_kg * 1e-3,
        "p_t": p_kg * 1e-3,
        **{f"{name}_t": mass * 1e-3 for name, mass in products.items()},
        "makeup_water_m3": makeup_m3,
        "mixing_MWh": mixing_mwh,
    }, index=pd.Index(_labels(months), name="month"))

    if prices:
        nf = get_fertiliser(params.n_fertiliser).name
        pf = get_fertiliser(params.p_fertiliser).name
        cost_lines = {"co2_cost": ("co2_t", "co2_per_t"),
                      f"{pf}_cost": (f"{pf}_t", "p_fertiliser_per_t"),
                      "water_cost": ("makeup_water_m3", "water_per_m3"),
                      "mixing_cost": ("mixing_MWh", "electricity_per_MWh")}
        if nf != pf:
            cost_lines[f"{nf}_cost"] = (f"{nf}_t", "n_fertiliser_per_t")
        costs = {col: table[qty] * float(prices[key])
                 for col, (qty, key) in cost_lines.items() if key in prices}
        for col, values in costs.items():
            table[col] = values
        table["total_cost"] = sum(costs.values()) if costs else 0.0

    multi_year = isinstance(months, pd.PeriodIndex) and len(set(months.year)) > 1
    table.loc["total" if multi_year else "year"] = table.sum(axis=0)
    units = {c: ("t" if c.endswith("_t") else "m3" if c.endswith("_m3") else
                 "MWh" if c.endswith("_MWh") else "currency") for c in table.columns}
    table.attrs = {"units": units, "params": asdict(params), "mixing": mixing,
                   "farm_area_m2": farm_area}
    return table


def bill_from_results(ds, *, policy=None, farm=None, rain_mm_daily=None,
                      params: InputsParams | None = None, prices: dict | None = None,
                      statistic: str = "mean") -> pd.DataFrame:
    """The inputs bill of one policy from a simulation's results Dataset.

    Parameters
    ----------
    ds : xarray.Dataset
        The results contract of :mod:`pondsim.results.files`: ``harvested`` [g m-2 d-1] and
        ``harvest_fraction`` [-] over (policy, member, day), ``evaporation`` [mm d-1]
        over day, a ``date`` coordinate and the ``pond_area_m2``, ``pond_count``,
        ``depth_m`` attributes.
    policy : str, optional
        Default the first policy.
    farm : RacewayFarm, optional
        Default built from the Dataset's attributes with the default velocity and
        geometry.
    rain_mm_daily : array-like or Series, optional [mm d-1]
        Rain per simulated day (e.g. the daily sums of :mod:`pondsim.pond.thermal`'s ``rain``);
        without it no rain is counted, which overstates makeup water.
    params : InputsParams, optional
    prices : dict, optional
        See :func:`inputs_bill`.
    statistic : {"mean", "median"}
        Across members, per day.

    Returns
    -------
    pandas.DataFrame
        As :func:`inputs_bill`; the harvested volume is ``harvest_fraction`` × pond
        volume × pond count.
    """
    if statistic not in ("mean", "median"):
        raise InputError(f"statistic must be 'mean' or 'median', got {statistic!r}",
                         field="statistic")
    policies = [str(p) for p in ds["policy"].values]
    policy = policies[0] if policy is None else policy
    if policy not in policies:
        raise InputError(f"unknown policy {policy!r}{did_you_mean(str(policy), policies)}; "
                         f"choose one of {', '.join(policies)}", field="policy")
    if farm is None:
        farm = RacewayFarm(area_m2=float(ds.attrs["pond_area_m2"]),
                           count=int(ds.attrs["pond_count"]),
                           depth_m=float(ds.attrs["depth_m"]))
    farm_area = float(farm.area_m2) * int(farm.count)
    sel = ds.sel(policy=policy)
    reduce = getattr(sel["harvested"], statistic)
    dates = pd.DatetimeIndex(ds["date"].values)
    harvested_kg = pd.Series(reduce("member").values * farm_area * 1e-3, index=dates)
    volume = pd.Series(getattr(sel["harvest_fraction"], statistic)("member").values
                       * float(farm.area_m2) * float(farm.depth_m) * int(farm.count),
                       index=dates)
    evap = pd.Series(ds["evaporation"].values.astype(float), index=dates)
    rain = None
    if rain_mm_daily is not None:
        values = np.asarray(rain_mm_daily, dtype=float)
        if values.shape != evap.shape:
            raise InputError(f"rain needs one value per simulated day ({len(evap)}), got "
                             f"{values.size}", field="rain_mm_daily")
        rain = pd.Series(values, index=dates)
    return inputs_bill(harvested_kg, evap, rain, farm, params=params, prices=prices,
                       harvest_volume_m3_by_month=volume)


__all__ = [
    "InputsParams", "PRICE_KEYS", "RacewayFarm", "bill_from_results", "inputs_bill",
    "mixing_power",
]
