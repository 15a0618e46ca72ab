"""Study report: one self-contained HTML page that a business case can attach.

``pondsim report SCENARIO`` runs the outlook ensemble (weather years × parameter draws ×
crash replicates), compares the policies and plans season by season over the same
ensemble, builds the crash-risk calendar and the inputs bill, computes Sobol indices when
the scenario declares uncertain parameters, writes every table as CSV next to the netCDF
results and the figures, and then writes ``report.html``.

One source of truth: the page is built from the CSV files read back from the output
folder, never from values held in memory, so every number in the page is a number in a
CSV. Figures are embedded as PNG data URIs; the page needs no network and no JavaScript
and prints to PDF with a page break before each major section.

Reuse: the folder's ``report_inputs.json`` records a hash of the scenario file's bytes,
the weather file's bytes, pondsim's version and the run options, and the SHA-256 of every
file written. When all of them match, the results are reused and only the page is
written again (identical apart from its run-date line).
"""

from __future__ import annotations

import base64
import datetime as dt
import hashlib
import html
import json
import math
import tomllib
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from pondsim.errors import InputError
from pondsim.glossary import CAUTION
from pondsim.results.files import atomic_write

MANIFEST = "report_inputs.json"
REPORT = "report.html"
MANIFEST_FORMAT = 1

#: The page's sections in order: (id, heading). Each is one <section> with one <h2>.
SECTIONS = (
    ("question", "The question and the site"),
    ("headline", "Headline numbers"),
    ("monthly", "The monthly picture"),
    ("harvest", "Harvest plan by season"),
    ("crash", "Crash-risk calendar"),
    ("inputs", "Inputs bill"),
    ("sensitivity", "Sensitivity: which assumptions move the answer"),
    ("assumptions", "Assumptions and parameters"),
    ("methods", "Method notes"),
    ("limitations", "Limitations and cautions"),
)

#: Tables written by a report run (file name -> what it holds).
TABLES = {
    "annual_yield.csv": "P50/P75/P90 annual yield, farm biomass, productivity, crashes",
    "summary.csv": "member means per policy: yield, harvests, density, efficiency",
    "monthly_bands.csv": "P10/P50/P90 monthly productivity per policy",
    "monthly_drivers.csv": "monthly PAR, water temperature, K and evaporation",
    "comparison.csv": "per season and policy: yield, harvests, crash risk",
    "best_by_season.csv": "best policy per season under the risk limit",
    "crash_months.csv": "expected crashes and crash probability per month and policy",
    "risk_calendar.csv": "days of the steepest fall of K and the overshoot then",
    "inputs_bill.csv": "monthly and annual inputs of the farm for the lead policy",
    "assumptions.csv": "every parameter with its unit, value and source",
}
FIGURES = ("exceedance.png", "monthly_bands.png", "monthly_drivers.png",
           "trajectories.png", "seasonal_yield.png", "risk_calendar.png")
OPTIONAL = ("sensitivity.csv", "sensitivity.png")

#: CSS of the page: system fonts, black on white, borders rather than fills, a page
#: break before each major section in print.
CSS = """
:root { color-scheme: light; }
html { background: #fff; }
body { font-family: system-ui, -apple-system, "Segoe UI", Roboto, "Noto Sans",
  "Liberation Sans", "Helvetica Neue", Arial, sans-serif; font-size: 15px;
  line-height: 1.45; color: #111; background: #fff; max-width: 62rem; margin: 0 auto;
  padding: 1.2rem 1.5rem 2rem; }
h1 { font-size: 1.75rem; margin: .2rem 0 .3rem; }
h2 { font-size: 1.35rem; border-bottom: 2px solid #222; padding-bottom: .15rem;
  margin: 2.4rem 0 .8rem; }
h3 { font-size: 1.05rem; margin: 1.3rem 0 .4rem; }
p, li { max-width: 52rem; }
.meta { font-size: .88rem; color: #222; }
.note { font-size: .88rem; color: #333; }
.wide { overflow-x: auto; }
table { border-collapse: collapse; margin: .4rem 0 1.1rem; font-size: .86rem; }
caption { caption-side: top; text-align: left; font-weight: 600; padding: .2rem 0; }
th, td { border: 1px solid #888; padding: .18rem .45rem; vertical-align: top; }
th { background: #f2f2f2; text-align: left; font-weight: 600; }
td.num { text-align: right; white-space: nowrap; font-variant-numeric: tabular-nums; }
tr.lead td, tr.lead th { font-weight: 700; }
figure { margin: 1rem 0 1.3rem; break-inside: avoid; }
figure img { display: block; max-width: 100%; height: auto; border: 1px solid #bbb; }
figcaption { font-size: .86rem; color: #222; margin-top: .3rem; }
.cards { display: grid; grid-template-columns: repeat(auto-fit, minmax(12.5rem, 1fr));
  gap: .6rem; margin: .6rem 0 1rem; }
.card { border: 2px solid #222; padding: .45rem .7rem; }
.card .value { display: block; font-size: 1.65rem; font-weight: 700; }
.card .label { display: block; font-size: .86rem; }
.caution { border: 3px double #000; padding: .6rem .9rem; margin: 1rem 0; }
code { font-family: ui-monospace, "DejaVu Sans Mono", "Liberation Mono", Menlo, Consolas,
  monospace; font-size: .86em; overflow-wrap: anywhere; }
table.fixed { table-layout: fixed; width: 100%; }
table.fixed td { overflow-wrap: anywhere; }
td.unit, td.nowrap { white-space: nowrap; }
.end-text { margin-top: 2rem; font-size: .88rem; }
hr.end { border: 0; border-top: 6px solid #000; margin: .3rem 0 0; }
@page { size: A4; margin: 15mm 13mm; }
@media print {
  body { max-width: none; padding: 0; font-size: 10pt; }
  section.major { break-before: page; }
  h2, h3, caption { break-after: avoid; }
  tr, figure, .card { break-inside: avoid; }
  th { background: #fff; }
  table { font-size: 8pt; }
  th, td { padding: 1px 3px; }
  .wide { overflow: visible; }
}
"""


# ---------------------------------------------------------------------------------------
# Inputs, hash and manifest
# ---------------------------------------------------------------------------------------

@dataclass(frozen=True)
class ReportRun:
    """What :func:`make_report` did: the page, whether results were reused, the manifest."""

    path: Path
    reused: bool
    manifest: dict


def _sha256(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def _file_sha256(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def resolve_options(scenario, *, years=None, draws=None, members=None, seed=None) -> dict:
    """The run options of a report, with the scenario's defaults filled in.

    ``weather_years`` and ``parameter_draws`` default to ``[uncertainty]`` (one draw
    without uncertain parameters); ``crash_replicates`` [per weather year and draw]
    defaults to 1; ``seed`` to ``run.seed``.
    """
    for value, flag, high in ((years, "--years", 100000), (draws, "--draws", 100000),
                              (members, "--members", 1000000)):
        if value is not None and not 1 <= value <= high:
            raise InputError(f"{value} is out of range; allowed: a whole number in "
                             f"[1, {high}]", field=flag)
    if seed is not None and not 0 <= seed < 2**63:
        raise InputError(f"{seed} is out of range; allowed: a whole number in "
                         "[0, 9223372036854775807]", field="--seed")
    unc = scenario.uncertainty
    return {
        "weather_years": int(years or unc.weather_years),
        "parameter_draws": int((draws or unc.draws) if unc.parameters else 1),
        "crash_replicates": int(members or 1),
        "seed": int(scenario.run.seed if seed is None else seed),
        "sensitivity": bool(unc.parameters),
        "sobol_samples": int(unc.sobol_samples) if unc.parameters else 0,
    }


def inputs_fingerprint(scenario, options: dict) -> dict:
    """Hashes that decide whether results can be reused.

    ``inputs_sha256`` is the SHA-256 over the scenario file's bytes, the weather file's
    bytes (none in clear-sky mode), pondsim's version and the run options (canonical
    JSON), each part prefixed by its label and length so that parts cannot run together.
    """
    from pondsim import __version__

    if scenario.path is None:
        raise InputError("the report needs a scenario read from a file", field="scenario")
    scenario_bytes = Path(scenario.path).read_bytes()
    weather = scenario.weather
    weather_bytes = Path(weather.path).read_bytes() if weather.source == "file" else b""
    options_bytes = json.dumps(options, sort_keys=True).encode("utf-8")
    h = hashlib.sha256()
    for label, part in (("scenario", scenario_bytes), ("weather", weather_bytes),
                        ("pondsim", __version__.encode("utf-8")), ("options", options_bytes)):
        h.update(label.encode("ascii") + b"\0" + len(part).to_bytes(8, "big") + part)
    return {
        "inputs_sha256": h.hexdigest(),
        "scenario_file": Path(scenario.path).name,
        "scenario_sha256": _sha256(scenario_bytes),
        "weather_file": Path(weather.path).name if weather.source == "file" else None,
        "weather_sha256": _sha256(weather_bytes) if weather.source == "file" else None,
        "pondsim_version": __version__,
        "options": options,
    }


def _expected_files(options: dict) -> list[str]:
    names = ["results.nc", *TABLES, *FIGURES]
    if options.get("sensitivity"):
        names += list(OPTIONAL)
    return names


def reusable_manifest(out_dir, fingerprint: dict) -> dict | None:
    """The folder's manifest when it was written for these inputs and every file it
    lists is present with the recorded SHA-256; otherwise None."""
    path = Path(out_dir) / MANIFEST
    if not path.is_file():
        return None
    try:
        manifest = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    if manifest.get("format") != MANIFEST_FORMAT:
        return None
    if manifest.get("inputs_sha256") != fingerprint["inputs_sha256"]:
        return None
    files = manifest.get("files", {})
    if set(_expected_files(fingerprint["options"])) - set(files):
        return None
    for name, digest in files.items():
        f = Path(out_dir) / name
        if not f.is_file() or _file_sha256(f) != digest:
            return None
    return manifest


# ---------------------------------------------------------------------------------------
# Tables computed from the results Dataset (all written to CSV)
# ---------------------------------------------------------------------------------------

def _with_member(da):
    return da if "member" in da.dims else da.expand_dims(member=[0])


def monthly_drivers(ds) -> pd.DataFrame:
    """Per month: P10/P50/P90 over the ensemble of mean daily PAR entering the culture
    [mol m-2 d-1], mean water temperature [degC] and mean carrying capacity [g m-3]; the
    median of mean daily GHI [MJ m-2 d-1] and evaporation [mm d-1]."""
    month = ds["date"].dt.month
    out = {}
    spec = (("par_mol_m2_d", "par_daily", True), ("water_temperature_c", "water_temperature",
                                                   True),
            ("k_g_m3", "carrying_capacity", True), ("ghi_MJ_m2_d", "ghi_daily", False),
            ("evaporation_mm_d", "evaporation", False))
    for name, var, bands in spec:
        monthly = _with_member(ds[var]).groupby(month).mean("day")  # (member, month)
        values = monthly.transpose("month", "member").values
        if bands:
            for q in (10, 50, 90):
                out[f"{name}_p{q}"] = np.percentile(values, q, axis=1)
        else:
            out[f"{name}_p50"] = np.median(values, axis=1)
    return pd.DataFrame(out, index=pd.Index(monthly["month"].values.astype(int),
                                            name="month"))


def crash_months(ds) -> pd.DataFrame:
    """Per policy and month: expected crashes [per month], probability of at least one
    crash in the month [-], mean daily crash probability [%] and days at risk [d] (member
    means; see :func:`pondsim.studies.compare.at_risk`)."""
    from pondsim.studies.compare import at_risk

    month = ds["date"].dt.month
    crashes = ds["crashed"].astype(float).groupby(month).sum("day")  # (policy, member, m)
    daily_p = -np.expm1(-ds["hazard"].astype(float))
    mean_p = daily_p.groupby(month).mean("day").mean("member")
    risk = at_risk(ds).astype(float).groupby(month).sum("day").mean("member")
    rows = []
    for pol in ds["policy"].values:
        for m in crashes["month"].values:
            c = crashes.sel(policy=pol, month=m).values
            rows.append({"policy": str(pol), "month": int(m),
                         "expected_crashes": float(c.mean()),
                         "p_crash": float((c > 0).mean()),
                         "daily_crash_probability_pct": 100 * float(
                             mean_p.sel(policy=pol, month=m)),
                         "days_at_risk": float(risk.sel(policy=pol, month=m))})
    return pd.DataFrame(rows).set_index(["policy", "month"])


def _single_k_view(ds):
    """The ensemble with the day-by-day median K over members, for the figures and the
    calendar of :mod:`pondsim.studies.compare`, which take one K series."""
    k = ds["carrying_capacity"]
    if "member" not in k.dims:
        return ds
    view = ds.copy()
    view["carrying_capacity"] = k.median("member").assign_attrs(k.attrs)
    return view


# ---------------------------------------------------------------------------------------
# The assumption table
# ---------------------------------------------------------------------------------------

#: Coefficients of the inputs bill (pondsim.studies.inputs_bill.InputsParams): unit and source.
BILL_PARAMETERS = {
    "carbon_fraction": ("kg C kg-1", "Carbon share of dry biomass, about 50 % (Chisti 2007, "
                        "Biotechnol. Adv. 25:294-306; from memory)."),
    "co2_utilisation": ("1", "Share of the supplied CO2 that the culture takes up (common "
                        "practice)."),
    "n_fraction": ("kg N kg-1", "Nitrogen share of dry biomass (from memory)."),
    "p_fraction": ("kg P kg-1", "Phosphorus share of dry biomass (from memory)."),
    "n_fertiliser": ("", "Nitrogen product."),
    "p_fertiliser": ("", "Phosphorus product."),
    "recycle_fraction": ("1", "Share of harvested medium returned to the ponds after "
                         "dewatering (common practice; 0.9 from memory of design studies)."),
    "harvest_density_g_m3": ("g m-3", "Density at harvest, used only when no harvested "
                             "volume is known (common practice 300-1000 g m-3)."),
    "manning_n": ("s m-1/3", "Manning roughness of the channel, float-finished concrete "
                  "(Chow 1959, Open-Channel Hydraulics, Table 5-6; from memory)."),
    "bend_k": ("1", "Loss of one 180 degree bend in velocity heads (raceway design texts; "
               "from memory)."),
    "paddlewheel_efficiency": ("1", "Wire-to-water efficiency of the paddlewheel drive "
                               "(from memory, not verified)."),
    "mixing_hours_per_day": ("h d-1", "Paddlewheels run around the clock (common "
                             "practice)."),
    "length_to_width": ("1", "Pond proportion when the channel width is not given (common "
                        "practice)."),
    "n_channels": ("", "Channels of one raceway (one bend per channel end)."),
}

#: Model constants that every run uses.
MODEL_CONSTANTS = (
    ("biomass energy content", "kJ g-1", "BIOMASS_ENERGY_KJ_G",
     "Weyer et al. (2010) BioEnergy Res. 3:204-213 (secondary); used for the "
     "photosynthetic efficiency."),
    ("highest credible solar-to-biomass efficiency", "1", "MAX_SOLAR_EFFICIENCY",
     "C3 photosynthesis maximum, Zhu, Long & Ort (2008) Curr. Opin. Biotechnol. "
     "19:153-159."),
    ("diffuse reflectance of the water surface", "1", "DIFFUSE_REFLECTANCE",
     "Fresnel reflectance integrated over a uniform sky; Payne (1972) J. Atmos. Sci. "
     "29:959-970 measured 0.061."),
)


def _format_value(v) -> str:
    if v is None:
        return "not set"
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float):
        return f"{v:g}"
    if isinstance(v, tuple | list):
        return ", ".join(_format_value(x) for x in v)
    if isinstance(v, dict):
        return "; ".join(f"{k} = {_format_value(x)}" for k, x in v.items())
    return str(v)


def assumption_table(scenario, *, options: dict, mixing: dict, bill_params: dict,
                     photons_per_joule: float) -> pd.DataFrame:
    """Every parameter of the study with its unit, value and source.

    ``source`` is ``scenario`` for a value set in the scenario file, ``default`` for a
    schema default (``note`` then holds the schema's doc text with its source or
    ASSUMPTION mark), and ``derived``, ``run option`` or ``model constant`` otherwise.
    """
    from pondsim.pond import light
    from pondsim.results import tables as results
    from pondsim.scenario import POLICY_KEYS, SCHEMA, UNCERTAINTY_KEYS

    with open(scenario.path, "rb") as fh:
        raw = tomllib.load(fh)
    objects = {"site": scenario.site, "weather": scenario.weather, "pond": scenario.pond,
               "light": scenario.light, "strain": scenario.strain,
               "inoculation": scenario.inoculation, "harvest": scenario.harvest,
               "crash": scenario.crash, "run": scenario.run}
    rows = []

    def add(group, key, unit, value, source, note):
        rows.append({"group": group, "key": key, "unit": unit, "value": _format_value(value),
                     "source": source, "note": note})

    for section, keys in SCHEMA.items():
        if section == "weather.normals":
            if scenario.weather.source != "clearsky":
                continue
            given = raw.get("weather", {}).get("normals", {})
            values = scenario.weather.normals or {}
        else:
            given = raw.get(section, {})
            values = None
        for name, key in keys.items():
            if section == "study":
                value = scenario.study_name if name == "name" else scenario.year
            elif section == "weather" and name == "path":
                value = given.get("path")
            elif values is not None:
                value = values.get(name)
            else:
                value = getattr(objects[section], name)
            source = "scenario" if name in given else "default"
            add(section, name, key.unit, value, source, key.doc)

    for i, pol in enumerate(scenario.policies):
        given = (raw.get("policy") or [{}])[i] if raw.get("policy") else {}
        for name, key in POLICY_KEYS.items():
            value = getattr(pol, name)
            if value is None:
                continue
            add(f"policy[{i + 1}]", name, key.unit, value,
                "scenario" if name in given else "default", key.doc)
    season_source = "scenario" if "season" in raw else "default"
    for s in scenario.seasons:
        add("season", s.name, "month", s.months, season_source,
            "Calendar months of the season" + ("" if "season" in raw else
                                               " (default meteorological seasons)."))
    for plan in scenario.plans:
        add("plan", plan.name, "", plan.policy_by_season, "scenario",
            "Policy run in each season.")
    given = raw.get("uncertainty", {})
    for name, key in UNCERTAINTY_KEYS.items():
        add("uncertainty", name, key.unit, getattr(scenario.uncertainty, name),
            "scenario" if name in given else "default", key.doc)
    for u in scenario.uncertainty.parameters:
        spread = {k: getattr(u, k) for k in ("sd", "sigma", "low", "high")
                  if getattr(u, k) is not None}
        centre = {"normal": "the strain's value is the mean",
                  "lognormal": "the strain's value is the median",
                  "triangular": "the strain's value is the mode",
                  "uniform": "the range brackets the strain's value"}[u.distribution]
        add("uncertainty", u.parameter, SCHEMA["strain"][u.parameter].unit,
            f"{u.distribution}: " + _format_value(spread), "scenario",
            f"Uncertain strain parameter; {centre}.")

    for name, value, note in (
            ("weather_years", options["weather_years"], "Synthetic weather years resampled "
             "from the weather file (or the file's own real years when it holds several)."),
            ("parameter_draws", options["parameter_draws"], "Latin hypercube draws of the "
             "uncertain strain parameters."),
            ("crash_replicates", options["crash_replicates"], "Crash draws per weather "
             "year and parameter draw."),
            ("seed", options["seed"], "Seed of weather years, draws and crashes."),
            ("sobol_samples", options["sobol_samples"], "Base samples of the Sobol "
             "indices (0: not computed).")):
        add("option", name, "", value, "run option", note)

    for name, value in bill_params.items():
        unit, note = BILL_PARAMETERS.get(name, ("", ""))
        add("inputs", name, unit, value, "default", note)
    add("inputs", "prices", "", "not priced", "default",
        "Scenario files hold no prices yet; the bill gives quantities only.")
    for name, unit, note in (("channel_width_m", "m", "Raceway channel width from the "
                              "pond area and proportion."),
                             ("channel_length_m", "m", "Flow path of one circuit."),
                             ("velocity_m_s", "m s-1", "Design mean channel velocity "
                              "(common practice 0.2-0.3 m s-1)."),
                             ("head_m", "m", "Head loss of one circuit: Manning friction "
                              "plus bends."),
                             ("power_w", "W", "Paddlewheel power of one pond.")):
        add("mixing", name, unit, float(mixing[name]), "derived", note)

    par_fraction = scenario.light.par_fraction
    if par_fraction is None:
        add("light_used", "par_fraction", "1", float(light.par_fraction_astm_g173()),
            "derived", "Integrated from the ASTM G173-03 spectrum over 400-700 nm.")
    if scenario.light.photons_per_joule_umol is None:
        add("light_used", "photons_per_joule_umol", "umol J-1", float(photons_per_joule),
            "derived", "Integrated from the ASTM G173-03 spectrum over 400-700 nm.")
    for label, unit, attr, note in MODEL_CONSTANTS:
        module = light if attr == "DIFFUSE_REFLECTANCE" else results
        add("constant", attr.lower(), unit, float(getattr(module, attr)), "model constant",
            f"{label[0].upper()}{label[1:]}: {note}")
    return pd.DataFrame(rows)


# ---------------------------------------------------------------------------------------
# Running the study
# ---------------------------------------------------------------------------------------

def _monthly_drivers_figure(drivers: pd.DataFrame, strain, path) -> Path:
    """Monthly PAR, water temperature and K with their P10-P90 bands over the ensemble."""
    import matplotlib.pyplot as plt

    from pondsim.results.figures import COLORS, _save

    months = drivers.index.to_numpy()
    labels = [pd.Timestamp(2000, int(m), 1).strftime("%b") for m in months]
    fig, axes = plt.subplots(3, 1, figsize=(10, 8.5), sharex=True, constrained_layout=True)
    panels = (("par_mol_m2_d", "daily PAR entering the culture\n[mol m$^{-2}$ d$^{-1}$]",
               "//"),
              ("water_temperature_c", "water temperature,\nmonthly mean [°C]", ".."),
              ("k_g_m3", "carrying capacity K,\nmonthly mean [g m$^{-3}$]", "\\\\"))
    for i, (ax, (col, ylabel, hatch)) in enumerate(zip(axes, panels, strict=True)):
        color = COLORS[i]
        ax.fill_between(months, drivers[f"{col}_p10"], drivers[f"{col}_p90"],
                        color=color, alpha=0.2, hatch=hatch, lw=0.0,
                        label="P10–P90 over weather years and draws")
        for q in ("p10", "p90"):
            ax.plot(months, drivers[f"{col}_{q}"], color=color, lw=0.8, linestyle=":")
        ax.plot(months, drivers[f"{col}_p50"], color=color, marker="o", ms=4, lw=1.6,
                label="median (P50)")
        ax.set_ylabel(ylabel)
        ax.grid(alpha=0.3)
        ax.legend(fontsize=8, loc="upper left")
    ax = axes[1]
    for value, style, name in ((strain.t_opt_c, "--", "strain optimum"),
                               (strain.t_max_c, "-.", "strain maximum")):
        ax.axhline(value, color="k", lw=0.9, linestyle=style)
        ax.annotate(f"{name} {value:g} °C", (1.0, value), xycoords=("axes fraction", "data"),
                    xytext=(-4, 3), textcoords="offset points", ha="right", va="bottom",
                    fontsize=8)
    ax.set_ylim(top=max(strain.t_max_c + 3, ax.get_ylim()[1]))
    axes[0].set_title("What drives growth, month by month")
    axes[-1].set_xticks(months, labels)
    axes[-1].set_xlabel("month")
    return _save(fig, path)


def run_study(scenario, out_dir, fingerprint: dict) -> dict:
    """Run the study, write every table, the netCDF results and the figures into
    *out_dir*, and return the manifest (written last)."""
    from pondsim.operations.crash import CrashModel
    from pondsim.operations.simulate import crash_model_of
    from pondsim.results.figures import compare_figures, outlook_figures
    from pondsim.results.files import save, write_csv
    from pondsim.results.tables import policy_summary
    from pondsim.studies.compare import best_by_season, risk_calendar, season_table
    from pondsim.studies.inputs_bill import bill_from_results
    from pondsim.studies.outlook import annual_table, monthly_bands, run_outlook, sensitivity

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    (out / MANIFEST).unlink(missing_ok=True)  # a run that stops leaves nothing to reuse
    opt = fingerprint["options"]
    ds, meta = run_outlook(scenario, n_years=opt["weather_years"],
                           n_draws=opt["parameter_draws"], members=opt["crash_replicates"],
                           seed=opt["seed"], progress=scenario.run.progress)
    annual = annual_table(ds, scenario.pond.farm_area_m2)
    lead = str(annual["P50_t_ha_yr"].idxmax())
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
    quiet = ds.copy()
    for name in ("evaporation", "rain"):
        if "member" in ds[name].dims:
            quiet[name] = ds[name].mean("member")
    rain = quiet["rain"].values
    bill = bill_from_results(quiet, policy=lead,
                             rain_mm_daily=None if np.isnan(rain).all() else rain)
    assumptions = assumption_table(scenario, options=opt, mixing=bill.attrs["mixing"],
                                   bill_params=bill.attrs["params"],
                                   photons_per_joule=ds.attrs["photons_per_joule_umol"])

    save(ds, out / "results.nc")
    tables = {"annual_yield.csv": annual, "summary.csv": summary,
              "monthly_bands.csv": bands, "monthly_drivers.csv": drivers,
              "comparison.csv": seasons, "best_by_season.csv": best,
              "crash_months.csv": crash_months(ds), "inputs_bill.csv": bill}
    for name, table in tables.items():
        write_csv(table, out / name)
    write_csv(calendar, out / "risk_calendar.csv", index=False)
    write_csv(assumptions, out / "assumptions.csv", index=False)
    if sens is not None:
        write_csv(sens, out / "sensitivity.csv")
    outlook_figures(ds, bands, sens, out)
    compare_figures(view, seasons, crash, out)
    _monthly_drivers_figure(drivers, scenario.strain, out / "monthly_drivers.png")

    names = _expected_files(opt)
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
                     "members": int(ds.sizes["member"]), "days": int(ds.sizes["day"])},
        "weather_notes": [str(n) for n in meta.get("notes", [])],
        "files": {name: _file_sha256(out / name) for name in names},
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


# ---------------------------------------------------------------------------------------
# The page
# ---------------------------------------------------------------------------------------

def read_table(path, index_col=None) -> pd.DataFrame:
    """A CSV written by :func:`pondsim.results.files.write_csv` (leading caution comment)."""
    with open(path, encoding="utf-8") as fh:
        skip = 1 if fh.readline().startswith("#") else 0
    return pd.read_csv(path, skiprows=skip, index_col=index_col, keep_default_na=False,
                       na_values=[""])


def esc(text) -> str:
    """HTML-escaped text (quotes too, so that it is safe in attributes)."""
    return html.escape(str(text), quote=True)


def _num(v, digits: int = 1, *, pct: bool = False) -> str:
    try:
        v = float(v)
    except (TypeError, ValueError):
        return esc(v)
    if not math.isfinite(v):
        return "—"
    if pct:
        v *= 100
    return f"{v:,.{digits}f}"


def _td(v, digits: int = 1, *, col: str | None = None, pct: bool = False) -> str:
    """A numeric cell; ``data-value`` holds the CSV value, ``data-col`` its column."""
    attrs = ' class="num"'
    if col is not None:
        attrs += f' data-col="{esc(col)}" data-value="{esc(repr(float(v)))}"'
    return f"<td{attrs}>{_num(v, digits, pct=pct)}</td>"


def _text_td(v, *, nowrap: bool = False) -> str:
    return f'<td class="nowrap">{esc(v)}</td>' if nowrap else f"<td>{esc(v)}</td>"


def _table(headers, rows, *, caption: str, table_id: str | None = None,
           row_attrs=None, widths=None) -> str:
    """A table; *headers* are plain text (with units), *rows* lists of cell HTML;
    *widths* [% of the line] fix the column widths (long text wraps inside them)."""
    head = "".join(f'<th scope="col">{esc(h)}</th>' for h in headers)
    cols = ""
    if widths:
        cols = "<colgroup>" + "".join(f'<col style="width: {w}%">' for w in widths) \
            + "</colgroup>"
    body = []
    for i, cells in enumerate(rows):
        attrs = row_attrs[i] if row_attrs else ""
        body.append(f"<tr{attrs}>{''.join(cells)}</tr>")
    tid = f' id="{esc(table_id)}"' if table_id else ""
    fixed = ' class="fixed"' if widths else ""
    return (f'<div class="wide"><table{tid}{fixed}><caption>{esc(caption)}</caption>{cols}'
            f"<thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table></div>")


def _figure(out_dir: Path, name: str, alt: str, caption: str) -> str:
    path = out_dir / name
    if not path.is_file():
        return ""
    data = base64.b64encode(path.read_bytes()).decode("ascii")
    return (f'<figure><img src="data:image/png;base64,{data}" alt="{esc(alt)}">'
            f"<figcaption>{esc(caption)}</figcaption></figure>")


def _p(text: str, cls: str | None = None) -> str:
    c = f' class="{cls}"' if cls else ""
    return f"<p{c}>{esc(text)}</p>"


def _month_name(m) -> str:
    return pd.Timestamp(2000, int(m), 1).strftime("%b")


UNIT_TEXT = {"g m-2 d-1": "g m⁻² d⁻¹", "g m-3": "g m⁻³", "m2": "m²", "m3": "m³",
             "d-1": "d⁻¹", "m-1": "m⁻¹", "m2 g-1": "m² g⁻¹", "umol m-2 s-1": "µmol m⁻² s⁻¹",
             "umol J-1": "µmol J⁻¹", "degC": "°C", "W m-2": "W m⁻²", "W m-2 K-1": "W m⁻² K⁻¹",
             "m s-1": "m s⁻¹", "m3 d-1": "m³ d⁻¹", "kWh m-2 d-1": "kWh m⁻² d⁻¹",
             "kJ g-1": "kJ g⁻¹", "kg C kg-1": "kg C kg⁻¹", "kg N kg-1": "kg N kg⁻¹",
             "kg P kg-1": "kg P kg⁻¹", "s m-1/3": "s m⁻¹ᐟ³", "h d-1": "h d⁻¹", "1": "–"}


def _unit(u: str) -> str:
    return UNIT_TEXT.get(u, u)


def _section(index: int, body: list[str]) -> str:
    sid, title = SECTIONS[index]
    cls = ' class="major"' if index else ""
    return (f'<section id="{sid}"{cls}>\n<h2>{index + 1}. {esc(title)}</h2>\n'
            + "\n".join(body) + "\n</section>")


def _describe(scenario, name: str) -> str:
    from pondsim.studies.tune import describe

    for p in scenario.policies:
        if p.name == name:
            return describe(p)
    for plan in scenario.plans:
        if plan.name == name:
            return "season plan: " + "; ".join(f"{s}: {p}"
                                               for s, p in plan.policy_by_season.items())
    return ""


def _question(scenario, manifest: dict, drivers: pd.DataFrame) -> str:
    pond, strain, site = scenario.pond, scenario.strain, scenario.site
    lat = site.latitude if site.latitude is not None else manifest["site"]["latitude"]
    lon = site.longitude if site.longitude is not None else manifest["site"]["longitude"]
    farm_ha = pond.farm_area_m2 / 1e4
    where = f"{site.name}"
    if lat is not None and lon is not None:
        where += f" (latitude {lat:.3f}°, longitude {lon:.3f}°"
        if site.elevation_m is not None:
            where += f", {site.elevation_m:g} m above sea level"
        where += ")"
    body = [_p(f"If {pond.count} open raceway pond(s) of {pond.area_m2:,.0f} m² each "
               f"({farm_ha:,.2f} ha of water) are run at {pond.depth_m:g} m depth at "
               f"{where}, growing {strain.name}: how much algal biomass will they give "
               "each month and each year, which harvest rule should run in each season, "
               "how often will cultures crash, and what will the ponds consume?")]
    ens = manifest["ensemble"]
    w = scenario.weather
    weather = (f"weather file {manifest['weather_file']} (format {w.format})"
               if w.source == "file" else "clear-sky weather built from monthly normals")
    rows = [
        ("study", scenario.study_name),
        ("study year", f"{scenario.year} ({ens['days']} days)"),
        ("site", where),
        ("weather", weather),
        ("ensemble", f"{ens['weather_years']} weather year(s) × {ens['parameter_draws']} "
                     f"parameter draw(s) × {ens['replicates']} crash replicate(s) = "
                     f"{ens['members']} members per policy"),
        ("ponds", f"{pond.count} × {pond.area_m2:,.0f} m², depth {pond.depth_m:g} m, "
                  f"{pond.volume_m3:,.0f} m³ of culture per pond; farm water surface "
                  f"{pond.farm_area_m2:,.0f} m²"),
        ("harvest", f"decisions at {scenario.harvest.hour:02d}:00 local standard time; "
                    f"recovery {scenario.harvest.recovery_efficiency:.0%}; capacity "
                    + ("unlimited" if scenario.harvest.capacity_m3_per_d is None else
                       f"{scenario.harvest.capacity_m3_per_d:,.0f} m³ d⁻¹ per pond")),
        ("strain", f"{strain.name}: {strain.growth_form.replace('_', '-')} growth, "
                   f"µmax {strain.mu_max_per_d:g} d⁻¹, {strain.light_model.replace('_', '–')}"
                   f" light response with parameter {strain.light_param_umol_m2_s:g} "
                   f"µmol m⁻² s⁻¹, cardinal temperatures {strain.t_min_c:g} / "
                   f"{strain.t_opt_c:g} / {strain.t_max_c:g} °C, maintenance "
                   f"{strain.maintenance_per_d:g} d⁻¹ at {strain.maintenance_t_ref_c:g} °C"),
        ("inoculation", f"{scenario.inoculation.density_g_m3:g} g m⁻³ on "
                        + (str(scenario.inoculation.start_date)
                           if scenario.inoculation.start_date else f"1 January {scenario.year}")
                        + f"; {scenario.inoculation.restart_days} d out of service after a "
                          "crash"),
    ]
    body.append(_table(["item", "value"], [[f'<th scope="row">{esc(k)}</th>', _text_td(v)]
                                           for k, v in rows],
                       caption="Who, what and where", table_id="study-table"))
    par = drivers["par_mol_m2_d_p50"]
    tw = drivers["water_temperature_c_p50"]
    body.append(_p(f"Across the year the median month brings {par.min():.1f} to "
                   f"{par.max():.1f} mol m⁻² d⁻¹ of PAR into the culture, and the pond's "
                   f"monthly mean water temperature runs from {tw.min():.1f} to "
                   f"{tw.max():.1f} °C (section 3)."))
    for note in manifest.get("weather_notes", []):
        body.append(_p(f"Weather note: {note}", "note"))
    return "\n".join(body)


def _headline(out: Path, scenario, manifest: dict, annual, summary, best) -> str:
    lead = manifest["lead_policy"]
    r = annual.loc[lead]
    cards = [("P50_farm_t_yr", 1, "P50 annual biomass, farm [t AFDW yr⁻¹]"),
             ("P90_farm_t_yr", 1, "P90 annual biomass, farm [t AFDW yr⁻¹]"),
             ("mean_g_m2_d", 2, "mean areal productivity [g m⁻² d⁻¹]"),
             ("expected_crashes_yr", 2, "expected crashes per pond per year [yr⁻¹]")]
    body = [_p(f"For the policy or plan with the highest P50, {lead!s} "
               f"({_describe(scenario, lead)}):"),
            '<div class="cards" id="headline-cards">']
    for col, digits, label in cards:
        body.append(f'<div class="card"><span class="value" data-col="{esc(col)}" '
                    f'data-value="{esc(repr(float(r[col])))}">{_num(r[col], digits)}</span>'
                    f'<span class="label">{esc(label)}</span></div>')
    body.append("</div>")
    headers = ["policy or plan", "mean [t ha⁻¹ yr⁻¹]", "P50 [t ha⁻¹ yr⁻¹]",
               "P90 [t ha⁻¹ yr⁻¹]", "P50 farm [t AFDW yr⁻¹]", "P90 farm [t AFDW yr⁻¹]",
               "mean productivity [g m⁻² d⁻¹]", "expected crashes [yr⁻¹]",
               "solar efficiency [%]"]
    cols = [("mean_t_ha_yr", 1), ("P50_t_ha_yr", 1), ("P90_t_ha_yr", 1),
            ("P50_farm_t_yr", 1), ("P90_farm_t_yr", 1), ("mean_g_m2_d", 2),
            ("expected_crashes_yr", 2)]
    rows, attrs = [], []
    for pol, row in annual.iterrows():
        cells = [f'<th scope="row">{esc(pol)}{" (lead)" if pol == lead else ""}</th>']
        cells += [_td(row[c], d, col=c) for c, d in cols]
        eff = summary.loc[pol, "efficiency_solar_pct"] if pol in summary.index else np.nan
        cells.append(_td(eff, 2, col="efficiency_solar_pct"))
        rows.append(cells)
        attrs.append(f' data-policy="{esc(pol)}"' + (' class="lead"' if pol == lead else ""))
    body.append(_table(headers, rows, caption="Annual yield over the ensemble (P90 = yield "
                       "exceeded in 90 % of members)", table_id="headline-table",
                       row_attrs=attrs))
    implausible = [p for p in summary.index if not bool(summary.loc[p, "plausible"])]
    for p in implausible:
        body.append(_p(f"Warning: {p} converts more than 4.6 % of total solar radiation "
                       "into biomass, above the published maximum for C3 photosynthesis "
                       "(Zhu, Long & Ort 2008); check the strain parameters."))
    rows = []
    for season, row in best.iterrows():
        rows.append([f'<th scope="row">{esc(season)}</th>', _text_td(row["best_policy"]),
                     _td(row["productivity_g_m2_d"], 2, col="productivity_g_m2_d"),
                     _td(row["p_crash"], 0, col="p_crash", pct=True),
                     _text_td("yes" if _truthy(row["within_risk_limit"]) else
                              "no: least risky shown")])
    body.append(_table(["season", "best policy or plan", "productivity [g m⁻² d⁻¹]",
                        "P(≥ 1 crash in the season) [%]", "within the risk limit"], rows,
                       caption="Best plan per season", table_id="headline-seasons",
                       row_attrs=[f' data-season="{esc(s)}"' for s in best.index]))
    body.append(_figure(out, "exceedance.png",
                        "Line chart of annual biomass yield in tonnes per hectare per year "
                        "against the probability of exceedance in percent, one line per "
                        "policy, with the P50, P75 and P90 levels marked.",
                        "Exceedance curves: the share of ensemble members whose annual "
                        "yield reaches at least the value on the vertical axis."))
    return "\n".join(body)


def _truthy(v) -> bool:
    return v is True or str(v).strip().lower() in ("true", "1", "yes")


def _monthly(out: Path, manifest: dict, drivers, bands) -> str:
    lead = manifest["lead_policy"]
    lead_bands = bands.xs(lead, level="policy") if lead in bands.index.get_level_values(0) \
        else None
    rows = []
    for m, r in drivers.iterrows():
        cells = [f'<th scope="row">{_month_name(m)}</th>',
                 _td(r["ghi_MJ_m2_d_p50"], 1, col="ghi_MJ_m2_d_p50"),
                 _td(r["par_mol_m2_d_p50"], 1, col="par_mol_m2_d_p50"),
                 _td(r["water_temperature_c_p50"], 1, col="water_temperature_c_p50"),
                 _td(r["k_g_m3_p50"], 0, col="k_g_m3_p50"),
                 _td(r["evaporation_mm_d_p50"], 1, col="evaporation_mm_d_p50")]
        if lead_bands is not None:
            b = lead_bands.loc[m]
            cells += [_td(b["p10_g_m2_d"], 2, col="p10_g_m2_d"),
                      _td(b["p50_g_m2_d"], 2, col="p50_g_m2_d"),
                      _td(b["p90_g_m2_d"], 2, col="p90_g_m2_d")]
        rows.append(cells)
    headers = ["month", "GHI [MJ m⁻² d⁻¹]", "PAR [mol m⁻² d⁻¹]", "water temperature [°C]",
               "K [g m⁻³]", "evaporation [mm d⁻¹]", f"{lead} P10 [g m⁻² d⁻¹]",
               f"{lead} P50 [g m⁻² d⁻¹]", f"{lead} P90 [g m⁻² d⁻¹]"]
    body = [_p("Medians over the ensemble of monthly means; the yield columns are the "
               "harvested productivity of the lead policy, P10 to P90 over members."),
            _table(headers, rows, caption="Month by month", table_id="monthly-table"),
            _figure(out, "monthly_drivers.png",
                    "Three stacked monthly charts: daily PAR entering the culture in mol "
                    "per square metre per day, monthly mean water temperature in degrees "
                    "Celsius with the strain's optimum and maximum marked, and the "
                    "carrying capacity K in grams per cubic metre; each a median line "
                    "with a hatched P10 to P90 band.",
                    "Light, water temperature and carrying capacity by month (median and "
                    "P10–P90 over weather years and parameter draws)."),
            _figure(out, "monthly_bands.png",
                    "Line chart of harvested productivity in grams per square metre per "
                    "day by month, one line per policy (median) with a shaded P10 to P90 "
                    "band.",
                    "Yield by month: harvested productivity, P50 with the P10–P90 band "
                    "over ensemble members.")]
    return "\n".join(body)


def _harvest(out: Path, scenario, comparison, best) -> str:
    limit = scenario.crash.max_season_probability
    body = [_p("Each harvest rule and season plan was run on every member of the ensemble. "
               f"For each season the best rule is the one with the most biomass whose "
               f"probability of at least one crash in the season stays within the risk "
               f"limit of {limit:.0%} (crash.max_season_probability). The seasonal winners "
               "together make a plan; to get its annual numbers, write it as a [[plan]] "
               "in the scenario (or run pondsim tune) and run the report again.")]
    names = list(pd.unique(comparison.index.get_level_values("policy")))
    body.append(_table(["policy or plan", "rule"],
                       [[f'<th scope="row">{esc(n)}</th>', _text_td(_describe(scenario, n))]
                        for n in names], caption="Rules compared"))
    months = {s.name: ", ".join(_month_name(m) for m in s.months) for s in scenario.seasons}
    rows = []
    for season, r in best.iterrows():
        rows.append([f'<th scope="row">{esc(season)}</th>', _text_td(months.get(season, "")),
                     _text_td(r["best_policy"]),
                     _td(r["yield_t_ha"], 2, col="yield_t_ha"),
                     _td(r["productivity_g_m2_d"], 2, col="productivity_g_m2_d"),
                     _td(r["p_crash"], 0, col="p_crash", pct=True),
                     _text_td("yes" if _truthy(r["within_risk_limit"]) else
                              "no: least risky shown")])
    body.append(_table(["season", "months", "best policy or plan",
                        "yield in the season [t ha⁻¹]", "productivity [g m⁻² d⁻¹]",
                        "P(≥ 1 crash) [%]", "within the risk limit"], rows,
                       caption="The harvest plan by season", table_id="plan-table"))
    rows = []
    for (season, pol), r in comparison.iterrows():
        rows.append([_text_td(season, nowrap=True), _text_td(pol),
                     _td(r["yield_t_ha"], 2), _td(r["yield_t_ha_p10"], 2),
                     _td(r["yield_t_ha_p90"], 2), _td(r["productivity_g_m2_d"], 2),
                     _td(r["harvests"], 1), _td(r["harvest_volume_m3"], 0),
                     _td(r["expected_crashes"], 2), _td(r["p_crash"], 0, pct=True),
                     _td(r["days_at_risk"], 1)])
    body.append(_table(["season", "policy or plan", "yield mean [t ha⁻¹]",
                        "yield P10 [t ha⁻¹]", "yield P90 [t ha⁻¹]",
                        "productivity [g m⁻² d⁻¹]", "harvests [count]",
                        "harvested volume per pond [m³]", "expected crashes [count]",
                        "P(≥ 1 crash) [%]", "days at risk [d]"], rows,
                       caption="Every rule in every season (member means; P10/P90 over "
                               "members)", table_id="comparison-table"))
    body.append(_figure(out, "seasonal_yield.png",
                        "Grouped bar chart of harvested productivity in grams per square "
                        "metre per day for each season and policy, with P10 to P90 error "
                        "bars; bars are told apart by hatching.",
                        "Seasonal yield by rule (bars: P10–P90 over members)."))
    body.append(_figure(out, "trajectories.png",
                        "One panel per policy: culture density in grams per cubic metre "
                        "through the year with the carrying capacity K, the P10 to P90 "
                        "band over members, harvest days and crashes of one member.",
                        "Density through the year by rule, with the ensemble's median K."))
    return "\n".join(body)


def _crash(out: Path, scenario, crash_by_month, calendar) -> str:
    c = scenario.crash
    body = [_p("A culture is at risk when it stands near or above its carrying capacity "
               "while K falls (a cold or dull spell, the end of summer). The daily hazard "
               f"adds up to {c.stress_hazard_per_d:g} d⁻¹ of weather stress to a base of "
               f"{c.base_hazard_per_d:g} d⁻¹; a crash loses {c.loss_fraction:.0%} of the "
               "standing biomass and takes the pond out for "
               f"{scenario.inoculation.restart_days} d. These hazard values are "
               "ASSUMPTIONS until replaced by the site's own crash history."
               + ("" if c.enabled else " Crashes are switched off in this scenario: the "
                  "calendar shows where K falls, but no crash was drawn."))]
    pols = list(pd.unique(crash_by_month.index.get_level_values("policy")))
    months = sorted(set(crash_by_month.index.get_level_values("month")))
    for col, digits, unit, caption, tid in (
            ("expected_crashes", 3, "per month", "Expected crashes per pond by month "
             "(member means)", "crash-months"),
            ("daily_crash_probability_pct", 2, "%", "Mean daily crash probability by month",
             "crash-probability")):
        rows = []
        for m in months:
            rows.append([f'<th scope="row">{_month_name(m)}</th>']
                        + [_td(crash_by_month.loc[(p, m), col], digits) for p in pols])
        body.append(_table(["month"] + [f"{p} [{unit}]" for p in pols], rows,
                           caption=caption, table_id=tid))
    body.append(_figure(out, "risk_calendar.png",
                        "Two panels through the year: the percentage fall of the smoothed "
                        "carrying capacity over the window, and a greyscale strip per "
                        "policy of the daily crash probability in percent.",
                        "Crash-risk calendar: where K falls and how likely a crash is "
                        "(median K over the ensemble; single years see sharper falls)."))
    if len(calendar):
        ratio_cols = [col for col in calendar.columns if col.startswith("X/K ")]
        rows = []
        for _, r in calendar.iterrows():
            rows.append([_text_td(r["date"], nowrap=True), _text_td(r["season"], nowrap=True),
                         _td(r["K_smoothed_g_m3"], 0), _td(r["K_drop_pct"], 1)]
                        + [_td(r[col], 2) for col in ratio_cols])
        headers = ["date", "season", f"K, {c.window_days}-day mean [g m⁻³]",
                   f"fall of K over {c.window_days} d [%]"] + [
            f"X/K, {col[4:]} [–]" for col in ratio_cols]
        body.append(_table(headers, rows, caption="Days of the steepest fall of K and where "
                           "each rule stands then (median member)",
                           table_id="calendar-table"))
    else:
        body.append(_p("K does not fall on any day of the year."))
    return "\n".join(body)


BILL_LABELS = {"biomass_t": "biomass harvested [t AFDW]", "co2_t": "CO₂ supplied [t]",
               "n_t": "nitrogen N [t]", "p_t": "phosphorus P [t]",
               "makeup_water_m3": "makeup water [m³]", "mixing_MWh": "mixing energy [MWh]"}


def _inputs(manifest: dict, bill) -> str:
    lead = manifest["lead_policy"]
    body = [_p(f"What the farm consumes when it runs {lead} (the lead policy), member means "
               "per month. CO₂, nitrogen and phosphorus follow the harvested biomass, so "
               "biomass later lost to crashes or respiration is not counted: these lines "
               "are lower bounds. Makeup water replaces evaporation net of rain plus the "
               "harvested medium that is not recycled. Mixing is the paddlewheel energy of "
               "every pond, every day.")]
    cols = [c for c in bill.columns if not c.endswith("_cost")]
    costs = [c for c in bill.columns if c.endswith("_cost")]
    headers = ["month"] + [BILL_LABELS.get(c, f"{c[:-2]} fertiliser [t product]"
                                           if c.endswith("_t") else c) for c in cols]
    headers += [f"{c[:-5]} cost [currency]" for c in costs] or ["cost [currency]"]
    rows = []
    for month, r in bill.iterrows():
        cells = [f'<th scope="row">{esc(month)}</th>']
        for c in cols:
            digits = {"makeup_water_m3": 0, "mixing_MWh": 1, "biomass_t": 2, "co2_t": 2}.get(
                c, 3)
            cells.append(_td(r[c], digits, col=c))
        cells += [_td(r[c], 0, col=c) for c in costs] or ['<td class="nowrap">not priced</td>']
        rows.append(cells)
    body.append(_table(headers, rows, caption=f"Inputs bill of the farm for {lead} (last "
                       "row: the year)", table_id="bill-table",
                       row_attrs=[f' data-month="{esc(m)}"' for m in bill.index]))
    if not costs:
        body.append(_p("Not priced: scenario files hold no prices yet, so the bill gives "
                       "quantities only. Multiply by local prices for CO₂, fertiliser, water "
                       "and electricity.", "note"))
    return "\n".join(body)


def _sensitivity(out: Path, scenario, manifest: dict, sens) -> str:
    from pondsim.scenario import SCHEMA

    if sens is None:
        return _p("Not computed: the scenario gives no strain parameter a distribution in "
                  "[uncertainty]. Add some (for example mu_max_per_d = { distribution = "
                  "\"normal\", sd = 0.2 }) to learn which assumptions move the answer.")
    lead = manifest["lead_policy"]
    ranked = sens.sort_values("total", ascending=False)
    top = ranked.index[0]
    body = [_p(f"Sobol indices of the annual yield of {lead} on the study year's weather, "
               f"without crashes, from {manifest['options']['sobol_samples']} base samples. "
               "The first-order index is the share of the yield's variance that a parameter "
               "explains alone; the total index adds its interactions with the others. "
               f"Here {top} moves the answer most (total index "
               f"{ranked.loc[top, 'total']:.2f}). Indices near zero, or with intervals "
               "that reach below zero, mean the parameter hardly matters at its stated "
               "spread."),
            ]
    dists = {u.parameter: u for u in scenario.uncertainty.parameters}
    rows = []
    for name, r in ranked.iterrows():
        u = dists.get(name)
        spread = "" if u is None else u.distribution + ": " + _format_value(
            {k: getattr(u, k) for k in ("sd", "sigma", "low", "high")
             if getattr(u, k) is not None})
        unit = SCHEMA["strain"][name].unit if name in SCHEMA["strain"] else ""
        rows.append([f'<th scope="row">{esc(name)}</th>', _text_td(_unit(unit)),
                     _text_td(spread),
                     _td(r["first_order"], 2, col="first_order"),
                     _text_td(f"{_num(r['first_order_low'], 2)} to "
                              f"{_num(r['first_order_high'], 2)}"),
                     _td(r["total"], 2, col="total"),
                     _text_td(f"{_num(r['total_low'], 2)} to {_num(r['total_high'], 2)}")])
    body.append(_table(["parameter", "unit", "distribution", "first order [–]",
                        "95 % interval [–]", "total [–]", "95 % interval [–]"], rows,
                       caption="Sobol indices of annual yield, largest total first",
                       table_id="sensitivity-table"))
    body.append(_figure(out, "sensitivity.png",
                        "Horizontal bar chart of first-order and total Sobol indices of "
                        "annual yield for each uncertain parameter, with 95 % bootstrap "
                        "intervals; total bars hatched.",
                        "Which uncertain parameters move the annual yield."))
    return "\n".join(body)


def _assumptions(assumptions) -> str:
    body = [_p("Every value the study used. Source: scenario = set in the scenario file; "
               "default = pondsim's default, with the reason or reference in the note "
               "(ASSUMPTION marks a value to replace with site data); derived = computed "
               "from other values; run option = the report's command line.")]
    rows = []
    for _, r in assumptions.iterrows():
        unit = _unit(r["unit"]) if isinstance(r["unit"], str) else ""
        rows.append([f'<td class="key"><code>{esc(r["group"])}.{esc(r["key"])}</code></td>',
                     f'<td class="unit">{esc(unit)}</td>',
                     _text_td(r["value"]), _text_td(r["source"]),
                     _text_td(r["note"] if isinstance(r["note"], str) else "")])
    body.append(_table(["key", "unit", "value", "source", "meaning and source of the value"],
                       rows, caption="Assumptions and parameters",
                       table_id="assumptions-table",
                       widths=(30, 11, 17, 10, 32)))
    return "\n".join(body)


METHODS = (
    ("Sun position", "The NREL solar position algorithm (through pvlib), taken at the "
     "middle of each hour.", "Reda & Andreas (2004) Solar Energy 76:577–589"),
    ("Clear-sky irradiance", "The Ineichen–Perez model with Linke turbidity (pvlib), for "
     "clear-sky site mode and the cloud correction.",
     "Ineichen & Perez (2002) Solar Energy 73:151–157"),
    ("Light entering the culture", "The PAR share of global irradiance and the photon "
     "count per joule, both integrated over 400–700 nm of the ASTM G173 reference "
     "spectrum; surface reflection from Fresnel's equations for water (n = 1.333) for the "
     "beam and a constant 0.066 for sky light.",
     "ASTM G173-03; checked against Szeicz (1974), Thimijan & Heins (1983) and Payne (1972) "
     "J. Atmos. Sci. 29:959–970"),
    ("Water temperature", "An hourly heat balance of one well-mixed layer: absorbed sun, sky "
     "longwave in, longwave out, evaporation, convection, ground conduction and makeup "
     "water.", "Béchet et al. (2011) Environ. Sci. Technol. 45:3702–3709"),
    ("Sky longwave", "The weather file's infrared field where present, else Brutsaert's "
     "clear-sky emissivity with a cloud correction.",
     "Brutsaert (1975) Water Resour. Res. 11:742–744; Crawford & Duchon (1999)"),
    ("Evaporation", "A Penman-type wind function for open water with FAO-56 saturation "
     "vapour pressure.", "Shuttleworth (1993); Allen et al. (1998) FAO-56"),
    ("Light response", "Steele, Monod/Tamiya or Jassby–Platt, averaged over the culture "
     "depth under Beer–Lambert attenuation by biomass and medium.",
     "Steele (1962); Jassby & Platt (1976)"),
    ("Temperature response", "The cardinal temperature model with inflexion.",
     "Rosso, Lobry & Flandrois (1993) J. Theor. Biol. 162:447–463"),
    ("Maintenance", "A respiration loss m = m_ref·θ^(T − T_ref), by day and by night.",
     "common practice (θ form)"),
    ("Carrying capacity K", "Per day, the density at which that day's net growth is zero, "
     "capped by a nutrient limit where one is set.", "pondsim's definition"),
    ("Check of the engine", "With constant forcing the best sustained logistic yield is "
     "r·K/4 at K/2.", "Schaefer (1954)"),
    ("Crash hazard", "A base hazard plus a stress hazard that grows with overshoot above K "
     "while K falls; seeded random draws per member.",
     "pondsim's model; parameters are ASSUMPTIONS"),
    ("Weather years", "Synthetic years resampled from the weather record (or the file's "
     "own real years); they spread the weather but hold no year worse than the record.",
     "pondsim.forcing.years"),
    ("Parameter draws", "Latin hypercube sampling of the uncertain strain parameters.",
     "McKay, Beckman & Conover (1979) Technometrics 21:239–245"),
    ("Sensitivity", "First-order and total Sobol indices (Saltelli/Jansen estimators in "
     "scipy.stats.sobol_indices) with bootstrap intervals.",
     "Sobol' (2001); Saltelli et al. (2010) Comput. Phys. Commun. 181:259–270"),
    ("Inputs bill", "CO₂ from the carbon in harvested biomass; N and P from its element "
     "shares and the fertilisers' formulas (IUPAC atomic weights); mixing power from "
     "Manning friction and bend losses of the raceway channel over the paddlewheel "
     "efficiency.", "Chisti (2007); Redfield (1958); Chow (1959)"),
    ("P-values", "Exceedance convention: P90 is the annual yield reached or exceeded in 90 % "
     "of members (the 10th percentile), P50 the median.", "common practice in project "
     "finance"),
)


def _methods() -> str:
    rows = [[f'<th scope="row">{esc(stage)}</th>', _text_td(what), _text_td(source)]
            for stage, what, source in METHODS]
    return _table(["stage", "method", "published source"], rows,
                  caption="Models used and where they come from", table_id="methods-table")


def _limitations() -> str:
    items = [
        "The pond is one well-mixed layer: no vertical gradients of temperature or light "
        "history (flashing light), no covered ponds or greenhouses.",
        "Growth responds to light and temperature only; nutrients act only as a cap on K; "
        "pH, dissolved oxygen, salinity and contamination dynamics are not modelled.",
        "A typical-year weather file holds no real year-to-year variation. Synthetic years "
        "spread the weather but hold no year worse than the record, so P90 may be "
        "optimistic.",
        "Crash hazards are assumptions, not measurements: replace them with the site's own "
        "crash history before relying on the risk figures.",
        "CO₂, N and P are lower bounds (biomass lost before harvest is not counted); "
        "nothing is priced.",
        "The best rule per season is picked season by season; the combined plan has not "
        "been simulated as a whole until it is written into the scenario.",
        "A demo or invented site, strain or weather file gives numbers for no real "
        "decision.",
    ]
    safety = [
        "These are estimates, not guarantees of yield, cost or safety.",
        "Deep water: ponds and sumps are a drowning hazard; fence them and keep rescue "
        "equipment at hand.",
        "Paddlewheels and pumps: guard rotating parts and lock out power before work.",
        "CO₂: pressurised gas that can collect in pits and low or enclosed spaces and "
        "suffocate; follow the supplier's handling rules.",
        "Chemicals (cleaning agents such as hypochlorite, acids, fertilisers): store and "
        "handle them as their safety data sheets require.",
        "Defer to local codes and permits and to licensed engineers for design, "
        "construction and operation.",
    ]
    return ("<h3>What the model leaves out</h3><ul>"
            + "".join(f"<li>{esc(t)}</li>" for t in items) + "</ul>"
            + f'<div class="caution" id="caution"><p><strong>Caution.</strong> '
            f"{esc(CAUTION)}</p><ul>" + "".join(f"<li>{esc(t)}</li>" for t in safety)
            + "</ul></div>")


def _reproduce(manifest: dict, run_date: str) -> str:
    opt = manifest["options"]
    command = (f"pondsim report {manifest['scenario_file']} --years {opt['weather_years']} "
               f"--draws {opt['parameter_draws']} --members {opt['crash_replicates']} "
               f"--seed {opt['seed']}")
    rows = [("pondsim version", manifest["pondsim_version"]),
            ("scenario file", manifest["scenario_file"]),
            ("scenario file SHA-256", manifest["scenario_sha256"]),
            ("weather file", manifest["weather_file"] or "none (clear-sky mode)"),
            ("weather file SHA-256", manifest["weather_sha256"] or "—"),
            ("inputs hash (scenario + weather + version + options)",
             manifest["inputs_sha256"]),
            ("to reproduce", command)]
    table = _table(["item", "value"], [[f'<th scope="row">{esc(k)}</th>',
                                        f"<td><code>{esc(v)}</code></td>"] for k, v in rows],
                   caption="Reproducibility", table_id="reproduce-table")
    return (f'<p class="meta" id="run-date">Run date: page written {esc(run_date)} from '
            f"results computed {esc(manifest['computed'])}</p>\n" + table)


def build_page(out_dir, scenario, manifest: dict, *, run_date: str | None = None) -> str:
    """The report page, built from the CSV tables and PNG figures in *out_dir*."""
    out = Path(out_dir)
    run_date = run_date or dt.datetime.now().astimezone().isoformat(timespec="seconds")
    annual = read_table(out / "annual_yield.csv", index_col="policy")
    summary = read_table(out / "summary.csv", index_col="policy")
    bands = read_table(out / "monthly_bands.csv", index_col=["policy", "month"])
    drivers = read_table(out / "monthly_drivers.csv", index_col="month")
    comparison = read_table(out / "comparison.csv", index_col=["season", "policy"])
    best = read_table(out / "best_by_season.csv", index_col="season")
    by_month = read_table(out / "crash_months.csv", index_col=["policy", "month"])
    calendar = read_table(out / "risk_calendar.csv")
    bill = read_table(out / "inputs_bill.csv", index_col="month")
    assumptions = read_table(out / "assumptions.csv")
    sens = read_table(out / "sensitivity.csv", index_col="parameter") \
        if (out / "sensitivity.csv").is_file() and manifest["options"]["sensitivity"] \
        else None
    parts = [
        _question(scenario, manifest, drivers),
        _headline(out, scenario, manifest, annual, summary, best),
        _monthly(out, manifest, drivers, bands),
        _harvest(out, scenario, comparison, best),
        _crash(out, scenario, by_month, calendar),
        _inputs(manifest, bill),
        _sensitivity(out, scenario, manifest, sens),
        _assumptions(assumptions),
        _methods(),
        _limitations(),
    ]
    sections = "\n".join(_section(i, [part]) for i, part in enumerate(parts))
    title = f"{scenario.study_name}: open pond study report"
    header = "\n".join([
        f"<h1>{esc(title)}</h1>",
        _p(f"{scenario.site.name} · {scenario.year} · strain {scenario.strain.name} · "
           f"pondsim {manifest['pondsim_version']}", "meta"),
        _p("Estimates from a model, not guarantees: read the limitations and cautions in "
           "the last section before using any number.", "meta"),
        _reproduce(manifest, run_date)])
    footer = (_p(f"End of report. Files of the study: {', '.join(sorted(manifest['files']))}.",
                 "end-text") + '\n<hr class="end">')
    return ("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
            '<meta name="viewport" content="width=device-width, initial-scale=1">\n'
            f"<title>{esc(title)}</title>\n<style>{CSS}</style>\n</head>\n<body>\n"
            f"<header>\n{header}\n</header>\n<main>\n{sections}\n</main>\n"
            f"<footer>\n{footer}\n</footer>\n</body>\n</html>\n")


def make_report(scenario_path, out_dir, *, years=None, draws=None, members=None, seed=None,
                run_date: str | None = None) -> ReportRun:
    """Run (or reuse) the study for *scenario_path* in *out_dir* and write report.html."""
    from pondsim.scenario import load_scenario

    scenario = load_scenario(scenario_path)
    options = resolve_options(scenario, years=years, draws=draws, members=members, seed=seed)
    fingerprint = inputs_fingerprint(scenario, options)
    manifest = reusable_manifest(out_dir, fingerprint)
    reused = manifest is not None
    if not reused:
        manifest = run_study(scenario, out_dir, fingerprint)
    page = build_page(out_dir, scenario, manifest, run_date=run_date)
    path = Path(out_dir) / REPORT
    atomic_write(path, lambda tmp: Path(tmp).write_text(page, encoding="utf-8"))
    return ReportRun(path=path, reused=reused, manifest=manifest)


# ---------------------------------------------------------------------------------------
# Command line
# ---------------------------------------------------------------------------------------

def add_report_parser(subparsers):
    """Add ``pondsim report`` to the CLI's subparsers; returns the parser."""
    r = subparsers.add_parser(
        "report", help="one self-contained HTML study report",
        description="Run the outlook ensemble, the season comparison, the crash-risk "
        "calendar, the inputs bill and (with uncertain parameters) the Sobol sensitivity, "
        "or reuse the results already in the output folder when the scenario, weather "
        "file, pondsim version and options are unchanged; write report.html, a single "
        "page with embedded figures that prints to PDF.")
    r.add_argument("scenario", help="scenario .toml")
    r.add_argument("--out", default=None, metavar="DIR",
                   help="output folder (default: out/<scenario name>-report)")
    r.add_argument("--years", type=int, default=None,
                   help="weather years (default: uncertainty.weather_years)")
    r.add_argument("--draws", type=int, default=None,
                   help="parameter draws (default: uncertainty.draws; 1 without uncertain "
                        "parameters)")
    r.add_argument("--members", type=int, default=None,
                   help="crash replicates per weather year and draw (default 1)")
    r.add_argument("--seed", type=int, default=None,
                   help="seed of weather years, draws and crashes (default: run.seed)")
    r.set_defaults(func=cmd_report)
    return r


def cmd_report(args) -> int:
    """``pondsim report``: write the study report; 0 on success."""
    import time

    out = Path(args.out) if args.out else Path("out") / f"{Path(args.scenario).stem}-report"
    t0 = time.perf_counter()
    run = make_report(args.scenario, out, years=args.years, draws=args.draws,
                      members=args.members, seed=args.seed)
    elapsed = time.perf_counter() - t0
    m = run.manifest
    how = "reused the results in" if run.reused else "computed the results into"
    print(f"{how} {out} ({elapsed:.1f} s); inputs hash {m['inputs_sha256'][:12]}")
    annual = read_table(out / "annual_yield.csv", index_col="policy")
    r = annual.loc[m["lead_policy"]]
    print(f"lead: {m['lead_policy']}: P50 {r['P50_farm_t_yr']:,.1f} t, P90 "
          f"{r['P90_farm_t_yr']:,.1f} t AFDW per year for the farm, "
          f"{r['mean_g_m2_d']:.2f} g/m2/d, {r['expected_crashes_yr']:.2f} crashes per year")
    print(f"report written: {run.path}")
    print("\n" + CAUTION)
    return 0


__all__ = ["SECTIONS", "ReportRun", "add_report_parser", "assumption_table", "build_page",
           "cmd_report", "crash_months", "inputs_fingerprint", "make_report",
           "monthly_drivers", "read_table", "resolve_options", "reusable_manifest",
           "run_study"]
