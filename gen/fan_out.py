"""Running independent jobs side by side: in this process, over a local process pool, or over a
Dask distributed cluster when the user names its scheduler.

The jobs are the independent runs of a sweep or a search (one parameter value, one candidate);
each is ``function(*job)`` and the results come back in the order of the jobs.
"""

from __future__ import annotations

import os
from collections.abc import Callable, Sequence
from concurrent.futures import ProcessPoolExecutor, as_completed
from typing import Any

from orbitfix.gen.errors import InputError, ToolchainError
from orbitfix.gen.progress import tell

SCHEDULER_SECONDS = 10  # how long a named Dask scheduler is tried before it counts as unreachable


def fan_out(function: Callable[..., Any], jobs: Sequence[tuple], workers: int | None = None,
            scheduler: str | None = None) -> list[Any]:
    """``[function(*job) for job in jobs]``, spread over ``workers`` local processes (default one
    per core; 1 runs in this process), or over the Dask cluster at ``scheduler`` (an address
    such as ``tcp://10.0.0.5:8786``, or a ``distributed.Client``/``LocalCluster`` object)."""
    if not jobs:
        return []
    what = f"running {len(jobs)} independent jobs ({function.__name__.strip('_').replace('_', ' ')})"
    if scheduler is not None:
        return _on_cluster(function, jobs, scheduler)
    count = min(workers or os.cpu_count() or 1, os.cpu_count() or 1, len(jobs))
    if count <= 1:
        results = []
        for done, job in enumerate(jobs):
            tell(what, done, len(jobs))
            results.append(function(*job))
        return results
    with ProcessPoolExecutor(max_workers=count) as pool:
        futures = [pool.submit(function, *job) for job in jobs]
        tell(what, 0, len(jobs))
        for done, _ in enumerate(as_completed(futures), start=1):
            tell(what, done, len(jobs))
        return [future.result() for future in futures]


def _on_cluster(function: Callable[..., Any], jobs: Sequence[tuple], scheduler: Any) -> list[Any]:
    try:
        import distributed
    except ImportError:
        raise ToolchainError("running on a Dask cluster needs the 'distributed' package: "
                             "pip install 'orbitfix[cluster]' (or pip install distributed)") from None
    if isinstance(scheduler, distributed.Client):
        return _gather(scheduler, function, jobs)
    try:
        client = distributed.Client(scheduler, timeout=SCHEDULER_SECONDS)
    except (OSError, TimeoutError, ValueError) as exc:
        raise InputError(f"cannot reach the Dask scheduler at {scheduler!r} ({exc}); check the "
                         "address (e.g. tcp://host:8786) and that the scheduler is running") from None
    try:
        return _gather(client, function, jobs)
    finally:
        client.close()


def _gather(client: Any, function: Callable[..., Any], jobs: Sequence[tuple]) -> list[Any]:
    futures = [client.submit(function, *job, pure=False) for job in jobs]
    return client.gather(futures)
