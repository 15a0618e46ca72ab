"""Durable writes (fsync of the data before a rename and of the folder after it) and
netCDF files too large for the in-memory path: checked against the disk's free space and
the file-size limit before HDF5 writes a byte, refused with the estimate otherwise."""

from __future__ import annotations

import os
import resource
import subprocess
import sys
import textwrap
from collections import namedtuple
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import xarray as xr

from pondsim.results import files as F

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture
def events(monkeypatch):
    """Record fsync (by path) and rename calls in the order they happen."""
    log = []
    real_fsync, real_replace = os.fsync, os.replace

    def fsync(fd):
        log.append(("fsync", os.readlink(f"/proc/self/fd/{fd}")))
        return real_fsync(fd)

    def replace(src, dst, *a, **kw):
        log.append(("replace", str(Path(src).resolve()), str(Path(dst).resolve())))
        return real_replace(src, dst, *a, **kw)

    monkeypatch.setattr(os, "fsync", fsync)
    monkeypatch.setattr(os, "replace", replace)
    return log


def _index(log, kind, path):
    path = str(Path(path).resolve())
    hits = [i for i, e in enumerate(log) if e[0] == kind and path in e[1:]]
    assert hits, (kind, path, log)
    return hits


def test_atomic_write_flushes_data_before_the_rename_and_the_folder_after(tmp_path, events):
    path = F.write_csv(pd.DataFrame({"a_t": [1.0]}), tmp_path / "x.csv")
    (rename,) = [i for i, e in enumerate(events) if e[0] == "replace"]
    tmp = events[rename][1]
    assert Path(tmp).name.endswith(".part")
    assert events[rename][2] == str(path.resolve())
    # the temporary's data reach the disk before it takes the final name ...
    assert any(i < rename for i in _index(events, "fsync", tmp))
    # ... and the folder entry of the new name right after
    assert any(i > rename for i in _index(events, "fsync", tmp_path))


def test_output_set_entries_reach_the_disk_before_its_manifest(tmp_path, events):
    out = tmp_path / "out"
    with F.OutputSet(out, command="test") as files:
        F.write_csv(pd.DataFrame({"a_t": [1.0]}), files.dir / "table.csv")
    manifest = str((out / F.MANIFEST_NAME).resolve())
    table = str((out / "table.csv").resolve())
    last = max(i for i, e in enumerate(events) if e[0] == "replace" and e[2] == manifest)
    data = max(i for i, e in enumerate(events) if e[0] == "replace" and e[2] == table)
    folder_syncs = _index(events, "fsync", out)
    assert any(data < i < last for i in folder_syncs)  # files durable before the manifest
    assert any(i > last for i in folder_syncs)         # and the manifest itself
    assert F.verify_output_set(out) == []


def _dataset(n=20_000, seed=0):
    rng = np.random.default_rng(seed)
    return xr.Dataset({"x": (("member", "day"), rng.standard_normal((n // 100, 100)))},
                      attrs={"units_note": "test"})


def test_size_estimate_bounds_the_file_from_above(tmp_path, monkeypatch):
    # random normals hardly compress: the worst case for an uncompressed estimate
    monkeypatch.setattr(F, "IN_MEMORY_NETCDF_BYTES", 0)  # the direct HDF5 path
    ds = _dataset()
    path = F.save(ds, tmp_path / "big.nc")
    assert path.stat().st_size <= F.netcdf_size_estimate(ds)
    with xr.open_dataset(path, engine="h5netcdf") as back:
        xr.testing.assert_allclose(back.load(), ds)


def test_large_netcdf_is_refused_with_the_estimate_when_the_disk_is_too_small(
        tmp_path, monkeypatch):
    monkeypatch.setattr(F, "IN_MEMORY_NETCDF_BYTES", 0)
    usage = namedtuple("usage", "total used free")
    monkeypatch.setattr(F.shutil, "disk_usage", lambda p: usage(10**9, 10**9 - 4096, 4096))
    ds = _dataset()
    with pytest.raises(F.OutputError) as err:
        F.save(ds, tmp_path / "big.nc")
    text = str(err.value)
    need = F.netcdf_size_estimate(ds) / 1024**3
    assert f"up to {need:.2f} GB" in text and "0.00 GB are free" in text
    assert "nothing was written" in text and "--full" in text
    assert list(tmp_path.iterdir()) == []  # no file, no .part


def test_large_netcdf_under_a_file_size_limit_is_refused_before_hdf5_writes(tmp_path):
    # A real limit (RLIMIT_FSIZE) in a child process: without the check HDF5 fails
    # part-way with its own diagnostics on stderr; with it, one clean message and no file.
    script = textwrap.dedent(f"""
        import numpy as np, xarray as xr
        from pondsim.results import files as F
        F.IN_MEMORY_NETCDF_BYTES = 0
        ds = xr.Dataset({{"x": (("m", "d"), np.random.default_rng(0).random((400, 1000)))}})
        try:
            F.save(ds, {str(tmp_path / "big.nc")!r})
        except F.OutputError as err:
            print("REFUSED", err)
    """)

    def limit():
        resource.setrlimit(resource.RLIMIT_FSIZE, (200_000, 200_000))

    res = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True,
                         env={**os.environ, "PYTHONPATH": str(ROOT)}, preexec_fn=limit,
                         timeout=120)
    assert "REFUSED" in res.stdout and "ulimit -f" in res.stdout, res.stdout + res.stderr
    assert "HDF5" not in res.stderr and "Traceback" not in res.stderr, res.stderr
    assert list(tmp_path.iterdir()) == []
