"""Exact order statistics (k-th smallest value, median) of values spread over chunks.

Radix selection: float64 values are mapped to unsigned 64-bit keys that sort like the values
(sign bit flipped for positives, all bits flipped for negatives); the keys are counted in 65536
bins of their top 16 bits, the bin holding rank k is kept, and the next 16 bits are counted
within it, until the candidates are few enough (≤ 2^20) to be gathered and partitioned
(``np.partition``). Each level is one pass over the chunks holding a small histogram per task,
so memory does not grow with the number of values, and the result is the exact k-th value —
``np.median`` of the gathered values, without gathering them all [1]_.

References
----------
.. [1] Knuth, D. E. (1998). The Art of Computer Programming, vol. 3: Sorting and Searching,
   2nd ed., §5.2.5 (radix sorting) and §5.3.3 (selection). Addison-Wesley.
"""

from __future__ import annotations

import numpy as np

__all__ = ["chunked_kth", "chunked_median"]

_GATHER = 1 << 20
_SIGN = np.uint64(1 << 63)


def _keys(values: np.ndarray) -> np.ndarray:
    bits = np.ascontiguousarray(values, dtype=np.float64).view(np.uint64)
    return np.where(bits & _SIGN, ~bits, bits | _SIGN)


def _matching(keys, prefix, shift):
    if prefix is None:
        return keys
    return keys[(keys >> np.uint64(shift)) == np.uint64(prefix)]


def _hist_block(block, values_fn, args, prefix, shift):
    keys = _matching(_keys(values_fn(block, *args)), prefix, shift + 16)
    bins = (keys >> np.uint64(shift)) & np.uint64(0xFFFF)
    return np.unique(bins, return_counts=True)


def _gather_block(block, values_fn, args, prefix, shift):
    values = np.asarray(values_fn(block, *args), dtype=np.float64)
    keys = _keys(values)
    if prefix is None:
        return values
    return values[(keys >> np.uint64(shift)) == np.uint64(prefix)]


def chunked_kth(runner, blocks, values_fn, args, ranks) -> list[float]:
    """The ``ranks``-th smallest values (0-based) of ``values_fn(block, *args)`` over blocks.

    ``values_fn`` is a top-level function returning a 1-D array of the block's values.
    """
    ranks = [int(r) for r in ranks]
    return [v for _, v in sorted(_select(runner, blocks, values_fn, args, ranks, None, 48,
                                         list(range(len(ranks)))))]


def _select(runner, blocks, values_fn, args, ranks, prefix, shift, order):
    """Pairs (position in the caller's list, value) for ranks within the keys of ``prefix``."""
    parts = runner.map(_hist_block, blocks, values_fn, args, prefix, shift)
    counts = np.zeros(65536, dtype=np.int64)
    for bins, cnt in parts:
        np.add.at(counts, bins.astype(np.int64), cnt)
    cum = np.cumsum(counts)
    groups: dict[int, list[tuple[int, int]]] = {}
    for pos, rank in zip(order, ranks):
        b = int(np.searchsorted(cum, rank, side="right"))
        below = int(cum[b - 1]) if b > 0 else 0
        groups.setdefault(b, []).append((pos, rank - below))
    out = []
    for b, members in groups.items():
        sub_prefix = b if prefix is None else (prefix << 16) | b
        if counts[b] <= _GATHER or shift == 0:
            parts = runner.map(_gather_block, blocks, values_fn, args, sub_prefix, shift)
            values = np.concatenate([p for p in parts if p.size] or [np.zeros(0)])
            local = sorted({r for _, r in members})
            values = np.partition(values, local)
            out.extend((pos, float(values[r])) for pos, r in members)
        else:
            out.extend(_select(runner, blocks, values_fn, args, [r for _, r in members],
                               sub_prefix, shift - 16, [p for p, _ in members]))
    return out


def chunked_median(runner, blocks, values_fn, args, n: int) -> float:
    """``np.median`` of the ``n`` values (mean of the two middle ones when n is even)."""
    if n % 2:
        return chunked_kth(runner, blocks, values_fn, args, [n // 2])[0]
    a, b = chunked_kth(runner, blocks, values_fn, args, [n // 2 - 1, n // 2])
    return float(np.mean(np.array([a, b])))
