"""The ``pondsim`` command line.

User errors (bad scenario, weather file, observations) print one message naming the file,
the field and what is allowed, and exit with status 2 — never a traceback.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

from pondsim.errors import InputError

EXIT_INPUT = 2
#: One meaning of the ensemble options in every command.
MEMBERS_HELP = "crash replicates per driver set (weather year x parameter draw)"
YEARS_HELP = "weather years"
#: Crash replicates of an outlook with crashes on, at least (farm totals draw each pond's
#: crash history from a cell's replicates; common practice for a bootstrap: >= 4-8).
OUTLOOK_REPLICATES = 4


def add_strict_option(parser) -> None:
    """``--strict``: refuse a run whose site disagrees with its weather."""
    parser.add_argument("--strict", action="store_true",
                        help="refuse to run when the site check fails (scenario site vs "
                        "the weather file's header, or the data's solar noon); default: "
                        "warn (weather.site_check)")


def load_checked_scenario(args):
    """The scenario of ``args.scenario``, in strict site-check mode under ``--strict``."""
    import dataclasses

    from pondsim.scenario import load_scenario

    scenario = load_scenario(args.scenario)
    if getattr(args, "strict", False):
        scenario = scenario.replace(weather=dataclasses.replace(scenario.weather,
                                                                site_check="strict"))
    return scenario


def print_site_check(meta_or_attrs) -> None:
    """The site check's line of the terminal summary."""
    text = meta_or_attrs.get("site_check")
    if text:
        flag = "WARNING: " if str(text).startswith("FAILED") else ""
        print(f"{flag}site check {text}")


def _parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="pondsim",
        description="Open raceway pond planning: weather, light, water temperature, "
                    "algal growth and harvest over a year, from one scenario file.",
        epilog="Results are estimates, not guarantees. Defer to local codes, permits and "
               "licensed engineers.")
    sub = p.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True

    w = sub.add_parser("weather", help="monthly weather, PAR and pond water table",
                       description="Print the monthly forcing table of a scenario or a "
                       "weather file: GHI, PAR, air and water temperature, wind, humidity, "
                       "evaporation, rain, makeup water and (with a scenario) the hours "
                       "of heat and cold stress.")
    w.add_argument("source", help="scenario .toml, or a weather file (EPW, TMY3, TMY2, "
                   "PVGIS, CSV)")
    w.add_argument("--plot", metavar="PATH", help="also save a figure (PNG)")
    w.add_argument("--csv", metavar="PATH", help="also write the monthly table (CSV)")
    w.add_argument("--year", type=int, help="calendar year to place a typical year in")
    for name, unit in (("latitude", "deg"), ("longitude", "deg"), ("elevation", "m"),
                       ("utc-offset", "h")):
        w.add_argument(f"--{name}", type=float, help=f"site {name} [{unit}] where the "
                       "file lacks it")
    w.add_argument("--depth", type=float, default=0.25,
                   help="pond depth for the water balance of a bare weather file [m] "
                        "(default 0.25)")

    r = sub.add_parser("run", help="simulate a year and write results",
                       description="Simulate the scenario's year for every policy; write "
                       "results.nc, summary.csv and figures.")
    r.add_argument("scenario", help="scenario .toml")
    r.add_argument("--out", default=None, metavar="DIR",
                   help="output folder (default: out/<scenario name>)")
    r.add_argument("--members", type=int, help=MEMBERS_HELP + " (default: run.members)")
    r.add_argument("--seed", type=int, help="seed of the random streams")
    r.add_argument("--no-plots", action="store_true", help="skip the figures")
    for parser in (w, r):
        add_strict_option(parser)

    c = sub.add_parser("compare", help="compare harvest policies and plans by season",
                       description="Run every policy and season plan of the scenario with "
                       "stochastic crash members; print and write the per-season comparison, "
                       "the best policy per season under the risk limit, and figures.")
    c.add_argument("scenario", help="scenario .toml")
    c.add_argument("--members", type=int, default=None,
                   help=MEMBERS_HELP + " (default: run.members, at least 200)")
    c.add_argument("--seed", type=int, help="seed of the random streams")
    c.add_argument("--out", default=None, metavar="DIR",
                   help="output folder (default: out/<scenario name>-compare)")
    add_strict_option(c)

    o = sub.add_parser("outlook", help="P50/P90 annual yield over weather years, "
                       "sensitivity and the inputs bill",
                       description="Simulate many weather years (synthetic from the typical "
                       "year, or the file's real years) with their own parameter draws and "
                       "crash replicates; report P50/P75/P90 annual yield (exceedance values:"
                       " P90 is exceeded with probability 0.9) with 95 % Monte Carlo "
                       "intervals, per pond area and for the farm (the sum of its ponds), "
                       "monthly 10th-90th percentile bands, Sobol sensitivity of yield to "
                       "the uncertain parameters and the farm's inputs bill. The ensemble "
                       "grows in rounds until the lead policy's P90 interval meets "
                       "uncertainty.p90_target_pct or uncertainty.max_members is reached.")
    o.add_argument("scenario", help="scenario .toml")
    o.add_argument("--years", type=int, default=None,
                   help=YEARS_HELP + " in the first round (default: "
                   "uncertainty.weather_years; a file of real years uses all of them)")
    o.add_argument("--draws", type=int, default=None,
                   help="parameter draws per weather year (default: uncertainty.draws; 1 "
                        "without uncertain parameters)")
    o.add_argument("--members", type=int, default=None,
                   help=MEMBERS_HELP + " (default: run.members, at least "
                   f"{OUTLOOK_REPLICATES} with crashes on, so that the farm's ponds crash "
                   "apart)")
    o.add_argument("--target", type=float, default=None, metavar="PCT",
                   help="convergence target: 95 %% interval half-width of the lead P90 as "
                        "%% of its P50 (default: uncertainty.p90_target_pct)")
    o.add_argument("--max-members", type=int, default=None,
                   help="cap on members per policy (default: uncertainty.max_members)")
    o.add_argument("--fixed", action="store_true",
                   help="one round of the given size, no growth towards the target")
    o.add_argument("--sobol-samples", type=int, default=None,
                   help="base samples of the Sobol indices (default: "
                        "uncertainty.sobol_samples)")
    o.add_argument("--seed", type=int, help="seed of weather years, draws and crashes")
    o.add_argument("--no-sensitivity", action="store_true", help="skip the Sobol indices")
    o.add_argument("--out", default=None, metavar="DIR",
                   help="output folder (default: out/<scenario name>-outlook)")
    add_strict_option(o)

    t = sub.add_parser("tune", help="tune the harvest rule of each season",
                       description="Search fixed-fraction, threshold and fixed-interval "
                       "rules for each season (many candidates per vectorised pass, then "
                       "Nelder-Mead refinement) for the most biomass within the crash-risk "
                       "limit; write the tuned plan into a copy of the scenario.")
    t.add_argument("scenario", help="scenario .toml")
    t.add_argument("--years", type=int, default=None,
                   help=YEARS_HELP + " (default: uncertainty.weather_years, at most 8)")
    t.add_argument("--members", type=int, default=8,
                   help=MEMBERS_HELP + " (default 8)")
    t.add_argument("--seed", type=int, help="seed of weather years and crashes")
    t.add_argument("--no-refine", action="store_true", help="grid search only")
    t.add_argument("--out", default=None, metavar="DIR",
                   help="output folder (default: out/<scenario name>-tune)")
    add_strict_option(t)

    from pondsim.report.build import add_report_parser
    from pondsim.studies.calibrate import add_fit_parser
    from pondsim.studies.crash_fit_command import add_hazardfit_parser
    from pondsim.studies.screen import add_screen_parser

    add_fit_parser(sub)
    add_hazardfit_parser(sub)
    add_screen_parser(sub)
    add_report_parser(sub)

    k = sub.add_parser("keys", help="print the scenario file reference (Markdown)")
    k.set_defaults()
    return p


class Terminated(KeyboardInterrupt):
    """SIGTERM, raised where the program is, so that it unwinds like Ctrl-C (outputs
    being written are discarded whole)."""


def _on_sigterm(signum, frame):
    raise Terminated()


def main(argv: list[str] | None = None) -> int:
    import signal

    args = _parser().parse_args(argv)
    try:
        previous = signal.signal(signal.SIGTERM, _on_sigterm)
    except ValueError:  # not the main thread (e.g. called from a worker thread)
        previous = None
    try:
        commands = {"weather": cmd_weather, "run": cmd_run, "compare": cmd_compare,
                    "outlook": cmd_outlook, "tune": cmd_tune, "fit": cmd_fit,
                    "hazardfit": cmd_hazardfit,
                    "screen": cmd_screen, "report": cmd_report, "keys": cmd_keys}
        check_arguments(args)
        return commands[args.command](args)
    except InputError as err:
        print(f"pondsim: error: {err}", file=sys.stderr)
        return EXIT_INPUT
    except MemoryError:
        print("pondsim: error: not enough memory for this run; use fewer members, weather "
              "years or draws (--members, --years, --draws, run.members)", file=sys.stderr)
        return EXIT_INPUT
    except Terminated:
        print("pondsim: terminated; no output set was written", file=sys.stderr)
        return 128 + signal.SIGTERM
    except KeyboardInterrupt:
        print("pondsim: interrupted; no output set was written", file=sys.stderr)
        return 130
    except BrokenPipeError:  # output piped into e.g. `head`, which closed early
        sys.stderr.close()
        return 0
    finally:
        if previous is not None:
            signal.signal(signal.SIGTERM, previous)


#: Command-line values checked before anything runs: flag -> (low, high), whole numbers.
WHOLE_NUMBER_FLAGS = {"members": (1, 1_000_000), "years": (1, 100_000),
                      "draws": (1, 100_000), "workers": (1, 4096), "seed": (0, 2**63 - 1),
                      "year": (1, 9999), "max_members": (1, 1_000_000),
                      "sobol_samples": (1, 8192)}


def check_arguments(args) -> None:
    """The same one-line error as the scenario checks for a bad command-line value
    (a negative --seed, --members 0, a NaN coordinate, ...)."""
    import math

    for name, (low, high) in WHOLE_NUMBER_FLAGS.items():
        value = getattr(args, name, None)
        if value is not None and not low <= value <= high:
            raise InputError(f"{value} is out of range; allowed: a whole number in "
                             f"[{low}, {high}]", field=f"--{name.replace('_', '-')}")
    for name, low, high in (("latitude", -90, 90), ("longitude", -180, 180),
                            ("elevation", -500, 6000), ("utc_offset", -14, 14)):
        value = getattr(args, name, None)
        if value is not None and not (math.isfinite(value) and low <= value <= high):
            raise InputError(f"{value} is out of range; allowed: a number in [{low}, "
                             f"{high}]", field=f"--{name.replace('_', '-')}")
    target = getattr(args, "target", None)
    if target is not None and not (math.isfinite(target) and 0.1 <= target <= 100):
        raise InputError(f"{target:g} is out of range; allowed: a number in [0.1, 100] %",
                         field="--target")
    out = getattr(args, "out", None)
    if out is not None and not str(out).strip():
        raise InputError("empty output folder name", field="--out")


def _check_out_first(folder) -> None:
    """Check an output folder before a command that writes its own files computes."""
    from pondsim.results.files import check_output_folder, clean_output_folder

    clean_output_folder(check_output_folder(folder))


def cmd_fit(args) -> int:
    from pondsim.studies.calibrate import cmd_fit as run_fit

    if getattr(args, "observations", None) and not getattr(args, "demo", False):
        _check_out_first(Path(args.out) if getattr(args, "out", None) else
                         Path("out") / f"{Path(args.observations).stem}_fit")
    return run_fit(args)


def cmd_hazardfit(args) -> int:
    from pondsim.studies.crash_fit_command import cmd_hazardfit as run_hazardfit

    return run_hazardfit(args)


def cmd_screen(args) -> int:
    from pondsim.studies.screen import cmd_screen as run_screen

    return run_screen(args)


def cmd_report(args) -> int:
    from pondsim.report.build import cmd_report as run_report

    _check_out_first(_out_dir(args, "-report"))
    return run_report(args)


def cmd_keys(args) -> int:
    from pondsim.scenario import schema_markdown

    print(schema_markdown())
    return 0


def _forcing_for(args):
    """(forcing, meta, pond, scenario-or-None) for `pondsim weather`."""
    from pondsim.operations.simulate import load_forcing
    from pondsim.scenario import SCHEMA, Pond

    source = Path(args.source)
    if source.suffix.lower() == ".toml":
        args.scenario = source
        scenario = load_checked_scenario(args)
        forcing, meta = load_forcing(scenario)
        return forcing, meta, scenario.pond, scenario
    from pondsim.forcing.weather import read_weather

    forcing, meta = read_weather(source, latitude=args.latitude, longitude=args.longitude,
                                 elevation_m=args.elevation, utc_offset_h=args.utc_offset,
                                 year=args.year)
    from pondsim.forcing.sitecheck import record_site_check

    record_site_check(forcing, meta, {"latitude": args.latitude, "longitude": args.longitude,
                                      "utc_offset_h": args.utc_offset},
                      strict=args.strict, path=source)
    key = SCHEMA["pond"]["depth_m"]
    if not key.low <= args.depth <= key.high:
        raise InputError(f"{args.depth:g} m is out of range; allowed [{key.low:g}, "
                         f"{key.high:g}] m", field="--depth")
    defaults = {n: k.default for n, k in SCHEMA["pond"].items()}
    defaults["depth_m"] = args.depth
    return forcing, meta, Pond(**defaults), None


def cmd_weather(args) -> int:
    from pondsim.glossary import CAUTION
    from pondsim.pond import light, thermal
    from pondsim.results.files import OutputError, check_output_folder
    from pondsim.results.tables import monthly_forcing_table

    if args.plot:  # checked before reading the weather
        if Path(args.plot).is_dir():
            raise OutputError("--plot names a folder; give a file name such as "
                              "weather.png", path=args.plot, field="--plot")
        check_output_folder(Path(args.plot).parent)
    forcing, meta, pond, scenario = _forcing_for(args)
    lt = scenario.light if scenario else None
    par = light.par_at_surface(forcing, par_fraction=lt.par_fraction if lt else None,
                               photons_per_joule=lt.photons_per_joule_umol if lt else None,
                               refractive_index=pond.refractive_index)
    upper = scenario.strain.t_max_c if scenario else None
    wind_h = scenario.weather.wind_height_m if scenario else 10.0
    water = thermal.water_temperature(forcing, pond, wind_height_m=wind_h,
                                      upper_limit_c=upper)
    stress = None
    if scenario:
        from pondsim.pond.stress import monthly_stress_hours

        st = scenario.strain
        stress = monthly_stress_hours(water, t_min_c=st.t_min_c, t_opt_c=st.t_opt_c,
                                      t_max_c=st.t_max_c)
    table = monthly_forcing_table(forcing, par, water, pond, stress)
    title = meta.get("name", "site")
    print(f"{title}  (lat {meta.get('latitude'):.3f}, lon {meta.get('longitude'):.3f}, "
          f"{meta.get('elevation_m', float('nan')):.0f} m, UTC{meta.get('utc_offset_h'):+g} h)"
          f"  pond depth {pond.depth_m:g} m, farm {pond.farm_area_m2:,.0f} m2")
    print_site_check(meta)
    for note in meta.get("notes", []):
        if not note.startswith("site check"):  # printed just above
            print(f"  note: {note}")
    print()
    print(table.to_string(float_format=lambda v: f"{v:,.1f}", na_rep="no data"))
    if stress is not None:
        st = scenario.strain
        print(f"(water stress hours for strain {st.name}: h > Topt {st.t_opt_c:g} degC, "
              f"h > Tmax {st.t_max_c:g} degC, h < Tmin {st.t_min_c:g} degC; "
              f"surface transfer: {pond.surface_transfer})")
    if args.csv:
        from pondsim.results.files import write_csv

        print(f"table written: {write_csv(table, args.csv)}")
    frozen_days = int(water["frozen"].groupby(water.index.date).any().sum())
    print(f"\nfreezing days: {frozen_days}", end="")
    if upper is not None:
        hot = int(water["above_limit"].sum())
        print(f"; hours above the strain's t_max_c ({upper:g} degC): {hot}", end="")
    print("\n\n" + CAUTION)
    if args.plot:
        from pondsim.results.figstyle import context_line
        from pondsim.results.figures import weather_figure

        station = str(meta.get("name") or "").strip()
        if scenario is not None:
            context = context_line(scenario.site.name, scenario.study_name,
                                   scenario.strain.name)
            file = (Path(scenario.weather.path).name if scenario.weather.source == "file"
                    else "clear-sky weather from monthly normals")
        else:
            file = Path(args.source).name
            context = f"weather file {file}, pond depth {pond.depth_m:g} m"
        source = f"{file} ({station})" if station and station != file else file
        path = weather_figure(table, water, forcing, context, args.plot, par=par,
                              source=source, stress=stress is not None)
        print(f"\nfigure written: {path}")
    return 0


def _out_dir(args, suffix: str) -> Path:
    return Path(args.out) if args.out else Path("out") / f"{Path(args.scenario).stem}{suffix}"


def _output_set(args, command: str, suffix: str, seed):
    """The command's output set; the folder is checked here, before any computation."""
    from pondsim.results.files import OutputSet

    return OutputSet(_out_dir(args, suffix), command=command, seed=seed,
                     scenario=args.scenario)


def _print_written(files, written) -> None:
    print("\nwritten: " + ", ".join(str(files.final(p)) for p in written)
          + f" (run {files.run_id}; README.txt, pondsim-manifest.json)")


def cmd_run(args) -> int:
    import numpy as np
    import pandas as pd

    from pondsim.glossary import CAUTION
    from pondsim.operations.simulate import simulate
    from pondsim.results.crashes import crashes_by_cause, print_crash_causes
    from pondsim.results.files import save, write_csv
    from pondsim.results.tables import monthly_pond_water, policy_summary

    scenario = load_checked_scenario(args)
    _check_memory(scenario, args.members or scenario.run.members)
    seed = scenario.run.seed if args.seed is None else args.seed
    with _output_set(args, "run", "", seed) as files:
        t0 = time.perf_counter()
        ds = simulate(scenario, members=args.members, seed=seed)
        elapsed = time.perf_counter() - t0
        summary = policy_summary(ds)
        water = monthly_pond_water(ds)
        files.notes["site_check"] = ds.attrs["site_check"]
        written = [save(ds, files.dir / "results.nc"),
                   write_csv(summary, files.dir / "summary.csv"),
                   write_csv(crashes_by_cause(ds), files.dir / "crashes_by_cause.csv"),
                   write_csv(water, files.dir / "pond_water_monthly.csv")]
        if not args.no_plots:
            from pondsim.results.figures import run_figures

            written += run_figures(ds, files.dir)
    print(f"{scenario.study_name}: {ds.attrs['site']}, {scenario.year}, "
          f"{scenario.pond.count} x {scenario.pond.area_m2:,.0f} m2 ponds at "
          f"{scenario.pond.depth_m:g} m, strain {scenario.strain.name} "
          f"({ds.sizes['member']} member(s), {elapsed:.1f} s)")
    print_site_check(ds.attrs)
    print()
    cols = ["yield_t_ha_yr", "productivity_g_m2_d", "harvests", "mean_density_g_m3",
            "crashes", "efficiency_par_pct", "efficiency_solar_pct", "washed_out_pct",
            "days_at_floor"]
    labels = ["yield t/ha/yr", "g/m2/d", "harvests/yr", "g/m3 growing", "crashes/yr",
              "PE PAR %", "PE solar %", "washed out %", "floor d/yr"]
    view = summary[cols].copy()
    for c in ("harvests", "days_at_floor", "washed_out_pct"):  # counts and shares
        view[c] = view[c].round().astype("Int64")
    view.columns = labels
    print(view.to_string(float_format=lambda v: f"{v:,.2f}"))
    print(f"(member means over {ds.sizes['member']} member(s); PE: photosynthetic "
          "efficiency, harvested biomass energy over incident PAR or total solar; washed "
          "out: members held at the viable floor "
          f"({ds.attrs['floor_g_m3']:g} g m-3) on more than {ds.attrs['washout_days']} "
          "days in a row)")
    print_crash_causes(ds)
    farm_t = summary["yield_t_ha_yr"] * scenario.pond.farm_area_m2 / 1e4
    print("\nfarm biomass (t AFDW per year): "
          + ", ".join(f"{p}: {v:,.1f}" for p, v in farm_t.items()))
    for p in summary.index[summary["washed_out_pct"] > 0]:
        print(f"WARNING: under policy {p!r} the culture washes out in "
              f"{summary.loc[p, 'washed_out_pct']:.0f} % of members (held at its viable "
              f"floor on more than {ds.attrs['washout_days']} days in a row): the rule "
              "dilutes faster than the culture grows, or the site and season do not let it "
              "grow; do not run it there (pondsim compare shows the seasons).")
    bad = summary.index[~summary["plausible"]]
    for p in bad:
        print(f"WARNING: policy {p!r} converts more than 4.6 % of total solar radiation to "
              "biomass, above the published maximum for C3 photosynthesis (Zhu, Long & Ort "
              "2008); check the strain parameters.")
    st = scenario.strain
    yr = water.loc["year"]
    print(f"\npond water: mean {yr['water_temperature_mean_c']:.1f} degC, evaporation "
          f"{yr['evaporation_mm']:,.0f} mm, rain "
          + ("no data" if np.isnan(yr["rain_mm"]) else f"{yr['rain_mm']:,.0f} mm")
          + f" per year; hours above Topt {st.t_opt_c:g} degC: "
          f"{yr['hours_above_t_opt']:,.0f}, above Tmax {st.t_max_c:g} degC: "
          f"{yr['hours_above_t_max']:,.0f}, below Tmin {st.t_min_c:g} degC: "
          f"{yr['hours_below_t_min']:,.0f}")
    months = water.drop(index="year")
    hot = months.index[months["hours_above_t_max"] > 0]
    if len(hot):
        print("  hours above Tmax by month: " + ", ".join(
            f"{pd.Timestamp(2000, int(m), 1):%b} {months.loc[m, 'hours_above_t_max']:.0f}"
            for m in hot))
    _print_written(files, written)
    print("\n" + CAUTION)
    return 0


def _check_memory(scenario, members, n_sets=1):
    """Refuse, with the estimate and the limit, a run whose daily outputs would not fit."""
    from pondsim.operations.simulate import check_memory

    check_memory(scenario, members, n_sets)


def cmd_compare(args) -> int:
    import pandas as pd

    from pondsim.glossary import CAUTION
    from pondsim.operations.simulate import crash_model_of, load_forcing, simulate
    from pondsim.results.crashes import crashes_by_cause, print_crash_causes
    from pondsim.results.files import save, write_csv
    from pondsim.studies.compare import (
        BAND_NOTE,
        HEADER_NOTE,
        best_by_season,
        comparison_table,
        comparison_view,
        risk_calendar,
        season_table,
    )
    from pondsim.studies.seasons import whole_year_plan

    scenario = load_checked_scenario(args)
    members = args.members or max(scenario.run.members, 200)
    _check_memory(scenario, members)
    seed = scenario.run.seed if args.seed is None else args.seed
    crash = crash_model_of(scenario)
    if crash is None:
        from pondsim.operations.crash import CrashModel

        crash = CrashModel()  # for the calendar only; no crashes are drawn
    with _output_set(args, "compare", "-compare", seed) as files:
        t0 = time.perf_counter()
        forcing = load_forcing(scenario)
        ds = simulate(scenario, members=members, seed=seed, forcing=forcing)
        table = season_table(ds)
        limit = scenario.crash.max_season_probability
        sliced = best_by_season(table, limit)
        best, versus = whole_year_plan(scenario, sliced, members, seed, forcing=forcing)
        elapsed = time.perf_counter() - t0
        calendar = risk_calendar(ds, crash)
        files.notes["site_check"] = ds.attrs["site_check"]
        out = files.dir
        written = [save(ds, out / "results.nc"),
                   write_csv(comparison_table(table), out / "comparison.csv"),
                   write_csv(best, out / "best_by_season.csv"),
                   write_csv(versus, out / "best_plan_vs_policies.csv"),
                   write_csv(calendar, out / "risk_calendar.csv", index=False),
                   write_csv(crashes_by_cause(ds), out / "crashes_by_cause.csv")]
        from pondsim.results.figures import compare_figures

        written += compare_figures(ds, table, crash, out)
    print(f"{scenario.study_name}: {len(ds['policy'])} policies/plans x {members} members, "
          f"{elapsed:.1f} s")
    print_site_check(ds.attrs)
    print()
    print(comparison_view(table).to_string())
    print(f"\n({HEADER_NOTE}.\n{BAND_NOTE}. Season totals are over the season's days: "
          + ", ".join(f"{s} {int(table.loc[s]['days'].iloc[0])} d"
                      for s in pd.unique(table.index.get_level_values('season')))
          + f". Washed out: held at the viable floor ({ds.attrs['floor_g_m3']:g} g m-3) on "
          f"more than {ds.attrs['washout_days']} days in a row.)")
    print_crash_causes(ds)
    print(f"\nbest plan, each season judged on whole years (risk limit: P(>= 1 crash) <= "
          f"{limit:.0%} per season; no washout):")
    for season, r in best.iterrows():
        flag = "" if r["within_limits"] else "  [no rule meets the limits: least offending]"
        other = "" if r["slice_best"] == r["best_policy"] else \
            f"  (the season's slice alone would name '{r['slice_best']}')"
        print(f"  {season:>10}: {r['best_policy']}  {r['yield_mean_t_ha_season']:.2f} "
              f"t/ha in the season (pct10-pct90 {r['yield_pct10_t_ha_season']:.2f}-"
              f"{r['yield_pct90_t_ha_season']:.2f}), P(crash) "
              f"{r['members_crashed_pct_season']:.0f} %{flag}{other}")
    chosen, rival = versus.iloc[0], versus.iloc[1]
    print(f"  whole year: {chosen['yield_mean_t_ha_yr']:.2f} t/ha/yr (pct10-pct90 "
          f"{chosen['yield_pct10_t_ha_yr']:.2f}-{chosen['yield_pct90_t_ha_yr']:.2f}); best "
          f"single policy or plan '{versus.index[1]}' {rival['yield_mean_t_ha_yr']:.2f} "
          f"t/ha/yr; paired gain in whole-year value "
          f"{rival['value_gain_of_chosen_mean_t_ha_yr']:+.2f} +/- "
          f"{rival['value_gain_of_chosen_se_t_ha_yr']:.2f} t/ha/yr (mean +/- SE)")
    if len(calendar):
        print("\nsteepest falls of K (risk calendar, median member X/K):")
        print(calendar.to_string(index=False, float_format=lambda v: f"{v:,.2f}"))
    _print_written(files, written)
    print(f"\nCrash hazard values: {scenario.crash.basis}. Fit them to the site's own pond log "
          "with `pondsim hazardfit`.")
    print("\n" + CAUTION)
    return 0


def cmd_outlook(args) -> int:
    from pondsim.glossary import CAUTION
    from pondsim.results.crashes import crashes_by_cause, print_crash_causes
    from pondsim.results.files import save, write_csv
    from pondsim.studies.bill import describe as describe_bill
    from pondsim.studies.bill import scenario_bill
    from pondsim.studies.outlook import (
        annual_table,
        headline,
        monthly_bands,
        run_outlook,
        sensitivity,
    )

    scenario = load_checked_scenario(args)
    unc = scenario.uncertainty
    n_years = args.years or unc.weather_years
    n_draws = (args.draws or unc.draws) if unc.parameters else 1
    crashes = scenario.crash is not None and scenario.crash.enabled
    members = args.members or (max(scenario.run.members, OUTLOOK_REPLICATES) if crashes
                               else scenario.run.members)
    seed = scenario.run.seed if args.seed is None else args.seed
    _check_memory(scenario, args.members, n_years * n_draws)
    with _output_set(args, "outlook", "-outlook", seed) as files:
        t0 = time.perf_counter()
        print(f"{scenario.study_name}: outlook, {n_draws} parameter draw(s) per weather "
              f"year x {members} crash replicate(s)", flush=True)
        ds, meta = run_outlook(scenario, n_years=n_years, n_draws=n_draws, members=members,
                               seed=seed, converge=not args.fixed, target_pct=args.target,
                               max_members=args.max_members,
                               report=lambda s: print(s, flush=True))
        annual = annual_table(ds, count=scenario.pond.count, seed=seed,
                              crash_correlation=unc.farm_crash_correlation)
        bands = monthly_bands(ds)
        best = str(annual["P50_t_ha_yr"].idxmax())
        sens = None
        n_sobol = args.sobol_samples or unc.sobol_samples
        if unc.parameters and not args.no_sensitivity:
            print(f"Sobol sensitivity of '{best}': {n_sobol} x {len(unc.parameters) + 2} "
                  "runs ...", flush=True)
            sens = sensitivity(scenario, best, n=n_sobol, seed=seed)
        bill = scenario_bill(ds, scenario, best)
        elapsed = time.perf_counter() - t0
        files.notes["site_check"] = ds.attrs.get("site_check", "not run")
        out = files.dir
        written = [save(ds, out / "results.nc"), write_csv(annual, out / "annual_yield.csv"),
                   write_csv(bands, out / "monthly_bands.csv"),
                   write_csv(bill.monthly, out / "inputs_bill.csv"),
                   write_csv(bill.lines, out / "inputs_bill_lines.csv"),
                   write_csv(crashes_by_cause(ds), out / "crashes_by_cause.csv")]
        if bill.cost_per_t is not None:
            written.append(write_csv(bill.cost_per_t, out / "inputs_cost_per_t.csv"))
        if meta.get("rounds"):
            import pandas as pd

            written.append(write_csv(pd.DataFrame(meta["rounds"]).set_index("round"),
                                     out / "convergence.csv"))
        if sens is not None:
            written.append(write_csv(sens, out / "sensitivity.csv"))
        from pondsim.results.figures import outlook_figures

        written += outlook_figures(ds, bands, sens, out, policy=best,
                                   annual_table=annual)
    r = annual.loc[best]
    print(f"\n{r['weather_years']:.0f} weather years x {n_draws} draws each "
          f"({r['parameter_draws']:.0f} distinct) x {members} crash replicate(s) = "
          f"{r['members']:.0f} members per policy, {elapsed:.1f} s")
    print_site_check(ds.attrs)
    for note in meta.get("notes", [])[-1:]:
        print(f"  note: {note}")
    print()

    def ci(col, unit):
        return annual.apply(lambda x: _ci_text(x, col, unit), axis=1)

    view = annual[["mean_t_ha_yr"]].copy()
    for name in ("P50", "P90"):
        view[f"{name} t/ha/yr (95 % CI)"] = ci(name, "t_ha_yr")
    for name in ("P50", "P90"):
        view[f"{name} farm t (95 % CI)"] = ci(name, "farm_t_yr")
    view["crashes/yr"] = annual["expected_crashes_yr"]
    view = view.rename(columns={"mean_t_ha_yr": "mean t/ha/yr"})
    print(view.to_string(float_format=lambda v: f"{v:,.2f}"))
    print(f"\nP50/P90 are exceedance values: P90 = annual yield exceeded with probability "
          f"0.9. Farm = sum over {scenario.pond.count} pond(s) sharing each weather year "
          f"and draw, each with its own crashes (correlation "
          f"{unc.farm_crash_correlation:g}).")
    status = _convergence_text(ds)
    print(f"lead policy '{best}'" + (f": {status}" if status else ""))
    print("  per hectare: " + "; ".join(headline(annual, best)))
    print(f"  farm of {scenario.pond.count} pond(s): "
          + "; ".join(headline(annual, best, farm=True)))
    print_crash_causes(ds)
    if sens is not None:
        print("\nSobol indices of annual yield (first order, total; 95 % bootstrap interval):")
        for name, s in sens.iterrows():
            print(f"  {name:>24}: {s['first_order']:.2f} ({s['first_order_low']:.2f}\u2013"
                  f"{s['first_order_high']:.2f})  {s['total']:.2f} ({s['total_low']:.2f}"
                  f"\u2013{s['total_high']:.2f})")
        for warning in sens.attrs.get("warnings", []):
            print(f"  WARNING: {warning}")
    print("\n" + describe_bill(bill))
    _print_written(files, written)
    print("\nSynthetic weather years resample the typical year: they spread the weather but "
          "cannot hold years worse than the record.")
    print("\n" + CAUTION)
    return 0


def _ci_text(row, name, unit) -> str:
    """``"17.3 (15.9–18.4)"`` from an annual-table row; an open side shows ``?``."""
    def f(v):
        return f"{v:,.1f}" if v == v else "?"

    return (f"{f(row[f'{name}_{unit}'])} ({f(row[f'{name}_low_{unit}'])}\u2013"
            f"{f(row[f'{name}_high_{unit}'])})")


def _convergence_text(ds) -> str:
    if "converged" not in ds.attrs:
        return ""
    n = ds.sizes["member"]
    half, target = ds.attrs["p90_half_width_pct"], ds.attrs["p90_target_pct"]
    if ds.attrs["converged"]:
        return (f"converged at {n} members per policy (P90 95 % CI half-width "
                f"{half:.1f} % of P50, target {target:g} %)")
    return (f"not converged at {n} members per policy (P90 95 % CI half-width {half:.1f} % "
            f"of P50, target {target:g} %; raise --max-members or uncertainty.max_members)")


def cmd_tune(args) -> int:
    import tomllib

    import numpy as np

    from pondsim.glossary import CAUTION
    from pondsim.results.files import write_csv
    from pondsim.scenario import parse_scenario, relocate_text
    from pondsim.studies.tune import (
        Z_KEEP,
        describe,
        tune_scenario,
        tuned_scenario_text,
        write_text,
    )

    scenario = load_checked_scenario(args)
    n_years = args.years or min(scenario.uncertainty.weather_years, 8)
    seed = scenario.run.seed if args.seed is None else args.seed
    with _output_set(args, "tune", "-tune", seed) as files:
        t0 = time.perf_counter()
        result = tune_scenario(scenario, n_years=n_years, members=args.members, seed=seed,
                               refine=not args.no_refine, progress=scenario.run.progress)
        names = [p.name for p in scenario.policies] + [p.name for p in scenario.plans]
        original = relocate_text(Path(args.scenario).read_text(encoding="utf-8"), scenario,
                                 files.folder)
        text, plan_name = tuned_scenario_text(original, scenario.seasons, result.plan, names)
        tuned_path = write_text(files.dir / f"{Path(args.scenario).stem}_tuned.toml", text)
        # The written file must load as it will read from the output folder.
        parse_scenario(tomllib.loads(tuned_path.read_text(encoding="utf-8")),
                       files.final(tuned_path))
        elapsed = time.perf_counter() - t0
        files.notes["site_check"] = result.meta.get("site_check", "not run")
        written = [tuned_path, write_csv(result.table, files.dir / "tuned_plan.csv"),
                   write_csv(result.check, files.dir / "tuned_check.csv")]
    h, limit = scenario.harvest, scenario.crash.max_season_probability
    print(f"{scenario.study_name}: tuned over {n_years} weather years x {args.members} crash "
          f"replicates, checked on {n_years} fresh weather years and crash draws, "
          f"{elapsed:.1f} s")
    print_site_check(result.meta)
    print()
    limits = [f"P(>= 1 crash) <= {limit:.0%} per season", "no washout (culture held at its "
              f"floor for more than {h.washout_days} d in a row)"]
    if h.dewatering_capacity_m3_per_d is not None:
        limits.append(f"farm dewatering <= {h.dewatering_capacity_m3_per_d:,.0f} m3/d "
                      "(7-day mean)")
    objective = "whole-year biomass" if h.dewatering_cost_kg_per_m3 == 0 else \
        f"whole-year net product (dewatering at {h.dewatering_cost_kg_per_m3:g} kg/m3)"
    print(f"objective: {objective}; limits: " + "; ".join(limits))
    print("on fresh draws a tuned rule replaces the existing one where it breaks the limits "
          f"less, or, with equal standing, where its mean paired gain in whole-year value "
          f"exceeds {Z_KEEP:g} standard errors (common random numbers)\n")
    for season, p in zip(scenario.seasons, result.plan, strict=True):
        r = result.table.loc[season.name]
        why = r["reason"]
        if np.isfinite(r["gain_g_m2"]):
            why += (f"; tuned rule's gain {r['gain_g_m2'] * 0.01:+.2f} +/- "
                    f"{r['gain_se_g_m2'] * 0.01:.2f} t/ha/yr (mean +/- SE)")
        flag = "" if r["recommended_within_limits"] else "  [limits not met on fresh draws]"
        print(f"  {season.name:>10}: {describe(p)}  ({why}){flag}")
    print(f"\non fresh draws, recommended plan vs the best original policy or plan "
          f"('{result.best_original}'); mean, with the pct10-pct90 band holding the middle "
          "80 % of members:")
    print(_check_view(result.check).to_string())
    print(f"\nrun it: pondsim compare {files.final(tuned_path)}  (plan '{plan_name}')")
    _print_written(files, written)
    print("\n" + CAUTION)
    return 0


def _check_view(check):
    """The fresh-draw check for the terminal: one column per quantity, units named."""
    import pandas as pd

    view = pd.DataFrame(index=check.index)
    view["biomass mean [t/ha/yr]"] = check["biomass_mean_t_ha_yr"].map("{:,.2f}".format)
    view["pct10-pct90 [t/ha/yr]"] = [f"{a:,.2f}-{b:,.2f}" for a, b in zip(
        check["biomass_pct10_t_ha_yr"], check["biomass_pct90_t_ha_yr"], strict=True)]
    view["dewatering [m3/farm/yr]"] = check["dewatering_mean_m3_farm_yr"].map("{:,.0f}".format)
    if "net_product_mean_t_ha_yr" in check:
        view["net product [t/ha/yr]"] = check["net_product_mean_t_ha_yr"].map(
            "{:,.2f}".format)
    view[f"value gain vs '{check.index[-1]}' [t/ha/yr, mean +/- SE]"] = [
        f"{g:+.2f} +/- {e:.2f}" for g, e in zip(check["value_gain_mean_t_ha_yr"],
                                                check["value_gain_se_t_ha_yr"], strict=True)]
    view["washed out [% members]"] = (100 * check["p_washout_year"]).round().astype(int)
    return view


if __name__ == "__main__":  # pragma: no cover
    raise SystemExit(main())
