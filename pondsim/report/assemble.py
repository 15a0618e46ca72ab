"""Data assembly of the report: tables computed from the results Dataset (monthly
drivers, crashes by month, the single-K view) and the table of every assumption."""

from __future__ import annotations

import re
import tomllib

import numpy as np
import pandas as pd

# ---------------------------------------------------------------------------------------
# Tables computed from the results Dataset (all written to CSV)
# ---------------------------------------------------------------------------------------

def _with_member(da):
    return da if "member" in da.dims else da.expand_dims(member=[0])


def monthly_drivers(ds) -> pd.DataFrame:
    """Per month: 10th/50th/90th percentiles over the ensemble of mean daily PAR entering
    the culture [mol m-2 d-1], mean water temperature [degC] and mean carrying capacity [g m-3]; the
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
                out[f"{name}_pct{q}"] = np.percentile(values, q, axis=1)
        else:
            out[f"{name}_pct50"] = np.median(values, axis=1)
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


def dewatering_check(ds, scenario) -> pd.DataFrame:
    """The farm's dewatering load per policy and season against the plant's capacity.

    The same check ``pondsim tune`` applies to its candidates
    (:mod:`pondsim.operations.plan_runs`): the farm's daily volume sent to dewatering is
    the member mean of the harvested share of the culture × pond volume × pond count
    [m3 d-1]; ponds harvested on a schedule of a few days are staggered, so the plant sees
    its trailing running mean over ``DEWATERING_WINDOW_D`` days, and the season's peak of
    that mean is compared with ``harvest.dewatering_capacity_m3_per_d`` (farm, all
    ponds).

    Returns
    -------
    pandas.DataFrame
        Rows ``(policy, season)`` and ``(policy, "year")``; columns
        ``dewatering_farm_m3`` [m3 per season or year, member mean],
        ``peak_7d_mean_farm_m3_d`` [m3 d-1], ``capacity_farm_m3_d`` [m3 d-1, empty =
        no limit set], ``within_capacity`` ("yes" / "no" / "no limit set").
    """
    from pondsim.operations.plan_runs import DEWATERING_WINDOW_D, _running_mean

    pond = scenario.pond
    cap = scenario.harvest.dewatering_capacity_m3_per_d
    share = _with_member(ds["harvest_fraction"].astype(float)).mean("member")  # (p, day)
    farm = share.transpose("policy", "day").values * pond.volume_m3 * pond.count
    running = _running_mean(farm, DEWATERING_WINDOW_D)
    months = pd.DatetimeIndex(ds["date"].values).month.to_numpy()
    periods = [(s.name, np.isin(months, s.months)) for s in scenario.seasons]
    periods.append(("year", np.ones(months.size, dtype=bool)))
    rows = []
    for i, pol in enumerate(ds["policy"].values):
        for name, days in periods:
            if not days.any():
                continue
            peak = float(running[i, days].max())
            rows.append({"policy": str(pol), "season": name,
                         "dewatering_farm_m3": float(farm[i, days].sum()),
                         "peak_7d_mean_farm_m3_d": peak,
                         "capacity_farm_m3_d": np.nan if cap is None else float(cap),
                         "within_capacity": "no limit set" if cap is None else
                         ("yes" if peak <= cap * (1 + 1e-9) else "no")})
    return pd.DataFrame(rows).set_index(["policy", "season"])


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


#: Words that show a default's note names its source or marks it as an assumption.
_SOURCED = re.compile(r"\b(1[89]|20)\d\d\b|assumption|common practice|definition|"
                      r"IUPAC|ASTM|FAO", re.IGNORECASE)


def default_note(doc: str, value) -> str:
    """The note the report shows for a default: the schema's doc text, with an unchecked
    value labelled ASSUMPTION.

    A doc that quotes a value without its source checked ("from memory" in the code) is
    shown as "ASSUMPTION, source not checked"; a numeric default whose doc cites no source
    and is not marked gets "ASSUMPTION (pondsim's default; no source cited)". A key left
    unset assumes nothing, and a switch or a name (true/false, a model's name, a text) is
    a choice rather than a value: both are shown as they are.
    """
    note = re.sub(r"\bfrom memory\b", "ASSUMPTION, source not checked", str(doc),
                  flags=re.IGNORECASE)
    note = re.sub(r"\bnot verified\b", "not checked", note, flags=re.IGNORECASE)
    numeric = isinstance(value, int | float) and not isinstance(value, bool)
    if not numeric or _SOURCED.search(note):
        return note
    return f"{note.rstrip()} ASSUMPTION (pondsim's default; no source cited)."


def assumption_table(scenario, *, options: dict, mixing: dict,
                     photons_per_joule: float) -> pd.DataFrame:
    """Every parameter of the study with its unit, value and source.

    ``source`` is ``scenario`` for a value set in the scenario file, ``default`` for a
    schema default (``note`` then holds the schema's doc text with its source or
    ASSUMPTION mark, see :func:`default_note`), and ``derived``, ``run option`` or
    ``model constant`` otherwise. The ``[inputs]`` and ``[prices]`` sections of the
    bill are included; prices left unset read "not set" (that line is not priced).
    """
    from pondsim.pond import light
    from pondsim.results import tables as results
    from pondsim.scenario import INPUTS_KEYS, POLICY_KEYS, PRICES_KEYS, SCHEMA, UNCERTAINTY_KEYS

    with open(scenario.path, "rb") as fh:
        raw = tomllib.load(fh)
    objects = {"site": scenario.site, "weather": scenario.weather, "pond": scenario.pond,
               "light": scenario.light, "strain": scenario.strain,
               "inoculation": scenario.inoculation, "harvest": scenario.harvest,
               "crash": scenario.crash, "run": scenario.run}
    rows = []

    def add(group, key, unit, value, source, note):
        if source == "default":
            note = default_note(note, value)
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

    for section, keys, obj in (("inputs", INPUTS_KEYS, scenario.inputs),
                               ("prices", PRICES_KEYS, scenario.prices)):
        given = raw.get(section, {})
        for name, key in keys.items():
            add(section, name, key.unit, getattr(obj, name),
                "scenario" if name in given else "default", key.doc)
    if not scenario.prices.any:
        add("prices", "(all)", "", "not priced", "default",
            "The scenario has no [prices]: the bill gives quantities only.")
    for name, unit, note in (("channel_width_m", "m", "Raceway channel width from the "
                              "pond area and proportion."),
                             ("channel_length_m", "m", "Flow path of one circuit."),
                             ("velocity_m_s", "m s-1", "Mean channel velocity "
                              "(inputs.velocity_m_s)."),
                             ("head_m", "m", "Head loss of one circuit: Manning friction "
                              "plus bends."),
                             ("power_w", "W", "Electric paddlewheel power of one pond "
                              "(hydraulic power over paddlewheel and drive "
                              "efficiencies).")):
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

