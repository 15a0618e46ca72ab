"""An outlook round in blocks of weather years, with bounded memory.

A round of the outlook (weather years x parameter draws nested in each year x crash
replicates) is cut into blocks of whole weather years. Each block is simulated on its
own (:func:`run_block`), wherever the study's :class:`~pondsim.studies.scheduling.Runner`
puts it, and its members take exactly the random crash streams they take in the whole
round (``simulate(stream_offset=...)``), so the assembled ensemble does not depend on
the block size or on where the blocks ran.

With a spill folder each finished block is written there at once (netCDF, uncompressed)
and reopened lazily (dask arrays backed by the file): the process then holds one block's
daily outputs at a time, and the summaries (annual values, monthly bands, the bill, crash
causes) and the final results file are computed block by block from disk. Without one
(the Python API, e.g. the report) the blocks are joined in memory.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import pandas as pd
import xarray as xr

from pondsim.operations.simulate import simulate

__all__ = ["SERIES_PER_BLOCK", "YearBlock", "years_per_block", "run_block", "run_blocks",
           "with_member_dim"]

#: Daily series (policy x member) simulated per block: ~2,000 keeps the numpy engine
#: near its best throughput (thousands of members per vectorised step) while a block's
#: daily outputs stay near 300 MB (about 140 B per series-day, see
#: :data:`pondsim.operations.simulate.BYTES_PER_SERIES_DAY`).
SERIES_PER_BLOCK = 2048


@dataclass
class YearBlock:
    """One block of a round: its weather years, their nested draws and where its
    members sit in the round."""

    scenario: object
    years: list
    draws: dict | None
    members: int
    seed: int
    first_year: int
    n_draws: int
    meta: dict
    weather_basis: str


def years_per_block(n_draws: int, members: int, n_entries: int,
                    series: int = SERIES_PER_BLOCK) -> int:
    """Weather years per block so that a block holds about *series* daily series
    (``n_entries`` policies and plans x draws x replicates per year); at least one."""
    per_year = max(1, int(n_draws) * int(members) * max(1, int(n_entries)))
    return max(1, int(series) // per_year)


def with_member_dim(ds: xr.Dataset) -> xr.Dataset:
    """Give every weather-only variable the member dimension, so parts concatenate."""
    out = ds.copy()
    for name, var in ds.data_vars.items():
        if "member" not in var.dims and "day" in var.dims:
            out[name] = var.expand_dims(member=ds["member"]).transpose(
                *(("member",) + var.dims))
    return out


def run_block(block: YearBlock) -> xr.Dataset:
    """Simulate one block; its members, weather years and streams numbered as in the
    whole round."""
    per_year = block.n_draws * block.members
    offset = block.first_year * per_year
    ds = simulate(block.scenario, members=block.members, seed=block.seed,
                  forcing=(block.years[0], block.meta), weather_years=block.years,
                  draws=block.draws, progress=False, weather_basis=block.weather_basis,
                  stream_offset=offset)
    ds = with_member_dim(ds)
    return ds.assign_coords(member=ds["member"] + offset,
                            weather_year=ds["weather_year"] + block.first_year)


def run_blocks(scenario, years: list[pd.DataFrame], draws: dict | None, *, members: int,
               n_draws: int, seed: int, meta: dict, weather_basis: str, runner=None,
               spill_dir: Path | None = None, block_years: int | None = None,
               progress: bool | None = None) -> xr.Dataset:
    """One round over *years* in blocks (see the module docstring).

    Parameters
    ----------
    draws : dict of str -> ndarray (n_years, n_draws), optional
        Draws nested in each weather year (:func:`pondsim.studies.uncertainty.sample_draws`).
    runner : Runner, optional
        Where blocks run (default: in this process).
    spill_dir : Path, optional
        Folder for the blocks' files (bounded memory); None joins them in memory.
    block_years : int, optional
        Weather years per block (default :func:`years_per_block`).

    Returns
    -------
    xarray.Dataset
        As :func:`pondsim.simulate` over all *years* (file-backed with ``spill_dir``).
    """
    n_entries = len(scenario.policies) + len(scenario.plans)
    size = block_years or years_per_block(n_draws, members, n_entries)
    starts = list(range(0, len(years), size))
    if len(starts) == 1 and spill_dir is None:  # one block, in memory: the plain run
        return simulate(scenario, members=members, seed=seed, forcing=(years[0], meta),
                        weather_years=years, draws=draws, progress=progress,
                        weather_basis=weather_basis)
    blocks = [YearBlock(scenario=scenario, years=years[y0:y0 + size],
                        draws=None if not draws else {k: v[y0:y0 + size]
                                                      for k, v in draws.items()},
                        members=members, seed=seed, first_year=y0, n_draws=n_draws,
                        meta=meta, weather_basis=weather_basis) for y0 in starts]
    consume = None
    if spill_dir is not None:
        spill_dir = Path(spill_dir)
        spill_dir.mkdir(parents=True, exist_ok=True)
        tag = len(list(spill_dir.glob("block-*.nc")))

        def consume(i, ds):
            path = spill_dir / f"block-{tag + i:05d}.nc"
            ds.to_netcdf(path, engine="h5netcdf")
            part = xr.open_dataset(path, engine="h5netcdf", chunks={})
            # coordinates (dates, seasons, member labels) are small: held in memory
            return part.assign_coords({k: part[k].load() for k in part.coords})

    if runner is None:
        from pondsim.studies.scheduling import Runner

        runner = Runner(workers=1)
    parts = runner.map(run_block, blocks, consume=consume)
    if len(parts) == 1:
        ds = parts[0]
    else:
        ds = xr.concat(parts, dim="member", data_vars="all", coords="different",
                       compat="equals", join="exact", combine_attrs="override")
    ds.attrs["weather_years"] = len(years)
    ds.attrs["parameter_draws"] = int(n_draws)
    ds.attrs["replicates"] = int(members)
    return ds

