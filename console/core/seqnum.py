"""Wrapping 16-bit sequence numbers compared the way serial-number arithmetic defines it.

Source: R. Elz, R. Bush, "Serial Number Arithmetic", RFC 1982, 1996, section 3 (addition, 3.1; comparison, 3.2), with
SERIAL_BITS = 16. Two numbers exactly half the space apart are not ordered (the RFC leaves that comparison undefined);
here neither is "after" the other. A fixed reference compared against a running counter becomes wrong after half the
space has gone by: keep references fresh (see `console.core.link`), never compare against one forever.
"""

from __future__ import annotations

SERIAL_BITS = 16
MODULUS = 1 << SERIAL_BITS


def add(seq: int, n: int, bits: int = SERIAL_BITS) -> int:
    """`seq + n` in the serial space (RFC 1982, 3.1: n may be 0 .. 2**(bits-1) - 1)."""
    if not 0 <= n < 1 << (bits - 1):
        raise ValueError(f"n = {n}: serial addition takes 0 .. {(1 << (bits - 1)) - 1}")
    return (seq + n) % (1 << bits)


def distance(later: int, earlier: int, bits: int = SERIAL_BITS) -> int:
    """Steps forward from `earlier` to `later`: 0 .. 2**bits - 1 (how many frames one is past the other)."""
    return (later - earlier) % (1 << bits)


def is_after(s1: int, s2: int, bits: int = SERIAL_BITS) -> bool:
    """s1 > s2 in the sense of RFC 1982, 3.2 (False when equal or exactly half the space apart)."""
    half = 1 << (bits - 1)
    return (s1 < s2 and s2 - s1 > half) or (s1 > s2 and s1 - s2 < half)
