"""The helpers behind the nearest-valid-value suggestions."""
from __future__ import annotations

import time

from trimtab.resolve.arithmetic import near_divisors, near_multiples, remainder


def test_nearest_values():
    assert remainder(1024, 96) == "1024 = 10 x 96 + 64"  # the design's own example (design 2.4)
    assert near_divisors(1024, 96) == [64, 128]
    assert near_divisors(768, 256, unit=48) == [192, 384]
    assert near_divisors(1024, 256, unit=96) == []
    assert near_multiples(1000, 96) == [960, 1056]  # issue 3's example suggestion
    assert near_multiples(5, 8) == [8]


def test_huge_counts_cost_no_time():
    start = time.perf_counter()
    n = 10**25 + 3
    found = near_divisors(n, 7)
    assert found and all(n % d == 0 for d in found)
    assert near_divisors(2**61 - 1, 10) == [1, 2**61 - 1]  # a Mersenne prime: only the budget stops the walk
    assert time.perf_counter() - start < 1.0
