"""Site screening: one scenario's policies and plans at many sites, with N weather years
and crash replicates per site, serially, on a local process pool or on a dask cluster.

Each site is one task. A task reads (or builds) the site's typical year, draws
``n_years`` synthetic weather years from it (:func:`pondsim.forcing.years.generate_years`),
simulates every policy and plan with ``members`` crash replicates per weather year
(:func:`pondsim.operations.simulate.simulate`) and REDUCES the daily results to a few summary
variables in the worker (:func:`reduce_site`), so only a few kilobytes per site travel
back and the memory of the client stays bounded whatever the number of sites. Results
stream back as tasks finish; each is written at once to ``OUT/sites/<site>.nc`` and the
files are combined at the end into one Dataset with a ``site`` dimension.

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

Weather years and seeds
-----------------------
Site ``s`` gets two seeds from ``numpy.random.SeedSequence([seed, h(s)])`` with ``h`` the
first 8 bytes of the SHA-256 of the site name (not Python's salted ``hash``): one for the
weather-year generator, one for the crash streams. The same scenario seed, site name,
members and years give the same numbers serially, on a pool or on a cluster, in any
order of completion. In clear-sky mode every day of a month is alike, so the synthetic
weather years hardly differ: the P50-P90 spread of such sites comes from the crash draws
alone and understates the weather risk (a note says so in the results).

Summaries (per site, policy or plan)
------------------------------------
``annual_yield`` [t ha-1 yr-1] per member (weather year x replicate), ``monthly_yield``
[t ha-1 month-1, member mean], ``crashes`` [yr-1] per member, ``yield_p50`` and
``yield_p90`` [t ha-1 yr-1], ``crash_rate`` (expected crashes per year),
``evaporation_per_biomass`` [m3 t-1] (mean annual pond evaporation over mean annual
harvested biomass), and per site the mean annual insolation ``insolation`` [kWh m-2
yr-1] and evaporation ``evaporation_annual`` [mm yr-1]. **P90 follows the exceedance
convention of yield assessments (common practice): the annual yield exceeded in 90 % of
member years, i.e. the 10th percentile over members**; P50 is the median.

The ranking table names, per site, the *best plan*: the policy or plan with the highest
P50 annual yield (crash risk is reported beside it, not traded off).

Where it runs
-------------
* ``workers=1``: in this process, one site after another.
* ``workers=N`` (default: the machine's cores): a
  :class:`concurrent.futures.ProcessPoolExecutor` with the *spawn* start method on this
  machine. Chosen over dask's ``LocalCluster`` so that the default needs no optional
  dependency and no ports; the tasks are the same either way. A script that calls
  :func:`screen` with more than one worker needs an ``if __name__ == "__main__":`` guard.
* ``scheduler=ADDRESS`` (or a ``distributed.Client``): the same tasks on a running
  dask.distributed cluster (``pip install "pondsim[distributed]"``). Start one with::

      dask scheduler                      # prints the address, e.g. tcp://10.0.0.5:8786
      dask worker tcp://10.0.0.5:8786 --nworkers 4 --nthreads 1   # on each machine

  then ``pondsim screen scenario.toml --sites SITES --scheduler tcp://10.0.0.5:8786``.
  Every worker needs the same pondsim version installed and must read the weather files
  at the same paths (a shared file system), or use a site table with normals only.
  One thread per worker process suits this work (numpy-bound, holds the GIL).

A site that fails (unreadable weather file, ...) is reported with its error on the
terminal, in ``failures.csv`` and in the ranking table; the others complete.
``resume=True`` skips sites whose file under ``OUT/sites/`` was written by the same
scenario, members, years, seed and mode (a fingerprint in the file's attributes).
"""

from __future__ import annotations

import dataclasses
import hashlib
import os
import re
import sys
import time
import uuid
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from pondsim.errors import InputError, did_you_mean
from pondsim.glossary import CAUTION, G_M2_TO_T_HA
from pondsim.results.files import save, write_csv
from pondsim.scenario import SCHEMA, Scenario, Site

#: Weather-file extensions picked up from a sites folder.
WEATHER_SUFFIXES = (".epw", ".csv", ".tm2", ".json")
#: The normals of a site table, as column stems (``<stem>_01`` .. ``<stem>_12``).
NORMAL_COLUMNS = ("temp_max_c", "temp_min_c", "wind_speed_m_s", "relative_humidity_pct",
                  "clearness", "ghi_kwh_m2_d")
COORDINATES = ("latitude", "longitude", "elevation_m", "utc_offset_h")
#: Default number of synthetic weather years per site.
DEFAULT_YEARS = 10
#: Exceedance probability of the low band (P90 = exceeded in 90 % of member years).
P90_PERCENTILE = 10.0
MM_HA_TO_M3 = 10.0  # 1 mm over 1 ha = 10 m3


# ------------------------------------------------------------------------------ sites
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

    @property
    def source(self) -> str:
        return str(self.weather_path) if self.weather_path else "monthly normals (clear sky)"


def read_sites(path) -> list[SiteSpec]:
    """Sites from a folder of weather files or a site table (see the module docstring).

    Raises
    ------
    InputError
        Missing path, empty folder, duplicate names, a bad column or value (naming the
        row), a row with neither normals nor a weather file.
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
        sites.append(_site_from_row(row, i, path))
        if sites[-1].name in names:
            raise InputError(f"site name {sites[-1].name!r} is used twice; names must be "
                             "unique", path=path, field=f"row {i}: name")
        names.add(sites[-1].name)
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


# ------------------------------------------------------------------------------ tasks
@dataclass(frozen=True)
class SiteTask:
    """Everything a worker needs for one site (picklable)."""

    site: SiteSpec
    scenario: Scenario  # already moved to the site (site_scenario)
    members: int
    n_years: int
    weather_seed: int
    crash_seed: int
    full: bool
    fingerprint: str


@dataclass
class SiteOutcome:
    """What comes back from a worker: a reduced Dataset, or the error."""

    name: str
    result: xr.Dataset | None = None
    error: str | None = None
    seconds: float = 0.0
    skipped: bool = False

    @property
    def ok(self) -> bool:
        return self.error is None


def run_site(task: SiteTask) -> SiteOutcome:
    """Simulate one site and reduce it (the task run by every worker).

    Never raises for a failing site: the error comes back in the outcome, so one bad
    site does not stop the others.
    """
    t0 = time.perf_counter()
    try:
        ds = _simulate_site(task)
        return SiteOutcome(task.site.name, result=ds, seconds=time.perf_counter() - t0)
    except InputError as err:
        return SiteOutcome(task.site.name, error=str(err), seconds=time.perf_counter() - t0)
    except Exception as err:  # report, never stop the other sites
        return SiteOutcome(task.site.name, error=f"{type(err).__name__}: {err}",
                           seconds=time.perf_counter() - t0)


def _simulate_site(task: SiteTask) -> xr.Dataset:
    from pondsim.forcing.years import generate_years
    from pondsim.operations.simulate import load_forcing, simulate

    scenario = task.scenario
    forcing, meta = load_forcing(scenario)
    years = generate_years(forcing, task.n_years, seed=task.weather_seed,
                           year=scenario.year)
    ds = simulate(scenario, members=task.members, seed=task.crash_seed, progress=False,
                  forcing=(forcing, meta), weather_years=years)
    notes = list(meta.get("notes", []))
    if scenario.weather.source == "clearsky":
        notes.append("every day of a month alike (clear-sky mode): the P50-P90 spread "
                     "reflects crash draws only, not weather risk")
    out = reduce_site(ds, name=task.site.name, source=task.site.source, notes=notes)
    if task.full:
        out = xr.merge([out, ds.expand_dims(site=[task.site.name])],
                       combine_attrs="override")
    out.attrs.update({
        "screen_fingerprint": task.fingerprint,
        "weather_seed": task.weather_seed, "crash_seed": task.crash_seed,
        "weather_years": task.n_years, "replicates": task.members,
        "full": int(task.full),
    })
    return out


def reduce_site(ds: xr.Dataset, *, name: str, source: str = "", notes=()) -> xr.Dataset:
    """The summary of one site's simulation, with a ``site`` dimension of length 1.

    Parameters
    ----------
    ds : xarray.Dataset
        From :func:`pondsim.operations.simulate.simulate` (dims policy, member, day).
    name : str
        Site name (the ``site`` coordinate).

    Returns
    -------
    xarray.Dataset
        See the module docstring, "Summaries"; units in the attributes.
    """
    n_days = ds.sizes["day"]
    per_year = 365.0 / n_days  # a leap year is scaled to 365 days, as policy_summary does
    harvested = ds["harvested"]  # g m-2 d-1
    annual = harvested.sum("day") * G_M2_TO_T_HA * per_year  # (policy, member) t ha-1 yr-1
    monthly = (harvested.groupby(ds["date"].dt.month).sum() * G_M2_TO_T_HA).mean("member")
    crashes = ds["crashed"].sum("day").astype(float) * per_year
    evap_mm = ds["evaporation"].sum("day") * per_year
    if "member" not in evap_mm.dims:
        evap_mm = evap_mm.expand_dims(member=ds["member"].values).copy()
    insolation = ds["ghi_daily"].sum("day") / 3.6 * per_year  # MJ -> kWh
    mean_yield = annual.mean("member")
    evap_per_t = (evap_mm.mean() * MM_HA_TO_M3) / mean_yield.where(mean_yield > 0)
    values = annual.transpose("policy", "member").values
    out = xr.Dataset(
        {
            "annual_yield": (("policy", "member"), values, {
                "long_name": "annual harvested biomass (AFDW)", "units": "t ha-1 yr-1"}),
            "monthly_yield": (("policy", "month"),
                              monthly.transpose("policy", "month").values, {
                "long_name": "monthly harvested biomass, member mean",
                "units": "t ha-1 month-1"}),
            "crashes": (("policy", "member"),
                        crashes.transpose("policy", "member").values, {
                "long_name": "culture crashes per year", "units": "yr-1"}),
            "yield_mean": (("policy",), mean_yield.values, {
                "long_name": "mean annual yield over members", "units": "t ha-1 yr-1"}),
            "yield_p50": (("policy",), np.percentile(values, 50, axis=1), {
                "long_name": "P50 annual yield (median over members)",
                "units": "t ha-1 yr-1"}),
            "yield_p90": (("policy",), np.percentile(values, P90_PERCENTILE, axis=1), {
                "long_name": "P90 annual yield: exceeded in 90 % of member years "
                             "(10th percentile)", "units": "t ha-1 yr-1"}),
            "crash_rate": (("policy",), crashes.mean("member").values, {
                "long_name": "expected culture crashes per year", "units": "yr-1"}),
            "evaporation_per_biomass": (("policy",), evap_per_t.values, {
                "long_name": "pond evaporation per tonne of harvested biomass",
                "units": "m3 t-1"}),
            "evaporation_annual": (("member",), evap_mm.values, {
                "long_name": "annual pond evaporation", "units": "mm yr-1"}),
            "insolation": ((), float(np.mean(insolation.values)), {
                "long_name": "mean annual global horizontal insolation",
                "units": "kWh m-2 yr-1"}),
            "weather_source": ((), str(source)),
            "weather_notes": ((), "; ".join(str(n) for n in notes)),
        },
        coords={
            "policy": ds["policy"].values,
            "member": ds["member"].values,
            "weather_year": (("member",), ds["weather_year"].values),
            "replicate": (("member",), ds["replicate"].values),
            "month": np.arange(1, 13),
        },
    )
    out = out.expand_dims(site=[name])
    for key in ("latitude", "longitude"):
        out = out.assign_coords({key: (("site",), [float(ds.attrs.get(key, np.nan))],
                                       {"units": "degrees_north" if key == "latitude"
                                        else "degrees_east"})})
    return out


# ------------------------------------------------------------------------------ running
@dataclass
class ScreenReport:
    """What :func:`screen` did: the combined Dataset, the tables, the files."""

    dataset: xr.Dataset | None
    ranking: pd.DataFrame
    failures: pd.DataFrame
    computed: list[str] = field(default_factory=list)
    skipped: list[str] = field(default_factory=list)
    written: list[Path] = field(default_factory=list)
    seconds: float = 0.0
    task_seconds: dict = field(default_factory=dict)


def _fingerprint(scenario: Scenario, site: SiteSpec, members, n_years, seed, full) -> str:
    from pondsim import __version__

    # Not the row number or file the site was declared in: a resumed run may add rows.
    parts = [repr(scenario), repr(dataclasses.replace(site, origin="")), members, n_years,
             seed, full, __version__]
    if site.weather_path is not None and site.weather_path.is_file():
        st = site.weather_path.stat()
        parts += [st.st_size, st.st_mtime_ns]
    return hashlib.sha256(repr(parts).encode("utf-8")).hexdigest()[:16]


def site_file_stems(names: Sequence[str]) -> dict[str, str]:
    """A file-system-safe, unique file stem for every site name."""
    stems = {}
    for name in names:
        stem = re.sub(r"[^A-Za-z0-9._-]+", "_", name).strip("._") or "site"
        stems[name] = stem
    counts = pd.Series(list(stems.values())).value_counts()
    for name, stem in stems.items():
        if counts[stem] > 1:  # only colliding names get a hash suffix
            stems[name] = f"{stem}-{hashlib.sha256(name.encode()).hexdigest()[:8]}"
    return stems


def _load_site_file(path: Path) -> xr.Dataset:
    with xr.open_dataset(path, engine="h5netcdf") as ds:
        return ds.load()


def _finished(path: Path, fingerprint: str) -> bool:
    if not path.is_file():
        return False
    try:
        with xr.open_dataset(path, engine="h5netcdf") as ds:
            return ds.attrs.get("screen_fingerprint") == fingerprint
    except (OSError, ValueError):
        return False


def screen(scenario: Scenario, sites, *, members: int | None = None,
           years: int = DEFAULT_YEARS, seed: int | None = None, out=None,
           workers: int | None = None, scheduler=None, resume: bool = False,
           full: bool = False, progress: bool = True,
           log: Callable[[str], None] | None = None) -> ScreenReport:
    """Screen sites: every policy and plan of ``scenario`` at every site.

    Parameters
    ----------
    scenario : Scenario
        Strain, pond, operation, policies and plans (its site and weather are replaced
        by each site's).
    sites : str, Path or list of SiteSpec
        A folder of weather files or a CSV site table (:func:`read_sites`).
    members : int, optional
        Crash replicates per weather year and policy (default ``scenario.run.members``).
    years : int
        Synthetic weather years per site (1..1000).
    seed : int, optional
        Scenario seed (default ``scenario.run.seed``); per-site seeds derive from it.
    out : str or Path, optional
        Output folder: ``sites/<site>.nc`` per site, then ``screen.nc``, ``ranking.csv``,
        ``failures.csv`` (when any failed) and ``ranking.png``. None: nothing written
        (and no resume).
    workers : int, optional
        Local processes (default: ``os.cpu_count()``); 1 runs in this process.
    scheduler : str or distributed.Client, optional
        A dask.distributed scheduler address (or client); overrides ``workers``.
    resume : bool
        Skip sites already written to ``out/sites`` by an identical run.
    full : bool
        Keep the full daily trajectories of every site (memory and file size grow with
        sites x policies x members x 365 days).
    progress : bool
        A tqdm bar of sites done.
    log : callable, optional
        Where failure messages go (default: the terminal, via the progress bar).

    Returns
    -------
    ScreenReport
    """
    t0 = time.perf_counter()
    specs = list(sites) if isinstance(sites, list | tuple) else read_sites(sites)
    members = scenario.run.members if members is None else int(members)
    seed = scenario.run.seed if seed is None else int(seed)
    _check_int(members, "--members", 1, 1_000_000)
    _check_int(years, "--years", 1, 1000)
    if workers is not None:
        _check_int(workers, "--workers", 1, 4096)
    if resume and out is None:
        raise InputError("resume needs an output folder", field="--resume")
    out = None if out is None else Path(out)
    stems = site_file_stems([s.name for s in specs])
    tasks = []
    for spec in specs:
        sc = site_scenario(scenario, spec)
        w_seed, c_seed = site_seeds(seed, spec.name)
        tasks.append(SiteTask(site=spec, scenario=sc, members=members, n_years=int(years),
                              weather_seed=w_seed, crash_seed=c_seed, full=bool(full),
                              fingerprint=_fingerprint(sc, spec, members, years, seed,
                                                       bool(full))))
    site_dir = None if out is None else out / "sites"
    todo, skipped = [], []
    for task in tasks:
        if resume and _finished(site_dir / f"{stems[task.site.name]}.nc", task.fingerprint):
            skipped.append(task.site.name)
        else:
            todo.append(task)

    results: dict[str, xr.Dataset] = {}
    errors: dict[str, str] = {}
    task_seconds: dict[str, float] = {}
    bar = _bar(progress, len(tasks), len(skipped))
    say = log or (bar.write if bar is not None else
                  (lambda msg: print(msg, file=sys.stderr)))

    def collect(outcome: SiteOutcome):
        task_seconds[outcome.name] = outcome.seconds
        if outcome.ok:
            if site_dir is not None:
                save(outcome.result, site_dir / f"{stems[outcome.name]}.nc")
                results[outcome.name] = None  # re-read from disk when combining
            else:
                results[outcome.name] = outcome.result
        else:
            errors[outcome.name] = outcome.error
            say(f"site {outcome.name!r} failed: {outcome.error}")
        if bar is not None:
            bar.update(1)

    try:
        for outcome in _execute(todo, workers=workers, scheduler=scheduler):
            collect(outcome)
    finally:
        if bar is not None:
            bar.close()

    parts = []
    for task in tasks:
        name = task.site.name
        if name in errors:
            continue
        if name in results and results[name] is not None:
            parts.append(results[name])
        elif site_dir is not None:
            parts.append(_load_site_file(site_dir / f"{stems[name]}.nc"))
    combined = combine(parts, scenario) if parts else None
    ranking = ranking_table(combined, [s.name for s in specs], errors)
    failures = pd.DataFrame(
        [{"site": s.name, "source": s.source, "declared_in": s.origin,
          "error": errors[s.name]} for s in specs if s.name in errors],
        columns=["site", "source", "declared_in", "error"])
    report = ScreenReport(dataset=combined, ranking=ranking, failures=failures,
                          computed=[t.site.name for t in todo], skipped=skipped,
                          task_seconds=task_seconds)
    if out is not None:
        report.written += write_outputs(report, out)
    report.seconds = time.perf_counter() - t0
    return report


def _check_int(value, name, low, high):
    if isinstance(value, bool) or int(value) != value or not low <= int(value) <= high:
        raise InputError(f"{value} is out of range; allowed: a whole number in "
                         f"[{low}, {high}]", field=name)


def _bar(progress: bool, total: int, done: int):
    if not progress or total == 0:
        return None
    from tqdm.auto import tqdm

    return tqdm(total=total, initial=done, unit="site", desc="screening sites",
                file=sys.stderr)


def _execute(tasks: list[SiteTask], *, workers=None, scheduler=None):
    """Run tasks and yield their outcomes as they complete (any order)."""
    if not tasks:
        return
    if scheduler is not None:
        yield from _execute_dask(tasks, scheduler)
        return
    n = (os.cpu_count() or 1) if workers is None else int(workers)
    n = min(n, len(tasks))
    if n <= 1:
        for task in tasks:
            yield run_site(task)
        return
    yield from _execute_pool(tasks, n)


def _execute_pool(tasks: list[SiteTask], n_workers: int):
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor, as_completed

    ctx = multiprocessing.get_context("spawn")
    with ProcessPoolExecutor(max_workers=n_workers, mp_context=ctx) as pool:
        futures = {pool.submit(run_site, t): t for t in tasks}
        try:
            for fut in as_completed(futures):
                try:
                    yield fut.result()
                except Exception as err:  # a dead worker process, unpicklable result
                    yield SiteOutcome(futures[fut].site.name,
                                      error=f"worker failed: {type(err).__name__}: {err}")
        except BaseException:
            for fut in futures:
                fut.cancel()
            raise


def connect(scheduler):
    """A ``distributed.Client`` for an address (or the client given); (client, owned)."""
    try:
        import distributed
    except ImportError:
        raise InputError("a dask scheduler needs dask.distributed: pip install "
                         "'pondsim[distributed]'", field="--scheduler") from None
    if isinstance(scheduler, distributed.Client):
        return scheduler, False
    try:
        client = distributed.Client(str(scheduler), timeout="20s")
    except (OSError, TimeoutError, ValueError) as err:
        raise InputError(f"cannot connect to the dask scheduler at {scheduler}: {err}; "
                         "start one with `dask scheduler` and workers with `dask worker "
                         "ADDRESS`", field="--scheduler") from None
    return client, True


def _execute_dask(tasks: list[SiteTask], scheduler):
    import distributed

    client, owned = connect(scheduler)
    token = uuid.uuid4().hex[:8]
    try:
        futures = {}
        for i, t in enumerate(tasks):
            fut = client.submit(run_site, t, key=f"pondsim-site-{i}-{token}", pure=False)
            futures[fut.key] = (fut, t)
        try:
            for fut in distributed.as_completed([f for f, _ in futures.values()]):
                task = futures[fut.key][1]
                try:
                    outcome = fut.result()
                except Exception as err:  # worker lost, task not deserialisable, ...
                    outcome = SiteOutcome(task.site.name,
                                          error=f"dask task failed: {type(err).__name__}: "
                                                f"{err}")
                fut.release()
                yield outcome
        except BaseException:
            client.cancel([f for f, _ in futures.values()])
            raise
    finally:
        if owned:
            client.close()


# ------------------------------------------------------------------------------ outputs
def combine(parts: Sequence[xr.Dataset], scenario: Scenario) -> xr.Dataset:
    """Concatenate per-site Datasets (in site order) along ``site``."""
    seeds = {}
    for name in ("weather_seed", "crash_seed"):
        seeds[name] = [int(p.attrs.get(name, -1)) for p in parts]
    ds = xr.concat(list(parts), dim="site", combine_attrs="drop_conflicts",
                   data_vars="minimal", coords="minimal", compat="override")
    for name, values in seeds.items():
        ds[name] = (("site",), np.asarray(values, dtype=np.int64),
                    {"long_name": f"per-site {name.replace('_', ' ')}", "units": "1"})
    first = parts[0].attrs
    ds.attrs = {
        "title": f"pondsim site screening: {scenario.study_name}",
        "strain": scenario.strain.name,
        "growth_form": scenario.strain.growth_form,
        "depth_m": scenario.pond.depth_m,
        "year": scenario.year,
        "weather_years": first.get("weather_years"),
        "replicates": first.get("replicates"),
        "full": first.get("full", 0),
        "p90_definition": "annual yield exceeded in 90 % of member years (10th percentile)",
        "best_plan_rule": "highest P50 annual yield",
        "caution": CAUTION,
        "Conventions": "CF-1.10",
        "source": f"pondsim {_version()}",
    }
    return ds


def _version() -> str:
    from pondsim import __version__

    return __version__


RANKING_COLUMNS = ["rank", "site", "latitude", "longitude", "best_plan",
                   "yield_p50_t_ha_yr", "yield_p90_t_ha_yr", "crash_risk_per_yr",
                   "evaporation_m3_per_t", "insolation_kwh_m2_yr", "status", "error"]


def ranking_table(ds: xr.Dataset | None, names: Sequence[str],
                  errors: dict[str, str] | None = None) -> pd.DataFrame:
    """Sites ranked by the P50 annual yield of their best plan; failed sites last.

    Columns: rank, site, latitude, longitude, best_plan, ``yield_p50_t_ha_yr``,
    ``yield_p90_t_ha_yr`` (exceedance P90), ``crash_risk_per_yr`` (expected crashes per
    year of the best plan), ``evaporation_m3_per_t`` (of the best plan),
    ``insolation_kwh_m2_yr``, status (``ok`` or ``failed``) and error.
    """
    errors = errors or {}
    rows = []
    if ds is not None:
        for name in ds["site"].values:
            s = ds.sel(site=name)
            p50 = s["yield_p50"].values
            best = int(np.nanargmax(p50)) if np.isfinite(p50).any() else 0
            rows.append({
                "site": str(name), "latitude": float(s["latitude"]),
                "longitude": float(s["longitude"]),
                "best_plan": str(s["policy"].values[best]),
                "yield_p50_t_ha_yr": float(p50[best]),
                "yield_p90_t_ha_yr": float(s["yield_p90"].values[best]),
                "crash_risk_per_yr": float(s["crash_rate"].values[best]),
                "evaporation_m3_per_t": float(s["evaporation_per_biomass"].values[best]),
                "insolation_kwh_m2_yr": float(s["insolation"]),
                "status": "ok", "error": ""})
    table = pd.DataFrame(rows, columns=RANKING_COLUMNS[1:])
    table = table.sort_values("yield_p50_t_ha_yr", ascending=False, kind="stable")
    table.insert(0, "rank", np.arange(1, len(table) + 1))
    failed = pd.DataFrame([{"site": n, "status": "failed", "error": errors[n]}
                           for n in names if n in errors], columns=RANKING_COLUMNS)
    if len(failed):
        table = pd.concat([table, failed], ignore_index=True) if len(table) else failed
    table = table.reset_index(drop=True)[RANKING_COLUMNS]
    table["rank"] = table["rank"].astype("Int64")  # failed sites have no rank
    return table


def write_outputs(report: ScreenReport, out: Path) -> list[Path]:
    """screen.nc, ranking.csv, failures.csv (if any failed) and ranking.png."""
    written = []
    if report.dataset is not None:
        written.append(save(report.dataset, out / "screen.nc"))
    written.append(write_csv(report.ranking, out / "ranking.csv", index=False))
    failures_path = out / "failures.csv"
    if len(report.failures):
        written.append(write_csv(report.failures, failures_path, index=False))
    elif failures_path.exists():
        failures_path.unlink()  # a resumed run that now succeeded everywhere
    if report.dataset is not None:
        written.append(screen_figure(report.ranking, out / "ranking.png"))
    return written


def screen_figure(ranking: pd.DataFrame, path) -> Path:
    """Ranked horizontal bars of P50 with the P50-P90 spread, and P50 against latitude."""
    import matplotlib.pyplot as plt

    from pondsim.results.figures import COLORS, _save

    ok = ranking[ranking["status"] == "ok"]
    n = len(ok)
    fig, (ax, ax2) = plt.subplots(1, 2, figsize=(12, max(3.5, 0.35 * n + 1.5)),
                                  constrained_layout=True,
                                  gridspec_kw={"width_ratios": [3, 2]})
    y = np.arange(n)[::-1]
    p50 = ok["yield_p50_t_ha_yr"].to_numpy(float)
    p90 = ok["yield_p90_t_ha_yr"].to_numpy(float)
    ax.barh(y, p50, color=COLORS[0], alpha=0.85, label="P50 (best plan)")
    ax.errorbar(p50, y, xerr=[np.clip(p50 - p90, 0, None), np.zeros(n)], fmt="none",
                ecolor="k", capsize=3, lw=1.2, label="down to P90 (exceeded in 90 %)")
    ax.set_yticks(y, [f"{s}\n{b}" for s, b in zip(ok["site"], ok["best_plan"],
                                                    strict=True)], fontsize=7)
    ax.set_xlabel("annual harvested biomass [t ha$^{-1}$ yr$^{-1}$ AFDW]")
    ax.set_title("Sites ranked by P50 annual yield of the best plan")
    ax.grid(axis="x", alpha=0.3)
    ax.legend(fontsize=8, loc="lower right")
    ax2.scatter(ok["latitude"], p50, color=COLORS[1], marker="o", zorder=3, label="P50")
    ax2.scatter(ok["latitude"], p90, color=COLORS[2], marker="v", zorder=3, label="P90")
    for lat, v, s in zip(ok["latitude"], p50, ok["site"], strict=True):
        ax2.annotate(str(s), (lat, v), fontsize=6, xytext=(3, 3),
                     textcoords="offset points")
    ax2.set_xlabel("latitude [deg, north positive]")
    ax2.set_ylabel("annual yield [t ha$^{-1}$ yr$^{-1}$]")
    ax2.set_title("Yield against latitude")
    ax2.grid(alpha=0.3)
    ax2.legend(fontsize=8)
    return _save(fig, path)


# ------------------------------------------------------------------------------ CLI
def add_screen_parser(subparsers):
    """Add ``pondsim screen`` to the CLI's subparsers; returns the parser."""
    s = subparsers.add_parser(
        "screen", help="rank many sites: policies x plans x weather years per site",
        description="Run the scenario's policies and plans at every site with synthetic "
        "weather years and crash replicates; reduce each site to yield P50/P90, crash "
        "risk and evaporation per tonne; write screen.nc, ranking.csv and ranking.png. "
        "Runs on this machine's cores, or on a dask.distributed cluster "
        "(--scheduler; start one with `dask scheduler` and `dask worker ADDRESS`).")
    s.add_argument("scenario", help="scenario .toml (strain, pond, policies, plans)")
    s.add_argument("--sites", required=True, metavar="SITES",
                   help="folder of weather files, or a CSV site table with coordinates "
                   "and monthly normals or weather_file (see scenarios/sites_demo.csv)")
    s.add_argument("--members", type=int, default=None,
                   help="crash replicates per weather year (default: run.members)")
    s.add_argument("--years", type=int, default=DEFAULT_YEARS,
                   help=f"synthetic weather years per site (default {DEFAULT_YEARS})")
    s.add_argument("--seed", type=int, help="scenario seed (default: run.seed)")
    where = s.add_mutually_exclusive_group()
    where.add_argument("--scheduler", metavar="ADDRESS",
                       help="dask.distributed scheduler, e.g. tcp://host:8786")
    where.add_argument("--workers", type=int, default=None,
                       help="local worker processes (default: all cores; 1 = serial)")
    s.add_argument("--resume", action="store_true",
                   help="skip sites already written to OUT/sites by an identical run")
    s.add_argument("--full", action="store_true",
                   help="keep full daily trajectories (large files)")
    s.add_argument("--out", default=None, metavar="DIR",
                   help="output folder (default: out/<scenario name>-screen)")
    s.add_argument("--no-progress", action="store_true", help="no progress bar")
    return s


def cmd_screen(args) -> int:
    """``pondsim screen``: 0 when every site ran, 1 when some failed (2: input error,
    raised as InputError for the CLI to print)."""
    from pondsim.scenario import load_scenario

    scenario = load_scenario(args.scenario)
    out = Path(args.out) if args.out else Path("out") / f"{Path(args.scenario).stem}-screen"
    report = screen(scenario, args.sites, members=args.members, years=args.years,
                    seed=args.seed, out=out, workers=args.workers,
                    scheduler=args.scheduler, resume=args.resume, full=args.full,
                    progress=not args.no_progress)
    where = f"dask scheduler {args.scheduler}" if args.scheduler else (
        "serial" if args.workers == 1 else
        f"{args.workers or os.cpu_count()} local processes")
    n_ok = int((report.ranking["status"] == "ok").sum())
    print(f"{scenario.study_name}: {len(report.ranking)} sites ({n_ok} ok, "
          f"{len(report.failures)} failed, {len(report.skipped)} resumed), "
          f"{report.seconds:.1f} s on {where}\n")
    view = report.ranking[report.ranking["status"] == "ok"][
        ["rank", "site", "latitude", "best_plan", "yield_p50_t_ha_yr", "yield_p90_t_ha_yr",
         "crash_risk_per_yr", "evaporation_m3_per_t", "insolation_kwh_m2_yr"]].copy()
    view.columns = ["rank", "site", "lat", "best plan", "P50 t/ha/yr", "P90 t/ha/yr",
                    "crashes/yr", "evap m3/t", "GHI kWh/m2/yr"]
    if len(view):
        print(view.to_string(index=False, float_format=lambda v: f"{v:,.2f}"))
    for _, r in report.failures.iterrows():
        print(f"FAILED {r['site']}: {r['error']}")
    print("\nP90 = annual yield exceeded in 90 % of weather years x crash replicates.")
    print("crashes/yr = expected crashes per pond per year over the same synthetic weather "
          "years x crash replicates of each site (not the scenario's single weather year); "
          f"hazard values: {scenario.crash.basis}.")
    if report.dataset is not None and (report.dataset["weather_notes"].str.contains(
            "clear-sky mode")).any():
        print("Sites from monthly normals (clear-sky mode) have no day-to-day weather: "
              "their P50-P90 spread reflects crash draws only.")
    print("\nwritten: " + ", ".join(str(p) for p in report.written))
    print("\n" + CAUTION)
    return 0 if report.failures.empty else 1


__all__ = ["SiteSpec", "SiteTask", "SiteOutcome", "ScreenReport", "read_sites",
           "site_seeds", "site_scenario", "run_site", "reduce_site", "screen", "combine",
           "ranking_table", "screen_figure", "connect", "add_screen_parser", "cmd_screen",
           "DEFAULT_YEARS", "WEATHER_SUFFIXES", "NORMAL_COLUMNS"]

