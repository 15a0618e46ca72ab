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
``sites`` is a folder of weather files (one site per file) or a CSV site table (one row
per site: coordinates and a weather file or monthly normals); see
:mod:`pondsim.studies.screen_sites` for the columns.

Modules
-------
:mod:`~pondsim.studies.screen_sites` (site lists, seeds) · :mod:`~pondsim.studies.screen_task`
(one site: simulate and reduce) · :mod:`~pondsim.studies.screen_scheduling` (serial, pool,
dask) · :mod:`~pondsim.studies.screen_outputs` (combined Dataset, ranking, files, figure) ·
this module (the :func:`screen` driver and the ``pondsim screen`` command).

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

import contextlib
import dataclasses
import hashlib
import os
import re
import sys
import time
from collections.abc import Callable, Sequence
from pathlib import Path

import pandas as pd
import xarray as xr

from pondsim.errors import InputError
from pondsim.glossary import CAUTION
from pondsim.results.files import OutputSet, save
from pondsim.scenario import Scenario
from pondsim.studies.screen_outputs import (
    ScreenReport,
    combine,
    ranking_table,
    screen_figure,
    write_outputs,
)
from pondsim.studies.screen_scheduling import _bar, _execute, connect
from pondsim.studies.screen_sites import (
    NORMAL_COLUMNS,
    WEATHER_SUFFIXES,
    SiteSpec,
    read_sites,
    site_scenario,
    site_seeds,
)
from pondsim.studies.screen_task import SiteOutcome, SiteTask, reduce_site, run_site

#: Default number of synthetic weather years per site.
DEFAULT_YEARS = 10


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
           full: bool = False, progress: bool = True, strict: bool = False,
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
    strict : bool
        A site whose coordinates disagree with its weather
        (:mod:`pondsim.forcing.sitecheck`) fails instead of running with a warning.
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
    _check_int(seed, "--seed", 0, 2**63 - 1)
    _check_int(years, "--years", 1, 1000)
    if workers is not None:
        _check_int(workers, "--workers", 1, 4096)
    if resume and out is None:
        raise InputError("resume needs an output folder", field="--resume")
    out = None if out is None else Path(out)
    if strict:
        scenario = scenario.replace(weather=dataclasses.replace(scenario.weather,
                                                                site_check="strict"))
    # the output folder is checked (and staged) before any site runs
    files = None if out is None else OutputSet(out, command="screen", seed=seed,
                                               scenario=scenario.path)
    with contextlib.nullcontext() if files is None else files:
        report = _screen_sites(scenario, specs, members=members, years=years, seed=seed,
                               out=out, workers=workers, scheduler=scheduler,
                               resume=resume, full=full, progress=progress, log=log)
        if files is not None:
            files.notes["sites"] = (f"{len(report.ranking)} ({len(report.failures)} "
                                    "failed)")
            report.written += [files.final(p) for p in write_outputs(report, files.dir)]
    report.seconds = time.perf_counter() - t0
    return report


def _screen_sites(scenario, specs, *, members, years, seed, out, workers, scheduler,
                  resume, full, progress, log) -> ScreenReport:
    """Run the sites (writing each site's cache file under ``out/sites``); no outputs."""
    stems = site_file_stems([s.name for s in specs])
    tasks = []
    for spec in specs:
        if spec.error is not None:  # a bad row of the site table fails alone
            continue
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
    errors: dict[str, str] = {s.name: s.error for s in specs if s.error is not None}
    task_seconds: dict[str, float] = {}
    bar = _bar(progress, len(tasks), len(skipped))
    say = log or (bar.write if bar is not None else
                  (lambda msg: print(msg, file=sys.stderr)))
    for name, error in errors.items():
        say(f"site {name!r} failed: {error}")

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
    return ScreenReport(dataset=combined, ranking=ranking, failures=failures,
                        computed=[t.site.name for t in todo], skipped=skipped,
                        task_seconds=task_seconds)


def _check_int(value, name, low, high):
    if isinstance(value, bool) or int(value) != value or not low <= int(value) <= high:
        raise InputError(f"{value} is out of range; allowed: a whole number in "
                         f"[{low}, {high}]", field=name)



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
    s.add_argument("--strict", action="store_true",
                   help="a site whose coordinates disagree with its weather file's header "
                   "or whose data peak away from the computed solar noon fails (default: "
                   "it runs with a warning in the ranking's site_check column)")
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
                    progress=not args.no_progress, strict=args.strict)
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
    for _, r in report.ranking.iterrows():
        if str(r["site_check"]).startswith("FAILED"):
            print(f"WARNING {r['site']}: site check {r['site_check']}")
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
