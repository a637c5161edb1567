"""An existing Dask scheduler, given by address (``tcp://host:8786``)."""

from __future__ import annotations

from contextlib import contextmanager
from typing import Iterator

from distributed import Client


@contextmanager
def connect(address: str, **_: object) -> Iterator[Client]:
    with Client(address) as client:
        yield client
