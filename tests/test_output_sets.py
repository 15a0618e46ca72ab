"""Outputs that are whole or absent: plain CSV tables, output folders checked before the
computation, writes that fail (no permission, disk full) with one message and exit 2,
runs killed mid-write (SIGKILL, SIGTERM) that leave the previous complete set, stale
files of killed runs cleaned, a move into place cut short and finished later."""

from __future__ import annotations

import errno
import json
import os
import resource
import shutil
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import pandas as pd
import pytest

from pondsim import cli
from pondsim.results import files as F

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "scenarios" / "kestrel_flats.toml"
ENV = {**os.environ, "PYTHONPATH": str(ROOT), "PYTHONDONTWRITEBYTECODE": "1",
       "MPLCONFIGDIR": tempfile.gettempdir()}


def _pondsim(*argv, preexec_fn=None, **kw):
    return subprocess.run([sys.executable, "-m", "pondsim", *map(str, argv)], env=ENV,
                          capture_output=True, text=True, preexec_fn=preexec_fn,
                          timeout=600, **kw)


def _one_error_line(stderr: str) -> str:
    lines = [ln for ln in stderr.splitlines() if ln.strip() and "%|" not in ln]
    assert len(lines) == 1 and lines[0].startswith("pondsim: error:"), stderr
    assert "Traceback" not in stderr
    return lines[0]


def _snapshot(folder: Path) -> dict:
    """Visible files of a folder with their bytes (hidden staging/lock files left out)."""
    return {p.relative_to(folder).as_posix(): p.read_bytes() for p in folder.rglob("*")
            if p.is_file() and not any(part.startswith(".") for part in
                                       p.relative_to(folder).parts)}


def _no_leftovers(folder: Path) -> None:
    hidden = [p.name for p in folder.iterdir() if p.name.startswith(".")]
    assert set(hidden) <= {F.LOCK_NAME}, hidden


# ------------------------------------------------------------------------ plain tables
def test_csv_outputs_are_plain_tables_and_the_caution_is_in_the_readme(tmp_path):
    table = pd.DataFrame({"yield_t_ha_yr": [22.7, 14.3], "note": ["a, b", "c"]},
                         index=pd.Index(["daily 15 %", "threshold"], name="policy"))
    with F.OutputSet(tmp_path / "out", command="test") as files:
        F.write_csv(table, files.dir / "summary.csv")
    path = tmp_path / "out" / "summary.csv"
    assert path.read_text(encoding="utf-8").splitlines()[0] == "policy,yield_t_ha_yr,note"
    back = pd.read_csv(path, index_col=0)  # a plain reader gets the table back
    pd.testing.assert_frame_equal(back, table)
    readme = (tmp_path / "out" / F.README_NAME).read_text(encoding="utf-8")
    assert "licensed engineers" in readme and "summary.csv" in readme
    # the reader used by the report takes both the plain and the older commented form
    old = tmp_path / "old.csv"
    old.write_text("# Results are estimates, not guarantees\n" + path.read_text())
    from pondsim.report.build import read_table

    pd.testing.assert_frame_equal(read_table(old, index_col="policy"), table)
    pd.testing.assert_frame_equal(read_table(path, index_col="policy"), table)


# ------------------------------------------------------------- folders checked first
@pytest.mark.parametrize("kind", ["file", "under_a_file", "empty_name"])
def test_bad_output_folder_is_refused_before_any_computation(kind, tmp_path, monkeypatch,
                                                             capsys):
    import pondsim.operations.simulate as sim

    def no_compute(*a, **k):
        raise AssertionError("computed before checking the output folder")

    import pondsim.report.build as rep
    import pondsim.studies.fit_command as fit

    monkeypatch.setattr(sim, "simulate", no_compute)
    monkeypatch.setattr(rep, "run_study", no_compute)
    monkeypatch.setattr(fit, "fit_pilot", no_compute)
    (tmp_path / "a_file").write_text("x")
    out = {"file": tmp_path / "a_file", "under_a_file": tmp_path / "a_file" / "sub",
           "empty_name": " "}[kind]
    pilot = ROOT / "scenarios" / "kestrel_flats_pilot.csv"
    for argv in (["run", DEMO], ["compare", DEMO], ["outlook", DEMO], ["tune", DEMO],
                 ["report", DEMO], ["fit", pilot, "--scenario", DEMO]):
        assert cli.main([*map(str, argv), "--out", str(out)]) == 2
        line = _one_error_line(capsys.readouterr().err)
        assert "--out" in line
    assert (tmp_path / "a_file").read_text() == "x"


def _unprivileged() -> list[str]:
    """Command prefix running the child as 'nobody' when the tests run as root (root
    ignores permissions)."""
    if os.geteuid() != 0:
        return []
    if shutil.which("setpriv") is None:
        pytest.skip("running as root without setpriv: cannot make a folder read-only")
    return ["setpriv", "--reuid=65534", "--regid=65534", "--clear-groups"]


def test_read_only_output_folder_is_one_message(tmp_path):
    base = Path(tempfile.mkdtemp(dir="/tmp" if os.path.isdir("/tmp") else None))
    try:
        os.chmod(base, 0o755)
        ro = base / "read_only"
        ro.mkdir()
        os.chmod(ro, 0o555)
        t0 = time.perf_counter()
        res = subprocess.run([*_unprivileged(), sys.executable, "-m", "pondsim", "run",
                              str(DEMO), "--out", str(ro), "--no-plots"], env=ENV,
                             capture_output=True, text=True, timeout=600, cwd=base)
        assert res.returncode == 2, res.stderr
        assert "cannot write in the output folder" in _one_error_line(res.stderr)
        assert time.perf_counter() - t0 < 60  # refused before the simulation
        assert list(ro.iterdir()) == []
    finally:
        os.chmod(base / "read_only", 0o755)
        shutil.rmtree(base, ignore_errors=True)


# --------------------------------------------------------------------- failing writes
def _previous_set(folder: Path) -> dict:
    res = _pondsim("run", DEMO, "--out", folder)
    assert res.returncode == 0, res.stderr
    assert F.verify_output_set(folder) == []
    assert any(name.endswith(".png") for name in _snapshot(folder))
    return _snapshot(folder)


@pytest.fixture(scope="module")
def previous(tmp_path_factory):
    """A complete output set of the demo run (written once, copied per test)."""
    folder = tmp_path_factory.mktemp("previous") / "run"
    return _previous_set(folder)


def _restore(snapshot: dict, folder: Path) -> None:
    for name, data in snapshot.items():
        (folder / name).parent.mkdir(parents=True, exist_ok=True)
        (folder / name).write_bytes(data)


def test_full_disk_gives_one_message_and_keeps_the_previous_set(previous, tmp_path):
    """A real write failure: the file-size limit (RLIMIT_FSIZE) makes every write past
    40 kB fail with EFBIG, as a full disk fails with ENOSPC."""
    folder = tmp_path / "run"
    _restore(previous, folder)

    def small_files():
        signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
        resource.setrlimit(resource.RLIMIT_FSIZE, (40_000, 40_000))

    res = _pondsim("run", DEMO, "--out", folder, "--no-plots", "--seed", 7,
                   preexec_fn=small_files)
    assert res.returncode == 2, res.stderr
    line = _one_error_line(res.stderr)
    assert "cannot write" in line and "nothing was written" in line
    assert _snapshot(folder) == previous and F.verify_output_set(folder) == []
    _no_leftovers(folder)


def test_failing_writer_leaves_no_partial_file(tmp_path, monkeypatch):
    def half_then_full(tmp):
        Path(tmp).write_bytes(b"half a file")
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    with pytest.raises(F.OutputError, match="No space left"):
        F.atomic_write(tmp_path / "x.nc", half_then_full)
    assert list(tmp_path.iterdir()) == []
    # inside a set: the whole set is dropped, the folder keeps what it had
    (tmp_path / "keep.txt").write_text("user file")
    with pytest.raises(F.OutputError), F.OutputSet(tmp_path, command="t") as files:
        F.write_csv(pd.DataFrame({"a": [1]}), files.dir / "a.csv")
        F.atomic_write(files.dir / "b.nc", half_then_full)
    assert sorted(p.name for p in tmp_path.iterdir()) == [F.LOCK_NAME, "keep.txt"]


# ------------------------------------------------------------------ killed mid-write
def _kill_while_writing(folder: Path, sig: int, argv=()) -> subprocess.CompletedProcess:
    """Start a run and send ``sig`` once its staging folder holds a written file."""
    proc = subprocess.Popen([sys.executable, "-m", "pondsim", "run", str(DEMO), "--out",
                             str(folder), "--seed", "11", *argv], env=ENV,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    deadline = time.time() + 300
    while time.time() < deadline and proc.poll() is None:
        staged = [p for p in folder.glob(f"{F.STAGING_PREFIX}*/*") if p.name != "pid"]
        if staged:
            proc.send_signal(sig)
            break
        time.sleep(0.005)
    out, err = proc.communicate(timeout=120)
    assert staged, "the run ended before anything was staged"
    return subprocess.CompletedProcess(proc.args, proc.returncode, out, err)


@pytest.mark.parametrize("sig", [signal.SIGKILL, signal.SIGTERM])
def test_run_killed_mid_write_leaves_the_previous_complete_set(sig, previous, tmp_path):
    folder = tmp_path / "run"
    _restore(previous, folder)
    res = _kill_while_writing(folder, sig)
    assert res.returncode == (-signal.SIGKILL if sig == signal.SIGKILL else 128 + sig)
    assert _snapshot(folder) == previous and F.verify_output_set(folder) == []
    if sig == signal.SIGTERM:  # handled like Ctrl-C: one line, staging removed at once
        assert "terminated" in res.stderr and "Traceback" not in res.stderr
        _no_leftovers(folder)
    else:  # the next run cleans what the killed one left, and lands whole
        assert list(folder.glob(f"{F.STAGING_PREFIX}*"))
        res = _pondsim("run", DEMO, "--out", folder, "--no-plots", "--seed", 12)
        assert res.returncode == 0, res.stderr
        _no_leftovers(folder)
        assert F.verify_output_set(folder) == []
        manifest = json.loads((folder / F.MANIFEST_NAME).read_text())
        assert manifest["seed"] == 12 and set(manifest["files"]) == {
            "results.nc", "summary.csv", "crashes_by_cause.csv", "pond_water_monthly.csv",
            F.README_NAME}
        assert set(_snapshot(folder)) == {"results.nc", "summary.csv", "crashes_by_cause.csv",
                                          "pond_water_monthly.csv", F.README_NAME,
                                          F.MANIFEST_NAME}  # no figure of another run


def test_new_set_replaces_the_old_one_whole_and_a_foreign_file_is_detected(tmp_path):
    folder = tmp_path / "out"
    with F.OutputSet(folder, command="t", seed=1) as files:
        for name in ("a.csv", "b.csv", "sub/c.csv"):
            F.write_csv(pd.DataFrame({"x": [1]}), files.dir / name)
    (folder / "mine.txt").write_text("a user's file")
    with F.OutputSet(folder, command="t", seed=2) as files:
        F.write_csv(pd.DataFrame({"x": [2]}), files.dir / "a.csv")
    assert F.verify_output_set(folder) == []
    assert not (folder / "b.csv").exists() and not (folder / "sub" / "c.csv").exists()
    assert (folder / "mine.txt").read_text() == "a user's file"
    # a file from another run (other content) is caught by the manifest
    F.write_csv(pd.DataFrame({"x": [3]}), folder / "a.csv")
    assert F.verify_output_set(folder) == [f"a.csv: not the file of run {files.run_id}"]


def test_move_cut_short_is_finished_by_the_next_run(tmp_path, monkeypatch):
    folder = tmp_path / "out"
    with F.OutputSet(folder, command="t", seed=1) as files:
        F.write_csv(pd.DataFrame({"x": [1]}), files.dir / "a.csv")
    real_replace = os.replace
    moved = []

    def crash_after_first_file(src, dst):
        if Path(src).parent.name.startswith(F.COMMIT_PREFIX) and moved:
            raise KeyboardInterrupt  # stands for a power cut / SIGKILL mid-move
        moved.append(dst)
        real_replace(src, dst)

    monkeypatch.setattr(F.os, "replace", crash_after_first_file)
    with pytest.raises(KeyboardInterrupt), F.OutputSet(folder, command="t", seed=2) as files:
        F.write_csv(pd.DataFrame({"x": [2]}), files.dir / "a.csv")
        F.write_csv(pd.DataFrame({"y": [2]}), files.dir / "b.csv")
    monkeypatch.setattr(F.os, "replace", real_replace)
    assert F.verify_output_set(folder)  # mid-move: not a complete set, and it says so
    assert F.clean_output_folder(folder)
    assert F.verify_output_set(folder) == []
    assert json.loads((folder / F.MANIFEST_NAME).read_text())["seed"] == 2


def test_stale_part_files_and_staging_folders_are_cleaned(tmp_path):
    folder = tmp_path / "out"
    (folder / "sites").mkdir(parents=True)
    dead = 2**22 + 12345  # above the default pid_max: no such process
    stale = [folder / f".results.nc.{dead}.abc.part", folder / ".summary.csv.k3j2.part",
             folder / "sites" / f".a.nc.{dead}.x1.part"]
    for p in stale:
        p.write_bytes(b"partial")
    live = folder / f".ranking.csv.{os.getpid()}.q9.part"
    live.write_bytes(b"being written")
    staging = folder / f"{F.STAGING_PREFIX}old"
    staging.mkdir()
    (staging / "pid").write_text(str(dead))
    (staging / "results.nc").write_bytes(b"partial")
    F.clean_output_folder(folder)
    assert not any(p.exists() for p in stale) and not staging.exists()
    assert live.exists()  # a live process's file is left alone


# ---------------------------------------------------------------- memory exhaustion
def test_memory_error_is_one_message(monkeypatch, tmp_path, capsys):
    import pondsim.operations.simulate as sim

    def too_big(*a, **k):
        raise MemoryError

    monkeypatch.setattr(sim, "simulate", too_big)
    # A member count that passes the memory estimate (a count that does not is refused
    # before the run, see test_study_speed.py), so that the MemoryError path is taken.
    assert cli.main(["run", str(DEMO), "--out", str(tmp_path / "o"), "--members",
                     "2"]) == 2
    assert "not enough memory" in _one_error_line(capsys.readouterr().err)
    assert not (tmp_path / "o").exists()
