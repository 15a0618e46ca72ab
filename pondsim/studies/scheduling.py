"""Where the pieces of a study run: in this process, on local worker processes, or on a
dask.distributed cluster, with results returned in submission order.

``outlook`` and ``tune`` cut their work into independent pieces (blocks of weather
years; groups of candidate plans) whose results do not depend on where they ran: each
piece carries its own random streams (:meth:`pondsim.operations.crash.CrashModel.streams`),
so serial, local and cluster runs give identical numbers. ``screen`` has its own
as-completed executor (:mod:`pondsim.studies.screen_scheduling`); the choice of place is
the same (``--workers N`` or ``--scheduler ADDRESS``).
"""

from __future__ import annotations

import os
import uuid

from pondsim.errors import InputError

__all__ = ["Runner", "open_runner", "describe_place"]


class Runner:
    """Ordered map of a function over pieces of work.

    Use as a context manager (:func:`open_runner`): worker processes or the cluster
    connection live for the whole study, so that a study of many small passes (``tune``)
    does not pay the start-up of workers at every pass.
    """

    def __init__(self, workers: int = 1, scheduler=None):
        self.scheduler = scheduler
        self.workers = max(1, int(workers))
        self._pool = None
        self._client = None
        self._owned = False

    # -------------------------------------------------------------- life cycle
    def __enter__(self) -> Runner:
        if self.scheduler is not None:
            from pondsim.studies.screen_scheduling import connect

            self._client, self._owned = connect(self.scheduler)
            n = len(self._client.scheduler_info().get("workers", {}))
            self.workers = max(1, n)
        elif self.workers > 1:
            import multiprocessing
            from concurrent.futures import ProcessPoolExecutor

            self._pool = ProcessPoolExecutor(
                max_workers=self.workers, mp_context=multiprocessing.get_context("spawn"))
        return self

    def __exit__(self, *exc) -> bool:
        if self._pool is not None:
            self._pool.shutdown(wait=True, cancel_futures=True)
            self._pool = None
        if self._client is not None and self._owned:
            self._client.close()
        self._client = None
        return False

    @property
    def parallel(self) -> bool:
        """Whether pieces may run side by side (more than one worker)."""
        return self.workers > 1

    # ------------------------------------------------------------------ mapping
    def map(self, fn, items, *, consume=None) -> list:
        """``[fn(item) for item in items]``, computed where this runner says.

        ``consume(i, result)``, if given, receives each result in submission order as
        soon as it (and every earlier one) is done, and its return value is kept in
        place of the result (so that a caller can write a block to disk and keep only a
        handle: memory then holds at most the results still waiting for an earlier
        one).
        """
        items = list(items)

        def keep(i, result):
            return result if consume is None else consume(i, result)

        if self._client is not None:
            return self._map_dask(fn, items, keep)
        if self._pool is not None and len(items) > 1:
            futures = [self._pool.submit(fn, item) for item in items]
            try:
                return [keep(i, fut.result()) for i, fut in enumerate(futures)]
            except BaseException:
                for fut in futures:
                    fut.cancel()
                raise
        return [keep(i, fn(item)) for i, item in enumerate(items)]

    def _map_dask(self, fn, items, keep):
        token = uuid.uuid4().hex[:8]
        name = getattr(fn, "__name__", "task")
        futures = [self._client.submit(fn, item, key=f"pondsim-{name}-{i}-{token}",
                                       pure=False) for i, item in enumerate(items)]
        try:
            out = []
            for i, fut in enumerate(futures):
                out.append(keep(i, fut.result()))
                fut.release()
            return out
        except BaseException:
            self._client.cancel(futures)
            raise


def open_runner(workers: int | None = 1, scheduler=None) -> Runner:
    """A :class:`Runner`: ``scheduler`` (a dask.distributed address or ``Client``) if
    given; else ``workers`` local processes (``None`` or 0: one per core; 1: serial, in
    this process)."""
    if scheduler is not None:
        return Runner(scheduler=scheduler)
    if workers is None or int(workers) == 0:
        workers = os.cpu_count() or 1
    if int(workers) < 0:
        raise InputError(f"{workers} workers; allowed: a whole number >= 0 (0 = one per "
                         "core, 1 = serial)", field="--workers")
    return Runner(workers=int(workers))


def describe_place(workers: int | None, scheduler) -> str:
    """Plain words for where a study ran (for the terminal summary)."""
    if scheduler is not None:
        return f"dask scheduler {scheduler}"
    n = (os.cpu_count() or 1) if not workers else int(workers)
    return "serial" if n == 1 else f"{n} local processes"
