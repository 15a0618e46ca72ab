"""Inputs, hash and manifest of a report run: which files a run writes, the fingerprint
of its inputs and the check that decides whether earlier results can be reused."""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass
from pathlib import Path

from pondsim.errors import InputError
from pondsim.results.files import file_sha256

MANIFEST = "report_inputs.json"
REPORT = "report.html"
MANIFEST_FORMAT = 2  # 2: priced bill, crash causes, pond water, dewatering

#: Tables written by a report run (file name -> what it holds).
TABLES = {
    "annual_yield.csv": "P50/P75/P90 annual yield, farm biomass, productivity, crashes",
    "summary.csv": "member means per policy: yield, harvests, density, efficiency",
    "monthly_bands.csv": "10th/50th/90th percentile monthly productivity per policy",
    "monthly_drivers.csv": "monthly PAR, water temperature, K and evaporation",
    "comparison.csv": "per season and policy: yield, harvests, crash risk",
    "best_by_season.csv": "best policy per season under the risk limit",
    "crash_months.csv": "expected crashes and crash probability per month and policy",
    "risk_calendar.csv": "days of the steepest fall of K and where each rule stands then",
    "crashes_by_cause.csv": "expected crashes per pond by policy, month and named cause",
    "crashes_per_year.csv": "crashes per pond-year by cause and salvage, per policy",
    "pond_water_monthly.csv": "monthly water temperature, evaporation, rain, stress hours",
    "dewatering_check.csv": "farm dewatering load per season against the plant capacity",
    "inputs_bill.csv": "monthly and annual inputs (and costs) of the farm, lead policy",
    "inputs_bill_lines.csv": "each line of the bill with its basis, source and price",
    "assumptions.csv": "every parameter with its unit, value and source",
}
FIGURES = ("exceedance.png", "monthly_bands.png", "monthly_drivers.png",
           "trajectories.png", "seasonal_yield.png", "risk_calendar.png")
OPTIONAL = ("sensitivity.csv", "sensitivity.png")
#: Written when the scenario has [prices].
PRICED = ("inputs_cost_per_t.csv",)


@dataclass(frozen=True)
class ReportRun:
    """What :func:`make_report` did: the page, whether results were reused, the manifest."""

    path: Path
    reused: bool
    manifest: dict


def _sha256(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def resolve_options(scenario, *, years=None, draws=None, members=None, seed=None) -> dict:
    """The run options of a report, with the scenario's defaults filled in.

    ``weather_years`` and ``parameter_draws`` default to ``[uncertainty]`` (one draw
    without uncertain parameters); ``crash_replicates`` [per weather year and draw]
    defaults to 1; ``seed`` to ``run.seed``.
    """
    for value, flag, high in ((years, "--years", 100000), (draws, "--draws", 100000),
                              (members, "--members", 1000000)):
        if value is not None and not 1 <= value <= high:
            raise InputError(f"{value} is out of range; allowed: a whole number in "
                             f"[1, {high}]", field=flag)
    if seed is not None and not 0 <= seed < 2**63:
        raise InputError(f"{seed} is out of range; allowed: a whole number in "
                         "[0, 9223372036854775807]", field="--seed")
    unc = scenario.uncertainty
    return {
        "weather_years": int(years or unc.weather_years),
        "parameter_draws": int((draws or unc.draws) if unc.parameters else 1),
        "crash_replicates": int(members or 1),
        "seed": int(scenario.run.seed if seed is None else seed),
        "sensitivity": bool(unc.parameters),
        "sobol_samples": int(unc.sobol_samples) if unc.parameters else 0,
    }


def inputs_fingerprint(scenario, options: dict) -> dict:
    """Hashes that decide whether results can be reused.

    ``inputs_sha256`` is the SHA-256 over the scenario file's bytes, the weather file's
    bytes (none in clear-sky mode), pondsim's version and the run options (canonical
    JSON), each part prefixed by its label and length so that parts cannot run together.
    """
    from pondsim import __version__

    if scenario.path is None:
        raise InputError("the report needs a scenario read from a file", field="scenario")
    scenario_bytes = Path(scenario.path).read_bytes()
    weather = scenario.weather
    weather_bytes = Path(weather.path).read_bytes() if weather.source == "file" else b""
    options_bytes = json.dumps(options, sort_keys=True).encode("utf-8")
    h = hashlib.sha256()
    for label, part in (("scenario", scenario_bytes), ("weather", weather_bytes),
                        ("pondsim", __version__.encode("utf-8")), ("options", options_bytes)):
        h.update(label.encode("ascii") + b"\0" + len(part).to_bytes(8, "big") + part)
    return {
        "inputs_sha256": h.hexdigest(),
        "scenario_file": Path(scenario.path).name,
        "scenario_sha256": _sha256(scenario_bytes),
        "weather_file": Path(weather.path).name if weather.source == "file" else None,
        "weather_sha256": _sha256(weather_bytes) if weather.source == "file" else None,
        "pondsim_version": __version__,
        "options": options,
    }


def _expected_files(options: dict) -> list[str]:
    names = ["results.nc", *TABLES, *FIGURES]
    if options.get("sensitivity"):
        names += list(OPTIONAL)
    return names


def reusable_manifest(out_dir, fingerprint: dict) -> dict | None:
    """The folder's manifest when it was written for these inputs and every file it
    lists is present with the recorded SHA-256; otherwise None."""
    path = Path(out_dir) / MANIFEST
    if not path.is_file():
        return None
    try:
        manifest = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    if manifest.get("format") != MANIFEST_FORMAT:
        return None
    if manifest.get("inputs_sha256") != fingerprint["inputs_sha256"]:
        return None
    files = manifest.get("files", {})
    if set(_expected_files(fingerprint["options"])) - set(files):
        return None
    for name, digest in files.items():
        f = Path(out_dir) / name
        if not f.is_file() or file_sha256(f) != digest:
            return None
    return manifest

