"""Speed benchmark: ``python -m pondsim.benchmarks.engine [SCENARIO] [--sizes 1 100 10000]
[--studies] [--baseline DIR]``.

Three parts, all measured in ONE run so that ratios compare like with like on a machine
whose load changes from minute to minute:

1. **Stages** of one weather year: reading the weather, light + pond water temperature,
   the daily carrying-capacity (K) solve, the engine for one member and the demo's whole
   ``simulate`` (its policies x ``run.members``), numpy and compiled side by side, and
   writing a run's results (netCDF + CSV).
2. **Engine** at each ensemble size: one year of hourly steps with a fixed-fraction
   harvest whose fraction varies over the members and the scenario's crash model, on the
   numpy engine, the compiled one on one core and on every core (wall and CPU time,
   member-hour steps per second, ratios against numpy), and, with ``--memory``, the peak
   memory of each (tracemalloc, a second run). Then the annual
   harvest of a few members against a per-member ``scipy.integrate.solve_ivp`` reference
   (RK45, rtol 1e-8, integrated one hour at a time) and the ledger closure of each
   engine.
3. With ``--studies``: the study commands as a user runs them (``run``, ``compare``,
   ``outlook --years 80 --draws 1 --no-sensitivity``, ``tune``), each in a fresh process
   (imports included) with the scenario's engine set to numpy and to compiled, plus, with
   ``--baseline DIR``, the same commands on another checkout of pondsim (e.g. the code
   before a change: ``git archive <commit> | tar -x -C DIR``). Wall time and peak
   resident memory of each.

This is a measurement script, not a test: numbers vary from run to run. On a machine
shared with other work, wall times follow the load; the CPU times beside them (all
threads of this process) are steadier, and the load average is printed before and after.
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

import numba
import numpy as np

from pondsim.operations import kernel
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
        if hod == operation.harvest_hour and day > operation.start_day \
                and x >= operation.min_density_g_m3:
            share = min(fraction, operation.max_fraction)
            if operation.floor_g_m3 > 0:  # never below the viable floor
                share = min(share, max(0.0, 1.0 - operation.floor_g_m3 / x))
            take = share * x
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


def _timed_cpu(fn, repeat: int = 1):
    """Best wall time [s] and best CPU time [s] (every thread of the process) of *repeat*
    calls."""
    wall, cpu = np.inf, np.inf
    for _ in range(repeat):
        t, c = time.perf_counter(), time.process_time()
        fn()
        wall = min(wall, time.perf_counter() - t)
        cpu = min(cpu, time.process_time() - c)
    return wall, cpu


def _peak_bytes(fn) -> int:
    tracemalloc.start()
    try:
        fn()
        return tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


def stages(scenario, repeat: int = 3) -> dict:
    """Wall time [s] of each stage of one weather year (best of *repeat*): a number for
    the stages both engines share, ``{"numpy": s, "compiled": s}`` for the others."""
    import dataclasses

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
    n_run = (len(scenario.policies) + len(scenario.plans)) * scenario.run.members
    one, run = {}, {}
    for engine in ("numpy", "compiled"):
        integrate(drivers, rules, op, crash=crash, seed=1, engine=engine)  # warm (load)
        one[engine], _ = _timed(
            lambda e=engine: integrate(drivers, rules, op, crash=crash, seed=1, engine=e),
            repeat)
        sc = dataclasses.replace(scenario, run=dataclasses.replace(scenario.run,
                                                                   engine=engine))
        run[engine], _ = _timed(lambda sc=sc: simulate(sc, forcing=forcing, progress=False),
                                repeat)
    out["engine, 1 member"] = one
    out[f"simulate ({n_run} members, physics cached)"] = run
    ds = simulate(scenario, members=1, forcing=forcing, progress=False)
    with tempfile.TemporaryDirectory() as tmp:
        def write():
            save(ds, Path(tmp) / "results.nc")
            write_csv(policy_summary(ds), Path(tmp) / "summary.csv")
        out["writes (netCDF + CSV, run)"], _ = _timed(write, repeat)
    return out


def engines(drivers, op, crash, sizes, memory: bool = False, skip_numpy_above=None) -> dict:
    """Numpy engine, compiled on one core and compiled on every core at each size: wall
    and CPU [s], member-h/s, peak bytes (numpy skipped above *skip_numpy_above*)."""
    report = {}
    cores = numba.get_num_threads()
    warm = _rules(2 * kernel.BLOCK, drivers.n_days)  # load both compiled builds first
    for threads in (1, cores):
        numba.set_num_threads(threads)
        integrate(drivers, warm, op, crash=crash, seed=1, engine="compiled")
    numba.set_num_threads(cores)
    for n in sizes:
        rules = _rules(n, drivers.n_days)
        row = {}
        for variant, engine, threads in (("numpy", "numpy", cores),
                                         ("compiled, 1 core", "compiled", 1),
                                         (f"compiled, {cores} cores", "compiled", cores)):
            if engine == "numpy" and skip_numpy_above and n > skip_numpy_above:
                continue
            def call(e=engine, rules=rules):
                return integrate(drivers, rules, op, crash=crash, seed=1, engine=e)
            numba.set_num_threads(threads)
            try:
                wall, cpu = _timed_cpu(call)
                row[variant] = {"wall_s": wall, "cpu_s": cpu,
                                "steps_per_s": n * drivers.n_hours / wall}
                if memory:
                    row[variant]["peak_bytes"] = _peak_bytes(call)
            finally:
                numba.set_num_threads(cores)
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
                   - led["salvaged"] - led["lost"] - led["final"])
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
        repeat: int = 3, skip_numpy_above: int | None = None) -> dict:
    scenario_path = Path(scenario_path)
    scenario = load_scenario(scenario_path)
    report = {"stages": stages(scenario, repeat)}
    forcing, _ = load_forcing(scenario)
    drivers = build_drivers(hourly_light_and_water(forcing, scenario), scenario)
    op, crash = operation_of(scenario), crash_model_of(scenario)
    print(f"scenario: {scenario_path}  ({drivers.n_days} days, growth form "
          f"{drivers.growth_form}, light model {drivers.light_model}); "
          f"load average {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores\n")
    print(f"stages of one weather year (best of {repeat}; wall ms):")
    print(f"  {'stage':<40} {'numpy':>10} {'compiled':>10} {'ratio':>7}")
    for name, s in report["stages"].items():
        if isinstance(s, dict):
            print(f"  {name:<40} {s['numpy'] * 1e3:>10.1f} {s['compiled'] * 1e3:>10.1f} "
                  f"{s['numpy'] / s['compiled']:>6.1f}x")
        else:
            print(f"  {name:<40} {s * 1e3:>10.1f} {'(same)':>10}")

    report["engine"] = engines(drivers, op, crash, sizes, memory, skip_numpy_above)
    print("\nengine, one year, fixed-fraction harvest, crash model on "
          "(wall s / CPU s of all threads; ratio = numpy wall / compiled wall):")
    variants = list(next(iter(report["engine"].values())))
    print(f"{'members':>8}" + "".join(f"{v:>26}" for v in variants)
          + "".join(f"{'ratio ' + v.split(', ')[1]:>14}" for v in variants[1:])
          + f"{'best member-h/s':>17}")
    for n, row in report["engine"].items():
        cells = "".join(f"{row[v]['wall_s']:>15.4f} / {row[v]['cpu_s']:>8.3f}"
                        if v in row else f"{'-':>26}" for v in variants)
        ratios = "".join(f"{row['numpy']['wall_s'] / row[v]['wall_s']:>13.1f}x"
                         if "numpy" in row else f"{'-':>14}" for v in variants[1:])
        best = max(r["steps_per_s"] for r in row.values())
        line = f"{n:>8}{cells}{ratios}{best:>17.3g}"
        if memory:
            line += "".join(f" {row[v]['peak_bytes'] / n:>12,.0f} B/member" for v in row)
        print(line)
    print(f"load average now {os.getloadavg()[0]:.1f}")

    if ivp_members:
        chk = ivp_check(drivers, op, ivp_members)
        report["ivp"] = chk
        best = max(r["steps_per_s"] for row in report["engine"].values()
                   for v, r in row.items() if v != "numpy")
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
    p.add_argument("--skip-numpy-above", type=int, default=None,
                   help="time only the compiled engine above this many members")
    args = p.parse_args(argv)
    run(args.scenario, tuple(args.sizes), args.ivp_members, studies=args.studies,
        baseline=args.baseline, memory=args.memory, repeat=args.repeat,
        skip_numpy_above=args.skip_numpy_above)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
