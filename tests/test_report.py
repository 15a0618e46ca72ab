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
from pondsim.results import files as F
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
    # The cards: the lead policy's farm biomass, productivity, crashes; the lead is the
    # highest P50 among rules that wash the culture out in no member (summary.csv).
    washed = _csv(report_dir / "summary.csv", index_col="policy")["washed_out_pct"]
    clean = annual[washed.reindex(annual.index).fillna(0) == 0]
    lead = (clean if len(clean) else annual)["P50_t_ha_yr"].idxmax()
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
    # The page and the output set's own README and manifest are new; every result file
    # is carried into the new set unchanged.
    renewed = {"report.html", F.README_NAME, F.MANIFEST_NAME}
    mtimes = {p.name: p.stat().st_mtime_ns for p in report_dir.iterdir()
              if p.name not in renewed}
    run = rep.make_report(small_scenario, report_dir, years=2, draws=2, members=2,
                          run_date="2000-01-01T00:00:00+00:00")
    assert run.reused
    assert {p.name: p.stat().st_mtime_ns for p in report_dir.iterdir()
            if p.name not in renewed} == mtimes
    assert F.verify_output_set(report_dir) == []
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
    # The schema's doc, labelled ASSUMPTION when it names no source.
    assert default["note"].startswith(SCHEMA["pond"]["water_emissivity"].doc)
    assert "ASSUMPTION" in default["note"]
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
    # A window taller than the page, at quarter scale: 250 x 15000 pixels.
    _chromium(exe, tmp_path, "--force-device-scale-factor=0.25", "--window-size=1000,60000",
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


def test_summary_reads_a_priced_bill(small_scenario, report_dir, page_text):
    """The demo is priced: the summary gives the annual cost and the cost per tonne's P50
    and conservative P10, the numbers of inputs_bill.csv and inputs_cost_per_t.csv."""
    from pondsim.report.html import _num

    bill = _csv(report_dir / "inputs_bill.csv", index_col="month")
    per_t = _csv(report_dir / "inputs_cost_per_t.csv", index_col="figure").iloc[0]
    summary = re.search(r'<section id="summary".*?</section>', page_text, re.S).group(0)
    assert (f"priced inputs {_num(bill.loc['year', 'total_cost_USD'], 0)} USD per year"
            in summary)
    assert (f"P50 {_num(per_t['P50_USD_per_t'], 0)} USD, conservative P10 "
            f"{_num(per_t['P10_USD_per_t'], 0)}") in summary


def _section_html(page_text: str, sid: str) -> str:
    return re.search(rf'<section id="{sid}".*?</section>', page_text, re.S).group(0)


def test_bill_lines_show_basis_source_and_cost_per_tonne(report_dir, page_text):
    """Each line of inputs_bill_lines.csv is in the page with its basis and source; the
    cost per tonne (P90/P50/P10) and the year's totals are the CSV numbers."""
    import html

    page = _parse(page_text)
    lines = _csv(report_dir / "inputs_bill_lines.csv", index_col="line")
    section = html.unescape(_section_html(page_text, "inputs"))
    shown = {c["row"]["data-line"] for c in page.values if c["table"] == "bill-lines"}
    assert shown == set(lines.index)
    for name, r in lines.iterrows():
        assert r["basis"] in section and r["source"] in section, name
    assert "gross growth" in lines.loc["biomass taken up", "basis"]
    assert "harvest" in lines.loc["product", "basis"]
    for c in page.values:
        if c["table"] == "bill-lines" and c["col"] == "cost_per_yr":
            assert float(c["value"]) == lines.loc[c["row"]["data-line"], "cost_per_yr"]
    per_t = _csv(report_dir / "inputs_cost_per_t.csv", index_col="figure").iloc[0]
    cells = [c for c in page.values if c["table"] == "bill-cost-per-t"]
    assert {c["row"]["data-level"] for c in cells} == {"P90", "P50", "P10"}
    for c in cells:
        assert float(c["value"]) == per_t[c["col"]]
    # A cost's exceedance figures: P90 is the low (optimistic) one, P10 the high one.
    assert per_t["P90_USD_per_t"] <= per_t["P50_USD_per_t"] <= per_t["P10_USD_per_t"]
    bill = _csv(report_dir / "inputs_bill.csv", index_col="month")
    year = {c["col"]: float(c["value"]) for c in page.values
            if c["table"] == "bill-table" and c["row"].get("data-month") == "year"}
    assert year["total_cost_USD"] == bill.loc["year", "total_cost_USD"]
    # Pricing arithmetic: each priced line's cost = quantity x unit price.
    priced = lines[lines["priced"] == "yes"]
    assert len(priced) >= 5
    np.testing.assert_allclose(priced["cost_per_yr"],
                               priced["quantity_per_yr"] * priced["unit_price"], rtol=1e-5)


def test_unpriced_scenario_says_not_priced(small_scenario, report_dir, tmp_path):
    """A scenario without [prices]: the bill gives quantities, the page and the summary
    say "not priced" and show no cost figure."""
    import xarray as xr

    from pondsim.report.summary import NOT_AVAILABLE, summary_section
    from pondsim.results.files import write_csv
    from pondsim.scenario.model import Prices
    from pondsim.studies.bill import scenario_bill

    manifest = json.loads((report_dir / rep.MANIFEST).read_text(encoding="utf-8"))
    scenario = load_scenario(small_scenario).replace(prices=Prices())
    copy = tmp_path / "unpriced"
    shutil.copytree(report_dir, copy)
    with xr.open_dataset(copy / "results.nc") as ds:
        bill = scenario_bill(ds.load(), scenario, manifest["lead_policy"])
    assert bill.cost_per_t is None
    write_csv(bill.monthly, copy / "inputs_bill.csv")
    write_csv(bill.lines, copy / "inputs_bill_lines.csv")
    (copy / "inputs_cost_per_t.csv").unlink()
    manifest["bill"]["notes"] = bill.notes
    text = rep.build_page(copy, scenario, manifest, run_date="now")
    section = _section_html(text, "inputs")
    assert "Not priced: the scenario has no [prices] section" in section
    assert 'id="bill-cost-per-t"' not in section and "total_cost_" not in section
    assert "not priced: the scenario has no [prices] section" in section  # the bill's note
    summary = summary_section(copy, scenario, manifest)
    assert f"cost: {NOT_AVAILABLE} (not priced)" in summary


def test_no_from_memory_text_and_every_default_sourced(small_scenario, report_dir,
                                                       page_text):
    """The issue's rule: every default cites a source or is labelled assumption, and no
    "from memory" reaches the report (the code's own marker for an unchecked value)."""
    import html

    from pondsim.scenario import INPUTS_KEYS, PRICES_KEYS

    text = html.unescape(page_text).lower()
    assert "from memory" not in text and "not verified" not in text
    table = _csv(report_dir / "assumptions.csv")
    keyed = {(g, k): r for g, k, r in zip(table["group"], table["key"],
                                          table.to_dict("records"), strict=True)}
    for section, keys in (("inputs", INPUTS_KEYS), ("prices", PRICES_KEYS)):
        for name in keys:
            assert (section, name) in keyed, (section, name)
    assert keyed[("prices", "currency")]["value"] == "USD"
    assert keyed[("prices", "currency")]["source"] == "scenario"
    assert keyed[("inputs", "co2_utilisation")]["source"] == "scenario"
    sourced = re.compile(r"\b(1[89]|20)\d\d\b|assumption|common practice|definition|"
                         r"IUPAC|ASTM|FAO", re.I)
    checked = 0
    for r in table.to_dict("records"):
        try:
            float(r["value"])
        except ValueError:  # not set, a switch, a name or a list: no value assumed
            continue
        if r["source"] == "default":
            assert sourced.search(str(r["note"])), (r["group"], r["key"], r["note"])
            checked += 1
    assert checked >= 20
    # A doc that says "from memory" in the code is shown as an unchecked assumption.
    assert "ASSUMPTION, source not checked" in keyed[("pond", "harbeck_prefactor")]["note"]


def test_crash_section_names_causes_basis_and_salvage(small_scenario, report_dir,
                                                       page_text):
    import html

    import xarray as xr

    from pondsim.operations.crash import CAUSES
    from pondsim.scenario.model import Crash

    assert not hasattr(Crash, "stress_hazard_per_d")  # the retired aliases are gone
    section = html.unescape(_section_html(page_text, "crash"))
    for word in ("background", "starvation", "heat", "cold shock", "competing risks",
                 "salvaged"):
        assert word in section
    assert "overshoot above K" not in section and "stress hazard" not in section
    with xr.open_dataset(report_dir / "results.nc") as ds:
        basis = ds.attrs["weather_basis"]
        cause = ds["crash_cause"].values  # (policy, member, day)
        policies = [str(p) for p in ds["policy"].values]
        salvaged = ds["salvaged"].sum("day").mean("member").values
        n_days = ds.sizes["day"]
    assert "synthetic weather years" in basis and basis in section
    assert section.count(basis) >= 2  # beside the tables and in the figure's caption
    # Crashes per pond-year by cause, recomputed from the netCDF with numpy.
    page = _parse(page_text)
    cells = [c for c in page.values if c["table"] == "crash-causes"]
    assert cells
    for c in cells:
        i = policies.index(c["row"]["data-policy"])
        if c["col"] == "salvaged_t_ha_yr":
            expected = salvaged[i] * 365 / n_days * 0.01  # g m-2 -> t ha-1
        elif c["col"] == "all_crashes_per_pond_yr":
            expected = (cause[i] > 0).sum(axis=1).mean() * 365 / n_days
        else:
            k = CAUSES.index(c["col"].removesuffix("_crashes_per_pond_yr")) + 1
            expected = (cause[i] == k).sum(axis=1).mean() * 365 / n_days
        assert float(c["value"]) == pytest.approx(expected, rel=1e-5, abs=1e-9)


def test_pond_water_washout_dewatering_and_site_check(small_scenario, report_dir,
                                                      page_text):
    import html

    import xarray as xr

    scenario = load_scenario(small_scenario)
    page = _parse(page_text)
    with xr.open_dataset(report_dir / "results.nc") as ds:
        above_max = ds["hours_above_t_max"].values
        share = ds["harvest_fraction"].values  # (policy, member, day)
        policies = [str(p) for p in ds["policy"].values]
        washed = ds["washed_out"].values.max(axis=-1) > 0  # (policy, member)
        site_check = ds.attrs["site_check"]
    # Stress hours for the year: the daily hours summed over days (member means).
    hours = above_max.mean(axis=0) if above_max.ndim == 2 else above_max
    year = [c for c in page.values if c["table"] == "pond-water-table"
            and c["row"]["data-month"] == "year" and c["col"] == "hours_above_t_max"]
    assert float(year[0]["value"]) == pytest.approx(hours.sum(), rel=1e-5)
    # Washout share per policy from the daily flags.
    for c in page.values:
        if c["table"] == "washout-table" and c["col"] == "washed_out_pct":
            i = policies.index(c["row"]["data-policy"])
            assert float(c["value"]) == pytest.approx(100 * washed[i].mean())
    # Dewatering: 7-day trailing mean of the farm's daily volume, recomputed with pandas.
    pond = scenario.pond
    check = _csv(report_dir / "dewatering_check.csv", index_col=["policy", "season"])
    for i, pol in enumerate(policies):
        farm = pd.Series(share[i].mean(axis=0) * pond.volume_m3 * pond.count)
        peak = farm.rolling(7, min_periods=1).mean().max()
        assert check.loc[(pol, "year"), "peak_7d_mean_farm_m3_d"] == pytest.approx(
            peak, rel=1e-5)
        assert check.loc[(pol, "year"), "dewatering_farm_m3"] == pytest.approx(
            farm.sum(), rel=1e-5)
        cap = scenario.harvest.dewatering_capacity_m3_per_d
        assert check.loc[(pol, "year"), "within_capacity"] == (
            "yes" if peak <= cap * (1 + 1e-9) else "no")
    # The site check's result, in the summary and beside the site.
    text = html.unescape(page_text)
    assert text.count(site_check) >= 2
    manifest = json.loads((report_dir / rep.MANIFEST).read_text(encoding="utf-8"))
    failed = {**manifest, "site_check": "FAILED: irradiance peak 1.02 h after solar noon"}
    bad = html.unescape(rep.build_page(report_dir, scenario, failed, run_date="now"))
    assert "WARNING: FAILED: irradiance peak 1.02 h" in bad
    assert "WARNING: the site check failed" in bad


def _snapshot(folder: Path) -> dict:
    return {p.name: p.read_bytes() for p in folder.iterdir()
            if p.is_file() and not p.name.startswith(".")}


def test_report_killed_mid_write_leaves_the_previous_complete_set(small_scenario,
                                                                    report_dir, tmp_path):
    """SIGKILL while the report's files are being written: the folder keeps the previous
    complete set byte for byte, and the next run clears what the killed one left."""
    import signal
    import subprocess
    import sys
    import time

    folder = tmp_path / "report"
    shutil.copytree(report_dir, folder)
    before = _snapshot(folder)
    assert F.verify_output_set(folder) == []
    # A quick study (no uncertain parameters, one weather year) to be killed.
    text = small_scenario.read_text(encoding="utf-8")
    quick = tmp_path / "quick.toml"
    quick.write_text("\n".join(ln for ln in text.splitlines() if "distribution =" not in ln)
                     + "\n", encoding="utf-8")
    quick_text = quick.read_text(encoding="utf-8")
    quick.write_text(re.sub(r'path = "([^"]+)"', lambda m: 'path = "' + str(
        (small_scenario.parent / m.group(1)).resolve()) + '"', quick_text, count=1),
        encoding="utf-8")
    env = {**os.environ, "PYTHONPATH": str(ROOT), "MPLCONFIGDIR": str(tmp_path)}
    proc = subprocess.Popen([sys.executable, "-m", "pondsim", "report", str(quick), "--out",
                             str(folder), "--years", "1", "--members", "1"], env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    staged = []
    deadline = time.time() + 300
    while time.time() < deadline and proc.poll() is None:
        staged = [p for p in folder.glob(f"{F.STAGING_PREFIX}*/*") if p.name != "pid"]
        if staged:
            proc.send_signal(signal.SIGKILL)
            break
        time.sleep(0.005)
    proc.communicate(timeout=120)
    assert staged, "the report ended before anything was staged"
    assert proc.returncode == -signal.SIGKILL
    assert _snapshot(folder) == before and F.verify_output_set(folder) == []
    assert list(folder.glob(f"{F.STAGING_PREFIX}*"))  # the killed run's staging is left
    # The next run (reusing the previous results) cleans it and lands whole.
    run = rep.make_report(small_scenario, folder, years=2, draws=2, members=2)
    assert run.reused
    assert not list(folder.glob(f"{F.STAGING_PREFIX}*"))
    assert F.verify_output_set(folder) == []
