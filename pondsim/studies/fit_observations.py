"""Pilot-pond observations: the observations file, its columns and units, read and
checked at the boundary (part of ``pondsim fit``; see :mod:`pondsim.studies.fit_growth`).

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
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from pondsim.errors import InputError, did_you_mean
from pondsim.forcing.timestamps import parse_times

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
    frame = read_csv_checked(path)
    return parse_observations(frame, path=path, columns=columns, density_unit=density_unit,
                              od_factor_g_l=od_factor_g_l, par_unit=par_unit,
                              pond_volume_m3=pond_volume_m3)


def read_csv_checked(path: Path, what: str = "observations file") -> pd.DataFrame:
    """The CSV table at *path* (``#`` comment lines skipped), or one clear
    :class:`InputError` for a missing or unreadable file."""
    if not path.is_file():
        raise InputError(f"{what} not found", path=path)
    try:
        return pd.read_csv(path, comment="#", skipinitialspace=True)
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as err:
        raise InputError(f"not a readable CSV file: {err}", path=path) from None


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
    time = parse_times(raw, path=path, field=tcol)
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


