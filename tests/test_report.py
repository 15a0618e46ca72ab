"""pondsim report: one self-contained HTML page built from the CSV outputs.

These check the project's own output contract (sections, embedded figures, numbers equal
to the CSVs, reuse of results, rendering in a headless browser). Outside facts used:
- The PNG signature 137 80 78 71 13 10 26 10: PNG specification (W3C / ISO/IEC 15948:2004)
  section 5.2.
- SHA-256 as computed by Python's hashlib (FIPS 180-4).
"""

from __future__ import annotations

import argparse
import base64
import hashlib
import json
import os
import re
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from pondsim import __version__
from pondsim.errors import InputError
from pondsim.report import build as rep
from pondsim.scenario import SCHEMA, load_scenario, relocate_text

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "scenarios" / "kestrel_flats.toml"
PNG_MAGIC = b"\x89PNG\r\n\x1a\n"  # PNG specification, section 5.2
OPTIONS = ["--years", "2", "--draws", "2", "--members", "2"]
VOID = {"area", "base", "br", "col", "embed", "hr", "img", "input", "link", "meta",
        "source", "track", "wbr"}


def _report(argv) -> int:
    """Run `pondsim report` through its own parser (the lead wires it into cli.py)."""
    parser = argparse.ArgumentParser(prog="pondsim")
    sub = parser.add_subparsers(dest="command")
    rep.add_report_parser(sub)
    return rep.cmd_report(parser.parse_args(["report", *argv]))


def _csv(path, index_col=None):
    """Read a CSV output independently of pondsim: a plain table (header row first, no
    comment lines; the caution is in the folder's README.txt)."""
    text = Path(path).read_text(encoding="utf-8")
    assert not text.startswith("#")
    return pd.read_csv(path, index_col=index_col, keep_default_na=False, na_values=[""])


class Page(HTMLParser):
    """Collects headings, tags with attributes, and the text of cells that carry a
    ``data-value`` with their table and row context."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict]] = []
        self.h2: list[str] = []
        self.section_ids: list[str] = []
        self.values: list[dict] = []
        self.run_date = None
        self._stack: list[tuple[str, dict | None]] = []
        self._table = None
        self._row: dict = {}
        self._h2 = None

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        self.tags.append((tag, a))
        if tag == "section":
            self.section_ids.append(a.get("id"))
        if tag == "table":
            self._table = a.get("id")
        if tag == "tr":
            self._row = a
        if tag == "h2":
            self._h2 = ""
        record = None
        if "data-value" in a:
            record = {"table": self._table, "row": dict(self._row), "col": a["data-col"],
                      "value": a["data-value"], "text": "", "tag": tag}
            self.values.append(record)
        if a.get("id") == "run-date":
            record = {"text": ""}
            self.run_date = record
        if tag not in VOID:
            self._stack.append((tag, record))

    def handle_endtag(self, tag):
        if tag == "h2" and self._h2 is not None:
            self.h2.append(self._h2.strip())
            self._h2 = None
        if tag == "table":
            self._table = None
        while self._stack:
            t, _ = self._stack.pop()
            if t == tag:
                break

    def handle_data(self, data):
        if self._h2 is not None:
            self._h2 += data
        for _, record in self._stack:
            if record is not None:
                record["text"] += data


def _parse(text: str) -> Page:
    page = Page()
    page.feed(text)
    page.close()
    return page


def _shown(text: str) -> tuple[float, float]:
    """A displayed number and half a unit of its last digit."""
    t = text.strip().replace(",", "")
    decimals = len(t.split(".")[1]) if "." in t else 0
    return float(t), 0.5 * 10.0 ** -decimals


@pytest.fixture(scope="module")
def small_scenario(tmp_path_factory):
    """The demo scenario with 8 Sobol base samples (the minimum) for a quick run."""
    folder = tmp_path_factory.mktemp("scenario")
    scenario = load_scenario(DEMO)
    text = relocate_text(DEMO.read_text(encoding="utf-8"), scenario, folder)
    assert "sobol_samples = 64" in text
    path = folder / "small.toml"
    path.write_text(text.replace("sobol_samples = 64", "sobol_samples = 8"), encoding="utf-8")
    return path


@pytest.fixture(scope="module")
def report_dir(small_scenario, tmp_path_factory):
    out = tmp_path_factory.mktemp("report")
    assert _report([str(small_scenario), "--out", str(out), *OPTIONS]) == 0
    return out


@pytest.fixture(scope="module")
def page_text(report_dir):
    return (report_dir / "report.html").read_text(encoding="utf-8")


def test_sections_in_order_and_page_is_self_contained(report_dir, page_text):
    page = _parse(page_text)
    assert [re.sub(r"^\d+\.\s*", "", h) for h in page.h2] == [t for _, t in rep.SECTIONS]
    assert page.section_ids == [sid for sid, _ in rep.SECTIONS]
    tags = [t for t, _ in page.tags]
    assert "script" not in tags and "link" not in tags and "iframe" not in tags
    assert "http://" not in page_text and "https://" not in page_text
    assert "@import" not in page_text and "url(" not in page_text
    for tag, attrs in page.tags:
        for name in ("src", "href", "action", "srcset"):
            value = attrs.get(name)
            assert value is None or value.startswith("data:image/png;base64,"), (tag, name)
        assert not any(k.startswith("on") for k in attrs), (tag, attrs)
    images = [a for t, a in page.tags if t == "img"]
    pngs = sorted(p.name for p in report_dir.glob("*.png"))
    assert len(images) == len(pngs) == len(rep.FIGURES) + 1  # + sensitivity.png
    embedded = set()
    for a in images:
        assert len(a.get("alt", "")) > 30  # a real description, not a file name
        data = base64.b64decode(a["src"].split(",", 1)[1], validate=True)
        assert data[:8] == PNG_MAGIC  # PNG specification, section 5.2
        embedded.add(hashlib.sha256(data).hexdigest())
    on_disk = {hashlib.sha256((report_dir / n).read_bytes()).hexdigest() for n in pngs}
    assert embedded == on_disk


def test_headline_numbers_are_the_csv_numbers(report_dir, page_text):
    page = _parse(page_text)
    annual = _csv(report_dir / "annual_yield.csv", index_col="policy")
    cells = [v for v in page.values if v["table"] == "headline-table"]
    seen = set()
    for c in cells:
        policy = c["row"]["data-policy"]
        if c["col"] == "efficiency_solar_pct":
            expected = _csv(report_dir / "summary.csv", index_col="policy").loc[
                policy, "efficiency_solar_pct"]
        else:
            expected = annual.loc[policy, c["col"]]
        assert float(c["value"]) == expected
        shown, half = _shown(c["text"])
        assert abs(shown - expected) <= half * (1 + 1e-9)
        seen.add((policy, c["col"]))
    for col in ("P50_farm_t_yr", "P90_farm_t_yr", "mean_g_m2_d", "expected_crashes_yr"):
        assert {(p, col) for p in annual.index} <= seen
    # The cards: the lead (highest P50) policy's farm biomass, productivity, crashes.
    lead = annual["P50_t_ha_yr"].idxmax()
    cards = {c["col"]: c for c in page.values if c["tag"] == "span"}
    assert set(cards) == {"P50_farm_t_yr", "P90_farm_t_yr", "mean_g_m2_d",
                          "expected_crashes_yr"}
    for col, c in cards.items():
        assert float(c["value"]) == annual.loc[lead, col]
        shown, half = _shown(c["text"])
        assert abs(shown - annual.loc[lead, col]) <= half * (1 + 1e-9)
    # Best plan per season and the annual inputs bill.
    best = _csv(report_dir / "best_by_season.csv", index_col="season")
    seasons = [c for c in page.values if c["table"] == "headline-seasons"]
    assert {c["row"]["data-season"] for c in seasons} == set(best.index)
    for c in seasons:
        assert float(c["value"]) == best.loc[c["row"]["data-season"], c["col"]]
    bill = _csv(report_dir / "inputs_bill.csv", index_col="month")
    year = [c for c in page.values if c["table"] == "bill-table"
            and c["row"].get("data-month") == "year"]
    assert {c["col"] for c in year} >= {"co2_t", "n_t", "p_t", "makeup_water_m3",
                                        "mixing_MWh"}
    for c in year:
        assert float(c["value"]) == bill.loc["year", c["col"]]
    assert "not priced" in page_text


def test_page_states_version_hashes_and_run_date(small_scenario, report_dir, page_text):
    page = _parse(page_text)
    digest = hashlib.sha256(small_scenario.read_bytes()).hexdigest()  # FIPS 180-4
    assert digest in page_text
    assert f"pondsim {__version__}" in page_text
    assert page.run_date is not None and re.search(r"\d{4}-\d\d-\d\dT\d\d:\d\d",
                                                   page.run_date["text"])
    weather = load_scenario(small_scenario).weather.path
    assert hashlib.sha256(weather.read_bytes()).hexdigest() in page_text


def test_rerun_reuses_results_and_page_differs_only_in_run_date(small_scenario, report_dir,
                                                                 page_text, monkeypatch):
    import importlib

    outlook = importlib.import_module("pondsim.studies.outlook")
    # the module, not the function
    simulate = importlib.import_module("pondsim.operations.simulate")

    def no_simulation(*args, **kwargs):
        raise AssertionError("the report simulated again instead of reusing the results")

    for module, name in ((outlook, "run_outlook"), (outlook, "simulate"),
                         (simulate, "simulate"), (rep, "run_study")):
        monkeypatch.setattr(module, name, no_simulation)
    mtimes = {p.name: p.stat().st_mtime_ns for p in report_dir.iterdir() if p.name
              != "report.html"}
    run = rep.make_report(small_scenario, report_dir, years=2, draws=2, members=2,
                          run_date="2000-01-01T00:00:00+00:00")
    assert run.reused
    assert {p.name: p.stat().st_mtime_ns for p in report_dir.iterdir()
            if p.name != "report.html"} == mtimes
    new = (report_dir / "report.html").read_text(encoding="utf-8")
    old_lines, new_lines = page_text.splitlines(), new.splitlines()
    assert len(old_lines) == len(new_lines)
    changed = [(a, b) for a, b in zip(old_lines, new_lines, strict=True) if a != b]
    assert len(changed) == 1 and 'id="run-date"' in changed[0][0]
    assert "2000-01-01T00:00:00+00:00" in changed[0][1]


def test_changed_inputs_or_files_are_not_reused(small_scenario, report_dir, tmp_path):
    scenario = load_scenario(small_scenario)
    options = rep.resolve_options(scenario, years=2, draws=2, members=2)
    base = rep.inputs_fingerprint(scenario, options)
    assert rep.reusable_manifest(report_dir, base) is not None
    other_seed = rep.inputs_fingerprint(scenario, {**options, "seed": options["seed"] + 1})
    assert other_seed["inputs_sha256"] != base["inputs_sha256"]
    assert rep.reusable_manifest(report_dir, other_seed) is None
    # Another weather file's bytes (one byte changed) change the hash.
    weather = tmp_path / "w.epw"
    data = bytearray(scenario.weather.path.read_bytes())
    data[-2] = ord("7") if data[-2] != ord("7") else ord("8")
    weather.write_bytes(bytes(data))
    text = small_scenario.read_text(encoding="utf-8")
    moved = tmp_path / "s.toml"
    moved.write_text(re.sub(r'path = "[^"]+"', 'path = "w.epw"', text, count=1),
                     encoding="utf-8")
    changed = rep.inputs_fingerprint(load_scenario(moved), options)
    assert changed["scenario_sha256"] != base["scenario_sha256"]
    assert changed["weather_sha256"] != base["weather_sha256"]
    # A CSV edited after the run is caught by its recorded SHA-256.
    copy = tmp_path / "copy"
    shutil.copytree(report_dir, copy)
    assert rep.reusable_manifest(copy, base) is not None
    with open(copy / "annual_yield.csv", "a", encoding="utf-8") as fh:
        fh.write("\n")
    assert rep.reusable_manifest(copy, base) is None


def test_every_parameter_with_unit_value_and_source(small_scenario, report_dir, page_text):
    table = _csv(report_dir / "assumptions.csv")
    keyed = {(g, k): r for g, k, r in zip(table["group"], table["key"],
                                          table.to_dict("records"), strict=True)}
    for section, keys in SCHEMA.items():
        if section == "weather.normals":  # only in clear-sky mode
            continue
        for name in keys:
            assert (section, name) in keyed, (section, name)
    assert keyed[("pond", "depth_m")]["source"] == "scenario"
    assert keyed[("pond", "depth_m")]["value"] == "0.25"
    default = keyed[("pond", "water_emissivity")]
    assert default["source"] == "default"
    assert default["note"] == SCHEMA["pond"]["water_emissivity"].doc
    assert "ASSUMPTION" in keyed[("crash", "background_per_d")]["note"]
    assert keyed[("option", "weather_years")]["value"] == "2"
    page = _parse(page_text)
    rows = [a for t, a in page.tags if t == "tr"]
    assert sum(1 for t, a in page.tags if t == "td" and a.get("class") == "key") == len(table)
    assert rows  # the table is drawn


def test_text_is_escaped(small_scenario, report_dir):
    import json

    scenario = load_scenario(small_scenario)
    nasty = scenario.replace(study_name="<script>alert('x')</script> & Co")
    manifest = json.loads((report_dir / rep.MANIFEST).read_text(encoding="utf-8"))
    text = rep.build_page(report_dir, nasty, manifest, run_date="now")
    assert "<script" not in text
    assert "&lt;script&gt;alert(&#x27;x&#x27;)&lt;/script&gt; &amp; Co" in text


def test_bad_options_name_the_flag(small_scenario):
    scenario = load_scenario(small_scenario)
    with pytest.raises(InputError, match="--years"):
        rep.resolve_options(scenario, years=0)
    with pytest.raises(InputError, match="--members"):
        rep.resolve_options(scenario, members=-3)


def _browser():
    exe = shutil.which("chromium") or shutil.which("chromium-browser")
    if exe is None and os.environ.get("CI") == "true" and shutil.which("apt-get"):
        subprocess.run(["apt-get", "update"], capture_output=True, timeout=600, check=False)
        subprocess.run(["apt-get", "install", "-y", "chromium"], capture_output=True,
                       timeout=900, check=False)
        exe = shutil.which("chromium")
    if exe is None:
        pytest.skip("no headless browser: chromium is not on PATH (CI installs it with "
                    "`apt-get install -y chromium`)")
    return exe


def _chromium(exe, tmp_path, *args):
    flags = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
             "--no-first-run", "--disable-background-networking",
             "--disable-component-update", "--disable-sync",
             f"--user-data-dir={tmp_path / 'profile'}", "--hide-scrollbars"]
    done = subprocess.run([exe, *flags, *args], capture_output=True, timeout=180, check=False)
    return done


def test_page_renders_in_headless_chromium(report_dir, tmp_path):
    import matplotlib.image as mpimg

    exe = _browser()
    url = (report_dir / "report.html").resolve().as_uri()
    shot = tmp_path / "report.png"
    # A window taller than the page, at half scale: 500 x 15000 pixels.
    _chromium(exe, tmp_path, "--force-device-scale-factor=0.5", "--window-size=1000,30000",
              f"--screenshot={shot}", url)
    assert shot.is_file(), "chromium wrote no screenshot"
    grey = mpimg.imread(shot)[..., :3].mean(axis=2)
    assert grey.std() > 0.05  # not blank
    dark = (grey < 0.5).mean()
    assert 0.005 < dark < 0.5  # text and figures on a light page, no dark background
    drawn = np.flatnonzero((grey < 0.9).any(axis=1))
    last = drawn.max()
    assert last < grey.shape[0] - 50, "the page is taller than the window"
    # The last thing drawn is the end rule after the last section: the whole page laid out.
    assert (grey[last] < 0.3).mean() > 0.8
    # Print to PDF: at least one page per major section.
    assert _pdf_pages(exe, tmp_path, url, "report.pdf") >= len(rep.SECTIONS)
    # The print CSS alone: ten one-line sections print on exactly ten pages, so each
    # major section starts a page.
    tiny = tmp_path / "tiny.html"
    body = "\n".join(rep._section(i, ["<p>one line</p>"]) for i in range(len(rep.SECTIONS)))
    tiny.write_text(f"<!DOCTYPE html><html><head><meta charset='utf-8'><style>{rep.CSS}"
                    f"</style></head><body><main>{body}</main></body></html>",
                    encoding="utf-8")
    assert _pdf_pages(exe, tmp_path, tiny.as_uri(), "tiny.pdf") == len(rep.SECTIONS)


def _pdf_pages(exe, tmp_path, url, name) -> int:
    pdf = tmp_path / name
    _chromium(exe, tmp_path, "--no-pdf-header-footer", f"--print-to-pdf={pdf}", url)
    data = pdf.read_bytes()
    assert data.startswith(b"%PDF-")
    return len(re.findall(rb"/Type\s*/Page(?![s\w])", data))


def _summary_page(page_text: str, paper: str) -> str:
    """The report's header and summary section alone, printed on *paper*."""
    head = re.search(r"<header>.*?</header>", page_text, re.S).group(0)
    summary = re.search(r'<section id="summary".*?</section>', page_text, re.S).group(0)
    return (f"<!DOCTYPE html><html><head><meta charset='utf-8'><style>{rep.CSS}"
            f"@page {{ size: {paper}; }}</style></head><body>{head}<main>{summary}</main>"
            "</body></html>")


@pytest.mark.parametrize("paper", ["A4", "Letter"])
def test_summary_prints_on_one_page(page_text, tmp_path, paper):
    exe = _browser()
    page = tmp_path / f"summary_{paper}.html"
    page.write_text(_summary_page(page_text, paper), encoding="utf-8")
    assert _pdf_pages(exe, tmp_path, page.as_uri(), f"summary_{paper}.pdf") == 1


def test_summary_answers_from_the_outputs(small_scenario, report_dir, page_text, tmp_path):
    from pondsim.report.summary import NOT_AVAILABLE, summary_section

    page = _parse(page_text)
    assert page.section_ids[0] == "summary"
    annual = _csv(report_dir / "annual_yield.csv", index_col="policy")
    manifest = json.loads((report_dir / rep.MANIFEST).read_text(encoding="utf-8"))
    lead = manifest["lead_policy"]
    cells = [v for v in page.values if v["table"] == "summary-answer"]
    assert {c["col"] for c in cells} == {"P50_farm_t_yr", "P50_t_ha_yr", "P90_farm_t_yr",
                                         "P90_t_ha_yr"}
    for c in cells:
        assert float(c["value"]) == annual.loc[lead, c["col"]]
        shown, half = _shown(c["text"])
        assert abs(shown - annual.loc[lead, c["col"]]) <= half * (1 + 1e-9)
    best = _csv(report_dir / "best_by_season.csv", index_col="season")
    plan = [c for c in page.values if c["table"] == "summary-plan"]
    assert {c["row"]["data-season"] for c in plan} == set(best.index)
    summary = re.search(r'<section id="summary".*?</section>', page_text, re.S).group(0)
    # Sobol ranking: the three largest total indices, largest first.
    sens = _csv(report_dir / "sensitivity.csv", index_col="parameter")
    top = list(sens.sort_values("total", ascending=False).index[:3])
    from pondsim.results.figures_outlook import parameter_label

    positions = [summary.index(parameter_label(k)) for k in top]
    assert positions == sorted(positions)
    # No interval columns in this run's table: the summary says so instead of a number.
    if "P50_low_farm_t_yr" not in annual.columns:
        assert f"interval: {NOT_AVAILABLE}" in summary
        # With interval columns (as an ensemble with Monte Carlo intervals writes them),
        # the summary shows them.
        copy = tmp_path / "copy"
        shutil.copytree(report_dir, copy)
        text = (copy / "annual_yield.csv").read_text(encoding="utf-8").splitlines()
        header = text[1] + ",P50_low_farm_t_yr,P50_high_farm_t_yr,P90_low_farm_t_yr," \
            "P90_high_farm_t_yr,confidence_pct"
        rows = [r + ",1.25,2.5,0.75,1.5,95" for r in text[2:]]
        (copy / "annual_yield.csv").write_text("\n".join([text[0], header, *rows]) + "\n",
                                               encoding="utf-8")
        body = summary_section(copy, load_scenario(small_scenario), manifest)
        assert "95 % interval 1.2 to 2.5" in body and "95 % interval 0.8 to 1.5" in body
        assert f"interval: {NOT_AVAILABLE}" not in body


def test_summary_reads_a_priced_bill(small_scenario, report_dir, tmp_path):
    """A bill with the priced columns (``total_cost_<currency>``, ``cost_per_t_<...>``)
    gives the bill's headline cost; without them the summary says it is not priced."""
    from pondsim.report.summary import NOT_AVAILABLE, summary_section

    manifest = json.loads((report_dir / rep.MANIFEST).read_text(encoding="utf-8"))
    scenario = load_scenario(small_scenario)
    plain = summary_section(report_dir, scenario, manifest)
    assert f"cost: {NOT_AVAILABLE} (not priced)" in plain
    copy = tmp_path / "priced"
    shutil.copytree(report_dir, copy)
    lines = (copy / "inputs_bill.csv").read_text(encoding="utf-8").splitlines()
    lines[0] += ",total_cost_EUR,cost_per_t_EUR"  # plain CSV: the header is the first line
    lines[1:] = [row + ",12345.0,678.9" for row in lines[1:]]
    (copy / "inputs_bill.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    priced = summary_section(copy, scenario, manifest)
    assert "priced inputs 12,345 EUR per year, 679 EUR per tonne of product" in priced
    assert "not priced" not in priced
