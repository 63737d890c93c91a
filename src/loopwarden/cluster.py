"""A Dask cluster for sweeps and batches (``--scheduler ADDRESS``; optional extra ``dask``).

``connect(address)`` opens a :class:`dask.distributed.Client` on a running scheduler
(``tcp://host:8786``) and closes it afterwards.  The sweep uses its executor
(``client.get_executor()``, whose ``map`` keeps the order of the chunks), the batch submits
chunks of designs to it.  The workers must be able to import loopwarden, and for a batch
see the design files and the output folder at the same paths (a shared filesystem), as
local worker processes do.
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

from .errors import UsageError

__all__ = ["connect", "executor"]

#: Seconds to wait for the scheduler before giving up.
CONNECT_TIMEOUT_S = 30


@contextmanager
def connect(address: str) -> Iterator[Any]:
    """A ``dask.distributed.Client`` on the scheduler at ``address`` (closed on exit)."""
    try:
        from dask.distributed import Client
    except ModuleNotFoundError as exc:
        raise UsageError("--scheduler needs dask.distributed, which is not installed",
                         hint="pip install 'loopwarden[dask]'") from exc
    try:
        client = Client(address, timeout=CONNECT_TIMEOUT_S, set_as_default=False)
    except (OSError, TimeoutError, ValueError) as exc:
        raise UsageError(f"--scheduler {address}: cannot reach the Dask scheduler ({exc})",
                         hint="start one with 'dask scheduler' and workers with "
                              "'dask worker ADDRESS', or leave out --scheduler") from exc
    try:
        yield client
    finally:
        client.close()


def executor(client: Any) -> Any:
    """The client's ``concurrent.futures``-style executor (``map`` keeps input order)."""
    return client.get_executor(pure=False)
