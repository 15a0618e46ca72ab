"""Parsing and validation: TOML text -> :class:`~pondsim.scenario.model.Scenario`.

Any problem raises :class:`pondsim.errors.InputError` naming the file, the dotted key
and what is allowed."""

from __future__ import annotations

import datetime as dt
import math
import re
import tomllib
from pathlib import Path

from pondsim.errors import InputError, did_you_mean
from pondsim.scenario.model import (
    NO_HARVEST,
    Crash,
    Harvest,
    Inoculation,
    Inputs,
    Light,
    Plan,
    Policy,
    Pond,
    Prices,
    Run,
    Scenario,
    Season,
    Site,
    Strain,
    Uncertain,
    Uncertainty,
    Weather,
)
from pondsim.scenario.schema import (
    DEFAULT_SEASONS,
    DISTRIBUTIONS,
    INPUTS_KEYS,
    MONTHS,
    PLAN_KEYS,
    POLICY_KEYS,
    PRICES_KEYS,
    SCHEMA,
    SEASON_KEYS,
    UNCERTAINTY_KEYS,
    Key,
    _allowed,
)


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


#: Keys of earlier versions, with what replaced them.
_CAUSES_NOTE = ("the crash hazard now has named causes (background_per_d, background_q10, "
                "starvation_hazard_per_d, heat_hazard_per_d_h, cold_hazard_per_d_k; see "
                "README 'Crash risk'): remove this key")
RETIRED_KEYS = {
    "crash.base_hazard_per_d": "renamed: write crash.background_per_d",
    "crash.stress_hazard_per_d": _CAUSES_NOTE,
    "crash.overshoot_onset": _CAUSES_NOTE,
    "crash.drop_scale": _CAUSES_NOTE,
    "inputs.uptake_basis": ("split in two: write inputs.carbon_basis (the CO2 line) and "
                            "inputs.nutrient_basis (the N and P lines), each "
                            "'gross_growth' or 'net_growth'"),
}


def _parse_table(table, keys: dict[str, Key], path, prefix: str, base_dir: Path) -> dict:
    if not isinstance(table, dict):
        raise InputError("expected a table", path=path, field=prefix)
    out = {}
    for name in table:
        if f"{prefix}.{name}" in RETIRED_KEYS:
            raise InputError(RETIRED_KEYS[f"{prefix}.{name}"], path=path,
                             field=f"{prefix}.{name}")
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
                                                          "uncertainty", "inputs", "prices")


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
        inputs=_check_inputs(Inputs(**_parse_table(data.get("inputs", {}), INPUTS_KEYS, path,
                                                   "inputs", base_dir)), path),
        prices=_check_prices(Prices(**_parse_table(data.get("prices", {}), PRICES_KEYS, path,
                                                   "prices", base_dir)), path),
        path=Path(path).resolve() if path else None,
    )


#: Elements a biomass formula may name, and one element with its (decimal) count.
BIOMASS_ELEMENTS = ("C", "H", "O", "N", "P", "S")
_FORMULA_TERM = re.compile(r"([A-Z][a-z]?)(\d+(?:\.\d+)?|\.\d+)?")


def biomass_formula_counts(formula: str) -> dict[str, float] | None:
    """Atoms per element of a biomass formula such as ``CO0.48H1.83N0.11P0.01`` (decimal
    counts, no parentheses), or None when the text is not such a formula."""
    text = formula.replace(" ", "")
    terms = _FORMULA_TERM.findall(text)
    if not terms or "".join(e + c for e, c in terms) != text:
        return None
    counts: dict[str, float] = {}
    for element, count in terms:
        counts[element] = counts.get(element, 0.0) + (float(count) if count else 1.0)
    return counts


def _check_inputs(inp: Inputs, path) -> Inputs:
    counts = biomass_formula_counts(inp.composition_formula)
    allowed = ("a formula like CO0.48H1.83N0.11P0.01 of the elements "
               + " ".join(BIOMASS_ELEMENTS) + " with carbon present")
    if counts is None or not set(counts) <= set(BIOMASS_ELEMENTS) or \
            not counts.get("C", 0.0) > 0:
        raise InputError(f"cannot read {inp.composition_formula!r}; allowed: {allowed}",
                         path=path, field="inputs.composition_formula")
    if inp.bends_per_circuit % 2:
        raise InputError(f"{inp.bends_per_circuit} bends; allowed: an even number (a "
                         "raceway's channels are joined end to end by 180 degree bends)",
                         path=path, field="inputs.bends_per_circuit")
    return inp


def _check_prices(prices: Prices, path) -> Prices:
    if prices.any and not (prices.currency or "").strip():
        raise InputError("missing currency; allowed: the name of the currency of every "
                         "price, e.g. currency = \"USD\"", path=path, field="prices.currency")
    return prices


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
        if not isinstance(dist, str) or dist not in DISTRIBUTIONS:
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
        raw = path.read_bytes()
    except OSError as err:
        raise InputError(f"cannot read the scenario file: {err.strerror or err}",
                         path=path) from None
    try:
        data = tomllib.loads(decode_text(raw, path))
    except tomllib.TOMLDecodeError as err:
        raise InputError(f"not valid TOML: {err}", path=path) from None
    try:
        return parse_scenario(data, path)
    except (TypeError, AttributeError) as err:  # safety net: a value of an odd type
        raise InputError(f"a value has a type the scenario does not allow ({err}); see "
                         "the key reference (pondsim keys)", path=path) from None


def decode_text(raw: bytes, path) -> str:
    """UTF-8 text of a file (a leading byte-order mark is dropped); a byte that is not
    UTF-8 raises :class:`InputError` naming its line and column."""
    try:
        return raw.decode("utf-8-sig")
    except UnicodeDecodeError as err:
        head = raw[:err.start]
        line = head.count(b"\n") + 1
        column = err.start - (head.rfind(b"\n") + 1) + 1
        raise InputError(f"not UTF-8 text: byte 0x{raw[err.start]:02x} at line {line}, "
                         f"column {column}; save the file as UTF-8", path=path) from None



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
