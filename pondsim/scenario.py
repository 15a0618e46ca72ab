"""Scenario files: one TOML file describes one study.

The file is parsed with :mod:`tomllib` into frozen dataclasses. Every key is declared once
in :data:`SCHEMA` with its type, unit, default, allowed range and meaning; the README's
scenario reference is generated from the same table (``pondsim keys``), so the two cannot
drift apart. Any problem raises :class:`pondsim.errors.InputError` naming the file, the
dotted key and what is allowed.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from pondsim.errors import InputError, did_you_mean

MONTHS = 12


@dataclass(frozen=True)
class Key:
    """Declaration of one scenario key."""

    kind: str  # "float", "int", "str", "bool", "date", "floats12", "ints", "path"
    default: Any = None  # None with required=False means "optional, absent"
    doc: str = ""
    unit: str = ""
    low: float | None = None
    high: float | None = None
    choices: tuple[str, ...] | None = None
    required: bool = False
    open_low: bool = False  # low bound excluded


# --------------------------------------------------------------------------------------
# The schema: section -> key -> declaration. Order here is the order of the README table.
# --------------------------------------------------------------------------------------
SCHEMA: dict[str, dict[str, Key]] = {
    "study": {
        "name": Key("str", "pondsim study", "Title used in tables and figures."),
        "year": Key("int", 2025, "Calendar year simulated (leap years have 366 days).",
                    "", 1900, 2100),
    },
    "site": {
        "name": Key("str", "site", "Site name."),
        "latitude": Key("float", None, "Latitude, north positive.", "deg", -66.5, 66.5),
        "longitude": Key("float", None, "Longitude, east positive.", "deg", -180, 180),
        "elevation_m": Key("float", None, "Elevation above sea level.", "m", -430, 5000),
        "utc_offset_h": Key("float", None, "Offset of local standard time from UTC.",
                            "h", -12, 14),
    },
    "weather": {
        "source": Key("str", "file", "Where hourly weather comes from: a weather file or "
                      "clear-sky mode from monthly normals.", choices=("file", "clearsky")),
        "path": Key("path", None, "Weather file, relative to the scenario file "
                    "(source = 'file')."),
        "format": Key("str", "auto", "Weather file format.",
                      choices=("auto", "epw", "tmy3", "tmy2", "pvgis", "csv")),
        "wind_height_m": Key("float", 10.0, "Height of the wind measurement.", "m", 0.5, 100),
        "max_gap_h": Key("int", 3, "Longest gap of missing hours filled by interpolation.",
                         "h", 0, 24),
    },
    "weather.normals": {
        "temp_max_c": Key("floats12", None, "Mean daily maximum air temperature per month.",
                          "degC", -60, 60),
        "temp_min_c": Key("floats12", None, "Mean daily minimum air temperature per month.",
                          "degC", -60, 60),
        "wind_speed_m_s": Key("floats12", None, "Mean wind speed per month.", "m s-1", 0, 40),
        "relative_humidity_pct": Key("floats12", None, "Mean relative humidity per month.",
                                     "%", 1, 100),
        "clearness": Key("floats12", None, "Mean daily GHI over clear-sky daily GHI per "
                         "month (give this or ghi_kwh_m2_d).", "1", 0.05, 1.0),
        "ghi_kwh_m2_d": Key("floats12", None, "Mean daily GHI per month.", "kWh m-2 d-1",
                            0.0, 12.0),
    },
    "pond": {
        "area_m2": Key("float", 1000.0, "Water surface of one pond.", "m2", 1.0, 1e6),
        "count": Key("int", 1, "Number of ponds in the farm.", "", 1, 100000),
        "depth_m": Key("float", 0.25, "Culture depth (held constant by makeup water).",
                       "m", 0.05, 1.0),
        "ground_temperature_c": Key("float", None, "Deep-ground temperature under the pond "
                                    "(default: annual mean air temperature).", "degC", -20, 45),
        "ground_conductance_w_m2_k": Key("float", 1.5, "Heat transfer coefficient from the "
                                         "water to the deep ground (assumption: soil ~1 W m-1 "
                                         "K-1 over ~0.7 m, common practice).", "W m-2 K-1",
                                         0.0, 50.0),
        "makeup_temperature_c": Key("float", None, "Temperature of makeup water (default: "
                                    "ground temperature).", "degC", 0, 60),
        "heat_input_w_m2": Key("float", 0.0, "Extra heat input, e.g. waste heat.", "W m-2",
                               0.0, 1000.0),
        "water_emissivity": Key("float", 0.97, "Longwave emissivity of water.", "1", 0.9, 1.0),
        "refractive_index": Key("float", 1.333, "Refractive index of the medium (Fresnel "
                                "reflectance).", "1", 1.3, 1.4),
    },
    "light": {
        "par_fraction": Key("float", None, "PAR (400-700 nm) share of global irradiance "
                            "(default: integrated from the ASTM G173 spectrum).", "1", 0.3, 0.6),
        "photons_per_joule_umol": Key("float", None, "Photon flux per watt of PAR (default: "
                                      "from ASTM G173).", "umol J-1", 4.0, 5.0),
    },
    "strain": {
        "name": Key("str", "strain", "Strain name."),
        "growth_form": Key("str", "self_shading", "Growth equation.",
                           choices=("self_shading", "logistic")),
        "mu_max_per_d": Key("float", None, "Maximum specific growth rate.", "d-1", 0.05, 5.0,
                            required=True),
        "light_model": Key("str", "steele", "Light response f(I).",
                           choices=("steele", "monod", "jassby_platt")),
        "light_param_umol_m2_s": Key("float", None, "Light parameter: optimum irradiance "
                                     "(steele), half-saturation (monod) or saturation onset "
                                     "Ik (jassby_platt).", "umol m-2 s-1", 5.0, 3000.0,
                                     required=True),
        "t_min_c": Key("float", None, "Minimum temperature for growth (CTMI).", "degC",
                       -10, 40, required=True),
        "t_opt_c": Key("float", None, "Optimum temperature (CTMI).", "degC", 0, 50,
                       required=True),
        "t_max_c": Key("float", None, "Maximum temperature for growth (CTMI).", "degC", 5, 60,
                       required=True),
        "maintenance_per_d": Key("float", 0.05, "Maintenance/respiration rate at "
                                 "maintenance_t_ref_c.", "d-1", 0.0, 1.0),
        "maintenance_theta": Key("float", 1.07, "Temperature coefficient of maintenance "
                                 "(m = m_ref theta^(T - T_ref)).", "1", 1.0, 1.2),
        "maintenance_t_ref_c": Key("float", 20.0, "Reference temperature of maintenance.",
                                   "degC", 0, 40),
        "k_biomass_m2_g": Key("float", 0.2, "Biomass-specific light extinction.", "m2 g-1",
                              0.01, 2.0),
        "k_background_per_m": Key("float", 2.0, "Light extinction of the medium itself.",
                                  "m-1", 0.0, 100.0),
        "nutrient_limit_g_m3": Key("float", None, "Cap on the carrying capacity set by the "
                                   "nutrient supply.", "g m-3", 1.0, 20000.0),
        "capacity_table_g_m3": Key("floats12", None, "Monthly carrying capacity table "
                                   "(logistic form only; default: computed light-limited K).",
                                   "g m-3", 1.0, 20000.0),
    },
    "inoculation": {
        "start_date": Key("date", None, "First day of culture (default: 1 January of the "
                          "study year)."),
        "density_g_m3": Key("float", 50.0, "Inoculum density.", "g m-3", 0.1, 5000.0),
        "restart_days": Key("int", 7, "Days a restarted pond is out of service (drain, "
                            "clean, refill, grow a seed train) before reinoculation.", "d",
                            0, 120),
    },
    "harvest": {
        "hour": Key("int", 9, "Local hour of the day at which harvest decisions are made.",
                    "h", 0, 23),
        "recovery_efficiency": Key("float", 0.95, "Share of removed biomass recovered by "
                                   "dewatering.", "1", 0.0, 1.0, open_low=True),
        "capacity_m3_per_d": Key("float", None, "Most culture volume one pond can send to "
                                 "harvest per day.", "m3 d-1", 0.0, 1e6, open_low=True),
        "min_density_g_m3": Key("float", 0.0, "Below this density nothing is harvested.",
                                "g m-3", 0.0, 20000.0),
    },
    "crash": {
        "enabled": Key("bool", True, "Draw culture crashes (false: deterministic runs)."),
        "base_hazard_per_d": Key("float", 0.0005, "Daily crash hazard whatever the weather "
                                 "(contamination, grazers); 0.0005 is 4.4 % per 90-day "
                                 "season. ASSUMPTION: replace with the site's crash "
                                 "history.", "d-1", 0.0, 1.0),
        "stress_hazard_per_d": Key("float", 0.25, "Largest hazard that overshoot while K "
                                   "falls can add. ASSUMPTION.", "d-1", 0.0, 50.0),
        "overshoot_onset": Key("float", 0.8, "Density/K ratio above which overshoot "
                               "stress counts. ASSUMPTION.", "1", 0.0, 0.99),
        "window_days": Key("int", 3, "Window of the K-drop index ln K(t-w) - ln K(t).", "d",
                           1, 30),
        "drop_scale": Key("float", 0.2, "Fall of ln K over the window that counts as one "
                          "unit of drop stress (0.2 = K down 18 %). ASSUMPTION.", "1", 0.0,
                          5.0, open_low=True),
        "loss_fraction": Key("float", 0.8, "Share of standing biomass lost in a crash (the "
                             "rest is salvaged as harvest).", "1", 0.0, 1.0),
        "max_season_probability": Key("float", 0.10, "Risk limit: highest acceptable "
                                      "probability of at least one crash in a season when "
                                      "naming the best policy per season.", "1", 0.0, 1.0,
                                      open_low=True),
    },
    "run": {
        "members": Key("int", 1, "Stochastic members (crash draws) per policy.", "", 1,
                       1000000),
        "seed": Key("int", 12345, "Seed of the random streams (same seed, same result).",
                    "", 0, 2**63 - 1),
        "progress": Key("bool", True, "Show progress bars on long runs."),
    },
}

# Array-of-tables sections are declared separately.
POLICY_KEYS: dict[str, Key] = {
    "name": Key("str", None, "Unique policy name.", required=True),
    "type": Key("str", None, "Harvest rule.", required=True,
                choices=("none", "fixed_fraction", "threshold", "fixed_interval")),
    "fraction": Key("float", None, "Share of the culture volume removed per harvest "
                    "(fixed_fraction; fixed_interval without residual).", "1", 0.0, 1.0,
                    open_low=True),
    "every_days": Key("int", 1, "Days between harvests (fixed_fraction, fixed_interval).",
                      "d", 1, 365),
    "trigger_g_m3": Key("float", None, "Density that triggers a harvest (threshold).",
                        "g m-3", 0.0, 20000.0, open_low=True),
    "residual_g_m3": Key("float", None, "Density left after a harvest (threshold, "
                         "fixed_interval).", "g m-3", 0.0, 20000.0, open_low=True),
}


SEASON_KEYS: dict[str, Key] = {
    "name": Key("str", None, "Season name.", required=True),
    "months": Key("ints", None, "Calendar months (1-12) of the season; seasons must cover "
                  "every month once.", "", 1, 12, required=True),
}

PLAN_KEYS: dict[str, Key] = {
    "name": Key("str", None, "Unique plan name (shown beside the policies).", required=True),
    "policy_by_season": Key("table", None, "Inline table: season name -> policy name, "
                            "one entry per season.", required=True),
}

UNCERTAINTY_KEYS: dict[str, Key] = {
    "weather_years": Key("int", 20, "Synthetic weather years for outlook and tuning studies.",
                         "", 1, 10000),
    "draws": Key("int", 16, "Parameter draws (Latin hypercube) for outlook studies.", "",
                 1, 10000),
    "sobol_samples": Key("int", 64, "Base samples for Sobol sensitivity indices (a power "
                         "of two; cost = samples x (parameters + 2) runs).", "", 8, 8192),
}

#: Distributions a strain parameter may take in [uncertainty], and their keys.
DISTRIBUTIONS = {
    "normal": ("sd",),            # mean = the strain's value
    "lognormal": ("sigma",),      # median = the strain's value, sigma of ln
    "uniform": ("low", "high"),
    "triangular": ("low", "high"),  # mode = the strain's value
}

#: Meteorological seasons by month, hemisphere-neutral names; used when none are given.
DEFAULT_SEASONS = (("Dec-Feb", (12, 1, 2)), ("Mar-May", (3, 4, 5)),
                   ("Jun-Aug", (6, 7, 8)), ("Sep-Nov", (9, 10, 11)))


# --------------------------------------------------------------------------------------
# Dataclasses
# --------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Site:
    name: str
    latitude: float | None
    longitude: float | None
    elevation_m: float | None
    utc_offset_h: float | None


@dataclass(frozen=True)
class Weather:
    source: str
    path: Path | None
    format: str
    wind_height_m: float
    max_gap_h: int
    normals: dict[str, tuple[float, ...]] | None


@dataclass(frozen=True)
class Pond:
    area_m2: float
    count: int
    depth_m: float
    ground_temperature_c: float | None
    ground_conductance_w_m2_k: float
    makeup_temperature_c: float | None
    heat_input_w_m2: float
    water_emissivity: float
    refractive_index: float

    @property
    def farm_area_m2(self) -> float:
        """Water surface of all ponds [m2]."""
        return self.area_m2 * self.count

    @property
    def volume_m3(self) -> float:
        """Culture volume of one pond [m3]."""
        return self.area_m2 * self.depth_m


@dataclass(frozen=True)
class Light:
    par_fraction: float | None
    photons_per_joule_umol: float | None


@dataclass(frozen=True)
class Strain:
    name: str
    growth_form: str
    mu_max_per_d: float
    light_model: str
    light_param_umol_m2_s: float
    t_min_c: float
    t_opt_c: float
    t_max_c: float
    maintenance_per_d: float
    maintenance_theta: float
    maintenance_t_ref_c: float
    k_biomass_m2_g: float
    k_background_per_m: float
    nutrient_limit_g_m3: float | None
    capacity_table_g_m3: tuple[float, ...] | None


@dataclass(frozen=True)
class Inoculation:
    start_date: dt.date | None
    density_g_m3: float
    restart_days: int


@dataclass(frozen=True)
class Harvest:
    hour: int
    recovery_efficiency: float
    capacity_m3_per_d: float | None
    min_density_g_m3: float


@dataclass(frozen=True)
class Policy:
    name: str
    type: str
    fraction: float | None = None
    every_days: int = 1
    trigger_g_m3: float | None = None
    residual_g_m3: float | None = None


@dataclass(frozen=True)
class Crash:
    enabled: bool
    base_hazard_per_d: float
    stress_hazard_per_d: float
    overshoot_onset: float
    window_days: int
    drop_scale: float
    loss_fraction: float
    max_season_probability: float


@dataclass(frozen=True)
class Season:
    name: str
    months: tuple[int, ...]


@dataclass(frozen=True)
class Plan:
    """A season plan: one policy name per season."""

    name: str
    policy_by_season: dict[str, str]


@dataclass(frozen=True)
class Uncertain:
    """One uncertain strain parameter: its distribution around the scenario value."""

    parameter: str
    distribution: str
    sd: float | None = None
    sigma: float | None = None
    low: float | None = None
    high: float | None = None


@dataclass(frozen=True)
class Uncertainty:
    weather_years: int
    draws: int
    sobol_samples: int
    parameters: tuple[Uncertain, ...] = ()


@dataclass(frozen=True)
class Run:
    members: int
    seed: int
    progress: bool


@dataclass(frozen=True)
class Scenario:
    """A validated study description. Build it with :func:`load_scenario`."""

    study_name: str
    year: int
    site: Site
    weather: Weather
    pond: Pond
    light: Light
    strain: Strain
    inoculation: Inoculation
    harvest: Harvest
    policies: tuple[Policy, ...]
    run: Run
    crash: Crash = None  # type: ignore[assignment]
    seasons: tuple[Season, ...] = tuple(Season(n, m) for n, m in DEFAULT_SEASONS)
    plans: tuple[Plan, ...] = ()
    uncertainty: Uncertainty = Uncertainty(20, 16, 64)
    path: Path | None = None
    extra: dict = field(default_factory=dict, compare=False)

    def replace(self, **changes) -> Scenario:
        """Return a copy with top-level fields replaced."""
        return dataclasses.replace(self, **changes)


NO_HARVEST = Policy(name="no harvest", type="none")


# --------------------------------------------------------------------------------------
# Parsing
# --------------------------------------------------------------------------------------
def _allowed(key: Key) -> str:
    if key.choices:
        return "one of " + ", ".join(repr(c) for c in key.choices)
    parts = []
    if key.low is not None and key.high is not None:
        lo = "(" if key.open_low else "["
        parts.append(f"a number in {lo}{key.low:g}, {key.high:g}]")
    elif key.kind in ("float", "floats12"):
        parts.append("a number")
    if key.unit and key.unit != "1":
        parts.append(key.unit)
    return " ".join(parts) if parts else key.kind


def _check_number(value, key: Key, path, name) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise InputError(f"expected {_allowed(key)}, got {value!r}", path=path, field=name)
    value = float(value)
    if not math.isfinite(value):
        raise InputError(f"expected a finite number, got {value!r}", path=path, field=name)
    too_low = key.low is not None and (value <= key.low if key.open_low else value < key.low)
    too_high = key.high is not None and value > key.high
    if too_low or too_high:
        raise InputError(f"{value:g} is out of range; allowed: {_allowed(key)}",
                         path=path, field=name)
    return value


def _convert(value, key: Key, path, name, base_dir: Path):
    kind = key.kind
    if kind == "float":
        return _check_number(value, key, path, name)
    if kind == "int":
        if isinstance(value, bool) or not isinstance(value, int):
            raise InputError(f"expected a whole number ({_allowed(key)}), got {value!r}",
                             path=path, field=name)
        return int(_check_number(value, key, path, name))
    if kind == "bool":
        if not isinstance(value, bool):
            raise InputError(f"expected true or false, got {value!r}", path=path, field=name)
        return value
    if kind == "str":
        if not isinstance(value, str):
            raise InputError(f"expected text, got {value!r}", path=path, field=name)
        if key.choices and value not in key.choices:
            raise InputError(f"unknown value {value!r}{did_you_mean(value, key.choices)}; "
                             f"allowed: {_allowed(key)}", path=path, field=name)
        return value
    if kind == "path":
        if not isinstance(value, str):
            raise InputError(f"expected a file path as text, got {value!r}", path=path,
                             field=name)
        return (base_dir / value).resolve()
    if kind == "date":
        if isinstance(value, dt.datetime):
            return value.date()
        if isinstance(value, dt.date):
            return value
        if isinstance(value, str):
            try:
                return dt.date.fromisoformat(value)
            except ValueError:
                pass
        raise InputError(f"expected a date like 2025-03-01, got {value!r}", path=path,
                         field=name)
    if kind == "floats12":
        if not isinstance(value, list) or len(value) != MONTHS:
            got = f"{len(value)} values" if isinstance(value, list) else repr(value)
            raise InputError(f"expected a list of 12 monthly values (January to December), "
                             f"got {got}", path=path, field=name)
        return tuple(_check_number(v, key, path, f"{name}[{i + 1}]")
                     for i, v in enumerate(value))
    if kind == "ints":
        if not isinstance(value, list) or not value:
            raise InputError(f"expected a list of whole numbers ({_allowed(key)}), got "
                             f"{value!r}", path=path, field=name)
        return tuple(_convert(v, Key("int", low=key.low, high=key.high), path,
                              f"{name}[{i + 1}]", base_dir) for i, v in enumerate(value))
    if kind == "table":
        if not isinstance(value, dict):
            raise InputError(f"expected an inline table {{ name = \"value\", ... }}, got "
                             f"{value!r}", path=path, field=name)
        for k, v in value.items():
            if not isinstance(v, str):
                raise InputError(f"expected text, got {v!r}", path=path, field=f"{name}.{k}")
        return dict(value)
    raise AssertionError(kind)  # pragma: no cover - schema bug


def _parse_table(table, keys: dict[str, Key], path, prefix: str, base_dir: Path) -> dict:
    if not isinstance(table, dict):
        raise InputError("expected a table", path=path, field=prefix)
    out = {}
    for name in table:
        if name not in keys:
            raise InputError(f"unknown key{did_you_mean(name, keys)}; allowed keys: "
                             + ", ".join(keys), path=path, field=f"{prefix}.{name}")
    for name, key in keys.items():
        dotted = f"{prefix}.{name}"
        if name in table:
            out[name] = _convert(table[name], key, path, dotted, base_dir)
        elif key.required:
            raise InputError(f"missing required key; expected {_allowed(key)}"
                             + (f" — {key.doc}" if key.doc else ""), path=path, field=dotted)
        else:
            out[name] = key.default
    return out


TOP_LEVEL = tuple(s for s in SCHEMA if "." not in s) + ("policy", "season", "plan",
                                                          "uncertainty")


def parse_scenario(data: dict, path: str | Path | None = None) -> Scenario:
    """Validate a scenario mapping (as read from TOML) into a :class:`Scenario`."""
    base_dir = Path(path).resolve().parent if path else Path.cwd()
    for name in data:
        if name not in TOP_LEVEL:
            raise InputError(f"unknown section{did_you_mean(name, TOP_LEVEL)}; allowed: "
                             + ", ".join(TOP_LEVEL), path=path, field=name)
    sec = {}
    for section, keys in SCHEMA.items():
        if "." in section:
            continue
        table = dict(data.get(section, {})) if isinstance(data.get(section, {}), dict) else \
            data[section]
        nested = {k: table.pop(k) for k in list(table) if f"{section}.{k}" in SCHEMA} \
            if isinstance(table, dict) else {}
        sec[section] = _parse_table(table, keys, path, section, base_dir)
        for sub, subtable in nested.items():
            sec[f"{section}.{sub}"] = _parse_table(subtable, SCHEMA[f"{section}.{sub}"], path,
                                                   f"{section}.{sub}", base_dir)
    if "strain" not in data:
        raise InputError("missing section [strain] (growth parameters of the strain)",
                         path=path, field="strain")

    weather = _build_weather(sec, path)
    site = Site(**sec["site"])
    if weather.source == "clearsky":
        for name in ("latitude", "longitude", "elevation_m", "utc_offset_h"):
            if getattr(site, name) is None:
                raise InputError("clear-sky mode needs the site's coordinates; allowed: "
                                 + _allowed(SCHEMA["site"][name]), path=path,
                                 field=f"site.{name}")
    strain = Strain(**sec["strain"])
    _check_strain(strain, path)
    year = sec["study"]["year"]
    inoc = Inoculation(**sec["inoculation"])
    if inoc.start_date is not None and inoc.start_date.year != year:
        raise InputError(f"start date {inoc.start_date} lies outside the study year {year}",
                         path=path, field="inoculation.start_date")
    policies = _parse_policies(data.get("policy", []), path, base_dir)
    seasons = _parse_seasons(data.get("season"), path, base_dir)
    plans = _parse_plans(data.get("plan", []), policies, seasons, path, base_dir)
    return Scenario(
        study_name=sec["study"]["name"], year=year, site=site, weather=weather,
        pond=Pond(**sec["pond"]), light=Light(**sec["light"]), strain=strain,
        inoculation=inoc, harvest=Harvest(**sec["harvest"]), policies=policies,
        run=Run(**sec["run"]), crash=Crash(**sec["crash"]), seasons=seasons, plans=plans,
        uncertainty=_parse_uncertainty(data.get("uncertainty", {}), strain, path, base_dir),
        path=Path(path).resolve() if path else None,
    )


#: Strain parameters that may be given a distribution in [uncertainty].
UNCERTAIN_PARAMETERS = ("mu_max_per_d", "light_param_umol_m2_s", "t_min_c", "t_opt_c",
                        "t_max_c", "maintenance_per_d", "maintenance_theta",
                        "k_biomass_m2_g", "k_background_per_m")


def _parse_uncertainty(raw, strain: Strain, path, base_dir) -> Uncertainty:
    if not isinstance(raw, dict):
        raise InputError("expected a table", path=path, field="uncertainty")
    plain = {k: v for k, v in raw.items() if k in UNCERTAINTY_KEYS}
    settings = _parse_table(plain, UNCERTAINTY_KEYS, path, "uncertainty", base_dir)
    params = []
    allowed = tuple(UNCERTAINTY_KEYS) + UNCERTAIN_PARAMETERS
    for name, spec in raw.items():
        if name in UNCERTAINTY_KEYS:
            continue
        where = f"uncertainty.{name}"
        if name not in UNCERTAIN_PARAMETERS:
            raise InputError(f"unknown key{did_you_mean(name, allowed)}; allowed: "
                             + ", ".join(allowed), path=path, field=where)
        if not isinstance(spec, dict) or "distribution" not in spec:
            raise InputError("expected an inline table such as { distribution = \"normal\", "
                             "sd = 0.2 }; distributions: " + ", ".join(
                                 f"{d} ({', '.join(k)})" for d, k in DISTRIBUTIONS.items()),
                             path=path, field=where)
        dist = spec["distribution"]
        if dist not in DISTRIBUTIONS:
            hint = did_you_mean(str(dist), DISTRIBUTIONS)
            raise InputError(f"unknown distribution {dist!r}{hint}; allowed: "
                             + ", ".join(DISTRIBUTIONS), path=path,
                             field=f"{where}.distribution")
        needed = DISTRIBUTIONS[dist]
        extra = sorted(set(spec) - set(needed) - {"distribution"})
        if extra:
            raise InputError(f"{extra} do not apply to a {dist} distribution; it takes "
                             + ", ".join(needed), path=path, field=where)
        values = {}
        for key in needed:
            if key not in spec:
                raise InputError(f"a {dist} distribution needs {', '.join(needed)}",
                                 path=path, field=f"{where}.{key}")
            values[key] = _check_number(spec[key], Key("float", low=0.0, high=1e6,
                                                       open_low=key in ("sd", "sigma")),
                                        path, f"{where}.{key}")
        centre = getattr(strain, name)
        if "low" in values and not values["low"] <= centre <= values["high"]:
            raise InputError(f"low {values['low']:g} and high {values['high']:g} must "
                             f"bracket the strain's value {centre:g}", path=path, field=where)
        params.append(Uncertain(parameter=name, distribution=dist, **values))
    return Uncertainty(parameters=tuple(params), **settings)


def _parse_seasons(raw, path, base_dir) -> tuple[Season, ...]:
    if raw is None:
        return tuple(Season(n, m) for n, m in DEFAULT_SEASONS)
    if not isinstance(raw, list) or not raw:
        raise InputError("expected one or more [[season]] tables", path=path, field="season")
    seasons = []
    owner: dict[int, str] = {}
    for i, table in enumerate(raw):
        prefix = f"season[{i + 1}]"
        season = Season(**_parse_table(table, SEASON_KEYS, path, prefix, base_dir))
        for month in season.months:
            if month in owner:
                raise InputError(f"month {month} is in season {owner[month]!r} and in "
                                 f"{season.name!r}; seasons must not overlap", path=path,
                                 field=f"{prefix}.months")
            owner[month] = season.name
        seasons.append(season)
    missing = [m for m in range(1, 13) if m not in owner]
    if missing:
        raise InputError(f"months {missing} belong to no season; the seasons must cover "
                         "all 12 months", path=path, field="season.months")
    names = [s.name for s in seasons]
    if len(set(names)) != len(names):
        raise InputError("season names must be unique", path=path, field="season.name")
    return tuple(seasons)


def _parse_plans(raw, policies, seasons, path, base_dir) -> tuple[Plan, ...]:
    if not isinstance(raw, list):
        raise InputError("expected [[plan]] tables", path=path, field="plan")
    plans = []
    policy_names = [p.name for p in policies]
    season_names = [s.name for s in seasons]
    taken = set(policy_names)
    for i, table in enumerate(raw):
        prefix = f"plan[{i + 1}]"
        plan = Plan(**_parse_table(table, PLAN_KEYS, path, prefix, base_dir))
        if plan.name in taken:
            raise InputError(f"name {plan.name!r} is already used by a policy or plan",
                             path=path, field=f"{prefix}.name")
        taken.add(plan.name)
        for season, policy in plan.policy_by_season.items():
            where = f"{prefix}.policy_by_season.{season}"
            if season not in season_names:
                raise InputError(f"unknown season{did_you_mean(season, season_names)}; "
                                 "seasons: " + ", ".join(season_names), path=path,
                                 field=where)
            if policy not in policy_names:
                raise InputError(f"unknown policy {policy!r}"
                                 f"{did_you_mean(policy, policy_names)}; policies: "
                                 + ", ".join(policy_names), path=path, field=where)
        missing = [s for s in season_names if s not in plan.policy_by_season]
        if missing:
            raise InputError(f"no policy for season(s) {missing}; a plan needs one policy "
                             "per season", path=path, field=f"{prefix}.policy_by_season")
        plans.append(plan)
    return tuple(plans)


def _build_weather(sec, path) -> Weather:
    w = sec["weather"]
    normals = sec.get("weather.normals")
    if w["source"] == "file":
        if w["path"] is None:
            raise InputError("source = 'file' needs the path of a weather file",
                             path=path, field="weather.path")
        if not w["path"].is_file():
            raise InputError(f"weather file not found: {w['path']}", path=path,
                             field="weather.path")
        normals = None
    else:
        if normals is None:
            raise InputError("source = 'clearsky' needs a [weather.normals] table with "
                             "monthly temp_max_c, temp_min_c, wind_speed_m_s, "
                             "relative_humidity_pct and clearness or ghi_kwh_m2_d",
                             path=path, field="weather.normals")
        for name in ("temp_max_c", "temp_min_c", "wind_speed_m_s", "relative_humidity_pct"):
            if normals[name] is None:
                raise InputError("missing monthly normals (12 values)", path=path,
                                 field=f"weather.normals.{name}")
        if (normals["clearness"] is None) == (normals["ghi_kwh_m2_d"] is None):
            raise InputError("give exactly one of clearness and ghi_kwh_m2_d", path=path,
                             field="weather.normals.clearness")
        for month, (hi, lo) in enumerate(zip(normals["temp_max_c"], normals["temp_min_c"],
                                             strict=True)):
            if lo > hi:
                raise InputError(f"month {month + 1}: temp_min_c {lo:g} exceeds temp_max_c "
                                 f"{hi:g}; allowed: temp_min_c <= temp_max_c", path=path,
                                 field=f"weather.normals.temp_min_c[{month + 1}]")
        normals = {k: v for k, v in normals.items() if v is not None}
    return Weather(normals=normals, **w)


def _check_strain(s: Strain, path) -> None:
    if not s.t_min_c < s.t_opt_c < s.t_max_c:
        raise InputError(f"cardinal temperatures must satisfy t_min_c < t_opt_c < t_max_c; "
                         f"got {s.t_min_c:g}, {s.t_opt_c:g}, {s.t_max_c:g} degC",
                         path=path, field="strain.t_opt_c")
    # Rosso et al. (1993): the inflexion form needs Topt above the midpoint of the range.
    if s.t_opt_c <= (s.t_min_c + s.t_max_c) / 2:
        raise InputError("the cardinal temperature model with inflexion (Rosso et al. 1993) "
                         "needs t_opt_c above the midpoint of t_min_c and t_max_c "
                         f"({(s.t_min_c + s.t_max_c) / 2:g} degC)", path=path,
                         field="strain.t_opt_c")
    if s.capacity_table_g_m3 is not None and s.growth_form != "logistic":
        raise InputError("a capacity table applies only to growth_form = 'logistic'",
                         path=path, field="strain.capacity_table_g_m3")


def _parse_policies(raw, path, base_dir) -> tuple[Policy, ...]:
    if not isinstance(raw, list):
        raise InputError("expected [[policy]] tables", path=path, field="policy")
    policies = []
    for i, table in enumerate(raw):
        prefix = f"policy[{i + 1}]"
        p = _parse_table(table, POLICY_KEYS, path, prefix, base_dir)
        pol = Policy(**p)
        _check_policy(pol, path, prefix)
        policies.append(pol)
    names = [p.name for p in policies]
    for name in names:
        if names.count(name) > 1:
            raise InputError(f"policy name {name!r} is used twice; names must be unique",
                             path=path, field="policy.name")
    return tuple(policies) if policies else (NO_HARVEST,)


def _check_policy(p: Policy, path, prefix) -> None:
    def need(key):
        if getattr(p, key) is None:
            raise InputError(f"a {p.type} policy needs {key} ({_allowed(POLICY_KEYS[key])})",
                             path=path, field=f"{prefix}.{key}")

    def refuse(*keys):
        for key in keys:
            if getattr(p, key) is not None:
                raise InputError(f"{key} does not apply to a {p.type} policy", path=path,
                                 field=f"{prefix}.{key}")

    if p.type == "fixed_fraction":
        need("fraction")
        refuse("trigger_g_m3", "residual_g_m3")
    elif p.type == "threshold":
        need("trigger_g_m3")
        need("residual_g_m3")
        refuse("fraction")
        if p.residual_g_m3 >= p.trigger_g_m3:
            raise InputError(f"residual_g_m3 ({p.residual_g_m3:g}) must be below "
                             f"trigger_g_m3 ({p.trigger_g_m3:g})", path=path,
                             field=f"{prefix}.residual_g_m3")
    elif p.type == "fixed_interval":
        refuse("trigger_g_m3")
        if (p.fraction is None) == (p.residual_g_m3 is None):
            raise InputError("a fixed_interval policy needs exactly one of residual_g_m3 "
                             "and fraction", path=path, field=f"{prefix}.residual_g_m3")
    else:  # none
        refuse("fraction", "trigger_g_m3", "residual_g_m3")


def load_scenario(path: str | Path) -> Scenario:
    """Read and validate a scenario TOML file.

    Raises
    ------
    InputError
        For a missing file, invalid TOML, an unknown key (with a suggestion), a wrong
        type or a value out of its allowed range.
    """
    path = Path(path)
    if not path.is_file():
        raise InputError("scenario file not found", path=path)
    try:
        with path.open("rb") as fh:
            data = tomllib.load(fh)
    except tomllib.TOMLDecodeError as err:
        raise InputError(f"not valid TOML: {err}", path=path) from None
    return parse_scenario(data, path)


def schema_markdown() -> str:
    """The scenario reference as Markdown tables (one per section)."""
    lines = []
    sections = list(SCHEMA.items()) + [
        ("policy (array of tables [[policy]])", POLICY_KEYS),
        ("season (array of tables [[season]]; default: Dec-Feb, Mar-May, Jun-Aug, "
         "Sep-Nov)", SEASON_KEYS),
        ("plan (array of tables [[plan]])", PLAN_KEYS),
        ("uncertainty (plus one inline table per uncertain strain parameter, e.g. "
         "mu_max_per_d = { distribution = \"normal\", sd = 0.2 }; distributions: "
         + ", ".join(f"{d} ({', '.join(k)})" for d, k in DISTRIBUTIONS.items())
         + ")", UNCERTAINTY_KEYS)]
    for section, keys in sections:
        lines += [f"### `[{section}]`", "", "| key | unit | default | allowed | meaning |",
                  "|---|---|---|---|---|"]
        for name, key in keys.items():
            if key.required:
                default = "required"
            elif key.default is None:
                default = "—"
            else:
                default = f"`{key.default}`"
            allowed = _allowed(key) if (key.choices or key.low is not None) else {
                "floats12": "12 numbers", "ints": "list of whole numbers",
                "table": "inline table", "path": "file path", "date": "date YYYY-MM-DD",
            }.get(key.kind, key.kind)
            unit = key.unit or ""
            lines.append(f"| `{name}` | {unit} | {default} | {allowed} | {key.doc} |")
        lines.append("")
    return "\n".join(lines)


def relocate_text(text: str, scenario: Scenario, new_dir: str | Path) -> str:
    """Scenario file text for a copy placed in *new_dir*: the weather file's path is
    rewritten relative to the new folder so that the copy still finds it."""
    import os
    import re

    if scenario.weather.path is None:
        return text
    rel = Path(os.path.relpath(scenario.weather.path, Path(new_dir).resolve())).as_posix()
    section = None
    lines = text.splitlines(keepends=True)
    for i, line in enumerate(lines):
        head = re.match(r"\s*\[+\s*([^\]]+?)\s*\]+", line)
        if head:
            section = head.group(1)
            continue
        if section == "weather" and re.match(r"\s*path\s*=", line):
            lines[i] = re.sub(r"(path\s*=\s*)([\"']).*?\2", lambda m: f'{m.group(1)}"{rel}"',
                              line, count=1)
            break
    return "".join(lines)
