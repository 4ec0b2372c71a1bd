"""Row blocks on the cluster: every partition encoded once into (X, y, w) on a worker and kept
there for the whole fit; functions go to the blocks and only small results come back, added up
on the client in a fixed order (so the answer does not depend on timing).
"""
from __future__ import annotations

import time

from learnopt.data.sharded import ShardedDataset, encode_block
from learnopt.scale.cluster import connect


def add_up(parts):
    """Sum a list of results (numbers, arrays, or tuples of them) in a fixed order."""
    total = parts[0]
    for part in parts[1:]:
        total = tuple(a + b for a, b in zip(total, part)) if isinstance(total, tuple) else total + part
    return total


class Blocks:
    """The encoded partitions of a sharded dataset, held on the cluster for one fit.

    ``total(fn, *per_block, **common)`` runs ``fn(block, *per_block_args, **common)`` on every
    block and returns the sum of the (small) results; ``map`` returns the futures themselves
    (per-block state that stays on the workers). Seconds spent waiting for passes are counted
    in ``seconds`` and the number of passes in ``passes``.
    """

    def __init__(self, dataset: ShardedDataset, client=None):
        from dask import delayed
        self.client = connect(client)
        self.dataset = dataset
        parts = dataset.source.to_delayed()
        encode = delayed(encode_block, pure=True)
        t0 = time.perf_counter()
        self.futures = self.client.compute([encode(p, dataset.spec, k) for k, p in enumerate(parts)])
        self.passes, self.seconds = 0, time.perf_counter() - t0

    def __len__(self) -> int:
        return len(self.futures)

    def map(self, fn, *per_block, **common) -> list:
        return self.client.map(fn, self.futures, *per_block, pure=False, **common)

    def gather(self, futures) -> list:
        t0 = time.perf_counter()
        try:
            out = self.client.gather(futures)
        finally:
            self.seconds += time.perf_counter() - t0
            self.passes += 1
        return out

    def total(self, fn, *per_block, **common):
        return add_up(self.gather(self.map(fn, *per_block, **common)))

    def pick(self, futures, index: int) -> list:
        """Futures of one element of each per-block tuple result (nothing moves to the client)."""
        return self.client.map(_item, futures, [index] * len(futures), pure=False)

    def release(self) -> None:
        self.futures = []


def _item(result, index):
    return result[index]
