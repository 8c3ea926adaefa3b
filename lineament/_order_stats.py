"""Compiled exact order statistics of float32 magnitudes, by radix selection.

The noise level of a run is a median of several million absolute gradient
components; partial sorting (``numpy.partition``) moves every value around
several times, while counting the upper and then the lower 16 bits of each
value's bit pattern finds the same element in two read-only passes (the
two middle elements of an even count too).  For
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
    # negative (sign bit set): all bits inverted, so larger magnitudes come first; otherwise the
    # sign bit set.  Written without a branch on the sign, which data of both signs would mispredict.
    return b ^ (0x80000000 | ((b >> 31) * 0x7FFFFFFF))


@numba.njit(cache=True, nogil=True, inline="always")
def _upper_counts(bits, signed):  # pragma: no cover - compiled
    """Counts of the order keys' upper 16 bits (the first pass of a selection)."""
    hist = np.zeros(65536, np.int64)
    for i in range(bits.size):
        hist[_order_key(np.int64(bits[i]), signed) >> 16] += 1
    return hist


@numba.njit(cache=True, nogil=True, inline="always")
def _bucket(hist, k):  # pragma: no cover - compiled
    """The bucket holding the k-th smallest (0-based) of counted keys, and its rank within the bucket."""
    below = 0
    for b in range(65536):
        if below + hist[b] > k:
            return b, k - below
        below += hist[b]
    return 0, 0  # not reached for 0 <= k < count


@numba.njit(cache=True, nogil=True)
def _kth_key(bits, k, signed):  # pragma: no cover - compiled
    """Order key of the k-th smallest (0-based) value (or magnitude) of float32 values given as uint32 bits."""
    hist = _upper_counts(bits, signed)
    top, rank = _bucket(hist, k)
    hist[:] = 0
    for i in range(bits.size):
        v = _order_key(np.int64(bits[i]), signed)
        if (v >> 16) == top:
            hist[v & 0xFFFF] += 1
    low, _ = _bucket(hist, rank)
    return (top << 16) | low


@numba.njit(cache=True, nogil=True)
def _two_keys(bits, k, signed):  # pragma: no cover - compiled
    """Order keys of the k-th and (k+1)-th smallest (0-based), in the two passes of :func:`_kth_key`.

    The (k+1)-th lies in the k-th's bucket of the upper 16 bits or, when
    that bucket holds no more, is the smallest key of the next non-empty one.
    """
    hist = _upper_counts(bits, signed)
    top, rank = _bucket(hist, k)
    nxt = top
    if rank + 1 >= hist[top]:  # the (k+1)-th is in the next non-empty bucket
        nxt = top + 1
        while nxt < 65536 and hist[nxt] == 0:
            nxt += 1
    hist[:] = 0
    least_next = np.int64(0xFFFFFFFF)
    for i in range(bits.size):
        v = _order_key(np.int64(bits[i]), signed)
        u = v >> 16
        if u == top:
            hist[v & 0xFFFF] += 1
        elif u == nxt and v < least_next:
            least_next = v
    low, within = _bucket(hist, rank)
    first = (top << 16) | low
    if within + 1 < hist[low]:  # a tie: the next element has the same key
        return first, first
    for b in range(low + 1, 65536):
        if hist[b] > 0:
            return first, (top << 16) | b
    return first, least_next


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
    lower, upper = _two_keys(a.view(np.uint32), k - 1, bool(signed))
    return _value_of_key(int(lower), signed), _value_of_key(int(upper), signed), False


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
