"""Whole-or-nothing writing of results: netCDF (h5netcdf), plain CSV tables, and output
SETS that land in their folder whole.

One file
--------
:func:`atomic_write` writes through a hidden ``.<name>.<pid>.<random>.part`` file in the
same folder and renames it into place, so a reader never sees half a file; the data are
flushed to the disk before the rename and the folder entry after it (fsync), so a power
loss cannot leave an empty file under the final name. netCDF goes
through memory first (:func:`save`): a full disk or a file-size limit then surfaces as one
``OSError`` from a plain ``write`` instead of HDF5 library errors on a half-written file;
a Dataset too large for memory is written by HDF5 only after a free-space and file-size
check against its uncompressed size, and refused with that estimate otherwise.
Any failed write raises :class:`OutputError` (an :class:`~pondsim.errors.InputError`, so
the command line prints one message and exits 2) and leaves no file behind.

One run's set of files
----------------------
:class:`OutputSet` is how a command writes its outputs::

    with OutputSet(out, command="run", seed=seed, scenario=path) as files:
        ...                                   # compute (the folder is checked first)
        save(ds, files.dir / "results.nc")    # write into a hidden staging folder
        write_csv(table, files.dir / "summary.csv")
    # here the whole set is in ``out``, with MANIFEST_NAME and README_NAME

1. Entering checks the output folder before any computation (not a file, creatable,
   writable) by creating the hidden staging folder ``out/.pondsim-staging-<run id>/``,
   and cleans what killed runs left behind (staging folders and ``.part`` files of
   processes that no longer run; an interrupted move is completed).
2. The command writes every file into the staging folder.
3. Leaving without an exception writes the manifest (run id, command, pondsim version,
   seed, scenario file and its SHA-256, every file with its size and SHA-256) and the
   README (the caution, what the files are), then MOVES the set into ``out`` under a lock,
   with SIGINT/SIGTERM held back: the old manifest is removed first, files of the old set
   that the new one lacks are removed, the new files are renamed in, and the new manifest
   comes last. The staging folder is renamed ``.pondsim-commit-<run id>`` before the move,
   so a move cut short (power loss, SIGKILL) is finished by the next run.
4. Leaving with an exception (an error, Ctrl-C, SIGTERM) removes the staging folder: the
   folder keeps the previous complete set.

A reader checks a folder with :func:`verify_output_set`: the files of a set are exactly
those in its manifest, with the hashes it lists. Files the user keeps in the folder are
never touched, unless they bear the name of an output.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import errno
import fcntl
import hashlib
import json
import os
import shutil
import signal
import tempfile
import uuid
from pathlib import Path

import pandas as pd
import xarray as xr

from pondsim.errors import InputError
from pondsim.glossary import CAUTION

#: The manifest of an output set (JSON), written last.
MANIFEST_NAME = "pondsim-manifest.json"
#: Plain-text notes of an output set: the caution and how to check the set.
README_NAME = "README.txt"
STAGING_PREFIX = ".pondsim-staging-"
COMMIT_PREFIX = ".pondsim-commit-"
LOCK_NAME = ".pondsim.lock"
#: Datasets larger than this are written straight to the file rather than through memory.
IN_MEMORY_NETCDF_BYTES = 2 * 1024**3
#: Allowance for the netCDF/HDF5 structure on top of the raw array bytes in
#: :func:`netcdf_size_estimate` (assumption: HDF5 headers, chunk indexes and attributes
#: of a results file take well under 1 % plus a few MB).
NETCDF_OVERHEAD = (1.01, 16 * 1024**2)


class OutputError(InputError):
    """An output cannot be written (folder is a file, no permission, disk full, ...)."""


def _write_error(path, err: BaseException) -> OutputError:
    reason = err.strerror if isinstance(err, OSError) and err.strerror else str(err)
    hint = ""
    if isinstance(err, OSError) and err.errno in (errno.ENOSPC, errno.EDQUOT, errno.EFBIG):
        hint = "; free some space or choose another --out folder"
    elif isinstance(err, PermissionError):
        hint = "; choose a folder you may write to (--out)"
    return OutputError(f"cannot write: {reason}{hint}; nothing was written", path=path,
                       field="--out")


def _pid_alive(pid: int) -> bool:
    if pid <= 0:
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:  # someone else's live process
        return True
    return True


def fsync_path(path: Path) -> None:
    """Flush a file's data, or a folder's entries, to the disk (``fsync``).

    A rename is durable only once both the renamed file's data and the folder entry are
    on the disk: without the two fsyncs a power loss shortly after a "finished" write can
    leave an empty or old file under the new name. File systems that cannot fsync a
    folder (EINVAL, e.g. some network mounts) are skipped silently.
    """
    flags = os.O_RDONLY | (os.O_DIRECTORY if Path(path).is_dir() else 0)
    fd = os.open(path, flags)
    try:
        os.fsync(fd)
    except OSError as err:
        if err.errno not in (errno.EINVAL, errno.ENOTSUP):
            raise
    finally:
        os.close(fd)


def atomic_write(path: Path, write) -> Path:
    """Write through a temporary file in the same folder, then rename: whole or nothing.

    ``write(tmp)`` writes the file at ``tmp``. Any failure (no permission, disk full, ...)
    raises :class:`OutputError` and leaves neither the file nor the temporary behind.
    Durable: the temporary is flushed to the disk (fsync) before the rename and the
    folder after it (:func:`fsync_path`).
    """
    path = Path(path)
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.{os.getpid()}.", suffix=".part",
                                   dir=path.parent)
        os.close(fd)
    except OSError as err:
        raise _write_error(path, err) from None
    # mkstemp makes the file private (0600); outputs are meant to be shared: use the
    # permissions an ordinary file gets under the user's umask.
    umask = os.umask(0)
    os.umask(umask)
    try:
        os.chmod(tmp, 0o666 & ~umask)
        write(tmp)
        fsync_path(Path(tmp))
        os.replace(tmp, path)
        fsync_path(path.parent)
    except (OSError, RuntimeError) as err:  # h5py reports I/O failures as RuntimeError
        Path(tmp).unlink(missing_ok=True)
        raise _write_error(path, err) from None
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return path


def netcdf_size_estimate(result: xr.Dataset) -> int:
    """Upper estimate of a results file's size [bytes]: the uncompressed bytes of every
    variable and coordinate plus :data:`NETCDF_OVERHEAD` (compression only shrinks it)."""
    raw = result.nbytes
    return int(raw * NETCDF_OVERHEAD[0] + NETCDF_OVERHEAD[1])


def _room_for(path: Path, need: int) -> None:
    """Refuse, before any byte is written, a file of ``need`` bytes that the file system's
    free space or the process's file-size limit cannot take."""
    import resource

    folder = path.parent
    try:
        free = shutil.disk_usage(folder).free
    except OSError as err:
        raise _write_error(path, err) from None
    limit = resource.getrlimit(resource.RLIMIT_FSIZE)[0]
    gb = 1024**3
    if limit != resource.RLIM_INFINITY and need > limit:
        raise OutputError(f"cannot write: the file would need up to {need / gb:.2f} GB "
                          f"(uncompressed estimate) but this process may write files of "
                          f"at most {limit / gb:.2f} GB (ulimit -f); raise the limit, or "
                          "write less (e.g. screen without --full); nothing was written",
                          path=path, field="--out")
    if need > free:
        raise OutputError(f"cannot write: the file would need up to {need / gb:.2f} GB "
                          f"(uncompressed estimate) and {free / gb:.2f} GB are free on "
                          "that disk; free some space, choose another --out folder or "
                          "write less (e.g. screen without --full); nothing was written",
                          path=path, field="--out")


def save(result: xr.Dataset, path: str | Path) -> Path:
    """Write a results Dataset to netCDF (h5netcdf engine, compressed), atomically and
    durably.

    Below :data:`IN_MEMORY_NETCDF_BYTES` the file is built in memory and written with one
    plain ``write``, so that a full disk gives one clean error rather than HDF5 failing
    part-way through its own writes. A larger Dataset (e.g. ``screen --full`` over many
    sites) is written by HDF5 straight to the file, after a check that the disk's free
    space and the process's file-size limit can take the uncompressed size
    (:func:`netcdf_size_estimate`); otherwise it is refused with the estimate before any
    byte is written. A file-backed (dask) Dataset, e.g. an outlook held in blocks on
    disk, is streamed to the file block by block the same way, so that writing it does
    not load it whole.
    """
    path = Path(path)
    encoding = {name: {"zlib": True, "complevel": 4, "shuffle": True}
                for name, var in result.data_vars.items() if var.dtype.kind in "fiu"}
    lazy = any(var.chunks is not None for var in result.variables.values())
    if result.nbytes < IN_MEMORY_NETCDF_BYTES and not lazy:
        def write(tmp):
            data = result.to_netcdf(engine="h5netcdf", encoding=encoding)
            with open(tmp, "wb") as fh:
                fh.write(data)
    else:
        _room_for(path, netcdf_size_estimate(result))

        def write(tmp):
            result.to_netcdf(tmp, engine="h5netcdf", encoding=encoding)
    return atomic_write(path, write)


def write_csv(table: pd.DataFrame, path: str | Path, *, index: bool = True) -> Path:
    """Write a plain CSV table atomically: one header row, no comment lines.

    The caution that every output carries goes into the output folder's
    :data:`README_NAME` (:class:`OutputSet`) and the netCDF attributes, not into the table,
    so that ``pandas.read_csv`` and spreadsheets read the table as it is.
    """
    def write(tmp):
        with open(tmp, "w", encoding="utf-8", newline="") as fh:
            table.to_csv(fh, float_format="%.6g", index=index)

    return atomic_write(Path(path), write)


# ------------------------------------------------------------------------ output sets
def check_output_folder(folder) -> Path:
    """Check that ``folder`` can hold outputs, creating it; raises :class:`OutputError`.

    Refuses a path that is a file, lies under a file, cannot be created, or is not
    writable (tried by creating and removing a hidden file, which also catches read-only
    file systems).
    """
    folder = Path(folder)
    if folder.exists() and not folder.is_dir():
        raise OutputError("the output folder is a file; give a folder (--out DIR)",
                          path=folder, field="--out")
    try:
        folder.mkdir(parents=True, exist_ok=True)
        fd, probe = tempfile.mkstemp(prefix=".pondsim-probe-", dir=folder)
        os.close(fd)
        os.unlink(probe)
    except (FileExistsError, NotADirectoryError):
        raise OutputError("a part of the output folder's path is a file; give a folder "
                          "(--out DIR)", path=folder, field="--out") from None
    except OSError as err:
        raise OutputError(f"cannot write in the output folder: {err.strerror or err}; "
                          "choose a folder you may write to (--out DIR)", path=folder,
                          field="--out") from None
    return folder


def file_sha256(path: Path) -> str:
    """SHA-256 of a file's bytes (hex), read in 1 MiB blocks."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


@contextlib.contextmanager
def _folder_lock(folder: Path):
    with open(folder / LOCK_NAME, "a+b") as fh:
        fcntl.flock(fh, fcntl.LOCK_EX)
        try:
            yield
        finally:
            fcntl.flock(fh, fcntl.LOCK_UN)


@contextlib.contextmanager
def _signals_held():
    """Hold SIGINT and SIGTERM back (delivered on exit) while a set moves into place."""
    held = {signal.SIGINT, signal.SIGTERM}
    try:
        old = signal.pthread_sigmask(signal.SIG_BLOCK, held)
    except (ValueError, OSError, AttributeError):  # not the main thread / no support
        yield
        return
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, old)


def _read_manifest(folder: Path) -> dict | None:
    try:
        return json.loads((folder / MANIFEST_NAME).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None


def _move_into_place(commit_dir: Path, folder: Path) -> None:
    """Finish moving a committed set into ``folder`` (also used to roll forward a move
    that was cut short). Call under the folder lock."""
    new = _read_manifest(commit_dir)
    if new is None:  # the manifest was already moved: only leftovers remain
        shutil.rmtree(commit_dir, ignore_errors=True)
        return
    old = _read_manifest(folder) or {}
    (folder / MANIFEST_NAME).unlink(missing_ok=True)  # the old set stops being a set
    for name in set(old.get("files", {})) - set(new["files"]) - {MANIFEST_NAME}:
        (folder / name).unlink(missing_ok=True)
    parents = {folder}
    for name in new["files"]:
        src = commit_dir / name
        if src.exists():
            (folder / name).parent.mkdir(parents=True, exist_ok=True)
            os.replace(src, folder / name)
            parents.add((folder / name).parent)
    for parent in sorted(parents):  # the set's entries reach the disk before its manifest
        fsync_path(parent)
    os.replace(commit_dir / MANIFEST_NAME, folder / MANIFEST_NAME)
    fsync_path(folder)
    shutil.rmtree(commit_dir, ignore_errors=True)


def clean_output_folder(folder) -> list[Path]:
    """Remove what killed runs left in ``folder``; finish a move that was cut short.

    Removes staging folders and ``.part`` files whose writing process no longer runs
    (and ``.part`` files of older pondsim versions, which carry no process id), in the
    folder and its direct subfolders. Returns the paths removed or completed.
    """
    folder = Path(folder)
    done = []
    if not folder.is_dir():
        return done
    with _folder_lock(folder):
        for commit_dir in sorted(folder.glob(f"{COMMIT_PREFIX}*")):
            _move_into_place(commit_dir, folder)
            done.append(commit_dir)
        for staging in folder.glob(f"{STAGING_PREFIX}*"):
            try:
                pid = int((staging / "pid").read_text().strip())
            except (OSError, ValueError):
                pid = -1
            if not _pid_alive(pid):
                shutil.rmtree(staging, ignore_errors=True)
                done.append(staging)
        for sub in [folder, *(p for p in folder.iterdir()
                              if p.is_dir() and not p.name.startswith("."))]:
            for part in sub.glob(".*.part"):
                fields = part.name.rsplit(".", 3)
                pid = int(fields[1]) if len(fields) == 4 and fields[1].isdigit() else -1
                if not _pid_alive(pid):
                    part.unlink(missing_ok=True)
                    done.append(part)
    return done


def _readme(manifest: dict) -> str:
    lines = [f"pondsim output set, run {manifest['run_id']}",
             f"command: pondsim {manifest['command']}",
             f"written: {manifest['created_utc']} by pondsim {manifest['pondsim_version']}"]
    if manifest.get("scenario"):
        lines.append(f"scenario: {manifest['scenario']} (sha256 "
                     f"{manifest['scenario_sha256'][:16]}...)")
    if manifest.get("seed") is not None:
        lines.append(f"seed: {manifest['seed']}")
    for key, value in manifest.get("notes", {}).items():
        lines.append(f"{key}: {value}")
    lines += ["", "Files of this run (sizes and SHA-256 in " + MANIFEST_NAME + "):"]
    lines += [f"  {name}" for name in sorted(manifest["files"]) if name != README_NAME]
    lines += ["", "The CSV files are plain tables (one header row, units in the column "
              "names); the netCDF files carry units and this caution in their attributes.",
              "A file of this folder belongs to this run only if " + MANIFEST_NAME +
              " lists it with its SHA-256 (pondsim.results.files.verify_output_set).",
              "", "CAUTION: " + CAUTION, ""]
    return "\n".join(lines)


class OutputSet:
    """The files of one run, written into a staging folder and moved into ``folder``
    whole (see the module docstring).

    Parameters
    ----------
    folder : str or Path
        The output folder (``--out``); checked and created on entering.
    command : str
        The pondsim command, recorded in the manifest.
    seed : int, optional
        Seed of the run, recorded in the manifest.
    scenario : str or Path, optional
        Scenario file, recorded with its SHA-256.
    notes : dict of str -> str, optional
        Further lines for the manifest and README (e.g. the site check).

    Attributes
    ----------
    dir : Path
        Where the command writes its files while the set is open.
    folder : Path
        Where the set lands.
    run_id : str
        Unique id of this run (UTC time and a random part).
    """

    def __init__(self, folder, *, command: str, seed=None, scenario=None, notes=None):
        self.folder = Path(folder)
        self.command = command
        self.seed = None if seed is None else int(seed)
        self.scenario = None if scenario is None else Path(scenario)
        self.notes = dict(notes or {})
        now = dt.datetime.now(dt.UTC)
        self.created = now.strftime("%Y-%m-%dT%H:%M:%SZ")
        self.run_id = f"{now:%Y%m%dT%H%M%SZ}-{uuid.uuid4().hex[:8]}"
        self.dir = self.folder / f"{STAGING_PREFIX}{self.run_id}"
        self.manifest: dict | None = None
        self._created = False

    def final(self, path) -> Path:
        """Where a file written under :attr:`dir` lands in the output folder."""
        path = Path(path)
        try:
            return self.folder / path.relative_to(self.dir)
        except ValueError:
            return path

    def written_line(self, written) -> str:
        """The terminal line listing the files written (their final paths) and the run."""
        return ("written: " + ", ".join(str(self.final(p)) for p in written)
                + f" (run {self.run_id}; {README_NAME}, {MANIFEST_NAME})")

    def __enter__(self) -> OutputSet:
        self._created = not self.folder.exists()
        check_output_folder(self.folder)
        clean_output_folder(self.folder)
        try:
            self.dir.mkdir()
            (self.dir / "pid").write_text(str(os.getpid()))
        except OSError as err:
            raise _write_error(self.folder, err) from None
        return self

    def __exit__(self, kind, value, tb) -> bool:
        if kind is not None:
            self._discard()
            return False
        try:
            self._commit()
        except OSError as err:
            self._discard()
            raise _write_error(self.folder, err) from None
        except BaseException:
            self._discard()
            raise
        return False

    def _discard(self) -> None:
        """Drop the staged files; a folder this run created and left empty goes too."""
        shutil.rmtree(self.dir, ignore_errors=True)
        if self._created:
            (self.folder / LOCK_NAME).unlink(missing_ok=True)
            with contextlib.suppress(OSError):
                self.folder.rmdir()  # only if empty

    def _commit(self) -> None:
        from pondsim import __version__

        (self.dir / "pid").unlink(missing_ok=True)
        manifest = {
            "run_id": self.run_id, "command": self.command, "created_utc": self.created,
            "pondsim_version": __version__, "seed": self.seed,
            "scenario": None if self.scenario is None else str(self.scenario.resolve()),
            "scenario_sha256": (None if self.scenario is None or not self.scenario.is_file()
                                else file_sha256(self.scenario)),
            "notes": self.notes, "files": {},
        }
        names = {p.relative_to(self.dir).as_posix(): 0 for p in self._files()}
        atomic_write(self.dir / README_NAME, lambda tmp: Path(tmp).write_text(
            _readme({**manifest, "files": names}), encoding="utf-8"))
        for path in self._files():
            manifest["files"][path.relative_to(self.dir).as_posix()] = {
                "bytes": path.stat().st_size, "sha256": file_sha256(path)}
        atomic_write(self.dir / MANIFEST_NAME, lambda tmp: Path(tmp).write_text(
            json.dumps(manifest, indent=1), encoding="utf-8"))
        self.manifest = manifest
        commit_dir = self.folder / f"{COMMIT_PREFIX}{self.run_id}"
        with _signals_held(), _folder_lock(self.folder):
            os.replace(self.dir, commit_dir)
            fsync_path(self.folder)  # a power loss now leaves a commit folder to finish
            _move_into_place(commit_dir, self.folder)

    def _files(self) -> list[Path]:
        return sorted(p for p in self.dir.rglob("*")
                      if p.is_file() and p.name != MANIFEST_NAME)


def verify_output_set(folder) -> list[str]:
    """Problems of the output set in ``folder`` (empty list: a complete, unmixed set).

    Checks that the manifest exists and that every file it lists is present with the
    listed size and SHA-256 (a file from another run has another hash).
    """
    folder = Path(folder)
    manifest = _read_manifest(folder)
    if manifest is None:
        return [f"no readable {MANIFEST_NAME}: not a complete pondsim output set"]
    problems = []
    for name, info in manifest.get("files", {}).items():
        path = folder / name
        if not path.is_file():
            problems.append(f"{name}: missing")
        elif path.stat().st_size != info["bytes"] or file_sha256(path) != info["sha256"]:
            problems.append(f"{name}: not the file of run {manifest['run_id']}")
    return problems
