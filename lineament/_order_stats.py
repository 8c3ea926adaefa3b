"""Compiled exact order statistics of float32 magnitudes, by radix selection.

The noise level of a run is a median of several million absolute gradient
components; partial sorting (``numpy.partition``) moves every value around
several times, while counting the upper and then the lower 16 bits of each
value's bit pattern finds the same element in two read-only passes.  For
non-negative IEEE 754 floats the order of the bit patterns, read as
unsigned integers, is the order of the values (IEEE 754-2019, section 3.4:
the encoding is sign, biased exponent, significand); negative values are
mapped to keys below them by inverting their bits.  The result is the
element ``numpy.partition`` would return, bit for bit; NaN sorts last, as
there.

References
----------
Knuth, D. E. (1998). The Art of Computer Programming, vol. 3, 2nd ed.,
section 5.2.5 (radix sorting). Addison-Wesley.
"""

from __future__ import annotations

import numba
import numpy as np

__all__ = ["kth_smallest", "kth_smallest_abs", "median", "median_abs"]


@numba.njit(cache=True, nogil=True, inline="always")
def _order_key(b, signed):  # pragma: no cover - compiled
    """Unsigned key with the order of the float32 value of bit pattern ``b`` (or of its magnitude)."""
    if (b & 0x7FFFFFFF) > 0x7F800000:  # NaN, either sign: last
        return 0xFFFFFFFF
    if not signed:
        return b & 0x7FFFFFFF
    if b & 0x80000000:  # negative: larger magnitudes first
        return (~b) & 0xFFFFFFFF
    return b | 0x80000000


@numba.njit(cache=True, nogil=True)
def _kth_key(bits, k, signed):  # pragma: no cover - compiled
    """Order key of the k-th smallest (0-based) value (or magnitude) of float32 values given as uint32 bits."""
    n = bits.size
    hist = np.zeros(65536, np.int64)
    for i in range(n):
        hist[_order_key(np.int64(bits[i]), signed) >> 16] += 1
    below = 0
    top = 0
    for b in range(65536):
        if below + hist[b] > k:
            top = b
            break
        below += hist[b]
    rank = k - below
    hist[:] = 0
    for i in range(n):
        v = _order_key(np.int64(bits[i]), signed)
        if (v >> 16) == top:
            hist[v & 0xFFFF] += 1
    below = 0
    for b in range(65536):
        if below + hist[b] > rank:
            return (top << 16) | b
        below += hist[b]
    return 0  # not reached for 0 <= k < n


def _value_of_key(key: int, signed: bool) -> float:
    if key == 0xFFFFFFFF:
        return float("nan")
    if signed:
        key = key & 0x7FFFFFFF if key & 0x80000000 else (~key) & 0xFFFFFFFF
    return float(np.array([key], np.uint32).view(np.float32)[0])


def _kth(values: np.ndarray, k: int, signed: bool) -> float:
    a = np.ascontiguousarray(values, dtype=np.float32).ravel()
    if not 0 <= k < a.size:
        raise ValueError(f"k must be in 0..{a.size - 1}, got {k}")
    return _value_of_key(int(_kth_key(a.view(np.uint32), int(k), bool(signed))), signed)


def kth_smallest_abs(values: np.ndarray, k: int) -> float:
    """The ``k``-th smallest (0-based) absolute value of float32 ``values``.

    The same element as ``np.partition(np.abs(values), k)[k]``.
    """
    return _kth(values, k, False)


def kth_smallest(values: np.ndarray, k: int) -> float:
    """The ``k``-th smallest (0-based) of float32 ``values``: the element ``np.partition(values, k)[k]``."""
    return _kth(values, k, True)


def _middle(values: np.ndarray, signed: bool) -> tuple[float, float, bool] | None:
    """The lower and upper middle elements (of the values or their magnitudes), and whether the count is odd."""
    a = np.ascontiguousarray(values, dtype=np.float32).ravel()
    n = a.size
    if n == 0:
        return None
    k = n // 2
    if n % 2:
        v = _kth(a, k, signed)
        return v, v, True
    return _kth(a, k - 1, signed), _kth(a, k, signed), False


def median_abs(values: np.ndarray) -> float:
    """Median of ``|values|`` for float32 values (NaN for no values).

    The middle element for an odd count; for an even count the mean, in
    float64, of the two middle elements (``np.median`` would round that
    mean to float32).
    """
    m = _middle(values, False)
    if m is None:
        return float("nan")
    lower, upper, _ = m
    return 0.5 * (lower + upper)  # exact for an odd count: float32 values doubled in float64


def median(values: np.ndarray) -> float:
    """``float(np.median(values))`` for float32 values without NaN (the same number).

    For an even count, the mean of the two middle elements as NumPy takes
    it (in float32).
    """
    m = _middle(values, True)
    if m is None:
        return float("nan")
    lower, upper, odd = m
    return lower if odd else float(np.mean(np.array([lower, upper], np.float32)))
