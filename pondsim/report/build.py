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

Layout of the stage: ``manifest`` (inputs, hash, reuse), ``run`` (running the studies),
``assemble`` (tables from the Dataset, the assumption table), ``html`` (building blocks),
``sections`` (the page's sections), ``css`` (the style sheet) and this module (the page,
``make_report`` and the command line).
"""

from __future__ import annotations

import datetime as dt
from pathlib import Path

from pondsim.glossary import CAUTION
from pondsim.report.assemble import assumption_table, crash_months, monthly_drivers
from pondsim.report.css import CSS
from pondsim.report.html import SECTIONS, _p, _section, esc, read_table
from pondsim.report.manifest import (
    FIGURES,
    MANIFEST,
    OPTIONAL,
    REPORT,
    TABLES,
    ReportRun,
    inputs_fingerprint,
    resolve_options,
    reusable_manifest,
)
from pondsim.report.methods import _limitations, _methods
from pondsim.report.run import run_study
from pondsim.report.sections import (
    _assumptions,
    _harvest,
    _headline,
    _monthly,
    _question,
    _reproduce,
    _sensitivity,
)
from pondsim.report.sections_bill import inputs_section
from pondsim.report.sections_crash import crash_section
from pondsim.report.summary import summary_section
from pondsim.results.files import atomic_write


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
        summary_section(out, scenario, manifest),
        _question(scenario, manifest, drivers),
        _headline(out, scenario, manifest, annual, summary, best),
        _monthly(out, manifest, drivers, bands, scenario),
        _harvest(out, scenario, comparison, best, summary, manifest),
        crash_section(out, scenario, manifest, by_month, calendar),
        inputs_section(out, manifest, bill),
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
           "the last section before using any number.", "meta")])
    files = ", ".join(sorted(manifest["files"]))
    footer = (_reproduce(manifest, run_date) + "\n"
              + _p(f"End of report. Files of the study: {files}.", "end-text")
              + '\n<hr class="end">')
    return ("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
            '<meta name="viewport" content="width=device-width, initial-scale=1">\n'
            f"<title>{esc(title)}</title>\n<style>{CSS}</style>\n</head>\n<body>\n"
            f"<header>\n{header}\n</header>\n<main>\n{sections}\n</main>\n"
            f"<footer>\n{footer}\n</footer>\n</body>\n</html>\n")


def make_report(scenario_path, out_dir, *, years=None, draws=None, members=None, seed=None,
                run_date: str | None = None) -> ReportRun:
    """Run (or reuse) the study for *scenario_path* in *out_dir* and write report.html.

    The whole folder is one output set (:class:`pondsim.results.files.OutputSet`): the
    folder is checked before any computation, every file is written into a hidden staging
    folder and the set moves into *out_dir* whole, so a run that fails or is killed
    leaves the previous complete set (or nothing). When the results are reused, the
    previous set's files are carried into the new set unchanged (hard links, else copies
    with their times) and only the page is written again.
    """
    from pondsim.results.files import OutputSet
    from pondsim.scenario import load_scenario

    scenario = load_scenario(scenario_path)
    options = resolve_options(scenario, years=years, draws=draws, members=members, seed=seed)
    fingerprint = inputs_fingerprint(scenario, options)
    out = Path(out_dir)
    with OutputSet(out, command="report", seed=options["seed"],
                   scenario=scenario_path) as files:
        manifest = reusable_manifest(out, fingerprint)
        reused = manifest is not None
        if reused:
            _carry_over(out, files.dir, [*manifest["files"], MANIFEST])
        else:
            manifest = run_study(scenario, files.dir, fingerprint)
        files.notes["site_check"] = manifest.get("site_check") or "not run"
        page = build_page(files.dir, scenario, manifest, run_date=run_date)
        atomic_write(files.dir / REPORT,
                     lambda tmp: Path(tmp).write_text(page, encoding="utf-8"))
    return ReportRun(path=out / REPORT, reused=reused, manifest=manifest)


def _carry_over(folder: Path, staging: Path, names) -> None:
    """Put the previous set's files *names* into the staging folder unchanged."""
    import os
    import shutil

    for name in names:
        src, dst = folder / name, staging / name
        dst.parent.mkdir(parents=True, exist_ok=True)
        try:
            os.link(src, dst)
        except OSError:  # no hard links on this file system
            shutil.copy2(src, dst)


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
    check = m.get("site_check")
    if check:
        print(("WARNING: " if str(check).startswith("FAILED") else "") + f"site check {check}")
    if (out / "summary.csv").is_file():
        summary = read_table(out / "summary.csv", index_col="policy")
        for pol in summary.index:
            if float(summary.loc[pol, "washed_out_pct"]) > 0:
                print(f"WARNING: {pol} washes out (held at the viable floor too long) in "
                      f"{summary.loc[pol, 'washed_out_pct']:.0f} % of members")
    per_t = out / "inputs_cost_per_t.csv"
    cur = (m.get("bill") or {}).get("currency")
    if cur and per_t.is_file():
        row = read_table(per_t, index_col="figure").iloc[0]
        print(f"inputs per tonne of product: P50 {row[f'P50_{cur}_per_t']:,.0f} {cur}, "
              f"conservative P10 {row[f'P10_{cur}_per_t']:,.0f} {cur}")
    else:
        print("inputs bill: not priced (the scenario has no [prices])")
    print(f"report written: {run.path}")
    print("\n" + CAUTION)
    return 0


__all__ = ["CSS", "FIGURES", "MANIFEST", "OPTIONAL", "SECTIONS", "TABLES", "ReportRun",
           "add_report_parser", "assumption_table", "build_page", "cmd_report",
           "crash_months", "inputs_fingerprint", "make_report", "monthly_drivers",
           "read_table", "resolve_options", "reusable_manifest", "run_study"]
