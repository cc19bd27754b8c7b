"""What the sharded and the broadcast tree share: the client, task names, gathering."""

from __future__ import annotations

import uuid
from typing import Any

import distributed


def client_of(client: Any) -> Any:
    """`client`, or the current Dask client."""
    if client is not None:
        return client
    try:
        return distributed.get_client()
    except ValueError:
        raise ValueError(
            "no Dask client: pass client=..., or create a distributed.Client first"
        ) from None


def new_token() -> str:
    """A fresh part of task keys, so that two calls never share Dask keys."""
    return uuid.uuid4().hex[:12]


def gather(client: Any, futures: list[Any], progress: bool, watched: Any = None) -> list[Any]:
    """The futures' results, with Dask's progress bar over `watched` when asked."""
    if progress:
        distributed.progress(watched if watched is not None else futures)
    return client.gather(futures)
