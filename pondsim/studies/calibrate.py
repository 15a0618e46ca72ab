"""Calibrate growth parameters from pilot-pond observations.

A pilot pond gives dated density samples, the harvests that were made, and perhaps the
water temperature and the light. :func:`fit_pilot` finds the strain parameters that make
the *same* hourly engine as the yearly simulation (:func:`pondsim.operations.engine.integrate`)
reproduce those samples, by weighted nonlinear least squares on log density; it reports
standard errors, 95 % intervals, correlations, residual diagnostics and warnings for
parameters the data cannot pin down. :func:`fit_logistic_curve` fits the closed-form
logistic curve to a batch growth curve that has no forcing data.

Observations file (CSV, ``#`` starts a comment line), one row per sample or event:

========================  ============================================================
column (default name)     meaning
========================  ============================================================
``time``                  date or date-time in local standard time (required)
``density``               density, unit from ``density_unit`` (or named
                          ``density_g_m3``, ``density_g_l``, ``density_mg_l``, ``od``)
``harvest_fraction``      share of the culture volume removed that day [-], or
``harvest_volume_m3``     culture volume removed that day [m3] (needs the pond volume)
``water_temperature_c``   water temperature at the row's time [degC] (optional)
``par``                   PAR, unit from ``par_unit`` (or named ``par_umol_m2_s`` for an
                          hour's mean flux, ``par_mol_m2_d`` for a daily light integral)
``weight``                relative weight of the sample in the fit (optional, >= 0)
========================  ============================================================

Other names map through ``columns`` (``{"time": "Date", "density": "DW_g_L"}``; on the
command line ``--columns time=Date,density=DW_g_L``). A row may carry a density sample, a
harvest, forcing readings or several of them.

How the pilot is simulated
--------------------------
* Samples are read at one local hour per day, the engine's ``Operation.sample_hour``: the
  most common (rounded) hour of the samples; date-only times are taken as sampled one hour
  before the harvest hour. Samples more than an hour away from it are counted in a note.
* Harvests happen at the scenario's harvest hour (``harvest.hour``) on their date, as a
  :class:`~pondsim.operations.harvest.HarvestRules` table with one period per day: the observed
  fraction on event days and nothing on other days. A sample taken at the harvest hour is
  taken after that harvest (the engine's rule).
* The initial condition ``x0_g_m3`` is the density at the harvest hour of the first
  simulated day (the first sample day if the first sample is at or after the harvest hour,
  else the day before). It is set per member by a "harvest down to a residual" rule on
  that day, so every Jacobian column, including the one for ``x0``, comes out of one
  engine call. The hours of that day before the reset are treated as dark; the state is a
  single density, so what happens before the reset cannot matter.
* Light and water temperature come from the scenario's forcing for the observation dates
  (:func:`pondsim.operations.simulate.load_forcing`,
  :func:`pondsim.operations.simulate.hourly_light_and_water`).
  Observed water temperatures correct the modelled hourly profile of their day by the
  observed-minus-modelled offset, interpolated across the day's readings (one reading
  shifts the whole day; hourly readings replace it). Observed PAR replaces the modelled
  value at the hours read and rescales the rest of that day (hour means, µmol m-2 s-1),
  or rescales the day's modelled profile to the observed daily integral (mol m-2 d-1).
  Crashes are switched off and the harvest capacity and minimum density do not apply:
  the observed harvests are what happened.

The fit
-------
Residuals are :math:`\\sqrt{w_i}\\,(\\ln y_i - \\ln \\hat y_i)`: density errors of pilot
samples are roughly proportional to the density, so logs make them about homoscedastic,
and a fit in logs weighs the thin early culture as much as the dense one. The least
squares solver is :func:`scipy.optimize.least_squares` (trust-region reflective, within
the scenario's allowed ranges). Its Jacobian is a central finite difference with all
2p + 1 parameter sets in ONE engine call (members mapped to driver sets by
``set_of_member``); central rather than forward differences cost no extra call and are
second-order accurate. Covariance :math:`s^2 (J^T J)^{-1}` with
:math:`s^2 = \\sum r_i^2 / (n - p)`, intervals estimate ± t(0.975, n − p)·SE
(Bates & Watts 1988, *Nonlinear Regression Analysis and Its Applications*, ch. 2).
"""

from __future__ import annotations

import argparse
import datetime as dt
import math
import os
import re
import sys
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import optimize, stats

from pondsim.errors import InputError, did_you_mean
from pondsim.operations.engine import HOURS_PER_DAY, STEP_D, Drivers, Operation, integrate
from pondsim.operations.harvest import RULE_CODES, HarvestRules
from pondsim.pond import kinetics

__all__ = [
    "DEMO_SEED",
    "PARAMETERS",
    "CurveFit",
    "Observations",
    "PilotFit",
    "PilotModel",
    "add_fit_parser",
    "cmd_fit",
    "fit_logistic_curve",
    "fit_pilot",
    "make_demo_pilot",
    "parse_observations",
    "pilot_hourly",
    "plot_fit",
    "read_observations",
    "write_demo_pilot",
    "write_fitted_scenario",
]

#: Seed of the demo pilot file ``scenarios/kestrel_flats_pilot.csv``.
DEMO_SEED = 20250320

#: Density units accepted, as factors to g m-3 (1 g L-1 = 1000 g m-3 = 1000 mg L-1).
DENSITY_UNITS = {"g/m3": 1.0, "g/l": 1000.0, "mg/l": 1.0, "od": None}
_UNIT_ALIASES = {
    "g/m3": "g/m3", "gm-3": "g/m3", "g_m3": "g/m3", "g/m^3": "g/m3",
    "g/l": "g/l", "gl-1": "g/l", "g_l": "g/l", "kg/m3": "g/l",
    "mg/l": "mg/l", "mgl-1": "mg/l", "mg_l": "mg/l",
    "od": "od", "od750": "od", "od680": "od",
}
PAR_UNITS = ("umol/m2/s", "mol/m2/d")
_PAR_ALIASES = {"umol/m2/s": "umol/m2/s", "umolm-2s-1": "umol/m2/s",
                "umol_m2_s": "umol/m2/s", "µmol/m2/s": "umol/m2/s",
                "mol/m2/d": "mol/m2/d", "molm-2d-1": "mol/m2/d", "mol_m2_d": "mol/m2/d"}

#: Fields of the observations file and the default column names that map to them.
FIELDS = ("time", "density", "harvest_fraction", "harvest_volume", "water_temperature",
          "par", "weight")
_DEFAULT_NAMES = {
    "time": ("time",), "density": ("density", "density_g_m3", "density_g_l",
                                   "density_mg_l", "od"),
    "harvest_fraction": ("harvest_fraction",), "harvest_volume": ("harvest_volume_m3",),
    "water_temperature": ("water_temperature_c",),
    "par": ("par", "par_umol_m2_s", "par_mol_m2_d"), "weight": ("weight",),
}
_UNIT_OF_NAME = {"density_g_m3": "g/m3", "density_g_l": "g/l", "density_mg_l": "mg/l",
                 "od": "od", "par_umol_m2_s": "umol/m2/s", "par_mol_m2_d": "mol/m2/d"}


@dataclass(frozen=True)
class Param:
    """A parameter the fit can estimate."""

    unit: str
    low: float
    high: float
    scale: float  # typical magnitude, for the solver's variable scaling and FD steps
    doc: str
    key: str | None  # scenario key it is written to ([strain] section), if any


#: Parameters the pilot fit can estimate; the allowed ranges follow the scenario schema.
PARAMETERS: dict[str, Param] = {
    "mu_max_per_d": Param("d-1", 0.05, 5.0, 1.0, "maximum specific growth rate",
                          "mu_max_per_d"),
    "light_param_umol_m2_s": Param("umol m-2 s-1", 5.0, 3000.0, 100.0,
                                   "light parameter of the light response",
                                   "light_param_umol_m2_s"),
    "maintenance_per_d": Param("d-1", 0.0, 1.0, 0.05, "maintenance rate at the reference "
                               "temperature", "maintenance_per_d"),
    "t_opt_c": Param("degC", 0.0, 50.0, 5.0, "optimum temperature (CTMI)", "t_opt_c"),
    "k_biomass_m2_g": Param("m2 g-1", 0.01, 2.0, 0.1, "biomass-specific light extinction",
                            "k_biomass_m2_g"),
    "capacity_g_m3": Param("g m-3", 1.0, 20000.0, 500.0, "carrying capacity over the pilot "
                           "(logistic form)", "capacity_table_g_m3"),
    "x0_g_m3": Param("g m-3", 1e-3, 20000.0, 50.0, "density at the start of the simulated "
                     "pilot", None),
}
GROWTH_FORMS = ("self_shading", "logistic")

# Warning thresholds (common practice in nonlinear regression reporting). The relative SE
# limit is set from this module's own recovery runs: light parameters fitted with SE above
# ~30 % of the estimate had Wald intervals that missed the truth far more often than 5 %.
MAX_RELATIVE_SE = 0.3
MAX_ABS_CORRELATION = 0.95


# --------------------------------------------------------------------------------------
# Observations
# --------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Observations:
    """Pilot-pond observations, converted to pondsim units.

    Attributes
    ----------
    time : pandas.DatetimeIndex
        Sample times, naive local standard time, increasing.
    density_g_m3 : ndarray [g m-3]
        Sampled density (ash-free dry weight as given).
    weight : ndarray [-]
        Relative weights of the samples.
    harvest : pandas.Series
        Share of the culture volume removed [-], indexed by (midnight) date.
    water_temperature_c : pandas.Series or None
        Observed water temperature [degC] indexed by time.
    par : pandas.Series or None
        Observed PAR indexed by time, in ``par_unit``.
    par_unit : str or None
        ``"umol/m2/s"`` (an hour's mean flux) or ``"mol/m2/d"`` (daily integral).
    path : Path or None
    notes : list of str
    """

    time: pd.DatetimeIndex
    density_g_m3: np.ndarray
    weight: np.ndarray
    harvest: pd.Series
    water_temperature_c: pd.Series | None = None
    par: pd.Series | None = None
    par_unit: str | None = None
    path: Path | None = None
    notes: list = field(default_factory=list)

    @property
    def n(self) -> int:
        return len(self.time)

    def without_harvests(self) -> Observations:
        """The same observations with the harvest record dropped (for comparisons)."""
        return Observations(self.time, self.density_g_m3, self.weight,
                            self.harvest.iloc[:0], self.water_temperature_c, self.par,
                            self.par_unit, self.path, list(self.notes))


def _norm_unit(text: str) -> str:
    return re.sub(r"\s+", "", str(text).strip().lower()).replace("^", "").replace("·", "")


def parse_column_map(text: str | None, *, field_name: str = "--columns") -> dict:
    """Parse ``"time=Date,density=DW_g_L"`` into ``{"time": "Date", "density": "DW_g_L"}``."""
    if not text:
        return {}
    out = {}
    for part in str(text).split(","):
        if not part.strip():
            continue
        if "=" not in part:
            raise InputError(f"expected FIELD=COLUMN pairs separated by commas, got "
                             f"{part!r}; fields: {', '.join(FIELDS)}", field=field_name)
        key, col = (s.strip() for s in part.split("=", 1))
        if key not in FIELDS:
            raise InputError(f"unknown field {key!r}{did_you_mean(key, FIELDS)}; fields: "
                             f"{', '.join(FIELDS)}", field=field_name)
        out[key] = col
    return out


def read_observations(path, *, columns: dict | None = None, density_unit: str | None = None,
                      od_factor_g_l: float | None = None, par_unit: str | None = None,
                      pond_volume_m3: float | None = None) -> Observations:
    """Read a pilot observations CSV (see the module docstring for the columns).

    Parameters
    ----------
    path : str or Path
    columns : dict, optional
        Field -> column name in the file, for fields whose column has another name.
    density_unit : str, optional
        ``g/m3``, ``g/L``, ``mg/L`` (dry weight) or ``OD`` (optical density, then
        ``od_factor_g_l`` is needed). Default: from the column name, else g/m3.
    od_factor_g_l : float, optional [g L-1 per unit OD]
        Dry weight per unit of optical density, from the strain's calibration line.
    par_unit : str, optional
        ``umol/m2/s`` (hour mean) or ``mol/m2/d`` (daily integral).
    pond_volume_m3 : float, optional [m3]
        Culture volume of the pilot pond, to turn harvested volumes into fractions.

    Raises
    ------
    InputError
        Missing file or column, unparsable or unsorted or duplicated times, negative or
        zero densities, unknown units, out-of-range harvests or forcing readings.
    """
    path = Path(path)
    if not path.is_file():
        raise InputError("observations file not found", path=path)
    try:
        frame = pd.read_csv(path, comment="#", skipinitialspace=True)
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as err:
        raise InputError(f"not a readable CSV file: {err}", path=path) from None
    return parse_observations(frame, path=path, columns=columns, density_unit=density_unit,
                              od_factor_g_l=od_factor_g_l, par_unit=par_unit,
                              pond_volume_m3=pond_volume_m3)


def _numeric(frame, col, path, allow_missing=True) -> np.ndarray:
    values = pd.to_numeric(frame[col], errors="coerce")
    bad = values.isna() & frame[col].notna() & (frame[col].astype(str).str.strip() != "")
    if bad.any():
        row = int(np.flatnonzero(bad.to_numpy())[0])
        raise InputError(f"row {row + 2}: {frame[col].iloc[row]!r} is not a number",
                         path=path, field=col)
    out = values.to_numpy(dtype=float)
    if not allow_missing and np.isnan(out).any():
        row = int(np.flatnonzero(np.isnan(out))[0])
        raise InputError(f"row {row + 2}: missing value", path=path, field=col)
    return out


def _find_column(frame, fieldname, columns, path):
    """Column of the file for *fieldname*, or None when the field is absent."""
    if fieldname in columns:
        col = columns[fieldname]
        if col not in frame.columns:
            raise InputError(f"column {col!r} (mapped to {fieldname}) is not in the file"
                             f"{did_you_mean(col, frame.columns)}; columns: "
                             f"{', '.join(map(str, frame.columns))}", path=path, field=col)
        return col
    found = [n for n in _DEFAULT_NAMES[fieldname] if n in frame.columns]
    if len(found) > 1:
        raise InputError(f"several columns could hold {fieldname}: {found}; keep one or "
                         f"map one with --columns {fieldname}=NAME", path=path,
                         field=found[0])
    return found[0] if found else None


def parse_observations(frame: pd.DataFrame, *, path=None, columns: dict | None = None,
                       density_unit: str | None = None, od_factor_g_l: float | None = None,
                       par_unit: str | None = None,
                       pond_volume_m3: float | None = None) -> Observations:
    """Validate and convert an observations table (the core of :func:`read_observations`)."""
    columns = dict(columns or {})
    for key in columns:
        if key not in FIELDS:
            raise InputError(f"unknown field {key!r}{did_you_mean(key, FIELDS)}; fields: "
                             f"{', '.join(FIELDS)}", path=path, field="--columns")
    frame = frame.rename(columns=lambda c: str(c).strip())
    notes = []
    cols = {f: _find_column(frame, f, columns, path) for f in FIELDS}
    if cols["time"] is None:
        raise InputError("no time column; name it 'time' or map yours with --columns "
                         f"time=NAME; columns in the file: {', '.join(map(str, frame.columns))}",
                         path=path, field="time")
    if cols["density"] is None:
        raise InputError("no density column; name it density (with --density-unit), "
                         "density_g_m3, density_g_l, density_mg_l or od, or map yours with "
                         "--columns density=NAME; columns in the file: "
                         f"{', '.join(map(str, frame.columns))}", path=path, field="density")
    if len(frame) == 0:
        raise InputError("the file holds no rows", path=path)

    # Time: parse, check order and uniqueness.
    tcol = cols["time"]
    raw = frame[tcol]
    try:
        time = pd.to_datetime(raw.astype(str).str.strip(), format="mixed")
    except (ValueError, TypeError) as err:
        raise InputError(f"cannot read the times as dates ({err}); write them like "
                         "2025-03-20 or 2025-03-20 08:00", path=path, field=tcol) from None
    time = pd.DatetimeIndex(time)
    if time.isna().any():
        row = int(np.flatnonzero(time.isna())[0])
        raise InputError(f"row {row + 2}: missing time", path=path, field=tcol)
    if time.tz is not None:
        raise InputError("times carry a time zone; give them in local standard time "
                         "without a zone (the scenario's site.utc_offset_h)", path=path,
                         field=tcol)
    step = np.diff(time.asi8)
    if (step < 0).any():
        row = int(np.flatnonzero(step < 0)[0]) + 1
        raise InputError(f"times are not in increasing order: row {row + 2} ({time[row]}) "
                         f"comes before row {row + 1} ({time[row - 1]}); sort the file by "
                         "time", path=path, field=tcol)
    if (step == 0).any():
        row = int(np.flatnonzero(step == 0)[0]) + 1
        raise InputError(f"duplicated time {time[row]} (rows {row + 1} and {row + 2}); "
                         "give each time once", path=path, field=tcol)

    # Density and its unit.
    dcol = cols["density"]
    unit_text = density_unit if density_unit is not None else _UNIT_OF_NAME.get(dcol, "g/m3")
    unit = _UNIT_ALIASES.get(_norm_unit(unit_text))
    if unit is None:
        raise InputError(f"unknown density unit {unit_text!r}; allowed: g/m3, g/L, mg/L "
                         "(dry weight) or OD (with --od-factor)", path=path,
                         field="--density-unit")
    dens = _numeric(frame, dcol, path)
    if unit == "od":
        if od_factor_g_l is None or not (od_factor_g_l > 0 and math.isfinite(od_factor_g_l)):
            raise InputError("optical density needs its calibration factor: --od-factor F "
                             "with F the dry weight in g L-1 per unit OD (> 0)", path=path,
                             field="--od-factor")
        factor = od_factor_g_l * 1000.0
    else:
        factor = DENSITY_UNITS[unit]
    bad = ~np.isnan(dens) & ~(dens > 0)
    if bad.any():
        row = int(np.flatnonzero(bad)[0])
        raise InputError(f"row {row + 2}: density {dens[row]:g} is not positive; allowed: "
                         "densities > 0 (leave the cell empty on rows without a sample)",
                         path=path, field=dcol)
    if not np.isfinite(dens[~np.isnan(dens)]).all():
        raise InputError("densities must be finite", path=path, field=dcol)
    has = ~np.isnan(dens)
    if not has.any():
        raise InputError("no density samples in the file", path=path, field=dcol)

    weight = np.ones(len(frame))
    if cols["weight"] is not None:
        weight = _numeric(frame, cols["weight"], path)
        weight = np.where(np.isnan(weight), 1.0, weight)
        if (weight < 0).any() or not np.isfinite(weight).all():
            raise InputError("weights must be finite and >= 0", path=path,
                             field=cols["weight"])

    # Harvests: fraction of the volume, or volume with the pond volume.
    fcol, vcol = cols["harvest_fraction"], cols["harvest_volume"]
    if fcol is not None and vcol is not None:
        raise InputError("give harvests as a fraction or as a volume, not both", path=path,
                         field=vcol)
    frac = np.zeros(len(frame))
    if fcol is not None:
        frac = np.nan_to_num(_numeric(frame, fcol, path), nan=0.0)
        if ((frac < 0) | (frac >= 1)).any():
            row = int(np.flatnonzero((frac < 0) | (frac >= 1))[0])
            raise InputError(f"row {row + 2}: harvest fraction {frac[row]:g} is out of "
                             "range; allowed: [0, 1) of the culture volume", path=path,
                             field=fcol)
    elif vcol is not None:
        vol = np.nan_to_num(_numeric(frame, vcol, path), nan=0.0)
        if pond_volume_m3 is None or not pond_volume_m3 > 0:
            raise InputError("harvested volumes need the pond's culture volume (> 0 m3; "
                             "--pond-volume, default from the scenario)", path=path,
                             field=vcol)
        frac = vol / pond_volume_m3
        if ((vol < 0) | (frac >= 1)).any():
            row = int(np.flatnonzero((vol < 0) | (frac >= 1))[0])
            raise InputError(f"row {row + 2}: harvested volume {vol[row]:g} m3 is out of "
                             f"range; allowed: [0, {pond_volume_m3:g}) m3 (the pond volume)",
                             path=path, field=vcol)
    days = time.normalize()
    events = pd.Series(frac, index=days)
    events = events[events > 0]
    # Several harvests on one date: the remaining shares multiply.
    harvest = events.groupby(level=0).agg(
        lambda v: v.iloc[0] if len(v) == 1 else 1.0 - float(np.prod(1.0 - v)))

    temp = None
    if cols["water_temperature"] is not None:
        tw = _numeric(frame, cols["water_temperature"], path)
        ok = ~np.isnan(tw)
        if ((tw[ok] < -5) | (tw[ok] > 60)).any():
            raise InputError("water temperature out of range; allowed: -5 to 60 degC",
                             path=path, field=cols["water_temperature"])
        temp = pd.Series(tw[ok], index=time[ok]) if ok.any() else None
    par = None
    punit = None
    if cols["par"] is not None:
        pcol = cols["par"]
        unit_text = par_unit if par_unit is not None else _UNIT_OF_NAME.get(pcol)
        if unit_text is None:
            raise InputError("the PAR column needs its unit: --par-unit umol/m2/s (hour "
                             "mean) or mol/m2/d (daily integral)", path=path,
                             field="--par-unit")
        punit = _PAR_ALIASES.get(_norm_unit(unit_text).replace("μ", "u").replace("µ", "u"))
        if punit is None:
            raise InputError(f"unknown PAR unit {unit_text!r}; allowed: "
                             + ", ".join(PAR_UNITS), path=path, field="--par-unit")
        pv = _numeric(frame, pcol, path)
        ok = ~np.isnan(pv)
        high = 3000.0 if punit == "umol/m2/s" else 100.0
        if ((pv[ok] < 0) | (pv[ok] > high)).any():
            raise InputError(f"PAR out of range; allowed: 0 to {high:g} {punit}", path=path,
                             field=pcol)
        par = pd.Series(pv[ok], index=time[ok]) if ok.any() else None

    return Observations(time=time[has], density_g_m3=dens[has] * factor, weight=weight[has],
                        harvest=harvest, water_temperature_c=temp, par=par, par_unit=punit,
                        path=None if path is None else Path(path), notes=notes)


# --------------------------------------------------------------------------------------
# The pilot model: observations + scenario forcing -> engine runs for many parameter sets
# --------------------------------------------------------------------------------------
def pilot_hourly(scenario, year: int | None = None) -> pd.DataFrame:
    """Hourly PAR and water temperature of the scenario's forcing for *year*.

    Returns the table of :func:`pondsim.operations.simulate.hourly_light_and_water` with a naive
    (local standard time) index.
    """
    from pondsim.operations.simulate import hourly_light_and_water, load_forcing

    if year is not None and year != scenario.year:
        scenario = scenario.replace(year=int(year))
    forcing, _ = load_forcing(scenario)
    hourly = hourly_light_and_water(forcing, scenario)
    idx = pd.DatetimeIndex(hourly.index)
    if idx.tz is not None:
        idx = idx.tz_localize(None)
    return hourly.set_axis(idx, axis=0)


class PilotModel:
    """The pilot pond as the engine sees it, for any number of parameter sets at once.

    Parameters
    ----------
    observations : Observations
    scenario : pondsim.scenario.Scenario
        Strain, pond, harvest hour; parameters not fitted keep the scenario's values.
    hourly : DataFrame
        :func:`pilot_hourly` of the observations' year.
    growth_form : {"self_shading", "logistic"}
    free : sequence of str
        Names in :data:`PARAMETERS` to estimate, in order.
    sample_hour : int, optional
        Local hour at which samples are read (default: see the module docstring).
    """

    def __init__(self, observations: Observations, scenario, hourly: pd.DataFrame,
                 growth_form: str, free, *, sample_hour: int | None = None):
        obs = observations
        self.obs, self.scenario, self.growth_form = obs, scenario, growth_form
        self.free = tuple(free)
        self.notes = list(obs.notes)
        path = obs.path
        h = int(scenario.harvest.hour)
        self.harvest_hour = h
        rounded = obs.time.round("h")
        if sample_hour is None:
            if (obs.time == obs.time.normalize()).all():
                sample_hour = max(h - 1, 0)
                rounded = obs.time.normalize() + pd.Timedelta(hours=sample_hour)
                self.notes.append(f"times carry no hour: samples taken as read at "
                                  f"{sample_hour:02d}:00, before the {h:02d}:00 harvest")
            else:
                sample_hour = int(pd.Series(rounded.hour).mode().iloc[0])
        elif not 0 <= int(sample_hour) <= 23:
            raise InputError(f"sample hour {sample_hour} out of range; allowed 0-23",
                             field="--sample-hour")
        self.sample_hour = s = int(sample_hour)
        off = np.abs(((rounded.hour - s + 12) % 24) - 12)
        if (off > 1).any():
            self.notes.append(f"{int((off > 1).sum())} sample(s) lie more than 1 h from the "
                              f"modelled sampling hour {s:02d}:00")
        dates = rounded.normalize()
        dup = dates.duplicated()
        if dup.any():
            raise InputError(f"two samples on {dates[dup][0].date()}; the fit takes one "
                             "sample per day (average replicates first)", path=path,
                             field="time")
        first = dates[0]
        self.start = first if s >= h else first - pd.Timedelta(days=1)
        end = dates[-1]
        year = hourly.index[0].year
        if self.start.year != year or end.year != year:
            raise InputError(f"the observations run from {obs.time[0].date()} to "
                             f"{obs.time[-1].date()}; a fit covers one calendar year of "
                             f"forcing ({year})" + (", and needs the day before the first "
                             "sample when it was read before the harvest hour"
                             if s < h else ""), path=path, field="time")
        self.n_days = int((end - self.start).days) + 1
        self.sample_day = ((dates - self.start).days).to_numpy().astype(int)
        d0 = int((self.start - pd.Timestamp(year=year, month=1, day=1)).days)
        window = hourly.iloc[d0 * HOURS_PER_DAY:(d0 + self.n_days) * HOURS_PER_DAY]
        self.hours = window.index
        tw = window["water_temperature"].to_numpy(dtype=float).copy()
        par = np.maximum(window["par"].to_numpy(dtype=float), 0.0).copy()
        self.modelled_temperature = tw.copy()
        tw = self._observed_temperature(tw)
        par = self._observed_par(par)
        self.water_temperature, self.par_observed_or_modelled = tw, par.copy()
        # Hours of day 0 before the reset to x0 are irrelevant: make them dark (no growth).
        par[:h] = 0.0
        self.par = par
        # Harvest fraction of each simulated day; events outside the samples' span drop.
        ev = obs.harvest
        idx = ((ev.index - self.start).days).to_numpy()
        # Day 0 ends at the reset to x0: a harvest before the first sample is part of x0.
        keep = (idx >= 1) & (idx < self.n_days)
        dropped = int((~keep).sum())
        if dropped:
            self.notes.append(f"{dropped} harvest(s) before the first sample or after the "
                              "last one ignored (the fit starts at the first sample)")
        self.fraction = np.zeros(self.n_days)
        self.fraction[idx[keep]] = ev.to_numpy()[keep]
        st = scenario.strain
        lit = par > 0
        self.temperature_range = (float(tw[lit].min()), float(tw[lit].max())) if lit.any() \
            else (float(tw.min()), float(tw.max()))
        self.ftemp_fixed = kinetics.ctmi(tw, st.t_min_c, st.t_opt_c, st.t_max_c)
        self.maint_unit = kinetics.maintenance_rate(tw, 1.0, st.maintenance_theta,
                                                    st.maintenance_t_ref_c)
        self.log_obs = np.log(obs.density_g_m3)
        self.sqrt_w = np.sqrt(obs.weight)
        self.runs = 0

    # -- forcing from the observations -----------------------------------------------
    def _hour_index(self, times):
        rel = (times.round("h") - self.start) // pd.Timedelta(hours=1)
        return np.asarray(rel, dtype=int)

    def _observed_temperature(self, tw):
        series = self.obs.water_temperature_c
        if series is None:
            return tw
        idx = self._hour_index(series.index)
        ok = (idx >= 0) & (idx < len(tw))
        idx, val = idx[ok], series.to_numpy()[ok]
        offset = val - tw[idx]
        out = tw.copy()
        day = idx // HOURS_PER_DAY
        for d in np.unique(day):
            sel = day == d
            hod = idx[sel] % HOURS_PER_DAY
            order = np.argsort(hod)
            shift = np.interp(np.arange(HOURS_PER_DAY), hod[order], offset[sel][order])
            out[d * HOURS_PER_DAY:(d + 1) * HOURS_PER_DAY] += shift
        self.notes.append(f"observed water temperature used on {len(np.unique(day))} day(s)")
        return out

    def _observed_par(self, par):
        series = self.obs.par
        if series is None:
            return par
        out = par.copy()
        if self.obs.par_unit == "mol/m2/d":
            day = ((series.index.normalize() - self.start).days).to_numpy()
            ok = (day >= 0) & (day < self.n_days)
            for d, v in zip(day[ok], series.to_numpy()[ok], strict=True):
                sl = slice(d * HOURS_PER_DAY, (d + 1) * HOURS_PER_DAY)
                modelled = out[sl].sum() * 3600e-6  # mol m-2 d-1
                if modelled > 0:
                    out[sl] *= v / modelled
                elif v > 0:  # no modelled light: spread over the day's 12 central hours
                    out[d * HOURS_PER_DAY + 6:d * HOURS_PER_DAY + 18] = v / (12 * 3600e-6)
            used = int(ok.sum())
        else:
            idx = self._hour_index(series.index)
            ok = (idx >= 0) & (idx < len(out))
            idx, val = idx[ok], series.to_numpy()[ok]
            day = idx // HOURS_PER_DAY
            for d in np.unique(day):
                sel = day == d
                modelled = out[idx[sel]].sum()
                sl = slice(d * HOURS_PER_DAY, (d + 1) * HOURS_PER_DAY)
                if modelled > 0:
                    out[sl] *= val[sel].sum() / modelled
                out[idx[sel]] = val[sel]
            used = len(np.unique(day))
        self.notes.append(f"observed PAR used on {used} day(s)")
        return out

    # -- parameters -------------------------------------------------------------------
    def value_of(self, name: str) -> float:
        """The scenario's value of a parameter (the start of the fit)."""
        st = self.scenario.strain
        if name == "x0_g_m3":
            return float(self.obs.density_g_m3[0])
        if name == "capacity_g_m3":
            if st.capacity_table_g_m3 is not None:
                return float(np.mean(st.capacity_table_g_m3))
            return float(1.3 * self.obs.density_g_m3.max())
        return float(getattr(st, PARAMETERS[name].key))

    def bounds(self, name: str) -> tuple[float, float]:
        p = PARAMETERS[name]
        if name == "t_opt_c":
            st = self.scenario.strain
            # CTMI needs t_min < t_opt < t_max and t_opt above their midpoint.
            return (st.t_min_c + st.t_max_c) / 2 + 0.25, st.t_max_c - 0.25
        return p.low, p.high

    def _column(self, thetas, name):
        if name in self.free:
            return thetas[:, self.free.index(name)]
        return np.full(thetas.shape[0], self.value_of(name))

    def run(self, thetas, *, all_days: bool = False):
        """Model density at the samples [g m-3], shape (m, n_obs), for m parameter sets.

        ``thetas`` has shape (m, p) in the order of ``free``. One engine call.
        With ``all_days`` the density at the sampling hour of every simulated day is
        returned instead, shape (m, n_days).
        """
        thetas = np.atleast_2d(np.asarray(thetas, dtype=float))
        m = thetas.shape[0]
        st = self.scenario.strain
        n_hours = self.n_days * HOURS_PER_DAY
        col = lambda name: self._column(thetas, name)  # noqa: E731
        if "t_opt_c" in self.free:
            ftemp = kinetics.ctmi(self.water_temperature[None, :], st.t_min_c,
                                  col("t_opt_c")[:, None], st.t_max_c)
        else:
            ftemp = np.broadcast_to(self.ftemp_fixed, (m, n_hours))
        maint = col("maintenance_per_d")[:, None] * self.maint_unit[None, :]
        cap = np.broadcast_to(col("capacity_g_m3")[:, None] if self.growth_form == "logistic"
                              else np.ones((1, 1)), (m, self.n_days))
        drivers = Drivers(
            par=np.broadcast_to(self.par, (m, n_hours)), temp_factor=ftemp,
            maintenance=maint, capacity=cap, mu_max=col("mu_max_per_d"),
            light_param=col("light_param_umol_m2_s"), k_biomass=col("k_biomass_m2_g"),
            k_background=np.full(m, st.k_background_per_m), light_model=st.light_model,
            growth_form=self.growth_form, depth_m=self.scenario.pond.depth_m)
        x0 = col("x0_g_m3")
        code = np.where(self.fraction > 0, RULE_CODES["fixed_fraction"], RULE_CODES["none"])
        code[0] = RULE_CODES["fixed_interval"]  # day 0: harvest down to x0 (the reset)
        residual = np.full((m, self.n_days), np.nan)
        residual[:, 0] = x0
        rules = HarvestRules(
            code=np.broadcast_to(code.astype(np.int8), (m, self.n_days)),
            fraction=np.broadcast_to(self.fraction, (m, self.n_days)),
            every_days=np.zeros((m, self.n_days), dtype=np.int32),
            trigger=np.full((m, self.n_days), np.nan), residual=residual,
            period_of_day=np.arange(self.n_days)[None, :])
        # Inoculum large enough to stay above every x0 through the dark hours before the
        # reset (pure decay exp(-m t) there).
        decay = np.exp(-maint[:, :self.harvest_hour].sum(axis=1) * STEP_D)
        inoculum = float(1.5 * np.max(x0 / decay) + 1.0)
        op = Operation(start_day=0, inoculum_g_m3=inoculum, restart_days=0,
                       harvest_hour=self.harvest_hour, recovery_efficiency=1.0,
                       max_fraction=1.0, min_density_g_m3=0.0, sample_hour=self.sample_hour)
        daily = integrate(drivers, rules, op, set_of_member=np.arange(m))
        self.runs += 1
        if not (daily.harvest_fraction[:, 0] > 0).all():  # pragma: no cover - guard
            raise RuntimeError("pilot reset to x0 did not happen; inoculum too small")
        return daily.sampled if all_days else daily.sampled[:, self.sample_day]

    def residuals(self, x_model):
        """Weighted log residuals sqrt(w) (ln y - ln yhat), shape (..., n_obs)."""
        return self.sqrt_w * (self.log_obs - np.log(np.maximum(x_model, 1e-12)))

    def dates(self) -> pd.DatetimeIndex:
        """Sampling time of each simulated day."""
        return pd.date_range(self.start + pd.Timedelta(hours=self.sample_hour),
                             periods=self.n_days, freq="D")


# --------------------------------------------------------------------------------------
# Statistics shared by both fits
# --------------------------------------------------------------------------------------
def _covariance(jac, resid, n_params):
    """(s2, cov, condition number) from the Jacobian of the residuals at the optimum."""
    n = len(resid)
    dof = n - n_params
    s2 = float(resid @ resid) / dof
    u, sv, vt = np.linalg.svd(jac, full_matrices=False)
    cond = float(sv[0] / sv[-1]) if sv[-1] > 0 else math.inf
    tiny = sv <= sv[0] * 1e-12 if sv[0] > 0 else np.ones_like(sv, bool)
    inv = np.where(tiny, 0.0, 1.0 / np.where(tiny, 1.0, sv) ** 2)
    cov = (vt.T * inv) @ vt * s2
    if tiny.any():  # a direction the data do not see at all
        null = np.abs(vt[tiny]).max(axis=0) > 1e-6
        cov[null, :] = np.inf
        cov[:, null] = np.inf
    return s2, cov, cond


def _correlation(cov):
    with np.errstate(invalid="ignore", divide="ignore"):
        sd = np.sqrt(np.diag(cov))
        corr = cov / np.outer(sd, sd)
    return np.where(np.isfinite(corr), corr, np.nan)


def _diagnostics(resid) -> dict:
    """RMSE, lag-1 autocorrelation and a normality hint of (log) residuals."""
    r = np.asarray(resid, dtype=float)
    out = {"rmse": float(np.sqrt(np.mean(r ** 2))), "mean": float(np.mean(r))}
    c = r - r.mean()
    den = float(c @ c)
    out["lag1_autocorrelation"] = float(c[1:] @ c[:-1] / den) if den > 0 and len(r) > 2 \
        else float("nan")
    out["durbin_watson"] = float(np.sum(np.diff(r) ** 2) / (r @ r)) if r @ r > 0 \
        else float("nan")
    if len(r) >= 3 and den > 0:
        out["skewness"] = float(stats.skew(r))
        out["excess_kurtosis"] = float(stats.kurtosis(r))
        out["shapiro_p"] = float(stats.shapiro(r).pvalue)
    else:
        out["skewness"] = out["excess_kurtosis"] = out["shapiro_p"] = float("nan")
    return out


def _parameter_table(names, est, cov, dof, units, docs) -> pd.DataFrame:
    se = np.sqrt(np.diag(cov))
    tq = float(stats.t.ppf(0.975, dof))
    with np.errstate(invalid="ignore", divide="ignore"):
        rel = se / np.abs(est)
    return pd.DataFrame({"estimate": est, "se": se, "ci95_low": est - tq * se,
                         "ci95_high": est + tq * se, "relative_se": rel, "unit": units,
                         "meaning": docs}, index=pd.Index(names, name="parameter"))


def _identifiability_warnings(table, corr, names) -> list[str]:
    warn = []
    for name, row in table.iterrows():
        if not np.isfinite(row["se"]):
            warn.append(f"{name}: not identifiable from these data (the Jacobian is "
                        "singular in its direction); fix it or collect other data")
        elif row["relative_se"] > MAX_RELATIVE_SE:
            warn.append(f"{name}: poorly identified (SE is {100 * row['relative_se']:.0f} % "
                        "of the estimate); its interval, from a linear approximation, is "
                        "unreliable and likely too narrow: treat the value as uncertain")
    for i in range(len(names)):
        for j in range(i + 1, len(names)):
            c = corr[i, j]
            if np.isfinite(c) and abs(c) > MAX_ABS_CORRELATION:
                warn.append(f"{names[i]} and {names[j]} are correlated ({c:+.3f}): the data "
                            "fix a combination of them, not each one; fix one of them")
    return warn


# --------------------------------------------------------------------------------------
# Pilot fit
# --------------------------------------------------------------------------------------
@dataclass
class PilotFit:
    """Result of :func:`fit_pilot`.

    ``table`` holds estimate, se, ci95_low/high, relative_se, unit, meaning per
    parameter; ``correlation`` the correlation matrix (DataFrame); ``fitted`` the model
    density at the samples [g m-3]; ``residuals`` the weighted log residuals [-];
    ``diagnostics`` RMSE (log), lag-1 autocorrelation, Durbin–Watson, skewness, excess
    kurtosis and the Shapiro–Wilk p-value of the residuals; ``warnings`` plain-language
    warnings; ``model`` the :class:`PilotModel`.
    """

    table: pd.DataFrame
    correlation: pd.DataFrame
    covariance: np.ndarray
    fitted: np.ndarray
    residuals: np.ndarray
    diagnostics: dict
    warnings: list
    notes: list
    model: PilotModel
    growth_form: str
    n_obs: int
    dof: int
    condition_number: float
    n_engine_calls: int
    success: bool
    message: str

    @property
    def estimates(self) -> dict:
        return self.table["estimate"].to_dict()

    def covers(self, truth: dict) -> dict:
        """For each true value given, whether it lies within the 95 % interval."""
        t = self.table
        return {k: bool(t.at[k, "ci95_low"] <= v <= t.at[k, "ci95_high"])
                for k, v in truth.items() if k in t.index}

    def report(self) -> str:
        """Plain-text report: estimates, correlations, diagnostics, warnings."""
        m = self.model
        obs = m.obs
        lines = [f"pilot fit ({self.growth_form}): {self.n_obs} samples "
                 f"{obs.time[0]:%Y-%m-%d} to {obs.time[-1]:%Y-%m-%d}, "
                 f"{int((m.fraction > 0).sum())} harvest(s), samples at {m.sample_hour:02d}:00,"
                 f" harvests at {m.harvest_hour:02d}:00; {len(self.table)} parameters, "
                 f"{self.dof} degrees of freedom",
                 "weighted least squares on ln(density); 95 % intervals from the Jacobian "
                 "(s^2 (J'J)^-1, Student t)", ""]
        header = f"{'parameter':24s} {'estimate':>12s} {'SE':>10s} {'95 % interval':>25s}  unit"
        lines.append(header)
        for name, r in self.table.iterrows():
            lines.append(f"{name:24s} {r['estimate']:12.5g} {r['se']:10.3g} "
                         f"[{r['ci95_low']:11.5g}, {r['ci95_high']:11.5g}]  {r['unit']}")
        lines += ["", "correlation matrix:", self.correlation.round(3).to_string(), ""]
        d = self.diagnostics
        lines.append(f"residuals (ln): RMSE {d['rmse']:.4f} (~{100 * d['rmse']:.1f} % of the "
                     f"density), mean {d['mean']:+.4f}, lag-1 autocorrelation "
                     f"{d['lag1_autocorrelation']:+.3f}, Durbin-Watson "
                     f"{d['durbin_watson']:.2f}, skewness {d['skewness']:+.2f}, excess "
                     f"kurtosis {d['excess_kurtosis']:+.2f}, Shapiro-Wilk p "
                     f"{d['shapiro_p']:.3f}")
        lo, hi = m.temperature_range
        lines.append(f"water temperature in lit hours over the pilot: {lo:.1f} to {hi:.1f} "
                     "degC")
        lines.append(f"solver: {self.message} ({self.n_engine_calls} engine calls; "
                     f"condition number of J {self.condition_number:.3g})")
        for note in self.notes:
            lines.append(f"note: {note}")
        for w in self.warnings:
            lines.append(f"WARNING: {w}")
        if not self.warnings:
            lines.append("no identifiability warnings")
        return "\n".join(lines)


def default_free(growth_form: str, temperature_range, scenario) -> list[str]:
    """Parameters estimated by default: µmax, light parameter, maintenance, x0, plus
    k_biomass (self_shading) or K (logistic), plus t_opt when the observed water
    temperature brackets the scenario's t_opt."""
    free = ["mu_max_per_d", "light_param_umol_m2_s", "maintenance_per_d"]
    free.append("k_biomass_m2_g" if growth_form == "self_shading" else "capacity_g_m3")
    lo, hi = temperature_range
    if lo < scenario.strain.t_opt_c < hi:
        free.append("t_opt_c")
    return free + ["x0_g_m3"]


def fit_pilot(observations: Observations, scenario, *, model: str | None = None,
              free=None, hourly: pd.DataFrame | None = None, start: dict | None = None,
              sample_hour: int | None = None, max_nfev: int = 60) -> PilotFit:
    """Fit growth parameters to pilot observations through the engine.

    Parameters
    ----------
    observations : Observations
        From :func:`read_observations`.
    scenario : pondsim.scenario.Scenario
        Forcing, pond, harvest hour and the values of parameters not fitted (and the
        starting values of those fitted).
    model : {"self_shading", "logistic"}, optional
        Growth form to fit (default: the scenario's).
    free : sequence of str, optional
        Names in :data:`PARAMETERS` to estimate (default :func:`default_free`);
        ``x0_g_m3`` is always estimated.
    hourly : DataFrame, optional
        :func:`pilot_hourly` for the observations' year (computed when omitted).
    start : dict, optional
        Starting values overriding the scenario's.
    sample_hour : int, optional
        Local hour of the samples.
    max_nfev : int
        Most function evaluations of the solver.

    Returns
    -------
    PilotFit

    Raises
    ------
    InputError
        Unknown model or parameter, too few samples for the parameters, observations
        outside the forcing year.
    """
    form = scenario.strain.growth_form if model is None else model
    if form not in GROWTH_FORMS:
        raise InputError(f"unknown model {form!r}{did_you_mean(str(form), GROWTH_FORMS)}; "
                         f"allowed: {', '.join(GROWTH_FORMS)}", field="--model")
    obs = observations
    if hourly is None:
        hourly = pilot_hourly(scenario, year=int(obs.time[0].year))
    probe = PilotModel(obs, scenario, hourly, form, (), sample_hour=sample_hour)
    if free is None:
        free = default_free(form, probe.temperature_range, scenario)
    free = list(dict.fromkeys(list(free) + ["x0_g_m3"]))
    for name in free:
        if name not in PARAMETERS:
            raise InputError(f"unknown parameter {name!r}{did_you_mean(name, PARAMETERS)}; "
                             f"allowed: {', '.join(PARAMETERS)}", field="--fit")
    if form == "logistic" and "k_biomass_m2_g" in free:
        raise InputError("k_biomass_m2_g does not enter the logistic form; fit "
                         "capacity_g_m3 instead", field="--fit")
    if form == "self_shading" and "capacity_g_m3" in free:
        raise InputError("capacity_g_m3 is fitted only with the logistic form (--model "
                         "logistic)", field="--fit")
    p = len(free)
    if obs.n < p + 2:
        raise InputError(f"{obs.n} density samples are too few to fit {p} parameters "
                         f"({', '.join(free)}); need at least {p + 2}", path=obs.path,
                         field="density")
    pm = PilotModel(obs, scenario, hourly, form, free, sample_hour=probe.sample_hour)
    warnings = []
    lo_t, hi_t = pm.temperature_range
    if "t_opt_c" in free and not lo_t < scenario.strain.t_opt_c < hi_t:
        warnings.append(f"t_opt_c: the water temperature over the pilot ({lo_t:.1f}-"
                        f"{hi_t:.1f} degC) does not bracket the optimum; the estimate is an "
                        "extrapolation")
    lower = np.array([pm.bounds(n)[0] for n in free])
    upper = np.array([pm.bounds(n)[1] for n in free])
    theta0 = np.array([(start or {}).get(n, pm.value_of(n)) for n in free], dtype=float)
    theta0 = np.clip(theta0, lower + 1e-9 * (upper - lower), upper - 1e-9 * (upper - lower))
    scale = np.maximum(np.abs(theta0), [PARAMETERS[n].scale * 0.1 for n in free])
    cache: dict = {}

    def evaluate(theta):
        key = theta.tobytes()
        if key not in cache:
            # Central differences: the point and 2p neighbours in one engine call.
            h = 1e-4 * scale
            plus = np.minimum(theta + h, upper)
            minus = np.maximum(theta - h, lower)
            sets = np.vstack([theta, theta + np.diag(plus - theta),
                              theta + np.diag(minus - theta)])
            r = pm.residuals(pm.run(sets))
            jac = (r[1:p + 1] - r[p + 1:]).T / (plus - minus)  # d residual / d theta
            cache.clear()
            cache[key] = (r[0], jac)
        return cache[key]

    def fun(theta):
        return evaluate(theta)[0]

    def jac(theta):
        return evaluate(theta)[1]

    res = optimize.least_squares(fun, theta0, jac=jac, bounds=(lower, upper),
                                 x_scale=scale, method="trf", ftol=1e-10, xtol=1e-10,
                                 gtol=1e-10, max_nfev=max_nfev)
    resid, jmat = evaluate(res.x)
    dof = obs.n - p
    _, cov, cond = _covariance(jmat, resid, p)
    units = [PARAMETERS[n].unit for n in free]
    docs = [PARAMETERS[n].doc for n in free]
    docs[free.index("x0_g_m3")] = (f"density at {pm.harvest_hour:02d}:00 on "
                                   f"{pm.start.date()} (start of the simulated pilot)")
    table = _parameter_table(free, res.x, cov, dof, units, docs)
    corr = _correlation(cov)
    warnings += _identifiability_warnings(table, corr, free)
    span = upper - lower
    for j, name in enumerate(free):
        if min(res.x[j] - lower[j], upper[j] - res.x[j]) < 1e-6 * span[j]:
            warnings.append(f"{name}: at the bound of its allowed range ({lower[j]:g}-"
                            f"{upper[j]:g} {units[j]}); its interval is not valid")
    fitted = np.exp(pm.log_obs - resid / np.where(pm.sqrt_w > 0, pm.sqrt_w, 1.0))
    diag = _diagnostics(resid)
    if diag["lag1_autocorrelation"] > 0.5:
        warnings.append(f"residuals are serially correlated (lag-1 "
                        f"{diag['lag1_autocorrelation']:.2f}): the model misses a process "
                        "(or the forcing is off) and the intervals are too narrow")
    if diag["shapiro_p"] < 0.01:
        warnings.append(f"residuals do not look normal (Shapiro-Wilk p "
                        f"{diag['shapiro_p']:.3g}); look for outliers")
    if not res.success:
        warnings.append(f"the solver stopped before converging: {res.message}")
    return PilotFit(table=table, correlation=pd.DataFrame(corr, index=free, columns=free),
                    covariance=cov, fitted=fitted, residuals=resid, diagnostics=diag,
                    warnings=warnings, notes=pm.notes, model=pm, growth_form=form,
                    n_obs=obs.n, dof=dof, condition_number=cond, n_engine_calls=pm.runs,
                    success=bool(res.success), message=str(res.message))


# --------------------------------------------------------------------------------------
# Closed-form logistic curve (batch culture without forcing)
# --------------------------------------------------------------------------------------
@dataclass
class CurveFit:
    """Result of :func:`fit_logistic_curve`: ``table`` with r, K, N0 and the derived
    time of steepest growth and maximum sustainable yield (estimate, se, 95 % interval),
    ``correlation`` of r, K, N0, ``fitted``, ``residuals`` and ``diagnostics``."""

    table: pd.DataFrame
    correlation: pd.DataFrame
    covariance: np.ndarray
    fitted: np.ndarray
    residuals: np.ndarray
    diagnostics: dict
    warnings: list
    n_obs: int
    dof: int

    def report(self, time_unit: str = "time unit", density_unit: str = "") -> str:
        lines = [f"logistic curve N(t) = K / (1 + (K/N0 - 1) exp(-r t)), {self.n_obs} points, "
                 f"{self.dof} degrees of freedom; least squares; delta-method intervals", ""]
        for name, r in self.table.iterrows():
            unit = (r["unit"].replace("T", time_unit).replace("N", density_unit or "N"))
            lines.append(f"{name:16s} {r['estimate']:12.5g} ± {r['se']:.3g}  "
                         f"[{r['ci95_low']:.5g}, {r['ci95_high']:.5g}]  {unit}")
        d = self.diagnostics
        lines += ["", f"residuals: RMSE {d['rmse']:.4g}, lag-1 autocorrelation "
                  f"{d['lag1_autocorrelation']:+.3f}, Shapiro-Wilk p {d['shapiro_p']:.3f}"]
        lines += [f"WARNING: {w}" for w in self.warnings]
        return "\n".join(lines)


def _logistic(t, r, k, n0):
    a = k / n0 - 1.0
    e = np.exp(-r * t)
    return k / (1.0 + a * e)


def fit_logistic_curve(t, n, *, weights=None, log_residuals: bool = False) -> CurveFit:
    r"""Fit the closed-form logistic curve to a batch growth curve.

    Parameters
    ----------
    t : array-like [any time unit T]
        Times, increasing (e.g. hours since inoculation).
    n : array-like [any density unit N], > 0
        Population or density.
    weights : array-like, optional
        Relative weights of the points.
    log_residuals : bool, default False
        Fit ln N instead of N (for errors proportional to N).

    Returns
    -------
    CurveFit
        ``r`` [T-1], ``K`` [N], ``N0`` [N], ``t_inflection`` [T] = ln(K/N0 − 1)/r (the
        time of steepest growth, N = K/2) and ``msy`` [N T-1] = r K / 4, the largest
        sustainable removal rate (Schaefer 1954), with delta-method standard errors.

    Notes
    -----
    .. math:: N(t) = \frac{K}{1 + (K/N_0 - 1)\,e^{-rt}}

    Derived quantities g(θ) take SE = sqrt(∇gᵀ C ∇g) with C the parameter covariance
    (delta method).
    """
    t = np.asarray(t, dtype=float)
    n = np.asarray(n, dtype=float)
    if t.shape != n.shape or t.ndim != 1:
        raise InputError("times and densities must be 1-D arrays of the same length",
                         field="density")
    if len(t) < 5:
        raise InputError(f"{len(t)} points are too few for the logistic curve (3 "
                         "parameters); need at least 5", field="density")
    if not (np.isfinite(t).all() and np.isfinite(n).all()) or (n <= 0).any():
        raise InputError("densities must be finite and > 0", field="density")
    if (np.diff(t) <= 0).any():
        raise InputError("times must be strictly increasing", field="time")
    w = np.ones_like(n) if weights is None else np.asarray(weights, dtype=float)
    sw = np.sqrt(w)
    # Start: K a little above the largest value, r from the logit line.
    k0 = 1.05 * n.max()
    below = n < 0.95 * k0
    slope, intercept = np.polyfit(t[below], np.log(k0 / n[below] - 1.0), 1)
    r0 = max(-slope, 1e-6 / max(np.ptp(t), 1e-12))
    n00 = k0 / (1.0 + math.exp(intercept))

    def model_jac(theta):
        r, k, n0 = theta
        a = k / n0 - 1.0
        e = np.exp(-r * t)
        d = 1.0 + a * e
        y = k / d
        dy_dr = k * a * t * e / d ** 2
        dy_dk = 1.0 / d - k * e / (n0 * d ** 2)
        dy_dn0 = k * k * e / (n0 ** 2 * d ** 2)
        return y, np.column_stack([dy_dr, dy_dk, dy_dn0])

    def fun(theta):
        y, _ = model_jac(theta)
        return sw * ((np.log(n) - np.log(y)) if log_residuals else (n - y))

    def jac(theta):
        y, jy = model_jac(theta)
        return -(sw[:, None] * (jy / y[:, None] if log_residuals else jy))

    res = optimize.least_squares(fun, [r0, k0, n00], jac=jac,
                                 bounds=([0, 0, 0], [np.inf, np.inf, np.inf]),
                                 x_scale=[r0, k0, n00], ftol=1e-14, xtol=1e-14, gtol=1e-14)
    dof = len(t) - 3
    resid = res.fun
    _, cov, _ = _covariance(res.jac, resid, 3)
    r, k, n0 = res.x
    q = k / n0 - 1.0
    t_infl = math.log(q) / r if q > 0 else float("nan")
    grads = {
        "t_inflection": np.array([-t_infl / r, 1.0 / (n0 * q * r), -k / (n0 ** 2 * q * r)]),
        "msy": np.array([k / 4.0, r / 4.0, 0.0]),
    }
    names = ["r", "K", "N0", "t_inflection", "msy"]
    est = np.array([r, k, n0, t_infl, r * k / 4.0])
    g = np.vstack([np.eye(3), grads["t_inflection"], grads["msy"]])
    full_cov = g @ cov @ g.T
    units = ["T-1", "N", "N", "T", "N T-1"]
    docs = ["intrinsic growth rate", "carrying capacity", "initial density (t = 0)",
            "time of steepest growth ln(K/N0 - 1)/r", "maximum sustainable yield r K / 4"]
    table = _parameter_table(names, est, full_cov, dof, units, docs)
    corr = _correlation(cov)
    warnings = _identifiability_warnings(table.iloc[:3], corr, names[:3])
    fitted = _logistic(t, r, k, n0)
    return CurveFit(table=table, correlation=pd.DataFrame(corr, index=names[:3],
                                                          columns=names[:3]),
                    covariance=full_cov, fitted=fitted, residuals=resid,
                    diagnostics=_diagnostics(resid), warnings=warnings, n_obs=len(t),
                    dof=dof)


# --------------------------------------------------------------------------------------
# Outputs: fitted scenario copy, figure
# --------------------------------------------------------------------------------------
def _toml_value(value) -> str:
    if isinstance(value, str):
        return '"' + value.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(value, list | tuple):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{ " + ", ".join(f"{k} = {_toml_value(v)}" for k, v in value.items()) + " }"
    return f"{float(value):.6g}" if not float(value).is_integer() else f"{float(value):.1f}"


def _edit_toml(text: str, updates: dict[str, dict]) -> str:
    """Set ``key = value`` in ``[section]`` tables of TOML text, keeping comments and
    layout; keys absent from their section are added at its end, a value of None removes
    the key. Values may be numbers, text, lists or flat dicts (inline tables)."""
    lines = text.splitlines()
    section = None
    last_key_line: dict[str, int] = {}
    found: dict[tuple, tuple[int, int]] = {}
    i = 0
    while i < len(lines):
        stripped = lines[i].strip()
        head = re.match(r"^\[\[?\s*([^\]]+?)\s*\]\]?", stripped)
        if head:
            section = head.group(1) if not stripped.startswith("[[") else None
            i += 1
            continue
        m = re.match(r"^([A-Za-z0-9_\-]+)\s*=\s*(.*)$", stripped)
        if m and section is not None:
            end = i
            value = m.group(2)
            if value.startswith("[") and value.count("[") > value.count("]"):
                depth = value.count("[") - value.count("]")
                while depth > 0 and end + 1 < len(lines):
                    end += 1
                    seg = lines[end].split("#", 1)[0]
                    depth += seg.count("[") - seg.count("]")
            found[(section, m.group(1))] = (i, end)
            last_key_line[section] = end
            i = end + 1
            continue
        i += 1
    replace: dict[int, tuple[int, str]] = {}
    inserts: dict[int, list[str]] = {}
    for sec, kv in updates.items():
        for key, value in kv.items():
            if value is None:
                if (sec, key) in found:
                    start, end = found[(sec, key)]
                    replace[start] = (end, None)
                continue
            new = f"{key} = {_toml_value(value)}"
            if (sec, key) in found:
                start, end = found[(sec, key)]
                comment = ""
                if start == end and "#" in lines[start] and not isinstance(value, dict):
                    val_part = lines[start].split("=", 1)[1]
                    if val_part.count('"') % 2 == 0 and "#" in val_part:
                        comment = "  # " + val_part.split("#", 1)[1].strip()
                replace[start] = (end, new.ljust(32) + comment if comment else new)
            elif sec in last_key_line:
                inserts.setdefault(last_key_line[sec], []).append(new)
            else:
                inserts.setdefault(len(lines) - 1, []).extend(["", f"[{sec}]", new])
    out = []
    i = 0
    while i < len(lines):
        if i in replace:
            end, new = replace[i]
            if new is not None:
                out.append(new)
            for extra in range(i, end + 1):
                out.extend(inserts.get(extra, []))
            i = end + 1
            continue
        out.append(lines[i])
        out.extend(inserts.get(i, []))
        i += 1
    return "\n".join(out) + "\n"


def write_fitted_scenario(fit: PilotFit, scenario_path, out_path) -> Path:
    """Write a copy of the scenario file with the fitted strain parameters.

    The original file is never changed; the copy is written atomically. Relative paths
    (the weather file) are rewritten to stay valid from the copy's folder. Under the
    logistic form the fitted K fills the monthly capacity table (months of the pilot;
    other months keep a table the scenario already had, else take the same K).
    Fitted parameters that ``[uncertainty]`` can carry get the fit's own uncertainty
    there (replacing what the scenario had): lognormal with sigma = SE/estimate for
    positive parameters, normal with sd = SE for t_opt_c; a parameter without a finite
    SE loses its entry. Draws from these are independent, so the fit's correlations
    (reported beside) are not carried over. The copy is validated before it is written.
    Returns the path written.
    """
    import tomllib

    from pondsim.results.files import atomic_write
    from pondsim.scenario import UNCERTAIN_PARAMETERS, parse_scenario

    scenario_path = Path(scenario_path)
    out_path = Path(out_path)
    scenario = fit.model.scenario
    text = scenario_path.read_text(encoding="utf-8")
    est = fit.estimates
    strain = {PARAMETERS[n].key: float(v) for n, v in est.items()
              if PARAMETERS[n].key is not None and n != "capacity_g_m3"}
    if fit.growth_form != scenario.strain.growth_form:
        strain["growth_form"] = fit.growth_form
    if "capacity_g_m3" in est:
        table = list(scenario.strain.capacity_table_g_m3 or [est["capacity_g_m3"]] * 12)
        months = sorted(set(fit.model.dates().month))
        for mth in months:
            table[mth - 1] = float(est["capacity_g_m3"])
        strain["capacity_table_g_m3"] = [float(f"{v:.6g}") for v in table]
    updates = {"strain": strain}
    spread = {}
    for name, value in est.items():
        if name not in UNCERTAIN_PARAMETERS:
            continue
        se = float(fit.table.at[name, "se"])
        if not (math.isfinite(se) and se > 0):
            spread[name] = None
        elif name == "t_opt_c" or value <= 0:
            spread[name] = {"distribution": "normal", "sd": float(f"{se:.4g}")}
        else:
            spread[name] = {"distribution": "lognormal", "sigma": float(f"{se / value:.4g}")}
    if spread:
        updates["uncertainty"] = spread
    if scenario.weather.path is not None:
        target = out_path.resolve().parent
        weather = str(scenario.weather.path)
        try:  # relative when copy and weather share a project folder, else absolute
            shared = os.path.commonpath([weather, str(target)]) != target.anchor
            rel = os.path.relpath(weather, target) if shared else weather
        except ValueError:  # other drive (Windows)
            rel = weather
        updates["weather"] = {"path": Path(rel).as_posix()}
    obs_name = fit.model.obs.path.name if fit.model.obs.path else "observations"
    stamp = dt.datetime.now(dt.UTC).strftime("%Y-%m-%d %H:%M UTC")
    header = (f"# Copy of {scenario_path.name} with strain parameters fitted by `pondsim fit` "
              f"to {obs_name} ({stamp}).\n# Fitted ({fit.growth_form}): "
              + ", ".join(f"{n} = {v:.4g} ± {fit.table.at[n, 'se']:.2g}"
                          for n, v in est.items()) + "\n")
    header += "".join(f"# WARNING: {w}\n" for w in fit.warnings)
    header += ("# [uncertainty] entries of fitted parameters hold the fit's standard errors "
               "(independent draws;\n# the fit's correlations are in fit_report.txt).\n"
               if spread else "")
    new_text = header + _edit_toml(text, updates)
    # The copy must load (from its own folder) and carry the fitted values: check first.
    check = parse_scenario(tomllib.loads(new_text), out_path)
    for n, v in strain.items():
        if isinstance(v, float) and not math.isclose(getattr(check.strain, n), v,
                                                     rel_tol=1e-5):
            raise RuntimeError(f"fitted scenario {out_path} lost {n}")  # pragma: no cover

    def write(tmp):
        Path(tmp).write_text(new_text, encoding="utf-8")

    return atomic_write(out_path, write)


def plot_fit(fit: PilotFit, path, *, context: str = "") -> Path:
    """Observed and fitted density with harvests marked, and the log residuals (PNG).

    *context* is the title's second line (the scenario's site, study and strain)."""
    from pondsim.results import figstyle as fs

    m = fit.model
    est = fit.table["estimate"].to_numpy()
    days = m.dates()
    curve = m.run(est[None, :], all_days=True)[0]
    if m.sample_hour < m.harvest_hour:  # day 0 is sampled before the reset to x0
        days, curve = days[1:], curve[1:]
    fig, (ax, axr) = fs.new_figure("Pilot fit: observed and modelled density", context,
                                   nrows=2, size=(9.0, 6.8), sharex=True,
                                   height_ratios=[3, 1.4])
    ax.plot(days, curve, "-", color=fs.OKABE_ITO["blue"], lw=1.4,
            label=f"model at {m.sample_hour:02d}:00 ({fit.growth_form})")
    ax.plot(m.obs.time, m.obs.density_g_m3, "o", ms=4, mfc="white",
            color=fs.OKABE_ITO["vermillion"], label="observed")
    for i, d in enumerate(np.flatnonzero(m.fraction > 0)):
        when = m.start + pd.Timedelta(days=int(d), hours=m.harvest_hour)
        ax.axvline(when, color="0.55", ls=":", lw=0.9, label="harvest" if i == 0 else None)
        axr.axvline(when, color="0.55", ls=":", lw=0.9)
    ax.set_ylabel("culture density [g m$^{-3}$ AFDW]")
    fs.from_zero(ax, top=1.1 * float(np.nanmax([np.nanmax(curve),
                                                  np.nanmax(m.obs.density_g_m3)])))
    fs.legend_right(ax)
    axr.axhline(0.0, color="0.3", lw=0.8)
    axr.plot(m.obs.time, fit.residuals, "o-", ms=3, lw=0.6, color=fs.OKABE_ITO["bluish green"])
    axr.set_ylabel("residual\nln(obs/model) [–]")
    axr.set_xlabel("date [local standard time]")
    import matplotlib.dates as mdates

    axr.xaxis.set_major_formatter(mdates.DateFormatter("%d %b"))
    return fs.save(fig, path)


def _plot_curve(t, n, fit: CurveFit, path, time_unit, density_unit) -> Path:
    from pondsim.results import figstyle as fs

    fig, (ax, axr) = fs.new_figure("Logistic fit of the observed density", "", nrows=2,
                                   size=(8.5, 6.2), sharex=True, height_ratios=[3, 1.4])
    r, k, n0 = fit.table["estimate"].to_numpy()[:3]
    tt = np.linspace(t.min(), t.max(), 300)
    ax.plot(tt, _logistic(tt - t.min(), r, k, n0), "-", color=fs.OKABE_ITO["blue"],
            label="logistic")
    ax.plot(t, n, "o", ms=4, mfc="white", color=fs.OKABE_ITO["vermillion"],
            label="observed")
    ax.set_ylabel(f"density [{density_unit}]")
    fs.from_zero(ax, top=1.1 * float(np.nanmax(n)))
    fs.legend_right(ax)
    axr.axhline(0.0, color="0.3", lw=0.8)
    axr.plot(t, fit.residuals, "o-", ms=3, lw=0.6, color=fs.OKABE_ITO["bluish green"])
    axr.set_ylabel(f"residual [{density_unit}]")
    axr.set_xlabel(f"time since first sample [{time_unit}]")
    return fs.save(fig, path)


# --------------------------------------------------------------------------------------
# Demo pilot file
# --------------------------------------------------------------------------------------
def make_demo_pilot(scenario, *, start: str = "2025-03-20", days: int = 45,
                    harvest_days=(16, 24, 31, 38), harvest_fraction: float = 0.5,
                    sample_hour: int = 8, noise_cv: float = 0.05, seed: int = DEMO_SEED,
                    hourly: pd.DataFrame | None = None) -> pd.DataFrame:
    """An invented pilot record: the scenario's own simulation plus lognormal noise.

    The culture is inoculated at the scenario's inoculum density at 00:00 on *start* and
    simulated with :func:`pondsim.operations.simulate.build_drivers` (the yearly simulation's
    drivers) and :func:`pondsim.operations.engine.integrate`, harvesting *harvest_fraction* of the
    volume at the scenario's harvest hour on the given day numbers (0 = *start*). Each
    day's sample is the density at *sample_hour* times exp(σ ε), ε ~ N(0, 1),
    σ = sqrt(ln(1 + cv²)) (a lognormal error with coefficient of variation *noise_cv*),
    from ``numpy.random.default_rng(seed)``. The water temperature column is the
    modelled one at the sampling hour, rounded to 0.1 degC.

    Returns a DataFrame with columns time, density_g_m3, harvest_fraction,
    water_temperature_c.
    """
    from pondsim.operations.simulate import build_drivers

    start_ts = pd.Timestamp(start)
    if hourly is None:
        hourly = pilot_hourly(scenario, year=start_ts.year)
    d0 = int((start_ts - pd.Timestamp(year=start_ts.year, month=1, day=1)).days)
    window = hourly.iloc[d0 * HOURS_PER_DAY:(d0 + days) * HOURS_PER_DAY]
    drivers = build_drivers(window, scenario)
    frac = np.zeros(days)
    frac[list(harvest_days)] = harvest_fraction
    code = np.where(frac > 0, RULE_CODES["fixed_fraction"], RULE_CODES["none"])
    rules = HarvestRules(code=code[None, :].astype(np.int8), fraction=frac[None, :],
                         every_days=np.zeros((1, days), np.int32),
                         trigger=np.full((1, days), np.nan),
                         residual=np.full((1, days), np.nan),
                         period_of_day=np.arange(days)[None, :])
    op = Operation(start_day=0, inoculum_g_m3=scenario.inoculation.density_g_m3,
                   harvest_hour=scenario.harvest.hour, sample_hour=sample_hour)
    daily = integrate(drivers, rules, op)
    truth = daily.sampled[0]
    rng = np.random.default_rng(seed)
    sigma = math.sqrt(math.log1p(noise_cv ** 2))
    observed = truth * np.exp(sigma * rng.standard_normal(days))
    times = pd.date_range(start_ts + pd.Timedelta(hours=sample_hour), periods=days, freq="D")
    tw = window["water_temperature"].to_numpy()[np.arange(days) * HOURS_PER_DAY
                                                  + sample_hour]
    return pd.DataFrame({"time": times.strftime("%Y-%m-%d %H:%M"),
                         "density_g_m3": np.round(observed, 2), "harvest_fraction": frac,
                         "water_temperature_c": np.round(tw, 1)})


def write_demo_pilot(path, scenario_path="scenarios/kestrel_flats.toml", **kwargs) -> Path:
    """Write :func:`make_demo_pilot` of a scenario to a CSV file (atomically)."""
    from pondsim.results.files import atomic_write
    from pondsim.scenario import load_scenario

    scenario = load_scenario(scenario_path)
    frame = make_demo_pilot(scenario, **kwargs)
    seed = kwargs.get("seed", DEMO_SEED)

    def write(tmp):
        with open(tmp, "w", encoding="utf-8", newline="") as fh:
            fh.write(f"# INVENTED pilot-pond record: made by pondsim.studies.calibrate."
                     f"make_demo_pilot from {Path(scenario_path).name} (seed {seed}); "
                     "not a measurement. See scenarios/README_pilot.md\n")
            frame.to_csv(fh, index=False)

    return atomic_write(Path(path), write)


# --------------------------------------------------------------------------------------
# Command line
# --------------------------------------------------------------------------------------
def add_fit_parser(subparsers) -> argparse.ArgumentParser:
    """Add the ``fit`` subcommand to an argparse subparsers object."""
    f = subparsers.add_parser(
        "fit", help="calibrate growth parameters from pilot-pond observations",
        description="Fit strain growth parameters to a pilot pond's density samples by "
        "weighted least squares on log density, simulating the pilot (with its harvests) "
        "through the same engine as `pondsim run`. Writes fit_parameters.csv, "
        "fit_report.txt, fit_series.csv, fit.png and a copy of the scenario with the "
        "fitted values. With --model curve, fits the closed-form logistic curve to a batch "
        "growth curve (no scenario needed).",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        epilog="Observation columns (defaults): time; density (or density_g_m3, "
        "density_g_l, density_mg_l, od); harvest_fraction or harvest_volume_m3; "
        "water_temperature_c; par (or par_umol_m2_s, par_mol_m2_d); weight.\n"
        "Example: pondsim fit pilot.csv --scenario site.toml --columns "
        "time=Date,density=DW_g_L --density-unit g/L")
    f.add_argument("observations", help="observations CSV")
    f.add_argument("--scenario", help="scenario .toml (forcing, pond, strain start values)")
    f.add_argument("--model", choices=("self_shading", "logistic", "curve"), default=None,
                   help="growth form to fit (default: the scenario's); 'curve' fits "
                   "N(t) = K/(1+(K/N0-1)e^(-rt)) without forcing")
    f.add_argument("--out", default=None, metavar="DIR",
                   help="output folder (default: out/<observations name>_fit)")
    f.add_argument("--columns", default=None, metavar="MAP",
                   help="column mapping FIELD=COLUMN,... (fields: " + ", ".join(FIELDS) + ")")
    f.add_argument("--density-unit", default=None,
                   help="g/m3, g/L, mg/L (dry weight) or OD (default: from the column name,"
                   " else g/m3)")
    f.add_argument("--od-factor", type=float, default=None, metavar="G_L_PER_OD",
                   help="dry weight per unit optical density [g L-1] (with --density-unit OD)")
    f.add_argument("--par-unit", default=None, help="umol/m2/s (hour mean) or mol/m2/d "
                   "(daily integral)")
    f.add_argument("--pond-volume", type=float, default=None, metavar="M3",
                   help="pilot culture volume [m3] for harvest_volume_m3 (default: the "
                   "scenario's pond area x depth)")
    f.add_argument("--fit", default=None, metavar="NAMES",
                   help="parameters to estimate, comma-separated (default: mu_max_per_d, "
                   "light_param_umol_m2_s, maintenance_per_d, k_biomass_m2_g or "
                   "capacity_g_m3, t_opt_c when the data bracket it; x0_g_m3 always); "
                   "allowed: " + ", ".join(PARAMETERS))
    f.add_argument("--sample-hour", type=int, default=None,
                   help="local hour of the samples (default: from the times)")
    f.add_argument("--time-unit", choices=("h", "d"), default="h",
                   help="unit of numeric times with --model curve (default h)")
    f.add_argument("--no-plots", action="store_true", help="skip the figure")
    return f


def _cmd_curve(args, out: Path) -> int:
    from pondsim.results.files import atomic_write

    path = Path(args.observations)
    if not path.is_file():
        raise InputError("observations file not found", path=path)
    try:
        frame = pd.read_csv(path, comment="#", skipinitialspace=True)
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as err:
        raise InputError(f"not a readable CSV file: {err}", path=path) from None
    cols = parse_column_map(getattr(args, "columns", None))
    unit = getattr(args, "time_unit", None) or "h"
    tcol = cols.get("time", "time")
    if tcol in frame.columns:
        numeric = pd.to_numeric(frame[tcol], errors="coerce")
        if numeric.notna().all():  # elapsed time in hours or days: make it a date-time
            frame = frame.assign(**{tcol: pd.Timestamp("2000-01-01")
                                    + pd.to_timedelta(numeric.to_numpy(), unit=unit)})
    obs = parse_observations(frame, path=path, columns=cols,
                             density_unit=getattr(args, "density_unit", None),
                             od_factor_g_l=getattr(args, "od_factor", None))
    t = np.asarray((obs.time - obs.time[0]) / pd.Timedelta(hours=1 if unit == "h" else 24),
                   dtype=float)
    fit = fit_logistic_curve(t, obs.density_g_m3, weights=obs.weight)
    text = fit.report(time_unit=unit, density_unit="g m-3")
    print(text)
    out.mkdir(parents=True, exist_ok=True)
    written = [atomic_write(out / "fit_parameters.csv",
                             lambda tmp: fit.table.to_csv(tmp, float_format="%.6g")),
               atomic_write(out / "fit_report.txt",
                             lambda tmp: Path(tmp).write_text(text + "\n", encoding="utf-8"))]
    if not getattr(args, "no_plots", False):
        written.append(_plot_curve(t, obs.density_g_m3, fit, out / "fit.png", unit, "g m-3"))
    print("\nwritten: " + ", ".join(str(p) for p in written))
    return 0


def cmd_fit(args) -> int:
    """Run ``pondsim fit`` from an argparse namespace (see :func:`add_fit_parser`).

    Expects attributes ``observations``, ``scenario``, ``model``, ``out`` and optionally
    ``columns``, ``density_unit``, ``od_factor``, ``par_unit``, ``pond_volume``, ``fit``,
    ``sample_hour``, ``time_unit``, ``no_plots``. Returns the exit status (0); bad input
    raises :class:`InputError`.
    """
    from pondsim.results.files import atomic_write
    from pondsim.scenario import load_scenario

    obs_path = Path(args.observations)
    out = Path(args.out) if getattr(args, "out", None) else \
        Path("out") / f"{obs_path.stem}_fit"
    model = getattr(args, "model", None)
    if model == "curve":
        return _cmd_curve(args, out)
    if not getattr(args, "scenario", None):
        raise InputError("a pilot fit needs --scenario SCENARIO.toml for its forcing and "
                         "pond (or --model curve for a batch curve)", field="--scenario")
    scenario = load_scenario(args.scenario)
    pond_volume = getattr(args, "pond_volume", None)
    obs = read_observations(
        obs_path, columns=parse_column_map(getattr(args, "columns", None)),
        density_unit=getattr(args, "density_unit", None),
        od_factor_g_l=getattr(args, "od_factor", None), par_unit=getattr(args, "par_unit", None),
        pond_volume_m3=scenario.pond.volume_m3 if pond_volume is None else pond_volume)
    free = None
    if getattr(args, "fit", None):
        free = [s.strip() for s in args.fit.split(",") if s.strip()]
    fit = fit_pilot(obs, scenario, model=model, free=free,
                    sample_hour=getattr(args, "sample_hour", None))
    text = fit.report()
    print(text)
    out.mkdir(parents=True, exist_ok=True)
    series = pd.DataFrame({"time": fit.model.obs.time, "observed_g_m3": obs.density_g_m3,
                           "fitted_g_m3": fit.fitted, "residual_ln": fit.residuals})
    table = fit.table.copy()
    written = [
        atomic_write(out / "fit_parameters.csv",
                      lambda tmp: table.to_csv(tmp, float_format="%.6g")),
        atomic_write(out / "fit_series.csv",
                      lambda tmp: series.to_csv(tmp, index=False, float_format="%.6g")),
        atomic_write(out / "fit_report.txt",
                      lambda tmp: Path(tmp).write_text(text + "\n", encoding="utf-8")),
        write_fitted_scenario(fit, args.scenario,
                              out / f"{Path(args.scenario).stem}_fitted.toml"),
    ]
    if not getattr(args, "no_plots", False):
        from pondsim.results.figstyle import context_line

        written.append(plot_fit(fit, out / "fit.png", context=context_line(
            scenario.site.name, scenario.study_name, scenario.strain.name)))
    print("\nwritten: " + ", ".join(str(p) for p in written))
    return 0


if __name__ == "__main__":  # pragma: no cover - regenerates the demo pilot file
    target = sys.argv[1] if len(sys.argv) > 1 else "scenarios/kestrel_flats_pilot.csv"
    print(f"written: {write_demo_pilot(target)}")
