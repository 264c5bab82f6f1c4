"""Enumerating partitions of the block instances, against combinatorics.

Outside truth: the number of partitions of an n-element set is the Bell number B_n, and
into exactly k parts the Stirling number of the second kind S(n, k) (any combinatorics
text, e.g. Graham, Knuth and Patashnik, *Concrete Mathematics*, section 6.1; values
recomputed here by the recurrence S(n, k) = k S(n-1, k) + S(n-1, k-1)). For a multiset
(block counts above one) every multiset partition must appear once: checked against a
brute-force enumeration of all assignments of instances to parts.
"""

from __future__ import annotations

import itertools

import pytest

from optimizer.solver.partitions import multiset_partitions

# Bell numbers B_1..B_8 (OEIS A000110)
BELL = [1, 2, 5, 15, 52, 203, 877, 4140]


def stirling2(n: int, k: int) -> int:
    if n == k:
        return 1
    if k == 0 or k > n:
        return 0
    return k * stirling2(n - 1, k) + stirling2(n - 1, k - 1)


def all_parts(total: tuple[int, ...]) -> list[tuple[int, ...]]:
    ranges = [range(t + 1) for t in total]
    return [p for p in itertools.product(*ranges) if any(p)]


@pytest.mark.parametrize("n", range(1, 9))
def test_set_partitions_are_bell_and_stirling_numbers(n):
    total = (1,) * n
    parts = all_parts(total)
    assert sum(1 for _ in multiset_partitions(total, parts, n)) == BELL[n - 1]
    for k in range(1, n + 1):
        exact = sum(1 for _ in multiset_partitions(total, parts, k, exact=True))
        assert exact == stirling2(n, k), (n, k)
        at_most = sum(1 for _ in multiset_partitions(total, parts, k))
        assert at_most == sum(stirling2(n, j) for j in range(1, k + 1)), (n, k)


def _brute(total: tuple[int, ...], max_parts: int) -> set[tuple]:
    """Every multiset of parts summing to ``total``, by assigning instances to parts."""
    instances = [b for b, t in enumerate(total) for _ in range(t)]
    found = set()
    for labels in itertools.product(range(max_parts), repeat=len(instances)):
        parts = [[0] * len(total) for _ in range(max_parts)]
        for b, label in zip(instances, labels, strict=True):
            parts[label][b] += 1
        found.add(tuple(sorted(tuple(p) for p in parts if any(p))))
    return found


@pytest.mark.parametrize("total", [(2, 1), (3, 1, 1), (2, 2), (1, 3, 2), (4,)])
def test_multiset_partitions_each_once(total):
    k = min(sum(total), 4)
    mine = [tuple(sorted(p)) for p in multiset_partitions(total, all_parts(total), k)]
    assert len(mine) == len(set(mine))
    assert set(mine) == _brute(total, k)


def test_only_allowed_parts_are_used():
    total = (2, 1, 1)
    allowed = [(1, 0, 0), (1, 1, 0), (0, 0, 1), (1, 0, 1)]
    for partition in multiset_partitions(total, allowed, 4):
        assert all(part in allowed for part in partition)
        assert tuple(map(sum, zip(*partition, strict=True))) == total
