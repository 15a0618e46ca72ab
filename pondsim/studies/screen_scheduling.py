"""Where screening tasks run: in this process, on a local process pool (spawn) or on a
dask.distributed cluster; outcomes are yielded as tasks finish, in any order."""

from __future__ import annotations

import os
import sys
import uuid

from pondsim.errors import InputError
from pondsim.studies.screen_task import SiteOutcome, SiteTask, run_site


def _bar(progress: bool, total: int, done: int):
    if not progress or total == 0:
        return None
    from tqdm.auto import tqdm

    return tqdm(total=total, initial=done, unit="site", desc="screening sites",
                file=sys.stderr)


def _execute(tasks: list[SiteTask], *, workers=None, scheduler=None):
    """Run tasks and yield their outcomes as they complete (any order)."""
    if not tasks:
        return
    if scheduler is not None:
        yield from _execute_dask(tasks, scheduler)
        return
    n = (os.cpu_count() or 1) if workers is None else int(workers)
    n = min(n, len(tasks))
    if n <= 1:
        for task in tasks:
            yield run_site(task)
        return
    yield from _execute_pool(tasks, n)


def _execute_pool(tasks: list[SiteTask], n_workers: int):
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor, as_completed

    ctx = multiprocessing.get_context("spawn")
    with ProcessPoolExecutor(max_workers=n_workers, mp_context=ctx) as pool:
        futures = {pool.submit(run_site, t): t for t in tasks}
        try:
            for fut in as_completed(futures):
                try:
                    yield fut.result()
                except Exception as err:  # a dead worker process, unpicklable result
                    yield SiteOutcome(futures[fut].site.name,
                                      error=f"worker failed: {type(err).__name__}: {err}")
        except BaseException:
            for fut in futures:
                fut.cancel()
            raise


def connect(scheduler):
    """A ``distributed.Client`` for an address (or the client given); (client, owned)."""
    try:
        import distributed
    except ImportError:
        raise InputError("a dask scheduler needs dask.distributed: pip install "
                         "'pondsim[distributed]'", field="--scheduler") from None
    if isinstance(scheduler, distributed.Client):
        return scheduler, False
    try:
        client = distributed.Client(str(scheduler), timeout="20s")
    except (OSError, TimeoutError, ValueError) as err:
        raise InputError(f"cannot connect to the dask scheduler at {scheduler}: {err}; "
                         "start one with `dask scheduler` and workers with `dask worker "
                         "ADDRESS`", field="--scheduler") from None
    return client, True


def _execute_dask(tasks: list[SiteTask], scheduler):
    import distributed

    client, owned = connect(scheduler)
    token = uuid.uuid4().hex[:8]
    try:
        futures = {}
        for i, t in enumerate(tasks):
            fut = client.submit(run_site, t, key=f"pondsim-site-{i}-{token}", pure=False)
            futures[fut.key] = (fut, t)
        try:
            for fut in distributed.as_completed([f for f, _ in futures.values()]):
                task = futures[fut.key][1]
                try:
                    outcome = fut.result()
                except Exception as err:  # worker lost, task not deserialisable, ...
                    outcome = SiteOutcome(task.site.name,
                                          error=f"dask task failed: {type(err).__name__}: "
                                                f"{err}")
                fut.release()
                yield outcome
        except BaseException:
            client.cancel([f for f, _ in futures.values()])
            raise
    finally:
        if owned:
            client.close()
