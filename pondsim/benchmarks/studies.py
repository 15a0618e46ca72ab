"""Study-command benchmark: ``python -m pondsim.benchmarks.studies [SCENARIO]
[--baseline DIR] [--only NAME ...]``.

Times the study commands as a user runs them, each in a fresh process (imports
included; wall time and peak resident memory), on this checkout and, with
``--baseline DIR``, on another checkout measured in the SAME run (e.g. the code before a
change: ``git archive <commit> | tar -x -C DIR``), so that ratios compare like with like
on a machine whose load changes from minute to minute. Rows:

- ``outlook 80 y``: ``outlook --years 80 --draws 1 --no-sensitivity`` (the issue's
  reference case), serially and with ``--workers 2``;
- ``tune``: the demo's ``tune``, serially and with ``--workers 2``;
- ``outlook 10 y`` / ``outlook 80 y x8``: ``--fixed --no-sensitivity`` with the
  scenario's own draws and replicates at 10 and 80 weather years: peak memory should stay
  flat (outlook blocks spilled to disk) while the ensemble grows eightfold.

The engine rows (one member, 40,000 members, stages) are in
:mod:`pondsim.benchmarks.engine`. This is a measurement script, not a test.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
from pathlib import Path

from pondsim.benchmarks.engine import _CHILD, DEMO, ROOT, _scenario_copy

#: name -> (command-line arguments after the scenario path, runs on the baseline too)
ROWS = {
    "outlook 80 y": (["outlook", "{scenario}", "--years", "80", "--draws", "1",
                      "--no-sensitivity", "--out", "{out}"], True),
    "outlook 80 y, 2 workers": (["outlook", "{scenario}", "--years", "80", "--draws", "1",
                                 "--no-sensitivity", "--workers", "2", "--out", "{out}"],
                                False),
    "tune": (["tune", "{scenario}", "--out", "{out}"], True),
    "tune, 2 workers": (["tune", "{scenario}", "--workers", "2", "--out", "{out}"], False),
    "outlook 10 y": (["outlook", "{scenario}", "--years", "10", "--fixed",
                      "--no-sensitivity", "--out", "{out}"], True),
    "outlook 80 y x8": (["outlook", "{scenario}", "--years", "80", "--fixed",
                         "--no-sensitivity", "--out", "{out}"], True),
}


def _time(code_dir: str, argv: list[str]) -> dict | None:
    env = dict(os.environ, PYTHONPATH=code_dir)
    proc = subprocess.run([sys.executable, "-c", _CHILD, *argv], env=env,
                          capture_output=True, text=True, stdin=subprocess.DEVNULL)
    tail = [line for line in proc.stderr.splitlines() if line.startswith("@@")]
    if proc.returncode != 0 or not tail:
        print(f"  failed: {' '.join(argv)}\n{proc.stderr[-800:]}", flush=True)
        return None
    wall, rss_kb = tail[-1].split()[1:]
    return {"wall_s": float(wall), "peak_mb": int(rss_kb) / 1024}


def run(scenario_path=DEMO, baseline: Path | None = None, only=None) -> dict:
    """Wall time [s] and peak RSS [MB] per row and variant (``before``: the baseline
    checkout; ``after``: this one)."""
    scenario_path = Path(scenario_path)
    names = [n for n in ROWS if not only or n in only]
    report = {}
    print(f"scenario {scenario_path}; load average {os.getloadavg()[0]:.1f} on "
          f"{os.cpu_count()} cores; each command in a fresh process", flush=True)
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        scen = _scenario_copy(scenario_path, None, tmp)
        for name in names:
            args, on_baseline = ROWS[name]
            row = {}
            places = ([("before", str(baseline))] if baseline and on_baseline else []) \
                + [("after", str(ROOT))]
            for variant, code in places:
                out = tmp / f"{variant}-{len(report)}"
                row[variant] = _time(code, [a.format(scenario=scen, out=out) for a in args])
            report[name] = row
            cells = "  ".join(f"{v}: " + ("failed" if r is None else
                                          f"{r['wall_s']:.1f} s, {r['peak_mb']:.0f} MB")
                              for v, r in row.items())
            ratio = ""
            if row.get("before") and row.get("after"):
                ratio = f"  ({row['before']['wall_s'] / row['after']['wall_s']:.1f}x)"
            print(f"  {name:<24} {cells}{ratio}  [load {os.getloadavg()[0]:.1f}]",
                  flush=True)
    return report


def main(argv=None) -> int:
    p = argparse.ArgumentParser(prog="python -m pondsim.benchmarks.studies",
                                description=__doc__,
                                formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("scenario", nargs="?", default=str(DEMO))
    p.add_argument("--baseline", type=Path, default=None,
                   help="another pondsim checkout, measured in the same run")
    p.add_argument("--only", nargs="+", choices=list(ROWS), default=None,
                   help="rows to run (default: all)")
    args = p.parse_args(argv)
    run(args.scenario, args.baseline, args.only)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
