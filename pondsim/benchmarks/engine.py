"""Speed benchmark: ``python -m pondsim.benchmarks.engine [SCENARIO] [--sizes 1 100 10000]
[--studies] [--baseline DIR]``.

Three parts, all measured in ONE run so that ratios compare like with like on a machine
whose load changes from minute to minute:

1. **Stages** of one weather year: reading the weather, light + pond water temperature,
   the daily carrying-capacity (K) solve, the engine (numpy reference and compiled), and
   writing a run's results (netCDF + CSV).
2. **Engine** at each ensemble size: one year of hourly steps with a fixed-fraction
   harvest whose fraction varies over the members and the scenario's crash model, on the
   numpy engine and the compiled one (member-hour steps per second, ratio), and, with
   ``--memory``, the peak memory of each (tracemalloc, a second run). Then the annual
   harvest of a few members against a per-member ``scipy.integrate.solve_ivp`` reference
   (RK45, rtol 1e-8, integrated one hour at a time) and the ledger closure of each
   engine.
3. With ``--studies``: the study commands as a user runs them (``run``, ``compare``,
   ``outlook --years 80 --draws 1 --no-sensitivity``, ``tune``), each in a fresh process
   (imports included) with the scenario's engine set to numpy and to compiled, plus, with
   ``--baseline DIR``, the same commands on another checkout of pondsim (e.g. the code
   before a change: ``git archive <commit> | tar -x -C DIR``). Wall time and peak
   resident memory of each.

This is a measurement script, not a test: numbers vary from run to run.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time
import tracemalloc
from pathlib import Path

import numpy as np

from pondsim.operations.engine import HOURS_PER_DAY, check_closure, integrate
from pondsim.operations.harvest import RULE_CODES, HarvestRules
from pondsim.operations.simulate import (
    _light_and_water,
    build_drivers,
    crash_model_of,
    hourly_light_and_water,
    load_forcing,
    operation_of,
)
from pondsim.pond import kinetics
from pondsim.scenario import load_scenario

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "scenarios" / "kestrel_flats.toml"

#: Study commands timed by ``--studies`` (arguments after the scenario path).
STUDIES = {
    "run": ["run", "{scenario}", "--no-plots", "--out", "{out}/run"],
    "compare": ["compare", "{scenario}", "--out", "{out}/compare"],
    "outlook 80 y": ["outlook", "{scenario}", "--years", "80", "--draws", "1",
                     "--no-sensitivity", "--out", "{out}/outlook"],
    "tune": ["tune", "{scenario}", "--out", "{out}/tune"],
}

# Peak RSS from /proc/self/status VmHWM [kB]: getrusage's ru_maxrss survives exec, so a
# child started by a big parent would report the parent's peak.
_CHILD = ("import sys, time\n"
          "t = time.perf_counter()\n"
          "from pondsim.cli import main\n"
          "code = main(sys.argv[1:])\n"
          "hwm = [int(line.split()[1]) for line in open('/proc/self/status') "
          "if line.startswith('VmHWM:')]\n"
          "print(f'@@ {time.perf_counter() - t:.3f} {hwm[0] if hwm else -1024}', "
          "file=sys.stderr)\n"
          "raise SystemExit(code)\n")


def _rules(n: int, n_days: int) -> HarvestRules:
    frac = np.linspace(0.05, 0.35, n) if n > 1 else np.array([0.2])
    col = frac[:, None]
    return HarvestRules(code=np.full((n, 1), RULE_CODES["fixed_fraction"], np.int8),
                        fraction=col, every_days=np.ones((n, 1), np.int32),
                        trigger=np.full((n, 1), np.nan), residual=np.full((n, 1), np.nan),
                        period_of_day=np.zeros((1, n_days), np.int16))


def solve_ivp_reference(drivers, operation, fraction: float) -> float:
    """Annual removed biomass [g m-3] of one member by solve_ivp, hour by hour (no
    crashes)."""
    from scipy.integrate import solve_ivp

    par, ft, m = drivers.par[0], drivers.temp_factor[0], drivers.maintenance[0]
    mu, p = float(drivers.mu_max[0]), float(drivers.light_param[0])
    kb, kbg, depth = float(drivers.k_biomass[0]), float(drivers.k_background[0]), \
        drivers.depth_m
    x, removed = 0.0, 0.0
    for hour in range(drivers.n_hours):
        day, hod = divmod(hour, HOURS_PER_DAY)
        if hod == 0 and day == operation.start_day:
            x = operation.inoculum_g_m3
        if hod == operation.harvest_hour and day > operation.start_day:
            take = min(fraction, operation.max_fraction) * x
            removed += take
            x -= take
        if x <= 0:
            continue

        def rhs(t, y, i0=par[hour], f=ft[hour], mm=m[hour]):
            avg = kinetics.depth_averaged_response(drivers.light_model, i0,
                                                   kb * y + kbg, depth, p)
            return (mu * f * avg - mm) * y

        x = float(solve_ivp(rhs, (0.0, 1.0 / HOURS_PER_DAY), [x], rtol=1e-8,
                            atol=1e-10).y[0, -1])
    return removed


def _timed(fn, repeat: int = 1):
    """Best wall time [s] of *repeat* calls, and the last result."""
    best, out = np.inf, None
    for _ in range(repeat):
        t = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t)
    return best, out


def _peak_bytes(fn) -> int:
    tracemalloc.start()
    try:
        fn()
        return tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


def stages(scenario, repeat: int = 3) -> dict:
    """Wall time [s] of each stage of one weather year (best of *repeat*)."""
    from pondsim.operations.simulate import simulate
    from pondsim.results.files import save, write_csv
    from pondsim.results.tables import policy_summary

    out = {}
    out["read weather"], (forcing, _) = _timed(lambda: load_forcing(scenario), repeat)
    # Uncached: the cost of one weather year's physics when it is first needed.
    out["light + thermal"], hourly = _timed(lambda: _light_and_water(forcing, scenario),
                                            repeat)
    out["K solve"], drivers = _timed(lambda: build_drivers(hourly, scenario), repeat)
    op, crash = operation_of(scenario), crash_model_of(scenario)
    rules = _rules(1, drivers.n_days)
    for engine in ("numpy", "compiled"):
        integrate(drivers, rules, op, crash=crash, seed=1, engine=engine)  # warm (load)
        out[f"engine, 1 member ({engine})"], _ = _timed(
            lambda e=engine: integrate(drivers, rules, op, crash=crash, seed=1, engine=e),
            repeat)
    ds = simulate(scenario, members=1, forcing=forcing, progress=False)
    with tempfile.TemporaryDirectory() as tmp:
        def write():
            save(ds, Path(tmp) / "results.nc")
            write_csv(policy_summary(ds), Path(tmp) / "summary.csv")
        out["writes (netCDF + CSV, run)"], _ = _timed(write, repeat)
    return out


def engines(drivers, op, crash, sizes, memory: bool = False) -> dict:
    """Numpy and compiled engine at each size: wall [s], member-h/s, peak bytes."""
    report = {}
    for n in sizes:
        rules = _rules(n, drivers.n_days)
        row = {}
        for engine in ("numpy", "compiled"):
            def call(e=engine, rules=rules):
                return integrate(drivers, rules, op, crash=crash, seed=1, engine=e)
            wall, _ = _timed(call)
            row[engine] = {"wall_s": wall, "steps_per_s": n * drivers.n_hours / wall}
            if memory:
                row[engine]["peak_bytes"] = _peak_bytes(call)
        report[n] = row
    return report


def ivp_check(drivers, op, n_members: int) -> dict:
    """Annual harvest of each engine against solve_ivp, and ledger closure (no crashes)."""
    fracs = np.linspace(0.05, 0.35, n_members) if n_members > 1 else np.array([0.2])
    rules = _rules(n_members, drivers.n_days)
    t = time.perf_counter()
    ref = np.array([solve_ivp_reference(drivers, op, f) for f in fracs])
    wall = time.perf_counter() - t
    out = {"ivp_wall_s": wall, "ivp_steps_per_s": n_members * drivers.n_hours / wall}
    for engine in ("numpy", "compiled"):
        daily = integrate(drivers, rules, op, engine=engine, check_ledger=False)
        led = daily.ledger
        balance = (led["inoculated"] + led["grown"] - led["respired"] - led["removed"]
                   - led["lost"] - led["final"])
        scale = led["inoculated"] + np.abs(led["grown"]) + led["respired"]
        check_closure(led)
        out[engine] = {
            "max_rel_harvest_vs_ivp": float(np.max(np.abs(daily.removed.sum(axis=1) / ref
                                                          - 1.0))),
            "ledger_rel_imbalance": float(np.max(np.abs(balance) / scale))}
    return out


def _scenario_copy(scenario_path: Path, engine: str | None, folder: Path) -> Path:
    """A copy of the scenario in *folder* with ``run.engine`` set (None: unchanged)."""
    from pondsim.scenario import relocate_text

    scenario = load_scenario(scenario_path)
    text = relocate_text(scenario_path.read_text(encoding="utf-8"), scenario, folder)
    if engine is not None:
        lines = text.splitlines()
        at = next((i for i, line in enumerate(lines) if line.strip() == "[run]"), None)
        if at is None:
            lines += ["", "[run]"]
            at = len(lines) - 1
        lines.insert(at + 1, f'engine = "{engine}"')
        text = "\n".join(lines) + "\n"
    path = folder / f"{scenario_path.stem}_{engine or 'as_is'}.toml"
    path.write_text(text, encoding="utf-8")
    return path


def study_commands(scenario_path: Path, baseline: Path | None = None,
                   names=tuple(STUDIES)) -> dict:
    """Wall time [s] and peak RSS [MB] of each study command in a fresh process, per
    variant (baseline checkout, numpy engine, compiled engine)."""
    report = {}
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        variants = {}
        if baseline is not None:
            variants["baseline"] = (str(baseline), _scenario_copy(scenario_path, None, tmp))
        here = str(ROOT)
        variants["numpy"] = (here, _scenario_copy(scenario_path, "numpy", tmp))
        variants["compiled"] = (here, _scenario_copy(scenario_path, "compiled", tmp))
        for name in names:
            report[name] = {}
            for variant, (path, scen) in variants.items():
                argv = [a.format(scenario=scen, out=tmp / variant) for a in STUDIES[name]]
                env = dict(os.environ, PYTHONPATH=path)
                proc = subprocess.run([sys.executable, "-c", _CHILD, *argv], env=env,
                                      capture_output=True, text=True, stdin=subprocess.DEVNULL)
                tail = [line for line in proc.stderr.splitlines() if line.startswith("@@")]
                if proc.returncode != 0 or not tail:
                    report[name][variant] = None
                    print(f"  {name} ({variant}) failed:\n{proc.stderr[-800:]}")
                    continue
                wall, rss_kb = tail[-1].split()[1:]
                report[name][variant] = {"wall_s": float(wall), "peak_mb": int(rss_kb) / 1024}
    return report


def run(scenario_path=DEMO, sizes=(1, 100, 10_000), ivp_members: int = 3, *,
        studies: bool = False, baseline: Path | None = None, memory: bool = False,
        repeat: int = 3) -> dict:
    scenario_path = Path(scenario_path)
    scenario = load_scenario(scenario_path)
    report = {"stages": stages(scenario, repeat)}
    forcing, _ = load_forcing(scenario)
    drivers = build_drivers(hourly_light_and_water(forcing, scenario), scenario)
    op, crash = operation_of(scenario), crash_model_of(scenario)
    print(f"scenario: {scenario_path}  ({drivers.n_days} days, growth form "
          f"{drivers.growth_form}, light model {drivers.light_model}); "
          f"load average {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores\n")
    print(f"stages of one weather year (best of {repeat}):")
    for name, s in report["stages"].items():
        print(f"  {name:<32} {s * 1e3:>9.1f} ms")

    report["engine"] = engines(drivers, op, crash, sizes, memory)
    print("\nengine, one year, fixed-fraction harvest, crash model on:")
    head = f"{'members':>8} {'numpy s':>9} {'compiled s':>11} {'ratio':>7} " \
           f"{'numpy member-h/s':>17} {'compiled member-h/s':>20}"
    if memory:
        head += f" {'numpy B/member':>15} {'compiled B/member':>18}"
    print(head)
    for n, row in report["engine"].items():
        a, b = row["numpy"], row["compiled"]
        line = (f"{n:>8} {a['wall_s']:>9.3f} {b['wall_s']:>11.4f} "
                f"{a['wall_s'] / b['wall_s']:>6.1f}x {a['steps_per_s']:>17.3g} "
                f"{b['steps_per_s']:>20.3g}")
        if memory:
            line += f" {a['peak_bytes'] / n:>15,.0f} {b['peak_bytes'] / n:>18,.0f}"
        print(line)

    if ivp_members:
        chk = ivp_check(drivers, op, ivp_members)
        report["ivp"] = chk
        best = max(r["compiled"]["steps_per_s"] for r in report["engine"].values())
        print(f"\nsolve_ivp reference, {ivp_members} member(s) one at a time: "
              f"{chk['ivp_wall_s']:.1f} s ({chk['ivp_steps_per_s']:.3g} member-h/s; best "
              f"compiled throughput is {best / chk['ivp_steps_per_s']:,.0f}x)")
        for engine in ("numpy", "compiled"):
            c = chk[engine]
            print(f"  {engine:>8}: annual harvest vs solve_ivp max rel. difference "
                  f"{c['max_rel_harvest_vs_ivp']:.2e}; ledger closes to "
                  f"{c['ledger_rel_imbalance']:.1e}")

    if studies:
        print("\nstudy commands, each in a fresh process (wall s / peak MB):")
        report["studies"] = study_commands(scenario_path, baseline)
        variants = list(next(iter(report["studies"].values())))
        print(f"  {'command':<14}" + "".join(f"{v:>20}" for v in variants))
        for name, row in report["studies"].items():
            cells = "".join(f"{'failed':>20}" if row[v] is None else
                            f"{row[v]['wall_s']:>10.1f} s {row[v]['peak_mb']:>5.0f} MB"
                            for v in variants)
            print(f"  {name:<14}{cells}")
    return report


def main(argv=None) -> int:
    p = argparse.ArgumentParser(prog="python -m pondsim.benchmarks.engine", description=__doc__,
                                formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("scenario", nargs="?", default=str(DEMO))
    p.add_argument("--sizes", type=int, nargs="+", default=[1, 100, 10_000])
    p.add_argument("--ivp-members", type=int, default=3)
    p.add_argument("--studies", action="store_true", help="also time the study commands")
    p.add_argument("--baseline", type=Path, default=None,
                   help="another pondsim checkout to time the study commands on")
    p.add_argument("--memory", action="store_true", help="peak memory of each engine run")
    p.add_argument("--repeat", type=int, default=3, help="repeats of each stage timing")
    args = p.parse_args(argv)
    run(args.scenario, tuple(args.sizes), args.ivp_members, studies=args.studies,
        baseline=args.baseline, memory=args.memory, repeat=args.repeat)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
