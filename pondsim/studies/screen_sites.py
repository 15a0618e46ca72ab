"""Site lists for screening: a folder of weather files or a CSV site table, read into
:class:`SiteSpec` records; per-site seeds; a scenario moved to a site.

Sites
-----
``sites`` is either

* a **folder of weather files** — every ``*.epw``, ``*.csv``, ``*.tm2``, ``*.json`` in
  it (not in subfolders, hidden files skipped) is one site, named by the file's stem and
  located by the coordinates in the file (any format :func:`pondsim.forcing.weather.read_weather`
  reads with ``fmt='auto'``); or
* a **site table** (CSV, ``#`` comment lines allowed), one row per site:

  ================================  =========  ============================================
  column                            unit       meaning
  ================================  =========  ============================================
  ``name``                                     unique site name (required)
  ``latitude``                      deg        north positive, -66.5..66.5
  ``longitude``                     deg        east positive, -180..180
  ``elevation_m``                   m          above sea level, -430..5000
  ``utc_offset_h``                  h          local standard time minus UTC, -12..14
  ``weather_file``                             optional: weather file, relative to the
                                               table's folder
  ``temp_max_c_01`` .. ``_12``      degC       mean daily maximum air temperature, Jan..Dec
  ``temp_min_c_01`` .. ``_12``      degC       mean daily minimum air temperature
  ``wind_speed_m_s_01`` .. ``_12``  m s-1      mean wind speed
  ``relative_humidity_pct_01``..    %          mean relative humidity
  ``clearness_01`` .. ``_12``       1          mean daily GHI / clear-sky daily GHI, or
  ``ghi_kwh_m2_d_01`` .. ``_12``    kWh m-2    mean daily GHI (exactly one of the two)
                                    d-1
  ================================  =========  ============================================

  A row with ``weather_file`` reads that file (its coordinates, where given in the row,
  override the file's). A row without it uses clear-sky mode
  (:func:`pondsim.forcing.climate.clearsky_weather`) from its monthly normals, and then needs the
  four coordinates and all twelve months of every normal. A row with neither, or with
  both, is an :class:`~pondsim.errors.InputError` naming the row. See
  ``scenarios/sites_demo.csv`` (invented sites).
"""

from __future__ import annotations

import dataclasses
import hashlib
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from pondsim.errors import InputError, did_you_mean
from pondsim.scenario import SCHEMA, Scenario, Site

#: Weather-file extensions picked up from a sites folder.
WEATHER_SUFFIXES = (".epw", ".csv", ".tm2", ".json")
#: The normals of a site table, as column stems (``<stem>_01`` .. ``<stem>_12``).
NORMAL_COLUMNS = ("temp_max_c", "temp_min_c", "wind_speed_m_s", "relative_humidity_pct",
                  "clearness", "ghi_kwh_m2_d")
COORDINATES = ("latitude", "longitude", "elevation_m", "utc_offset_h")


@dataclass(frozen=True)
class SiteSpec:
    """One site to screen: coordinates plus a weather file or monthly normals."""

    name: str
    latitude: float | None = None
    longitude: float | None = None
    elevation_m: float | None = None
    utc_offset_h: float | None = None
    weather_path: Path | None = None
    normals: dict | None = None  # key -> tuple of 12 floats
    origin: str = ""  # where the site was declared (file and row), for messages
    #: Why the row cannot be screened (a bad value in the site table), or None. Such a
    #: site fails alone: it is listed with this reason and the others run.
    error: str | None = None

    @property
    def source(self) -> str:
        return str(self.weather_path) if self.weather_path else "monthly normals (clear sky)"


def read_sites(path) -> list[SiteSpec]:
    """Sites from a folder of weather files or a site table (see the module docstring).

    A bad row of a site table (a value out of range, a duplicate name, neither normals
    nor a weather file) does not stop the others: its :class:`SiteSpec` carries the
    reason in ``error`` and :func:`pondsim.studies.screen.screen` lists it as failed.

    Raises
    ------
    InputError
        Missing path, empty folder, duplicate file stems, an unreadable table, an unknown
        column or a missing ``name`` column.
    """
    path = Path(path)
    if path.is_dir():
        return _sites_from_folder(path)
    if not path.is_file():
        raise InputError("sites not found: give a folder of weather files or a CSV site "
                         "table", path=path, field="--sites")
    return _sites_from_table(path)


def _sites_from_folder(folder: Path) -> list[SiteSpec]:
    files = sorted(p for p in folder.iterdir()
                   if p.is_file() and not p.name.startswith(".")
                   and p.suffix.lower() in WEATHER_SUFFIXES)
    if not files:
        raise InputError(f"no weather files ({', '.join(WEATHER_SUFFIXES)}) in the folder",
                         path=folder, field="--sites")
    seen: dict[str, Path] = {}
    for f in files:
        if f.stem in seen:
            raise InputError(f"two weather files for site {f.stem!r}: {seen[f.stem].name} "
                             f"and {f.name}; site names (file stems) must be unique",
                             path=folder, field="--sites")
        seen[f.stem] = f
    return [SiteSpec(name=f.stem, weather_path=f.resolve(), origin=str(f)) for f in files]


def _sites_from_table(path: Path) -> list[SiteSpec]:
    try:
        table = pd.read_csv(path, comment="#", dtype=str, keep_default_na=False,
                            skipinitialspace=True)
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as err:
        raise InputError(f"cannot read the site table as CSV: {err}", path=path,
                         field="--sites") from None
    table.columns = [str(c).strip() for c in table.columns]
    allowed = {"name", "weather_file", *COORDINATES} | {
        f"{stem}_{m:02d}" for stem in NORMAL_COLUMNS for m in range(1, 13)}
    for col in table.columns:
        if col not in allowed:
            raise InputError(f"unknown column{did_you_mean(col, sorted(allowed))}; allowed: "
                             "name, latitude, longitude, elevation_m, utc_offset_h, "
                             "weather_file, <normal>_01.._12 for normal in "
                             + ", ".join(NORMAL_COLUMNS), path=path, field=col)
    if "name" not in table.columns:
        raise InputError("the site table needs a 'name' column (and latitude, longitude, "
                         "elevation_m, utc_offset_h, then weather_file or monthly normals "
                         "temp_max_c_01..12 etc.)", path=path, field="name")
    if table.empty:
        raise InputError("the site table has no rows", path=path, field="--sites")
    sites, names = [], set()
    for i, row in enumerate(table.to_dict("records"), start=1):
        name = str(row.get("name", "")).strip() or f"row {i}"
        try:
            site = _site_from_row(row, i, path)
            if site.name in names:
                raise InputError(f"site name {site.name!r} is used twice; names must be "
                                 "unique", path=path, field=f"row {i}: name")
        except InputError as err:  # this row fails alone; the other sites still run
            if name in names:
                name = f"{name} (row {i})"
            site = SiteSpec(name=name, origin=f"{path}, row {i}", error=str(err))
        sites.append(site)
        names.add(site.name)
    return sites


def _site_from_row(row: dict, i: int, path: Path) -> SiteSpec:
    name = str(row.get("name", "")).strip()
    where = f"row {i}" + (f" ({name})" if name else "")
    if not name:
        raise InputError("empty site name", path=path, field=f"{where}: name")
    coords = {}
    for key in COORDINATES:
        text = str(row.get(key, "")).strip()
        if not text:
            coords[key] = None
            continue
        spec = SCHEMA["site"][key]
        try:
            value = float(text)
        except ValueError:
            value = float("nan")
        if not (np.isfinite(value) and spec.low <= value <= spec.high):
            raise InputError(f"{text!r} is not allowed; expected a number in "
                             f"[{spec.low:g}, {spec.high:g}] {spec.unit}", path=path,
                             field=f"{where}: {key}")
        coords[key] = value
    weather_file = str(row.get("weather_file", "")).strip()
    given = {stem: [str(row.get(f"{stem}_{m:02d}", "")).strip() for m in range(1, 13)]
             for stem in NORMAL_COLUMNS}
    has_normals = any(v for values in given.values() for v in values)
    if weather_file and has_normals:
        raise InputError("give either a weather_file or monthly normals, not both",
                         path=path, field=f"{where}: weather_file")
    if weather_file:
        wpath = (path.parent / weather_file).resolve()
        return SiteSpec(name=name, weather_path=wpath, origin=f"{path}, {where}", **coords)
    if not has_normals:
        raise InputError("no weather for this site: give a weather_file or the monthly "
                         "normals (temp_max_c_01..12, temp_min_c_01..12, "
                         "wind_speed_m_s_01..12, relative_humidity_pct_01..12 and "
                         "clearness_01..12 or ghi_kwh_m2_d_01..12)", path=path,
                         field=f"{where}: weather_file")
    for key, value in coords.items():
        if value is None:
            raise InputError("clear-sky mode from normals needs the site's coordinates; "
                             f"{key} is empty", path=path, field=f"{where}: {key}")
    normals = {}
    for stem, values in given.items():
        if not any(values):
            continue
        missing = [m + 1 for m, v in enumerate(values) if not v]
        if missing:
            raise InputError(f"months {missing} are empty; give all 12 months", path=path,
                             field=f"{where}: {stem}_{missing[0]:02d}")
        try:
            normals[stem] = tuple(float(v) for v in values)
        except ValueError:
            bad = next(m for m, v in enumerate(values) if not _is_number(v))
            raise InputError(f"{values[bad]!r} is not a number", path=path,
                             field=f"{where}: {stem}_{bad + 1:02d}") from None
    from pondsim.forcing.climate import validate_normals

    try:
        validate_normals(normals)
    except InputError as err:
        stem = (err.field or "").rsplit(".", 1)[-1]
        raise InputError(err.reason, path=path, field=f"{where}: {stem}") from None
    return SiteSpec(name=name, normals=normals, origin=f"{path}, {where}", **coords)


def _is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def site_seeds(seed: int, name: str) -> tuple[int, int]:
    """(weather seed, crash seed) of a site, from the scenario seed and the site name."""
    h = int.from_bytes(hashlib.sha256(name.encode("utf-8")).digest()[:8], "little")
    children = np.random.SeedSequence([int(seed), h]).spawn(2)
    return tuple(int(c.generate_state(1, np.uint64)[0]) & (2**63 - 1) for c in children)


def site_scenario(scenario: Scenario, site: SiteSpec) -> Scenario:
    """The scenario moved to ``site``: its coordinates and its weather source."""
    w = scenario.weather
    if site.weather_path is not None:
        weather = dataclasses.replace(w, source="file", path=site.weather_path,
                                      format="auto", normals=None)
    else:
        weather = dataclasses.replace(w, source="clearsky", path=None,
                                      normals=dict(site.normals))
    return scenario.replace(
        site=Site(name=site.name, latitude=site.latitude, longitude=site.longitude,
                  elevation_m=site.elevation_m, utc_offset_h=site.utc_offset_h),
        weather=weather, path=None)
