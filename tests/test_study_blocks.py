"""Study commands in pieces: outlook blocks of weather years, tune's candidate groups,
where they run (serial, local processes, dask.distributed) and the memory they hold.

References: the one-pass outlook and the one-pass ``run_plans`` of the same ensemble
(pieces must reproduce them: exactly where only the place changes, to 1e-9 relative
where the vector length changes), numpy's PCG64 stream read in one piece, and
tracemalloc's measured peak (memory must not grow with the weather years when the blocks
are spilled to disk, and must grow without spilling — so the check can fail).
"""

from __future__ import annotations

import tracemalloc
from pathlib import Path

import numpy as np
import pytest
import xarray as xr

from pondsim.operations import simulate as sim
from pondsim.operations.crash import CrashModel
from pondsim.operations.harvest import season_of_day
from pondsim.operations.plan_runs import ensemble_of, run_plans, scenario_plans
from pondsim.scenario import load_scenario
from pondsim.studies import outlook_blocks
from pondsim.studies.outlook import run_outlook
from pondsim.studies.scheduling import open_runner
from pondsim.studies.seasons import run_plans_on

DEMO = Path(__file__).resolve().parents[1] / "scenarios" / "kestrel_flats.toml"


@pytest.fixture(scope="module")
def demo():
    return load_scenario(DEMO)


def _assert_same(a: xr.Dataset, b: xr.Dataset, rtol: float = 0.0):
    assert set(a.data_vars) == set(b.data_vars)
    for k in a.coords:
        np.testing.assert_array_equal(a[k].values, b[k].values, err_msg=k)
    for v in a.data_vars:
        x = a[v].values.astype(float)
        y = b[v].transpose(*a[v].dims).values.astype(float)
        scale = max(float(np.nanmax(np.abs(x))), 1.0) if x.size else 1.0
        np.testing.assert_allclose(y, x, rtol=0, atol=rtol * scale, err_msg=v)
    assert a.attrs == b.attrs


def test_streams_of_a_block_are_those_of_the_whole():
    # numpy's PCG64 read in one piece is the reference
    whole = np.random.Generator(np.random.PCG64(11)).random((40, 366))
    np.testing.assert_array_equal(CrashModel.streams(11, np.arange(40)), whole)
    np.testing.assert_array_equal(CrashModel.streams(11, np.arange(17, 29) % 40),
                                  whole[17:29])
    np.testing.assert_array_equal(CrashModel.streams(11, np.array([33, 5, 33])),
                                  whole[[33, 5, 33]])


def test_blocks_reproduce_the_one_pass_outlook(demo, tmp_path):
    kw = dict(n_years=2, n_draws=2, members=2, seed=3)
    whole, _ = run_outlook(demo, **kw)
    blocks, _ = run_outlook(demo, block_years=1, **kw)
    # Same members, streams and draws; only the vector length of each engine pass
    # changes, which moves sums in the last bits (measured 1e-13 relative).
    _assert_same(whole, blocks, rtol=1e-9)
    spilled, _ = run_outlook(demo, block_years=1, spill_dir=tmp_path / "spill", **kw)
    assert spilled["harvested"].chunks is not None  # file-backed
    _assert_same(blocks, spilled.load())
    assert len(list((tmp_path / "spill").glob("block-*.nc"))) == 2


#: Runs in a separate interpreter: a dask client in the test process changes what
#: tracemalloc sees in later tests (test_study_speed's memory estimate measured 6 MB
#: instead of 16 MB after one), so the cluster lives and dies in a child.
DASK_CHECK = """
import sys, numpy as np, distributed
from pondsim.scenario import load_scenario
from pondsim.studies.outlook import run_outlook
from pondsim.studies.scheduling import open_runner
if __name__ == "__main__":
    demo = load_scenario(sys.argv[1])
    kw = dict(n_years=2, n_draws=1, members=2, seed=5, block_years=1)
    serial, _ = run_outlook(demo, **kw)
    with open_runner(2) as runner:
        local, _ = run_outlook(demo, runner=runner, **kw)
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=False,
                                  dashboard_address=":0") as cluster, \\
            distributed.Client(cluster) as client, open_runner(scheduler=client) as runner:
        on_dask, _ = run_outlook(demo, runner=runner, **kw)
    for other in (local, on_dask):
        assert other.attrs == serial.attrs
        for v in serial.variables:
            assert np.array_equal(serial[v].values, other[v].values), v
    print("identical")
"""


def test_blocks_serial_local_and_dask_are_identical(tmp_path):
    import subprocess
    import sys

    pytest.importorskip("distributed")
    script = tmp_path / "check.py"
    script.write_text(DASK_CHECK)
    # ENVIRONMENT.md: a dashboard port of its own (":0"); spawn needs the main guard
    done = subprocess.run([sys.executable, str(script), str(DEMO)], capture_output=True,
                          text=True, timeout=600)
    assert done.returncode == 0 and "identical" in done.stdout, done.stderr[-2000:]


def test_candidate_groups_reproduce_one_pass(demo):
    from pondsim.studies.outlook import weather_years

    years, _ = weather_years(demo, 2, 7)
    hourly = [sim.hourly_light_and_water(t, demo) for t in years]
    ens = ensemble_of(demo, sim.build_drivers(hourly, demo), 3, 7)
    period = season_of_day(hourly[0].index[::24], demo.seasons)
    plans, _ = scenario_plans(demo)
    plans = plans + plans[::-1]
    one = run_plans(ens, plans, period)
    with open_runner(2) as runner:
        assert runner.parallel
        split = run_plans_on(runner, ens, plans, period)
    for name in ("value", "product", "volume_m3", "season_product", "crashed", "washed",
                 "farm_peak_m3_d"):
        np.testing.assert_array_equal(getattr(split, name), getattr(one, name),
                                      err_msg=name)


def _peak_mb(fn) -> float:
    tracemalloc.start()
    try:
        fn()
        return tracemalloc.get_traced_memory()[1] / 1e6
    finally:
        tracemalloc.stop()


def _fake_block(block):
    """A block's Dataset of the outlook's shape (policy, member, day) without running the
    engine (tracemalloc slows the engine a hundredfold): ~3 MB of data per block."""
    per_year = block.n_draws * block.members
    n = len(block.years) * per_year
    member = np.arange(n) + block.first_year * per_year
    rng = np.random.default_rng(block.first_year)
    data = {f"v{k}": (("policy", "member", "day"), rng.random((4, n, 365)))
            for k in range(4)}
    return xr.Dataset(data, coords={
        "policy": ["a", "b", "c", "d"], "member": member, "day": np.arange(1, 366),
        "weather_year": (("member",), member // per_year)})


def test_spilled_outlook_memory_is_flat_in_weather_years(demo, tmp_path, monkeypatch):
    """8x the weather years: at most 1.5x the peak with blocks spilled to disk (and a
    summary read through them); without spilling the same runs grow about 8x, so the
    check can fail. Blocks are stand-ins of the real one's size and layout."""
    monkeypatch.setattr(outlook_blocks, "run_block", _fake_block)

    def run(n_years, spill):
        folder = tmp_path / f"s{n_years}{spill}"
        ds = outlook_blocks.run_blocks(
            demo, [None] * n_years, None, members=64, n_draws=1, seed=1, meta={},
            weather_basis="test", block_years=1, spill_dir=folder if spill else None)
        total = float(ds["v0"].sum().compute())  # a summary read through the blocks
        ds.close()
        return total

    run(2, True)  # imports, first writes
    small, large = _peak_mb(lambda: run(2, True)), _peak_mb(lambda: run(16, True))
    assert large <= 1.5 * small, (small, large)
    kept_small, kept_large = _peak_mb(lambda: run(2, False)), _peak_mb(lambda: run(16, False))
    assert kept_large > 4 * kept_small, (kept_small, kept_large)


def test_years_per_block():
    assert outlook_blocks.years_per_block(8, 4, 4, series=2048) == 16
    assert outlook_blocks.years_per_block(100, 100, 4, series=2048) == 1
