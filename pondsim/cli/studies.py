"""The ensemble study commands: outlook and tune."""

from __future__ import annotations

import tempfile
import time
from pathlib import Path

from pondsim.cli.common import (
    OUTLOOK_REPLICATES,
    _check_memory,
    _output_set,
    _print_written,
    load_checked_scenario,
    print_site_check,
)
from pondsim.studies.scheduling import describe_place, open_runner


def cmd_outlook(args) -> int:
    from pondsim.glossary import CAUTION
    from pondsim.results.crashes import crashes_by_cause, print_crash_causes
    from pondsim.results.files import save, write_csv
    from pondsim.results.tables import lead_policy
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
    _check_memory(scenario, members, min(n_years, _block_years(scenario, n_draws, members))
                  * n_draws)
    with _output_set(args, "outlook", "-outlook", seed) as files, \
            tempfile.TemporaryDirectory(prefix="pondsim-outlook-blocks-") as spill, \
            open_runner(args.workers or 1, args.scheduler) as runner:
        t0 = time.perf_counter()
        print(f"{scenario.study_name}: outlook, {n_draws} parameter draw(s) per weather "
              f"year x {members} crash replicate(s)", flush=True)
        ds, meta = run_outlook(scenario, n_years=n_years, n_draws=n_draws, members=members,
                               seed=seed, converge=not args.fixed, target_pct=args.target,
                               max_members=args.max_members,
                               report=lambda s: print(s, flush=True), runner=runner,
                               spill_dir=Path(spill))
        annual = annual_table(ds, count=scenario.pond.count, seed=seed,
                              crash_correlation=unc.farm_crash_correlation)
        bands = monthly_bands(ds)
        best = lead_policy(annual, ds)
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
        ds.close()
    r = annual.loc[best]
    print(f"\n{r['weather_years']:.0f} weather years x {n_draws} draws each "
          f"({r['parameter_draws']:.0f} distinct) x {members} crash replicate(s) = "
          f"{r['members']:.0f} members per policy, {elapsed:.1f} s "
          f"({describe_place(args.workers or 1, args.scheduler)})")
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
    top = str(annual["P50_t_ha_yr"].idxmax())
    if top != best:
        print(f"  ('{top}' has a higher P50 but washes the culture out at its viable floor "
              "in some members; the lead is the highest P50 of the rules that never do)")
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


def _block_years(scenario, n_draws: int, members: int) -> int:
    from pondsim.studies.outlook_blocks import years_per_block

    return years_per_block(n_draws, members, len(scenario.policies) + len(scenario.plans))


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
    with _output_set(args, "tune", "-tune", seed) as files, \
            open_runner(args.workers or 1, args.scheduler) as runner:
        t0 = time.perf_counter()
        result = tune_scenario(scenario, n_years=n_years, members=args.members, seed=seed,
                               refine=not args.no_refine, progress=scenario.run.progress,
                               runner=runner)
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
          f"{elapsed:.1f} s ({describe_place(args.workers or 1, args.scheduler)})")
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

