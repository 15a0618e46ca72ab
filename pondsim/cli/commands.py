"""The forcing and single-year commands: weather, run, compare, and the entry points
of fit, hazardfit, screen, report and keys."""

from __future__ import annotations

import time
from pathlib import Path

from pondsim.cli.common import (
    _check_memory,
    _output_set,
    _print_written,
    load_checked_scenario,
    print_site_check,
)
from pondsim.errors import InputError


def cmd_fit(args) -> int:
    from pondsim.studies.calibrate import cmd_fit as run_fit

    return run_fit(args)  # an output set: the folder is checked before the fit


def cmd_hazardfit(args) -> int:
    from pondsim.studies.crash_fit_command import cmd_hazardfit as run_hazardfit

    return run_hazardfit(args)


def cmd_screen(args) -> int:
    from pondsim.studies.screen import cmd_screen as run_screen

    return run_screen(args)


def cmd_report(args) -> int:
    from pondsim.report.build import cmd_report as run_report

    return run_report(args)  # an output set: the folder is checked before the study


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

