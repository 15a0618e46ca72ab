"""The ``pondsim fit`` command: calibrate growth parameters from pilot observations."""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np
import pandas as pd

from pondsim.errors import InputError
from pondsim.results.files import OutputSet, atomic_write, write_csv
from pondsim.studies.fit_curve import fit_logistic_curve
from pondsim.studies.fit_growth import PARAMETERS, fit_pilot
from pondsim.studies.fit_observations import (
    FIELDS,
    parse_column_map,
    parse_observations,
    read_csv_checked,
    read_observations,
)
from pondsim.studies.fit_outputs import (
    plot_curve,
    plot_fit,
    write_fitted_scenario,
)


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
    f.add_argument("--map-weather-year", action="store_true",
                   help="accept a weather file of one real year of another calendar year "
                   "as the pilot's weather (noted in the report)")
    f.add_argument("--sample-hour", type=int, default=None,
                   help="local hour of the samples (default: from the times)")
    f.add_argument("--time-unit", choices=("h", "d"), default="h",
                   help="unit of numeric times with --model curve (default h)")
    f.add_argument("--no-plots", action="store_true", help="skip the figure")
    return f


def _cmd_curve(args, out: Path) -> int:
    path = Path(args.observations)
    frame = read_csv_checked(path)
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
    with OutputSet(out, command="fit") as files:
        fit = fit_logistic_curve(t, obs.density_g_m3, weights=obs.weight)
        text = fit.report(time_unit=unit, density_unit="g m-3")
        print(text)
        stage = files.dir
        written = [write_csv(fit.table, stage / "fit_parameters.csv"),
                   atomic_write(stage / "fit_report.txt", lambda tmp: Path(tmp).write_text(
                       text + "\n", encoding="utf-8"))]
        if not getattr(args, "no_plots", False):
            written.append(plot_curve(t, obs.density_g_m3, fit, stage / "fit.png", unit,
                                      "g m-3"))
    print("\n" + files.written_line(written))
    return 0


def cmd_fit(args) -> int:
    """Run ``pondsim fit`` from an argparse namespace (see :func:`add_fit_parser`).

    Expects attributes ``observations``, ``scenario``, ``model``, ``out`` and optionally
    ``columns``, ``density_unit``, ``od_factor``, ``par_unit``, ``pond_volume``, ``fit``,
    ``sample_hour``, ``time_unit``, ``no_plots``. Returns the exit status (0); bad input
    raises :class:`InputError`.
    """
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
    with OutputSet(out, command="fit", seed=None, scenario=args.scenario) as files:
        fit = fit_pilot(obs, scenario, model=model, free=free,
                        sample_hour=getattr(args, "sample_hour", None),
                        map_weather_year=bool(getattr(args, "map_weather_year", False)))
        text = fit.report()
        print(text)
        stage = files.dir
        series = pd.DataFrame({"time": fit.model.obs.time, "observed_g_m3": obs.density_g_m3,
                               "fitted_g_m3": fit.fitted, "residual_ln": fit.residuals})
        name = f"{Path(args.scenario).stem}_fitted.toml"
        written = [
            write_csv(fit.table, stage / "fit_parameters.csv"),
            write_csv(series, stage / "fit_series.csv", index=False),
            atomic_write(stage / "fit_report.txt",
                         lambda tmp: Path(tmp).write_text(text + "\n", encoding="utf-8")),
            write_fitted_scenario(fit, args.scenario, out / name, write_to=stage / name),
        ]
        if not getattr(args, "no_plots", False):
            from pondsim.results.figstyle import context_line

            written.append(plot_fit(fit, stage / "fit.png", context=context_line(
                scenario.site.name, scenario.study_name, scenario.strain.name)))
    print("\n" + files.written_line(written))
    return 0

