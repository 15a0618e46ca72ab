"""Scenario files: one TOML file describes one study.

``schema`` declares every key (type, unit, default, range, meaning); ``model`` holds the
frozen dataclasses a scenario becomes; ``parse`` reads and validates the file. Any problem
raises :class:`pondsim.errors.InputError` naming the file, the dotted key and what is
allowed.
"""

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
from pondsim.scenario.parse import (
    TOP_LEVEL,
    UNCERTAIN_PARAMETERS,
    load_scenario,
    parse_scenario,
    relocate_text,
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
    schema_markdown,
)

__all__ = [
    "NO_HARVEST", "Crash", "Harvest", "Inoculation", "Inputs", "Light", "Plan", "Policy",
    "Pond", "Prices", "Run",
    "Scenario", "Season", "Site", "Strain", "Uncertain", "Uncertainty", "Weather",
    "TOP_LEVEL", "UNCERTAIN_PARAMETERS", "load_scenario", "parse_scenario", "relocate_text",
    "DEFAULT_SEASONS", "DISTRIBUTIONS", "INPUTS_KEYS", "MONTHS", "PLAN_KEYS", "POLICY_KEYS",
    "PRICES_KEYS", "SCHEMA",
    "SEASON_KEYS", "UNCERTAINTY_KEYS", "Key", "schema_markdown",
]
