"""Benchmark of site screening: sites per minute serially, on the local process pool and
on a dask.distributed LocalCluster, the speed-up and the per-task overhead.

``python -m pondsim.benchmarks.screen [--sites 20] [--years 20] [--members 1]
[--workers 2] [--no-cluster]``

The workload is the demo scenario's first three harvest policies (no season plans) at
invented sites made from the demo site table's monthly normals (clear-sky mode), each
site with ``--years`` synthetic weather years. Per-task overhead is reported two ways:

* ``(wall time x workers - sum of in-task compute times) / tasks``: everything a task
  costs beyond its own computation in that run (process or cluster start-up and imports
  amortised over the tasks, pickling, scheduling, writing the site file, idle tail);
* the round trip of a task that does nothing, on a pool or cluster already running.

This is a measurement script, not a test; timings depend on the machine and its load.
"""

from __future__ import annotations

import argparse
import dataclasses
import os
import tempfile
import time
from pathlib import Path

import xarray as xr

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "scenarios" / "kestrel_flats.toml"
DEMO_SITES = ROOT / "scenarios" / "sites_demo.csv"


def _noop(i):
    return i


def benchmark_sites(n_sites: int):
    """``n_sites`` invented clear-sky sites: the demo table's normals sites, shifted in
    latitude by whole degrees so that no two are the same."""
    from pondsim.studies.screen import read_sites

    base = [s for s in read_sites(DEMO_SITES) if s.normals is not None]
    sites = []
    for i in range(n_sites):
        b = base[i % len(base)]
        shift = i // len(base)
        lat = b.latitude + (shift if b.latitude >= 0 else -shift)
        sites.append(dataclasses.replace(b, name=f"{b.name} #{shift}", latitude=lat))
    return sites


def _noop_round_trip_pool(workers: int, n: int = 50) -> float:
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor

    with ProcessPoolExecutor(workers, mp_context=multiprocessing.get_context("spawn")) as p:
        list(p.map(_noop, range(workers)))  # start the workers first
        t0 = time.perf_counter()
        for fut in [p.submit(_noop, i) for i in range(n)]:
            fut.result()
        return (time.perf_counter() - t0) / n


def _noop_round_trip_dask(client, n: int = 50) -> float:
    import distributed

    client.gather([client.submit(_noop, i, pure=False) for i in range(4)])  # warm up
    t0 = time.perf_counter()
    futures = [client.submit(_noop, i, pure=False) for i in range(n)]
    for fut in distributed.as_completed(futures):
        fut.result()
    return (time.perf_counter() - t0) / n


def main(argv=None) -> int:
    from pondsim.scenario import load_scenario
    from pondsim.studies.screen import screen

    ap = argparse.ArgumentParser(prog="python -m pondsim.benchmarks.screen",
                                 description=__doc__.split("\n\n")[0])
    ap.add_argument("--sites", type=int, default=20)
    ap.add_argument("--years", type=int, default=20)
    ap.add_argument("--members", type=int, default=1)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--no-cluster", action="store_true", help="skip the LocalCluster run")
    args = ap.parse_args(argv)

    demo = load_scenario(DEMO)
    scenario = demo.replace(policies=demo.policies[:3], plans=())
    sites = benchmark_sites(args.sites)
    n_plans = len(scenario.policies) + len(scenario.plans)
    print(f"{len(sites)} sites x {n_plans} plans x {args.years} weather years x "
          f"{args.members} replicate(s); {os.cpu_count()} cores\n")
    rows, results = [], {}
    with tempfile.TemporaryDirectory() as tmp:
        def run(label, workers, **kw):
            out = Path(tmp) / label
            t0 = time.perf_counter()
            rep = screen(scenario, sites, members=args.members, years=args.years,
                         workers=workers, out=out, progress=False, **kw)
            wall = time.perf_counter() - t0
            busy = sum(rep.task_seconds.values())
            n = len(sites)
            rows.append({"mode": label, "workers": workers, "wall_s": wall,
                         "sites_per_min": 60 * n / wall, "task_s": busy / n,
                         "overhead_s": (wall * workers - busy) / n})
            results[label] = rep.dataset
            assert rep.failures.empty, rep.failures

        run("serial", 1)
        run("local pool", args.workers)
        cluster_start = noop_dask = None
        if not args.no_cluster:
            import distributed

            t0 = time.perf_counter()
            with distributed.LocalCluster(n_workers=args.workers, threads_per_worker=1,
                                          processes=True, dashboard_address=":0") as cl, \
                    distributed.Client(cl) as client:
                cluster_start = time.perf_counter() - t0
                run("dask LocalCluster", args.workers, scheduler=client)
                noop_dask = _noop_round_trip_dask(client)
        noop_pool = _noop_round_trip_pool(args.workers)

    for ds in results.values():
        xr.testing.assert_identical(ds, results["serial"])
    serial_wall = rows[0]["wall_s"]
    print("| mode | workers | wall time | sites per minute | speed-up | compute per task "
          "| overhead per task |")
    print("|---|---:|---:|---:|---:|---:|---:|")
    for r in rows:
        print(f"| {r['mode']} | {r['workers']} | {r['wall_s']:.1f} s | "
              f"{r['sites_per_min']:.1f} | {serial_wall / r['wall_s']:.2f}x | "
              f"{r['task_s']:.2f} s | {r['overhead_s']:.2f} s |")
    print("\nAll modes gave identical Datasets.")
    print(f"No-op task round trip on a running pool: {1e3 * noop_pool:.2f} ms")
    if cluster_start is not None:
        print(f"LocalCluster start-up: {cluster_start:.1f} s; no-op task round trip on it: "
              f"{1e3 * noop_dask:.2f} ms")
    return 0


if __name__ == "__main__":  # spawn start method: workers re-import this module
    raise SystemExit(main())
