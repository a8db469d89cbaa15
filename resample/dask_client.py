"""The one place famwise opens a dask client.

The resampling engine, batch and the planner run their joblib calls on
``backend="dask"`` through :func:`dask_session`.  The scheduler may be a
``dask.distributed.Client`` (used as given), an address string (a client is
opened and closed here), or ``None``: the current default client, else, when
the caller allows it (``start_local=True``), a ``LocalCluster`` bound to
127.0.0.1 that is started and closed here.
"""

from __future__ import annotations

import logging
import os
import warnings
from contextlib import contextmanager
from dataclasses import dataclass

from ..core.errors import FamwiseInputError

__all__ = ["DaskSession", "dask_session"]


@dataclass(frozen=True)
class DaskSession:
    """An open client and a plain description of where the work runs."""

    client: object
    where: str


def _distributed():
    try:
        import distributed
    except ImportError:  # pragma: no cover - optional dependency
        raise FamwiseInputError(
            "backend='dask' needs dask.distributed; install famwise[dask]") from None
    return distributed


def _local_cluster(distributed, n_jobs):
    import joblib
    workers = joblib.effective_n_jobs(n_jobs) if n_jobs not in (None, 1) else (os.cpu_count() or 1)
    with warnings.catch_warnings():
        # The scheduler's bare HTTP endpoint binds 127.0.0.1 and moves to a free
        # port when 8787 is taken; that move is not the user's concern.
        warnings.filterwarnings("ignore", message="Port .* is already in use")
        cluster = distributed.LocalCluster(n_workers=max(1, workers), threads_per_worker=1,
                                           processes=True, host="127.0.0.1",
                                           dashboard_address=None, silence_logs=logging.ERROR)
    return distributed.Client(cluster, set_as_default=False), cluster


@contextmanager
def dask_session(scheduler=None, *, n_jobs=1, start_local=False):
    """Yield a :class:`DaskSession`; close whatever was opened here on exit.

    Parameters
    ----------
    scheduler : dask.distributed.Client, str or None
        A client, a scheduler address, or None for the current default client.
    n_jobs : int
        Workers of a LocalCluster started here (``None`` or 1: one per core).
    start_local : bool, default=False
        With ``scheduler=None`` and no current client, start a LocalCluster on
        127.0.0.1 instead of raising.
    """
    distributed = _distributed()
    closing = []
    if scheduler is None:
        try:
            client = distributed.get_client()
            where = f"the current dask client ({client.scheduler.address})"
        except ValueError:
            if not start_local:
                raise FamwiseInputError(
                    "backend='dask' needs a running dask.distributed Client or "
                    "scheduler=ADDRESS; none was found") from None
            client, cluster = _local_cluster(distributed, n_jobs)
            closing = [client, cluster]
            n = len(client.scheduler_info()["workers"])
            where = f"a LocalCluster on 127.0.0.1 ({n} workers)"
    elif isinstance(scheduler, str):
        try:
            client = distributed.Client(scheduler, set_as_default=False, timeout="10s")
        except OSError as exc:
            raise FamwiseInputError(
                f"cannot reach the dask scheduler {scheduler!r}: {exc}".splitlines()[0]) \
                from None
        closing = [client]
        where = f"the dask scheduler at {scheduler}"
    elif isinstance(scheduler, distributed.Client):
        client, where = scheduler, f"the dask client given ({scheduler.scheduler.address})"
    else:
        raise FamwiseInputError(
            f"scheduler must be a dask.distributed Client or an address string; "
            f"got {type(scheduler).__name__}")
    try:
        yield DaskSession(client, where)
    finally:
        for thing in closing:
            thing.close()
