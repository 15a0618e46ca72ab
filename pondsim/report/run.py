"""Running the studies of a report: the outlook ensemble, the season comparison, the
crash-risk calendar, crashes by cause, the pond water and its stress hours, the
dewatering check, the priced inputs bill and the Sobol sensitivity; every table, the
netCDF results, the figures and, last, the manifest are written into the folder given
(the staging folder of the report's output set)."""

from __future__ import annotations

import datetime as dt
import json
import math
from pathlib import Path

from pondsim.report.assemble import (
    _single_k_view,
    assumption_table,
    crash_months,
    dewatering_check,
    monthly_drivers,
)
from pondsim.report.manifest import (
    MANIFEST,
    MANIFEST_FORMAT,
    PRICED,
    _expected_files,
)
from pondsim.results.files import atomic_write, file_sha256

# ---------------------------------------------------------------------------------------
# Running the study
# ---------------------------------------------------------------------------------------

def run_study(scenario, out_dir, fingerprint: dict) -> dict:
    """Run the study, write every table, the netCDF results and the figures into
    *out_dir*, and return the manifest (written last)."""
    from pondsim.operations.crash import CrashModel
    from pondsim.operations.simulate import crash_model_of
    from pondsim.results.crashes import (
        crash_basis_line,
        crashes_by_cause,
        crashes_per_year_by_cause,
        weather_basis,
    )
    from pondsim.results.figstyle import context_of, source_of
    from pondsim.results.figures import compare_figures, drivers_figure, outlook_figures
    from pondsim.results.files import save, write_csv
    from pondsim.results.tables import lead_policy, monthly_pond_water, policy_summary
    from pondsim.studies.bill import scenario_bill
    from pondsim.studies.compare import best_by_season, risk_calendar, season_table
    from pondsim.studies.outlook import annual_table, monthly_bands, run_outlook, sensitivity

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    opt = fingerprint["options"]
    ds, meta = run_outlook(scenario, n_years=opt["weather_years"],
                           n_draws=opt["parameter_draws"], members=opt["crash_replicates"],
                           seed=opt["seed"], progress=scenario.run.progress)
    annual = annual_table(ds, scenario.pond.farm_area_m2)
    lead = lead_policy(annual, ds)
    bands = monthly_bands(ds)
    summary = policy_summary(ds)
    crash = crash_model_of(scenario) or CrashModel()  # calendar only when switched off
    view = _single_k_view(ds)
    seasons = season_table(ds)
    best = best_by_season(seasons, scenario.crash.max_season_probability)
    calendar = risk_calendar(view, crash)
    drivers = monthly_drivers(ds)
    sens = None
    if opt["sensitivity"]:
        sens = sensitivity(scenario, lead, n=opt["sobol_samples"], seed=opt["seed"])
    bill = scenario_bill(ds, scenario, lead)  # the ensemble as is: member by member
    assumptions = assumption_table(scenario, options=opt, mixing=bill.mixing,
                                   photons_per_joule=ds.attrs["photons_per_joule_umol"])

    save(ds, out / "results.nc")
    tables = {"annual_yield.csv": annual, "summary.csv": summary,
              "monthly_bands.csv": bands, "monthly_drivers.csv": drivers,
              "comparison.csv": seasons, "best_by_season.csv": best,
              "crash_months.csv": crash_months(ds),
              "crashes_by_cause.csv": crashes_by_cause(ds),
              "crashes_per_year.csv": crashes_per_year_by_cause(ds),
              "pond_water_monthly.csv": monthly_pond_water(ds),
              "dewatering_check.csv": dewatering_check(ds, scenario),
              "inputs_bill.csv": bill.monthly, "inputs_bill_lines.csv": bill.lines}
    if bill.cost_per_t is not None:
        tables["inputs_cost_per_t.csv"] = bill.cost_per_t
    for name, table in tables.items():
        write_csv(table, out / name)
    write_csv(calendar, out / "risk_calendar.csv", index=False)
    write_csv(assumptions, out / "assumptions.csv", index=False)
    if sens is not None:
        write_csv(sens, out / "sensitivity.csv")
    outlook_figures(ds, bands, sens, out, policy=lead)
    compare_figures(view, seasons, crash, out)
    drivers_figure(drivers, scenario.strain, out / "monthly_drivers.png",
                   context=context_of(ds), source=source_of(ds))

    names = _expected_files(opt) + [n for n in PRICED if (out / n).is_file()]
    manifest = {
        "format": MANIFEST_FORMAT, **fingerprint,
        "computed": dt.datetime.now().astimezone().isoformat(timespec="seconds"),
        "lead_policy": lead,
        "site": {"name": str(ds.attrs.get("site", "")),
                 "latitude": _finite(ds.attrs.get("latitude")),
                 "longitude": _finite(ds.attrs.get("longitude"))},
        "ensemble": {"weather_years": int(ds.attrs.get("weather_years", 1)),
                     "parameter_draws": int(ds.attrs.get("parameter_draws", 1)),
                     "replicates": int(ds.attrs.get("replicates", 1)),
                     "members": int(ds.sizes["member"]), "days": int(ds.sizes["day"]),
                     "converged": (None if ds.attrs.get("converged") is None
                                   else bool(int(ds.attrs["converged"])))},
        "weather_notes": [str(n) for n in meta.get("notes", [])],
        "site_check": str(ds.attrs.get("site_check", "")) or None,
        "weather_basis": weather_basis(ds),
        "crash_basis": crash_basis_line(ds),
        "bill": {"policy": lead, "currency": bill.currency,
                 "notes": [str(n) for n in bill.notes]},
        "files": {name: file_sha256(out / name) for name in names},
    }
    text = json.dumps(manifest, indent=2, sort_keys=True) + "\n"
    atomic_write(out / MANIFEST, lambda tmp: Path(tmp).write_text(text, encoding="utf-8"))
    return manifest


def _finite(v):
    try:
        v = float(v)
    except (TypeError, ValueError):
        return None
    return v if math.isfinite(v) else None
