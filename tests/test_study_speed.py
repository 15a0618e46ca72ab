"""Once-per-study physics and the memory estimate before a run.

References are the project's own uncached functions (the cache must return exactly what
they return) and tracemalloc's measured peak (the estimate must be of the right size).
"""

from __future__ import annotations

import dataclasses
import tracemalloc
from pathlib import Path

import pytest

from pondsim.cli import main
from pondsim.operations import simulate as sim
from pondsim.scenario import load_scenario

DEMO = Path(__file__).resolve().parents[1] / "scenarios" / "kestrel_flats.toml"


@pytest.fixture(scope="module")
def demo():
    scenario = load_scenario(DEMO)
    return scenario, sim.load_forcing(scenario)[0]


def test_light_and_water_computed_once_per_year_and_physics(demo, monkeypatch):
    scenario, forcing = demo
    calls = []
    real = sim._light_and_water
    monkeypatch.setattr(sim, "_light_and_water",
                        lambda f, s: calls.append(1) or real(f, s))
    monkeypatch.setattr(sim, "_PHYSICS_CACHE", type(sim._PHYSICS_CACHE)())
    first = sim.hourly_light_and_water(forcing, scenario)
    again = sim.hourly_light_and_water(forcing.copy(), scenario)  # same content
    assert len(calls) == 1
    assert again.equals(real(forcing, scenario)) and again.attrs == first.attrs
    again["scratch"] = 1.0  # a caller's own column does not reach the cache
    assert "scratch" not in sim.hourly_light_and_water(forcing, scenario)
    # A different weather hour, or different pond physics, is a different entry.
    warmer = forcing.copy()
    warmer.iloc[4000, warmer.columns.get_loc("temp_air")] += 3.0
    sim.hourly_light_and_water(warmer, scenario)
    deeper = scenario.replace(pond=dataclasses.replace(scenario.pond,
                                                       depth_m=scenario.pond.depth_m + 0.05))
    sim.hourly_light_and_water(forcing, deeper)
    assert len(calls) == 3


def test_memory_estimate_is_the_measured_size(demo, tmp_path):
    """The estimate is within a factor of two of the measured peak of simulate + save."""
    from pondsim.results.files import save

    scenario, forcing = demo
    # The compiled engine when it is ported (tracemalloc slows the numpy engine).
    scenario = scenario.replace(run=dataclasses.replace(scenario.run, engine="compiled"))
    members = 50  # the per-member part dominates, as in any run worth checking
    sim.simulate(scenario, members=2, forcing=forcing, progress=False)  # compile, import
    sim._PHYSICS_CACHE.clear()  # the estimate includes the hourly light and water table
    tracemalloc.start()
    try:
        ds = sim.simulate(scenario, members=members, forcing=forcing, progress=False)
        save(ds, tmp_path / "r.nc")
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    estimate = sim.memory_estimate(scenario, members)
    assert 0.5 < estimate / peak < 2.0


def test_run_refuses_a_member_count_that_would_not_fit(tmp_path, capsys):
    out = tmp_path / "big"
    assert main(["run", str(DEMO), "--members", "1000000", "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert "GB" in err and "limit" in err and "--members" in err and "at most" in err
    assert not out.exists()
