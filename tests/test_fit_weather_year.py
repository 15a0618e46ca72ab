"""Dated records (pilot observations, pond logs) must not silently take another year's
weather: a weather file of one real year stands in for another year only when asked,
with a note; a typical-year file is placed into the record's year with a note."""

from __future__ import annotations

from pathlib import Path

import pytest

from pondsim.cli import main
from pondsim.errors import InputError
from pondsim.scenario import load_scenario
from pondsim.studies.fit_growth import pilot_hourly

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "scenarios" / "kestrel_flats.toml"  # weather: one real year, 2025


def test_other_year_raises_unless_mapped():
    scenario = load_scenario(DEMO)
    with pytest.raises(InputError) as err:
        pilot_hourly(scenario, year=2024)
    text = str(err.value)
    assert "2024" in text and "2025" in text and "--map-weather-year" in text
    hourly = pilot_hourly(scenario, year=2024, map_year=True)
    assert hourly.index[0].year == 2024 and len(hourly) == 366 * 24
    assert any("weather of 2025 used" in n for n in hourly.attrs["notes"])
    same = pilot_hourly(scenario, year=2025)
    assert not same.attrs["notes"]


def test_fit_command_exits_2_on_a_pilot_dated_in_another_year(tmp_path, capsys):
    text = (ROOT / "scenarios" / "kestrel_flats_pilot.csv").read_text(encoding="utf-8")
    shifted = tmp_path / "pilot_2024.csv"
    shifted.write_text(text.replace("2025-", "2024-"), encoding="utf-8")
    status = main(["fit", str(shifted), "--scenario", str(DEMO), "--out",
                   str(tmp_path / "out"), "--no-plots"])
    assert status == 2
    assert "--map-weather-year" in capsys.readouterr().err
    out = tmp_path / "out"
    assert not out.exists() or not [p for p in out.iterdir() if not p.name.startswith(".")]
