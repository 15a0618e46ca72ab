"""Whole-or-nothing writing of results: netCDF (h5netcdf) and CSV tables."""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

import pandas as pd
import xarray as xr

from pondsim.glossary import CAUTION


def atomic_write(path: Path, write) -> Path:
    """Write through a temporary file in the same folder, then rename: whole or nothing."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=path.parent)
    os.close(fd)
    # mkstemp makes the file private (0600); outputs are meant to be shared: use the
    # permissions an ordinary file gets under the user's umask.
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp, 0o666 & ~umask)
    try:
        write(tmp)
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return path


def save(result: xr.Dataset, path: str | Path) -> Path:
    """Write a results Dataset to netCDF (h5netcdf engine, compressed), atomically."""
    encoding = {name: {"zlib": True, "complevel": 4, "shuffle": True}
                for name, var in result.data_vars.items() if var.dtype.kind in "fiu"}
    return atomic_write(Path(path), lambda tmp: result.to_netcdf(
        tmp, engine="h5netcdf", encoding=encoding))


def write_csv(table: pd.DataFrame, path: str | Path, *, caution: bool = True,
              index: bool = True) -> Path:
    """Write a table to CSV atomically, with the caution as a leading comment line."""
    def write(tmp):
        with open(tmp, "w", encoding="utf-8", newline="") as fh:
            if caution:
                fh.write(f"# {CAUTION}\n")
            table.to_csv(fh, float_format="%.6g", index=index)

    return atomic_write(Path(path), write)
