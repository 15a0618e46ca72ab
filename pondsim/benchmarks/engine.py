"""Engine benchmark: ``python -m pondsim.benchmarks.engine [SCENARIO] [--sizes 1 100 10000]``.

For each ensemble size, one year of hourly steps of the scenario (its forcing, water
temperature and daily K solve included, computed once as the engine does), with a
fixed-fraction harvest whose fraction varies over the members. Reports wall time,
member-hour steps per second and peak memory of the integration (bytes per member), and
compares the annual harvest of a few members with a per-member ``scipy.integrate
.solve_ivp`` reference (RK45, rtol 1e-8, integrated knot to knot, one hour at a time),
with the speed ratio. Run it on a quiet machine; numbers vary from run to run.
"""

from __future__ import annotations

import argparse
import time
import tracemalloc
from pathlib import Path

import numpy as np

from pondsim.operations.engine import HOURS_PER_DAY, integrate
from pondsim.operations.harvest import RULE_CODES, HarvestRules
from pondsim.operations.simulate import (
    build_drivers,
    hourly_light_and_water,
    load_forcing,
    operation_of,
)
from pondsim.pond import kinetics
from pondsim.scenario import load_scenario

DEMO = Path(__file__).resolve().parents[1] / "scenarios" / "kestrel_flats.toml"


def _rules(n: int, n_days: int) -> HarvestRules:
    frac = np.linspace(0.05, 0.35, n) if n > 1 else np.array([0.2])
    col = frac[:, None]
    return HarvestRules(code=np.full((n, 1), RULE_CODES["fixed_fraction"], np.int8),
                        fraction=col, every_days=np.ones((n, 1), np.int32),
                        trigger=np.full((n, 1), np.nan), residual=np.full((n, 1), np.nan),
                        period_of_day=np.zeros((1, n_days), np.int16))


def solve_ivp_reference(drivers, operation, fraction: float) -> float:
    """Annual removed biomass [g m-3] of one member by solve_ivp, hour by hour."""
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


def run(scenario_path=DEMO, sizes=(1, 100, 10_000), ivp_members: int = 10) -> dict:
    scenario = load_scenario(scenario_path)
    t0 = time.perf_counter()
    forcing, _ = load_forcing(scenario)
    hourly = hourly_light_and_water(forcing, scenario)
    drivers = build_drivers(hourly, scenario)
    t_drivers = time.perf_counter() - t0
    op = operation_of(scenario)
    n_days = drivers.n_days
    print(f"scenario: {scenario_path}  ({n_days} days, growth form "
          f"{drivers.growth_form}, light model {drivers.light_model})")
    print(f"forcing + water temperature + daily K solve (once per driver set): "
          f"{t_drivers:.2f} s\n")
    print(f"{'members':>8} {'wall s':>8} {'member-h/s':>12} {'peak MB':>9} "
          f"{'bytes/member':>13}")
    report = {"drivers_s": t_drivers, "sizes": {}}
    for n in sizes:
        rules = _rules(n, n_days)
        t = time.perf_counter()
        integrate(drivers, rules, op)
        wall = time.perf_counter() - t
        tracemalloc.start()
        integrate(drivers, rules, op)
        _, peak = tracemalloc.get_traced_memory()
        tracemalloc.stop()
        rate = n * drivers.n_hours / wall
        report["sizes"][n] = {"wall_s": wall, "steps_per_s": rate, "peak_bytes": peak}
        print(f"{n:>8} {wall:>8.2f} {rate:>12.3g} {peak / 1e6:>9.1f} {peak / n:>13,.0f}")

    if ivp_members:
        fracs = np.linspace(0.05, 0.35, ivp_members)
        rules = _rules(ivp_members, n_days)
        ours = integrate(drivers, rules, op).removed.sum(axis=1)
        t = time.perf_counter()
        ref = np.array([solve_ivp_reference(drivers, op, f) for f in fracs])
        wall_ivp = time.perf_counter() - t
        rel = np.abs(ours / ref - 1.0)
        ivp_rate = ivp_members * drivers.n_hours / wall_ivp
        best = max(v["steps_per_s"] for v in report["sizes"].values())
        report["ivp"] = {"wall_s": wall_ivp, "steps_per_s": ivp_rate,
                         "max_rel_error": float(rel.max()), "speed_ratio": best / ivp_rate}
        print(f"\nsolve_ivp reference, {ivp_members} members one at a time: {wall_ivp:.1f} s, "
              f"{ivp_rate:.3g} member-h/s")
        print(f"annual harvest, engine vs solve_ivp: max relative difference {rel.max():.2e}")
        print(f"speed ratio (best engine throughput / solve_ivp): {best / ivp_rate:,.0f}x")
    return report


def main(argv=None) -> int:
    p = argparse.ArgumentParser(prog="python -m pondsim.benchmarks.engine", description=__doc__,
                                formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("scenario", nargs="?", default=str(DEMO))
    p.add_argument("--sizes", type=int, nargs="+", default=[1, 100, 10_000])
    p.add_argument("--ivp-members", type=int, default=10)
    args = p.parse_args(argv)
    run(args.scenario, tuple(args.sizes), args.ivp_members)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
