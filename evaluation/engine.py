"""Where dask runs: the default threads, a running dask.distributed scheduler, or a local cluster.

The same request gives the same numbers on every engine; only where the chunks are
reduced changes.
"""

from __future__ import annotations

import contextlib
from collections.abc import Iterator

from .errors import InputError

__all__ = ["connect", "dashboard_link"]

_ACTIVE: dict[str, str | None] = {"dashboard": None}


@contextlib.contextmanager
def connect(*, address: str | None = None, workers: int | None = None) -> Iterator[object]:
    """Use a dask.distributed cluster for the computations inside the block.

    Parameters
    ----------
    address
        Address of a running scheduler (``tcp://host:8786``), e.g. one started by a job
        queue, Kubernetes or SSH deployment of dask.
    workers
        Start a :class:`distributed.LocalCluster` with this many worker processes
        instead (ignored when ``address`` is given).
    """
    from distributed import Client, LocalCluster

    cluster = None
    try:
        if address:
            client = Client(address, timeout="10s")
        else:
            if workers is None or workers < 1:
                raise InputError(f"--workers must be a positive number (got {workers})", remedy="e.g. --workers 2")
            cluster = LocalCluster(n_workers=workers, threads_per_worker=1, processes=True, dashboard_address=":0")
            client = Client(cluster)
    except InputError:
        raise
    except Exception as exc:
        raise InputError(
            f"cannot reach the dask scheduler ({' '.join(str(exc).split())[:120]})",
            file=address,
            remedy="check the address and that the scheduler is running (dask scheduler / dask-scheduler)",
        ) from None
    _ACTIVE["dashboard"] = client.dashboard_link
    try:
        yield client
    finally:
        _ACTIVE["dashboard"] = None
        client.close()
        if cluster is not None:
            cluster.close()


def dashboard_link() -> str | None:
    """The dask dashboard of the cluster in use, if any."""
    return _ACTIVE["dashboard"]
