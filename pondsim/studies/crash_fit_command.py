"""The ``pondsim hazardfit`` command: fit the crash hazard to a site's pond log, report
the estimates with their profile-likelihood intervals and the test of the weather terms,
and write a copy of the scenario whose [crash] section carries the fitted values and
where they came from. Also makes the invented demo log of Kestrel Flats."""

from __future__ import annotations

import argparse
import dataclasses
import datetime as dt
import math
import sys
from pathlib import Path

import numpy as np
import pandas as pd

from pondsim.errors import InputError
from pondsim.studies.crash_fit import PARAMS, HazardFit, PeriodStress, fit_hazard, simulate_periods
from pondsim.studies.crash_log import PondLog, log_from_daily, read_pond_log, write_pond_log
from pondsim.studies.scenario_copy import edit_toml

#: The invented crash behaviour of the demo log (the values a fit of it should recover).
DEMO_TRUTH = {"background_per_d": 0.003, "background_q10": 2.5,
              "starvation_hazard_per_d": 0.05, "heat_hazard_per_d_h": 0.02,
              "cold_hazard_per_d_k": 0.02}
DEMO_SEED = 20250614
DEMO_POLICY = "threshold 700/400"


# --------------------------------------------------------------------------------------
# Report and scenario copy
# --------------------------------------------------------------------------------------
def hazard_report(fit: HazardFit, log: PondLog, data: PeriodStress, *, log_name: str,
                  t_ref_c: float) -> str:
    """Plain-text report of a hazard fit."""
    lines = [f"crash hazard fitted to {log_name}: {fit.n_periods} pond-periods of "
             f"{log.periods['pond'].nunique()} pond(s), {fit.n_crashes} crashes in "
             f"{fit.pond_days} pond-days at risk "
             f"({log.periods['start'].min():%Y-%m-%d} to {log.periods['end'].max():%Y-%m-%d})",
             "maximum likelihood, discrete-time survival (crash-free days and crash days, "
             "periods without a crash censored at their end); 95 % profile-likelihood "
             "intervals", ""]
    lines.append(f"{'parameter':24s} {'estimate':>11s} {'95 % interval':>26s}  unit")
    for name, r in fit.table.iterrows():
        interval = (f"[{r['ci95_low']:11.4g}, {r['ci95_high']:11.4g}]"
                    if np.isfinite(r["ci95_low"]) else f"{'(not estimated)':>26s}")
        lines.append(f"{name:24s} {r['estimate']:11.4g} {interval}  {r['unit']}"
                     + ("" if r["status"] == "fitted" else f"  [{r['status']}]"))
    lines.append(f"(background at {t_ref_c:g} degC water; without weather terms the "
                 f"background alone would be {fit.background_only_per_d:.4g} d-1 = crashes "
                 f"/ pond-days)")
    lines += ["", f"weather terms against a background-only hazard: likelihood ratio "
              f"{fit.lr_statistic:.2f}, p = {fit.lr_p_value:.3g} ({fit.lr_df})"]
    if np.isfinite(fit.lr_p_value):
        lines.append("  -> the weather terms explain the crashes better than chance would"
                     if fit.lr_p_value < 0.05 else
                     "  -> this log gives no evidence that weather drives its crashes: the "
                     "fitted weather terms may be noise; the background alone may be used")
    lines.append(f"log-likelihood {fit.log_likelihood:.2f} (background only "
                 f"{fit.log_likelihood_background:.2f})")
    obs = _expected_vs_observed(fit, data)
    lines.append(f"expected crashes under the fit {obs[0]:.1f}, observed {obs[1]}")
    if len(log.samples):
        lines.append(_sample_check(log, data))
    for note in fit.notes:
        lines.append(f"note: {note}")
    for name, r in fit.table.iterrows():
        if "reaches" in r["status"]:
            lines.append(f"WARNING: {name}: the interval runs to the allowed range; the log "
                         "cannot bound it there")
    if fit.n_crashes < 20:
        lines.append(f"WARNING: {fit.n_crashes} crashes are few: the intervals are wide and "
                     "the weather terms weakly identified")
    return "\n".join(lines)


def _expected_vs_observed(fit: HazardFit, data: PeriodStress):
    z = data.covariates()
    th = fit.theta
    h = np.exp(th[0] + th[1] * z[0]) + th[2] * z[1] + th[3] * z[2] + th[4] * z[3]
    # Expected crashes of the logged exposure: sum of daily crash probabilities.
    return float((-np.expm1(-h))[data.at_risk].sum()), int(data.crashed.sum())


def _sample_check(log: PondLog, data: PeriodStress) -> str:
    periods = log.periods
    day = (pd.DatetimeIndex(log.samples["date"])
           - pd.DatetimeIndex(periods["start"].to_numpy()[log.samples["period"]])).days
    model = data.density_g_m3[log.samples["period"].to_numpy(), np.asarray(day)]
    ok = model > 0
    r = np.log(log.samples["density_g_m3"].to_numpy()[ok] / model[ok])
    rmse = float(np.sqrt(np.mean(r ** 2))) if r.size else float("nan")
    text = (f"density samples: {int(ok.sum())} against the engine's end-of-day density, "
            f"log ratio mean {np.mean(r):+.2f}, RMSE {rmse:.2f}")
    if rmse > 0.5:
        text += (" -- WARNING: the simulated cultures differ from the logged ones; calibrate "
                 "growth first (`pondsim fit`) or the starvation index will be off")
    return text


def hazard_scenario_text(fit: HazardFit, scenario, scenario_path, out_path, *,
                         log_name: str) -> str:
    """Text of a copy of the scenario file (to live at *out_path*) with the fitted [crash]
    values and their provenance in ``crash.basis`` and a comment header; checked to load
    and to carry the fitted values."""
    import tomllib

    from pondsim.scenario import parse_scenario, relocate_text

    out_path = Path(out_path)
    text = relocate_text(Path(scenario_path).read_text(encoding="utf-8"), scenario,
                         out_path.parent)
    stamp = dt.datetime.now(dt.UTC).strftime("%Y-%m-%d")
    values = {k: float(f"{v:.4g}") for k, v in fit.estimates().items()}
    fitted = [k for k, r in fit.table.iterrows() if r["status"].startswith("fitted")]
    basis = (f"fitted by pondsim hazardfit to {log_name} ({fit.n_periods} periods, "
             f"{fit.n_crashes} crashes, {fit.pond_days} pond-days; {stamp}): "
             + ", ".join(fitted) + "; weather terms vs background only: p = "
             f"{fit.lr_p_value:.2g}")
    updates = {"crash": {**values, "basis": basis}}
    header = [f"# Copy of {Path(scenario_path).name} with [crash] fitted by `pondsim "
              f"hazardfit` to {log_name} ({stamp}).",
              "# 95 % profile-likelihood intervals:"]
    for k, r in fit.table.iterrows():
        if np.isfinite(r["ci95_low"]):
            header.append(f"#   {k} = {r['estimate']:.4g} [{r['ci95_low']:.4g}, "
                          f"{r['ci95_high']:.4g}] {r['unit']}")
        else:
            header.append(f"#   {k} = {r['estimate']:.4g} {r['unit']} (not estimated: "
                          "the scenario's value)")
    header.append("# The [crash] values below replace the scenario's; crash.basis says where "
                  "they came from.")
    new_text = "\n".join(header) + "\n" + edit_toml(text, updates, keep_comments=False)
    check = parse_scenario(tomllib.loads(new_text), out_path)
    for k, v in values.items():
        if not math.isclose(getattr(check.crash, k), v, rel_tol=1e-9):
            raise RuntimeError(f"fitted scenario lost crash.{k}")  # pragma: no cover
    return new_text


def period_table(log: PondLog, data: PeriodStress, fit: HazardFit, t_ref_c: float
                 ) -> pd.DataFrame:
    """Per logged period: dates, outcome, pond-days, expected crashes under the fit and
    the mean stress indices over its days at risk."""
    z = data.covariates()
    th = fit.theta
    h = np.exp(th[0] + th[1] * z[0]) + th[2] * z[1] + th[3] * z[2] + th[4] * z[3]
    risk = data.at_risk
    n = data.n_days
    out = log.periods[["pond", "start", "end", "crashed", "days"]].copy()
    out["start"] = pd.to_datetime(out["start"]).dt.strftime("%Y-%m-%d")
    out["end"] = pd.to_datetime(out["end"]).dt.strftime("%Y-%m-%d")
    out = out.rename(columns={"days": "pond_days"})
    out["expected_crashes"] = np.where(risk, -np.expm1(-h), 0.0).sum(axis=1)
    out["mean_water_temperature_c"] = np.where(risk, z[0], 0).sum(axis=1) / n + t_ref_c
    out["mean_net_loss_per_d"] = np.where(risk, z[1], 0).sum(axis=1) / n * 0.1
    out["heat_hours"] = np.where(risk, z[2], 0).sum(axis=1)
    out["cold_shock_k_days"] = np.where(risk, z[3], 0).sum(axis=1)
    return out


# --------------------------------------------------------------------------------------
# Demo log
# --------------------------------------------------------------------------------------
def make_demo_log(scenario, *, n_ponds: int = 24, truth: dict | None = None,
                  seed: int = DEMO_SEED, policy: str = DEMO_POLICY):
    """An invented pond log: the scenario simulated with crash values *truth*, one member
    per pond (ponds inoculated two days apart from 1 January; restarts as the engine
    makes them), harvests of *policy* logged, fortnightly density samples with 10 %
    noise.
    Returns ``(periods, harvests, samples)`` for :func:`write_pond_log`."""
    from pondsim.operations.engine import HOURS_PER_DAY, integrate
    from pondsim.operations.harvest import build_rules
    from pondsim.operations.simulate import (
        build_drivers,
        crash_model_of,
        hourly_light_and_water,
        load_forcing,
        operation_of,
    )

    crash = dataclasses.replace(scenario.crash, enabled=True, **(truth or DEMO_TRUTH))
    scenario = scenario.replace(crash=crash)
    forcing, _ = load_forcing(scenario)
    hourly = hourly_light_and_water(forcing, scenario)
    drivers = build_drivers(hourly, scenario)
    dates = pd.DatetimeIndex(hourly.index[::HOURS_PER_DAY]).tz_localize(None)
    chosen = [p for p in scenario.policies if p.name == policy]
    if not chosen:
        raise InputError(f"unknown policy {policy!r}", field="policy")
    rules, _ = build_rules(chosen, (), scenario.seasons, dates, repeat=n_ponds)
    op = dataclasses.replace(operation_of(scenario), start_day=np.arange(n_ponds) * 2)
    daily = integrate(drivers, rules, op, crash=crash_model_of(scenario), seed=seed)
    return log_from_daily(daily, dates, [f"KF-{i + 1:02d}" for i in range(n_ponds)],
                          sample_every_days=14, sample_cv=0.1, seed=seed)


def write_demo_log(path, scenario_path="scenarios/kestrel_flats.toml", **kwargs) -> Path:
    """Write :func:`make_demo_log` of a scenario as a pond-log CSV."""
    from pondsim.scenario import load_scenario

    scenario = load_scenario(scenario_path)
    periods, harvests, samples = make_demo_log(scenario, **kwargs)
    truth = kwargs.get("truth") or DEMO_TRUTH
    header = (f"INVENTED pond log of Kestrel Flats: made by pondsim.studies.crash_fit_command."
              f"make_demo_log from {Path(scenario_path).name} (seed "
              f"{kwargs.get('seed', DEMO_SEED)}) with crash values "
              + ", ".join(f"{k} = {v:g}" for k, v in truth.items())
              + "; not a measurement. See scenarios/README_pond_log.md")
    return write_pond_log(path, periods, harvests, samples, header=header)


# --------------------------------------------------------------------------------------
# Command line
# --------------------------------------------------------------------------------------
def add_hazardfit_parser(subparsers) -> argparse.ArgumentParser:
    """Add the ``hazardfit`` subcommand."""
    keys = [p[3] for p in PARAMS]
    h = subparsers.add_parser(
        "hazardfit", help="fit the crash hazard to a site's pond log",
        description="Fit the crash hazard of named causes (background with its "
        "temperature rise, starvation, heat, cold shock) to a pond log by maximum "
        "likelihood, simulating every logged pond-period on the site's weather through the "
        "same engine as `pondsim run`. Writes hazard_parameters.csv, hazard_periods.csv, "
        "hazard_report.txt and a copy of the scenario with the fitted [crash] values.",
        epilog="Log columns: pond, date, event (inoculated, crash, end, harvest, sample), "
        "value. See the README section 'Fitting crash risk to a pond log'.")
    h.add_argument("log", help="pond log CSV")
    h.add_argument("--scenario", required=True, help="scenario .toml (site, weather, pond, "
                   "strain, operations)")
    h.add_argument("--out", default=None, metavar="DIR",
                   help="output folder (default: out/<log name>_hazard)")
    h.add_argument("--fit", default=None, metavar="NAMES",
                   help="crash keys to estimate, comma-separated (default: all; "
                   "background_per_d always): " + ", ".join(keys))
    h.add_argument("--policy", default=None,
                   help="harvest policy of the periods when the log has no harvest rows "
                   "(default: the scenario's first policy)")
    h.add_argument("--map-weather-year", action="store_true",
                   help="accept a weather file of one real year of another calendar year "
                   "as the weather of the log's dates (noted in the report)")
    return h


def cmd_hazardfit(args) -> int:
    """Run ``pondsim hazardfit`` (see :func:`add_hazardfit_parser`); 0 on success."""
    from pondsim.operations.simulate import crash_model_of
    from pondsim.results.files import (
        OutputSet,
        atomic_write,
        check_output_folder,
        clean_output_folder,
        write_csv,
    )
    from pondsim.scenario import load_scenario

    log_path = Path(args.log)
    out = Path(args.out) if args.out else Path("out") / f"{log_path.stem}_hazard"
    clean_output_folder(check_output_folder(out))  # before any computation
    scenario = load_scenario(args.scenario)
    log = read_pond_log(log_path)
    free = None if not args.fit else [s.strip() for s in args.fit.split(",") if s.strip()]
    data = simulate_periods(log, scenario, policy=args.policy,
                            map_year=bool(args.map_weather_year))
    base = crash_model_of(scenario.replace(crash=dataclasses.replace(scenario.crash,
                                                                     enabled=True)))
    fit = fit_hazard(data, base, free=free)
    text = hazard_report(fit, log, data, log_name=log_path.name,
                         t_ref_c=scenario.crash.background_t_ref_c)
    # Everything is made and checked before the first file is written; the set of files
    # lands whole (OutputSet) or not at all.
    copy_name = f"{Path(args.scenario).stem}_hazard.toml"
    copy_text = hazard_scenario_text(fit, scenario, args.scenario, out / copy_name,
                                     log_name=log_path.name)
    periods = period_table(log, data, fit, scenario.crash.background_t_ref_c)
    print(text)
    with OutputSet(out, command="hazardfit", scenario=args.scenario,
                   notes={"pond_log": str(log_path.resolve())}) as files:
        written = [
            write_csv(fit.table, files.dir / "hazard_parameters.csv"),
            write_csv(periods, files.dir / "hazard_periods.csv", index=False),
            atomic_write(files.dir / "hazard_report.txt",
                         lambda tmp: Path(tmp).write_text(text + "\n", encoding="utf-8")),
            atomic_write(files.dir / copy_name,
                         lambda tmp: Path(tmp).write_text(copy_text, encoding="utf-8")),
        ]
    print("\nwritten: " + ", ".join(str(files.final(p)) for p in written))
    print("\nA fitted hazard describes this log's ponds, weather and operations; it is an "
          "estimate, not a guarantee. Results are estimates, not guarantees; defer to local "
          "codes, permits and licensed engineers.")
    return 0


if __name__ == "__main__":  # pragma: no cover - regenerates the demo pond log
    target = sys.argv[1] if len(sys.argv) > 1 else "scenarios/kestrel_flats_pond_log.csv"
    print(f"written: {write_demo_log(target)}")
