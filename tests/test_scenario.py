"""Scenario files: the demo parses; every malformed file gives one clear message naming the
file and the key, and the CLI exits with status 2 without a traceback.

These are checks of the project's own input contract (no outside reference values); the
cardinal-temperature ordering rule comes from Rosso, Lobry & Flandrois (1993), J. Theor.
Biol. 162:447-463 (the model needs Tmin < Topt < Tmax and Topt above the mid-range).
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from pondsim import load_scenario
from pondsim.cli import main
from pondsim.errors import InputError
from pondsim.scenario import INPUTS_KEYS, PRICES_KEYS, SCHEMA, schema_markdown

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "scenarios" / "kestrel_flats.toml"


def demo_text() -> str:
    return DEMO.read_text()


def write(tmp_path, text, name="bad.toml") -> Path:
    path = tmp_path / name
    # Keep the demo's weather path valid from the temporary folder.
    text = text.replace('"../weather/kestrel_flats.epw"',
                        repr(str(ROOT / "weather" / "kestrel_flats.epw")).replace("'", '"'))
    path.write_text(text)
    return path


def test_demo_scenario_parses():
    s = load_scenario(DEMO)
    assert s.pond.depth_m == 0.25
    assert s.strain.t_min_c < s.strain.t_opt_c < s.strain.t_max_c
    assert len(s.policies) == 3
    assert s.weather.path.is_file()
    assert s.pond.farm_area_m2 == 2000 * 8


def test_defaults_fill_missing_keys(tmp_path):
    text = demo_text().replace("maintenance_theta = 1.07\n", "")
    s = load_scenario(write(tmp_path, text))
    assert s.strain.maintenance_theta == SCHEMA["strain"]["maintenance_theta"].default


def test_readme_reference_lists_every_key():
    readme = (ROOT / "README.md").read_text()
    sections = {**SCHEMA, "inputs": INPUTS_KEYS, "prices": PRICES_KEYS}
    for section, keys in sections.items():
        for name in keys:
            assert f"`{name}`" in readme, f"README lacks [{section}] {name}"
    assert schema_markdown().count("###") == len(SCHEMA) + 6


BAD_CASES = [
    # (description, edit of the demo text, field named in the message, words expected)
    ("unknown key with suggestion",
     lambda t: t.replace("depth_m = 0.25", "depht_m = 0.25"),
     "pond.depht_m", r"did you mean 'depth_m'"),
    ("unknown section",
     lambda t: t + "\n[strian]\nname = 'x'\n", "strian", r"did you mean 'strain'"),
    ("wrong type",
     lambda t: t.replace("depth_m = 0.25", 'depth_m = "deep"'), "pond.depth_m",
     r"expected a number in \[0.05, 1\] m"),
    ("out of range depth",
     lambda t: t.replace("depth_m = 0.25", "depth_m = 3.0"), "pond.depth_m",
     r"out of range; allowed: a number in \[0.05, 1\] m"),
    ("Tmin >= Topt",
     lambda t: t.replace("t_min_c = 2 ", "t_min_c = 30 "), "strain.t_opt_c",
     r"t_min_c < t_opt_c < t_max_c"),
    ("missing weather file",
     lambda t: t.replace('path = "../weather/kestrel_flats.epw"', 'path = "nowhere.epw"'),
     "weather.path", r"weather file not found"),
    ("unknown light model",
     lambda t: t.replace('light_model = "steele"', 'light_model = "steel"'),
     "strain.light_model", r"did you mean 'steele'"),
    ("negative fraction",
     lambda t: t.replace("fraction = 0.15", "fraction = -0.15"), "policy[1].fraction",
     r"allowed: a number in \(0, 1\]"),
    ("residual above trigger",
     lambda t: t.replace("residual_g_m3 = 400\n\n[[policy]]", "residual_g_m3 = 900\n\n"
                         "[[policy]]", 1), "policy[2].residual_g_m3", r"must be below"),
    ("missing required strain key",
     lambda t: re.sub(r"(?m)^mu_max_per_d = .*$", "", t), "strain.mu_max_per_d",
     r"missing required key"),
    ("non-integer count",
     lambda t: t.replace("count = 8 ", "count = 8.5 "), "pond.count", r"whole number"),
    ("invalid TOML", lambda t: t.replace("[pond]", "[pond"), None, r"not valid TOML"),
    ("clear-sky without normals",
     lambda t: t.replace('source = "file"', 'source = "clearsky"'), "weather.normals",
     r"needs a \[weather.normals\] table"),
    ("start date outside the year",
     lambda t: t.replace("[inoculation]", '[inoculation]\nstart_date = "2024-03-01"'),
     "inoculation.start_date", r"outside the study year"),
    ("overlapping seasons",
     lambda t: t + '\n[[season]]\nname = "cool"\nmonths = [11, 12, 1, 2, 3]\n'
                   '[[season]]\nname = "warm"\nmonths = [3, 4, 5, 6, 7, 8, 9, 10]\n',
     "season[2].months", r"month 3 is in season 'cool' and in 'warm'"),
    ("season months missing",
     lambda t: t + '\n[[season]]\nname = "cool"\nmonths = [11, 12, 1, 2]\n'
                   '[[season]]\nname = "warm"\nmonths = [3, 4, 5, 6, 7, 8]\n',
     "season.months", r"months \[9, 10\] belong to no season"),
    ("plan names an unknown policy",
     lambda t: t.replace('"Jun-Aug" = "daily 15 %"', '"Jun-Aug" = "daily 51 %"'),
     "plan[1].policy_by_season.Jun-Aug", r"did you mean 'daily 15 %'"),
    ("unknown distribution",
     lambda t: t.replace('distribution = "normal"', 'distribution = "gaussian"'),
     "uncertainty.mu_max_per_d.distribution", r"allowed: normal, lognormal"),
    ("duplicate policy names",
     lambda t: t.replace('name = "every 3 d to 400"', 'name = "daily 15 %"'),
     "policy.name", r"used twice"),
]


@pytest.mark.parametrize("desc, edit, field, words", BAD_CASES, ids=[c[0] for c in BAD_CASES])
def test_bad_scenario_message_and_exit_code(tmp_path, capsys, desc, edit, field, words):
    path = write(tmp_path, edit(demo_text()))
    with pytest.raises(InputError) as info:
        load_scenario(path)
    msg = str(info.value)
    assert str(path) in msg
    if field:
        assert f"field '{field}'" in msg
    assert re.search(words, msg), msg
    code = main(["run", str(path), "--out", str(tmp_path / "out")])
    err = capsys.readouterr().err
    assert code == 2
    assert "Traceback" not in err
    assert err.count("\n") == 1 and err.startswith("pondsim: error:")
    assert not (tmp_path / "out").exists(), "nothing is written for bad input"


def test_missing_scenario_file(capsys, tmp_path):
    code = main(["run", str(tmp_path / "absent.toml")])
    assert code == 2
    assert "scenario file not found" in capsys.readouterr().err
