"""Outputs of the pilot fit: the fitted scenario copy, figures, and the invented demo
pilot record."""

from __future__ import annotations

import datetime as dt
import math
import os
from pathlib import Path

import numpy as np
import pandas as pd

from pondsim.operations.engine import HOURS_PER_DAY, Operation, integrate
from pondsim.operations.harvest import RULE_CODES, HarvestRules
from pondsim.studies.fit_curve import CurveFit, logistic_curve
from pondsim.studies.fit_growth import PARAMETERS, PilotFit, pilot_hourly
from pondsim.studies.scenario_copy import edit_toml

#: Seed of the demo pilot file ``scenarios/kestrel_flats_pilot.csv``.
DEMO_SEED = 20250320

#: Largest relative standard error (SE / estimate) a fitted parameter may have for its
#: SE to become the copy's ``[uncertainty]`` spread [1]. Beyond it the SE is treated like
#: an infinite one (the parameter's entry is removed, with a warning in the copy).
#: Assumption: a lognormal sigma of 10 spans a factor of e^40 in its central 95 %, i.e.
#: the pilot says nothing about the parameter (a badly dated record once gave 7e36).
MAX_FIT_RELATIVE_SE = 10.0
#: Scale of t_opt_c for that test [degC] (assumption): an SE above 10 x 10 degC.
T_OPT_SCALE_C = 10.0


def write_fitted_scenario(fit: PilotFit, scenario_path, out_path, *, write_to=None) -> Path:
    """Write a copy of the scenario file with the fitted strain parameters.

    *out_path* is where the copy will live (relative paths are made valid from there);
    *write_to*, when given, is where it is written now (an output set's staging folder).

    The original file is never changed; the copy is written atomically. Relative paths
    (the weather file) are rewritten to stay valid from the copy's folder. Under the
    logistic form the fitted K fills the monthly capacity table (months of the pilot;
    other months keep a table the scenario already had, else take the same K).
    Fitted parameters that ``[uncertainty]`` can carry get the fit's own uncertainty
    there (replacing what the scenario had): lognormal with sigma = SE/estimate for
    positive parameters, normal with sd = SE for t_opt_c; a parameter without a finite
    SE, or with one beyond :data:`MAX_FIT_RELATIVE_SE` times its estimate, loses its
    entry (said in the copy's header). Draws from these are independent, so the fit's correlations
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
    unidentified = []
    for name, value in est.items():
        if name not in UNCERTAIN_PARAMETERS:
            continue
        se = float(fit.table.at[name, "se"])
        scale = abs(value) if name != "t_opt_c" else T_OPT_SCALE_C
        if not (math.isfinite(se) and se > 0):
            spread[name] = None
        elif not se <= MAX_FIT_RELATIVE_SE * scale:
            spread[name] = None
            unidentified.append(f"{name} is not identified by the pilot record (SE "
                                f"{se:.3g}, more than {MAX_FIT_RELATIVE_SE:g} x "
                                f"{scale:.3g}): its [uncertainty] entry is removed")
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
    header += "".join(f"# WARNING: {w}\n" for w in [*fit.warnings, *unidentified])
    header += ("# [uncertainty] entries of fitted parameters hold the fit's standard errors "
               "(independent draws;\n# the fit's correlations are in fit_report.txt).\n"
               if spread else "")
    new_text = header + edit_toml(text, updates)
    # The copy must load (from its own folder) and carry the fitted values: check first.
    check = parse_scenario(tomllib.loads(new_text), out_path)
    for n, v in strain.items():
        if isinstance(v, float) and not math.isclose(getattr(check.strain, n), v,
                                                     rel_tol=1e-5):
            raise RuntimeError(f"fitted scenario {out_path} lost {n}")  # pragma: no cover

    def write(tmp):
        Path(tmp).write_text(new_text, encoding="utf-8")

    return atomic_write(out_path if write_to is None else Path(write_to), write)


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


def plot_curve(t, n, fit: CurveFit, path, time_unit, density_unit) -> Path:
    from pondsim.results import figstyle as fs

    fig, (ax, axr) = fs.new_figure("Logistic fit of the observed density", "", nrows=2,
                                   size=(8.5, 6.2), sharex=True, height_ratios=[3, 1.4])
    r, k, n0 = fit.table["estimate"].to_numpy()[:3]
    tt = np.linspace(t.min(), t.max(), 300)
    ax.plot(tt, logistic_curve(tt - t.min(), r, k, n0), "-", color=fs.OKABE_ITO["blue"],
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


