"""The map step of a partitioned build run elsewhere: each partition read, decoded and built by a ``Builder``
of its own in another process (``ProcessRunner``, a pool on this machine) or on a Dask cluster
(``DaskRunner``), its rows and state handed back in input order for ``build_partitions`` to merge
(``reduce.merge``).

A runner's ``map(plan, last, partitions, decoding)`` takes the partitions ``(export, decoded or None)`` in
order and yields ``(export, decoded or None, (rows, builder))`` in the same order; ``decoding`` (limits,
formats, decisions) decodes a partition that comes undecoded. At most one partition more than there are
workers is in flight, so memory stays bounded by the partition size whatever the input's.
"""

from __future__ import annotations

import os
from collections import deque

from ..decode import decode, paused_gc
from .rows import Builder


def decode_partition(export, decoding: tuple) -> dict:
    """The decoded columns of a partition read but not decoded: ``decoding`` is (limits, formats, decisions)."""
    limits, formats, decided = decoding
    return decode(export, limits, formats, decided=decided)


def build_alone(plan, last: dict, export, decoded: dict | None, decoding: tuple | None) -> tuple:
    """The map step: one partition's rows and the ``Builder`` that made them, alone (``last``: the records
    that keep each natural key, duplicates = "last", known from a first pass over the whole input)."""
    with paused_gc():
        if decoded is None:
            decoded = decode_partition(export, decoding)
        builder = Builder(plan)
        builder.last = last
        builder.add(export, decoded)
        return builder.take_rows(), builder


def _ordered(submit, partitions, depth: int):
    """``(export, decoded, result)`` for every partition, in order, with at most ``depth`` submitted ahead."""
    pending: deque = deque()
    for export, decoded in partitions:
        pending.append((export, decoded, submit(export, decoded)))
        if len(pending) >= depth:
            export, decoded, done = pending.popleft()
            yield export, decoded, done.result()
    while pending:
        export, decoded, done = pending.popleft()
        yield export, decoded, done.result()


_SHARED: dict = {}  # a pool process's plan and first-pass holders, set once when it starts


def _start(plan, last, decoding) -> None:
    _SHARED.update(plan=plan, last=last, decoding=decoding)


def _build_here(export, decoded):
    return build_alone(_SHARED["plan"], _SHARED["last"], export, decoded, _SHARED["decoding"])


class ProcessRunner:
    """Partitions built by a pool of ``workers`` processes on this machine (default: one per core)."""

    def __init__(self, workers: int | None = None):
        self.workers = workers or os.cpu_count() or 1

    def map(self, plan, last: dict, partitions, decoding: tuple | None):
        from concurrent.futures import ProcessPoolExecutor

        with ProcessPoolExecutor(self.workers, initializer=_start, initargs=(plan, last, decoding)) as pool:
            yield from _ordered(lambda e, d: pool.submit(_build_here, e, d), partitions, self.workers + 1)

    def describe(self) -> str:
        return f"{self.workers} processes"


class DaskRunner:
    """Partitions built as tasks of a Dask cluster: ``address`` a scheduler's (``tcp://host:8786``), or
    ``local:N`` for a ``distributed.LocalCluster`` of N worker processes started for the build."""

    def __init__(self, address: str):
        self.address = address

    def map(self, plan, last: dict, partitions, decoding: tuple | None):
        from distributed import Client, LocalCluster

        cluster = None
        if self.address.startswith("local:"):
            n = int(self.address.split(":", 1)[1] or 1)
            cluster = LocalCluster(n_workers=n, threads_per_worker=1, processes=True, dashboard_address=None)
            client = Client(cluster)
        else:
            client = Client(self.address)
        try:
            workers = max(1, len(client.scheduler_info().get("workers", {})))
            shared = client.scatter([plan, last, decoding], broadcast=True)
            yield from _ordered(lambda e, d: client.submit(build_alone, *shared[:2], e, d, shared[2], pure=False),
                                partitions, workers + 1)
        finally:
            client.close()
            if cluster is not None:
                cluster.close()

    def describe(self) -> str:
        return f"Dask at {self.address}"
