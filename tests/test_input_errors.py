"""Every bad input ends in one line 'pondsim: error: FILE: field ...: what is allowed' and
exit status 2, never a traceback: text that is not UTF-8, values of the wrong type at any
depth of the scenario (inline tables, arrays of tables), and bad command-line values."""

from __future__ import annotations

import copy
import datetime as dt
import tomllib
from pathlib import Path

import pytest

from pondsim import cli
from pondsim.errors import InputError
from pondsim.scenario import load_scenario, parse_scenario

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "scenarios" / "kestrel_flats.toml"
DEMO_EPW = ROOT / "weather" / "kestrel_flats.epw"


def _demo_text() -> str:
    return DEMO.read_text(encoding="utf-8").replace('"../weather/kestrel_flats.epw"',
                                                    f'"{DEMO_EPW.as_posix()}"')


def _one_line(capsys) -> str:
    err = capsys.readouterr().err
    assert "Traceback" not in err
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("pondsim: error:"), err
    return lines[0]


@pytest.mark.parametrize("encode", [
    lambda t: t.replace("(invented)", "(inv\u00e9nted)").encode("latin-1", "replace"),  # value
    lambda t: t.replace("# deg, north", "# d\u00e9g, north").encode("cp1252"),  # comment
    lambda t: t.replace('name = "', 'name = "\u201c').encode("cp1252"),  # smart quote
    lambda t: t.encode("utf-16"),
    lambda t: t.encode("utf-8")[:200] + b"\xff\xfe" + t.encode("utf-8")[200:],
], ids=["latin1-value", "cp1252-comment", "cp1252-quote", "utf16", "stray-bytes"])
def test_text_that_is_not_utf8_is_one_line(encode, tmp_path, capsys):
    path = tmp_path / "s.toml"
    path.write_bytes(encode(_demo_text()))
    with pytest.raises(InputError, match=r"not UTF-8 text: byte 0x[0-9a-f]{2} at line \d+"):
        load_scenario(path)
    assert cli.main(["run", str(path), "--out", str(tmp_path / "o")]) == 2
    assert "save the file as UTF-8" in _one_line(capsys)
    assert not (tmp_path / "o").exists()


def test_utf8_with_byte_order_mark_is_read(tmp_path):
    path = tmp_path / "bom.toml"
    path.write_bytes(b"\xef\xbb\xbf" + _demo_text().encode("utf-8"))
    assert load_scenario(path).study_name


ODD_VALUES = [["normal"], [1, 2], [], {"a": 1}, {}, "text", True, -3, 1e300,
              float("nan"), dt.date(2025, 1, 1), dt.time(12, 0)]


def _leaves(obj, prefix=()):
    if isinstance(obj, dict):
        items = obj.items()
    elif isinstance(obj, list):
        items = enumerate(obj)
    else:
        return
    for key, value in items:
        yield prefix + (key,)
        yield from _leaves(value, prefix + (key,))


def test_a_value_of_any_odd_type_anywhere_is_an_input_error():
    """Every key of the demo (top-level, inline tables such as the distributions of
    [uncertainty], arrays of tables such as [[policy]]) replaced in turn by values of the
    wrong kind: the parser raises InputError naming the file, never another error."""
    base = tomllib.loads(_demo_text())
    tried = 0
    for where in _leaves(base):
        for odd in ODD_VALUES:
            data = copy.deepcopy(base)
            holder = data
            for key in where[:-1]:
                holder = holder[key]
            holder[where[-1]] = odd
            tried += 1
            try:
                parse_scenario(data, DEMO)
            except InputError as err:
                assert str(DEMO) in str(err)
    assert tried > 500


def test_distribution_name_given_as_a_list(tmp_path, capsys):
    path = tmp_path / "s.toml"
    path.write_text(_demo_text().replace('distribution = "normal"',
                                         'distribution = ["normal"]'), encoding="utf-8")
    assert cli.main(["outlook", str(path), "--out", str(tmp_path / "o")]) == 2
    line = _one_line(capsys)
    assert "uncertainty.mu_max_per_d.distribution" in line and "allowed" in line


@pytest.mark.parametrize("argv, flag", [
    (["run", "{s}", "--seed", "-1"], "--seed"),
    (["run", "{s}", "--seed", str(2**64)], "--seed"),
    (["run", "{s}", "--members", "0"], "--members"),
    (["run", "{s}", "--members", "-5"], "--members"),
    (["run", "{s}", "--members", "1000001"], "--members"),
    (["compare", "{s}", "--seed", "-7"], "--seed"),
    (["outlook", "{s}", "--years", "0"], "--years"),
    (["outlook", "{s}", "--draws", "-2"], "--draws"),
    (["tune", "{s}", "--members", "0"], "--members"),
    (["screen", "{s}", "--sites", "{s}", "--workers", "0"], "--workers"),
    (["screen", "{s}", "--sites", "{s}", "--seed", "-1"], "--seed"),
    (["weather", "{w}", "--latitude", "nan"], "--latitude"),
    (["weather", "{w}", "--longitude", "-200"], "--longitude"),
    (["weather", "{w}", "--utc-offset", "inf"], "--utc-offset"),
    (["weather", "{w}", "--year", "0"], "--year"),
    (["run", "{s}", "--out", ""], "--out"),
])
def test_bad_command_line_values_are_one_line(argv, flag, capsys):
    argv = [a.format(s=DEMO, w=DEMO_EPW) for a in argv]
    assert cli.main(argv) == 2
    assert f"field '{flag}'" in _one_line(capsys)


# ------------------------------------------------------------ dates written by people
# A day-first file whose days never pass 12 (1-12 April written 01/04/2025 ...) was read
# month-first by pandas' inference: 4 January ... 4 December, still increasing, so the
# fit ran on the wrong dates without a word. Every reader of user dates now takes one
# format for the whole column and refuses what both orders read differently.
def test_parse_times_reads_one_order_for_the_whole_column_or_refuses():
    from pondsim.forcing.timestamps import parse_times

    iso = parse_times(["2025-04-01 08:00", "2025-04-02", "2025-04-03T09:30:00"])
    assert list(iso.day) == [1, 2, 3] and list(iso.month) == [4, 4, 4]
    # one row with a day above 12 settles the order for every row
    dmy = parse_times(["01/04/2025 08:00", "12/04/2025 08:00", "13/04/2025 08:00"])
    assert list(dmy.month) == [4, 4, 4] and list(dmy.day) == [1, 12, 13]
    mdy = parse_times(["04/01/2025", "04/12/2025", "04/13/2025"])
    assert list(mdy.month) == [4, 4, 4] and list(mdy.day) == [1, 12, 13]
    dotted = parse_times(["01.04.2025", "20.04.2025"])
    assert list(dotted.month) == [4, 4]
    with pytest.raises(InputError, match="ambiguous.*1 April.*4 January.*ISO 8601"):
        parse_times([f"{d:02d}/04/2025" for d in range(1, 13)], field="time")
    # every row the same day and month: both orders give the same dates
    assert parse_times(["04/04/2025"])[0] == dt.datetime(2025, 4, 4)
    with pytest.raises(InputError, match="cannot read the times"):
        parse_times(["soon", "later"])
    assert parse_times(["2025-04-01", "x"], coerce=True).isna().tolist() == [False, True]


def _pilot_rows(tmp_path, fmt):
    import pandas as pd

    src = pd.read_csv(ROOT / "scenarios" / "kestrel_flats_pilot.csv", comment="#")
    t = pd.to_datetime(src["time"])
    part = src[(t.dt.month == 4) & (t.dt.day <= 12)].copy()
    part["time"] = pd.to_datetime(part["time"]).dt.strftime(fmt)
    path = tmp_path / "pilot.csv"
    part.to_csv(path, index=False)
    return path


def test_ambiguous_observation_dates_are_one_line(tmp_path, capsys):
    path = _pilot_rows(tmp_path, "%d/%m/%Y %H:%M")
    scenario = tmp_path / "s.toml"
    scenario.write_text(_demo_text(), encoding="utf-8")
    out = tmp_path / "fit"
    assert cli.main(["fit", str(path), "--scenario", str(scenario), "--no-plots",
                     "--out", str(out)]) == 2
    line = _one_line(capsys)
    assert "pilot.csv" in line and "'time'" in line and "ambiguous" in line
    # nothing written (the folder check may leave its hidden lock file)
    assert not out.exists() or not [p for p in out.iterdir() if not p.name.startswith(".")]


def test_day_first_observation_dates_are_read_day_first(tmp_path):
    from pondsim.studies.fit_observations import read_observations

    path = _pilot_rows(tmp_path, "%d/%m/%Y %H:%M")
    text = path.read_text().splitlines()
    # add 13 April so that the order is settled: 01/04 is then 1 April, not 4 January
    path.write_text("\n".join(text + [text[-1].replace("12/04/2025", "13/04/2025")]))
    obs = read_observations(path)
    assert obs.time.month.unique().tolist() == [4]
    assert obs.time[0].day == 1 and obs.time[-1].day == 13


def test_ambiguous_pond_log_dates_are_refused(tmp_path):
    from pondsim.studies.crash_log import read_pond_log

    path = tmp_path / "log.csv"
    path.write_text("pond,date,event,value\nA,01/03/2025,inoculated,\nA,05/03/2025,sample,"
                    "80\nA,10/03/2025,crash,\n")
    with pytest.raises(InputError, match="ambiguous") as err:
        read_pond_log(path)
    assert err.value.field == "date"


def test_ambiguous_weather_csv_times_are_refused(tmp_path):
    import pandas as pd

    from pondsim.forcing.formats import raw_csv

    hours = pd.date_range("2025-01-01", periods=24 * 12, freq="h")  # 12 days: all <= 12
    frame = pd.DataFrame({"time": hours.strftime("%d/%m/%Y %H:%M"), "ghi": 0.0,
                          "temp_air": 20.0, "wind_speed": 2.0, "relative_humidity": 50.0})
    path = tmp_path / "w.csv"
    frame.to_csv(path, index=False)
    with pytest.raises(InputError, match="ambiguous"):
        raw_csv(path, None, None, "start")
