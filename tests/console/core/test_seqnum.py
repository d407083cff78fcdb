"""Serial-number arithmetic against the worked examples of its specification.

Source: R. Elz, R. Bush, "Serial Number Arithmetic", RFC 1982, 1996, section 5.1 (SERIAL_BITS = 2: the values 0..3;
1 > 0, 2 > 1, 3 > 2 and 0 > 3; 2 and 0, 3 and 1 are not ordered) and section 3.1 (addition of 0 .. 2**(bits-1) - 1).
"""

from __future__ import annotations

import itertools

import pytest

from console.core import seqnum

ORDERED = {(1, 0), (2, 1), (3, 2), (0, 3)}   # (s1, s2) with s1 > s2, RFC 1982 section 5.1


@pytest.mark.parametrize("s1, s2", list(itertools.product(range(4), repeat=2)))
def test_two_bit_space_of_rfc_1982_section_5_1(s1: int, s2: int) -> None:
    assert seqnum.is_after(s1, s2, bits=2) is ((s1, s2) in ORDERED)


def test_sixteen_bit_comparison_across_the_wrap() -> None:
    assert seqnum.is_after(0, 65535) and not seqnum.is_after(65535, 0)
    assert seqnum.is_after(10, 65530)                       # 16 steps on, across the wrap
    assert not seqnum.is_after(32768, 0) and not seqnum.is_after(0, 32768)   # half the space: not ordered
    assert seqnum.is_after(32767, 0) and seqnum.is_after(0, 32769)


def test_addition_wraps_and_refuses_half_the_space() -> None:
    assert seqnum.add(65535, 1) == 0 and seqnum.add(3, 1, bits=2) == 0
    assert seqnum.distance(5, 65533) == 8
    with pytest.raises(ValueError):
        seqnum.add(0, 32768)
