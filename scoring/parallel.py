"""Scoring many sessions: serially, on a local process pool, or on a Dask cluster.

Scoring a session is a pure function of (session file, study parameters), so
sessions are independent tasks. Only the file path and the parameters travel
to a worker; the worker opens the session file itself and returns the small
result (score records, no raw samples), so the coordinating process never
holds more than one session's results per task and a study of hundreds of
sessions scores in bounded memory. Results come back in the order of the
inputs whatever order the workers finish in, so a parallel run equals the
serial run exactly.
"""

from __future__ import annotations

import os
from collections.abc import Callable, Iterable, Sequence
from concurrent.futures import ProcessPoolExecutor, as_completed
from typing import Any

from echoreo.errors import InputError, ScoringInputError

__all__ = ["default_workers", "map_sessions"]


def default_workers() -> int:
    """Worker processes to use by default: the cores this process may run on."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - not on Linux
        return max(1, os.cpu_count() or 1)


def _call(func: Callable, path: Any, kwargs: dict) -> tuple[str, Any]:
    """Run one task; a user-fixable error travels back as its message, not a crash."""
    try:
        return "ok", func(path, **kwargs)
    except InputError as exc:
        return "input_error", str(exc)


def map_sessions(
    func: Callable[..., Any],
    paths: Sequence[Any],
    *,
    workers: int | None = None,
    cluster: str | None = None,
    progress: Callable[[int, int], None] | None = None,
    connect_timeout_s: float = 10.0,
    **kwargs: Any,
) -> list[tuple[str, Any]]:
    """Apply ``func(path, **kwargs)`` to every session, in parallel.

    Parameters
    ----------
    func : callable
        A module-level (picklable) function of one session path.
    paths : sequence
        Session file paths.
    workers : int, optional
        Local worker processes; ``1`` runs serially in this process. Default:
        the available cores.
    cluster : str, optional
        Address of a Dask distributed scheduler (``tcp://host:port``); needs
        the ``dask`` extra. Overrides ``workers``.
    progress : callable, optional
        Called as ``progress(done, total)`` after each finished session.
    connect_timeout_s : float
        How long to try reaching the Dask scheduler, s.
    **kwargs
        Passed to ``func`` (study parameters).

    Returns
    -------
    list of (status, value)
        In the order of ``paths``: ``("ok", result)`` or
        ``("input_error", message)`` for a session that could not be scored
        (the others are still scored).
    """
    paths = list(paths)
    total = len(paths)
    out: list[tuple[str, Any] | None] = [None] * total
    done = 0

    def tick() -> None:
        nonlocal done
        done += 1
        if progress is not None:
            progress(done, total)

    if cluster is not None:
        return _map_dask(func, paths, cluster, kwargs, tick, connect_timeout_s)
    n = default_workers() if workers is None else int(workers)
    if n < 1:
        raise ScoringInputError(f"workers must be at least 1; got {workers}")
    if n == 1 or total <= 1:
        for i, path in enumerate(paths):
            out[i] = _call(func, path, kwargs)
            tick()
        return out  # type: ignore[return-value]
    with ProcessPoolExecutor(max_workers=min(n, total)) as pool:
        futures = {pool.submit(_call, func, path, kwargs): i for i, path in enumerate(paths)}
        for fut in as_completed(futures):
            out[futures[fut]] = fut.result()
            tick()
    return out  # type: ignore[return-value]


def _map_dask(func: Callable, paths: Iterable[Any], address: str, kwargs: dict,
              tick: Callable[[], None], timeout_s: float) -> list[tuple[str, Any]]:
    try:
        from distributed import Client
        from distributed import as_completed as dask_completed
    except ImportError as exc:
        raise ScoringInputError(
            "--cluster needs Dask distributed, which is not installed",
            hint="pip install 'echoreo[dask]'") from exc
    paths = list(paths)
    try:
        client = Client(address, timeout=timeout_s)
    except (OSError, TimeoutError) as exc:
        raise ScoringInputError(
            f"cannot reach the Dask scheduler at {address}: {exc}",
            hint="start one with `dask scheduler` and `dask worker ADDRESS`, "
                 "or drop --cluster to use the local cores") from exc
    try:
        futures = [client.submit(_call, func, p, kwargs, pure=False) for p in paths]
        index = {f.key: i for i, f in enumerate(futures)}
        out: list[tuple[str, Any] | None] = [None] * len(paths)
        for fut in dask_completed(futures):
            out[index[fut.key]] = fut.result()
            fut.release()
            tick()
        return out  # type: ignore[return-value]
    finally:
        client.close()
