"""Chunks of mergers on an existing Dask cluster (optional extra ``kncast[dask]``, dask.distributed).

The population is drawn in the main process, so a seed gives the same mergers whatever runs them;
each chunk is planned by the same function as in one process and the results come back in order.
"""
from __future__ import annotations

CONNECT_TIMEOUT_S = 10.0  # how long to wait for the scheduler


def check_available() -> None:
    """A one-line error when dask.distributed is not installed."""
    from kncast.planner.errors import InputError

    try:
        import dask.distributed  # noqa: F401
    except ImportError:
        raise InputError("a Dask cluster needs dask.distributed: pip install 'kncast[dask]'") from None


def connect(address):
    """A dask.distributed Client of the scheduler at ``address``; a one-line error when it cannot be reached."""
    check_available()
    from dask.distributed import Client

    from kncast.planner.errors import InputError

    try:
        return Client(address, timeout=CONNECT_TIMEOUT_S)
    except (OSError, TimeoutError, ValueError) as err:
        raise InputError(f"cannot reach the Dask scheduler at {address!r} within {CONNECT_TIMEOUT_S:g} s "
                         f"({type(err).__name__})") from None


def map_chunks(address, chunks: list, eph, table, ns) -> list:
    """plan_chunk over ``chunks`` on the cluster at ``address`` (a scheduler address, or a Client), in order."""
    check_available()
    from dask.distributed import Client

    from kncast.planner.semester.network import plan_chunk

    client = address if isinstance(address, Client) else connect(address)
    try:
        shared = client.scatter([eph, table, ns], broadcast=True)
        futures = client.map(plan_chunk, chunks, *[[s] * len(chunks) for s in shared], pure=False)
        return client.gather(futures)
    finally:
        if client is not address:
            client.close()
