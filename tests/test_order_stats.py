"""Exact order statistics by radix selection (lineament._order_stats) against numpy."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from lineament._order_stats import kth_smallest, kth_smallest_abs, median, median_abs


@pytest.mark.parametrize("n", [1, 2, 3, 4, 10, 1001, 65537, 400_000])
def test_median_abs_is_numpys(n):
    # Reference: numpy.median of the absolute values in float64 (the mean of the two middle
    # elements for an even count), and numpy.partition for single ranks
    rng = np.random.default_rng(n)
    a = (rng.normal(size=n) * 3).astype(np.float32)
    assert median_abs(a) == float(np.median(np.abs(a).astype(np.float64)))
    assert median(a) == float(np.median(a))
    for k in {0, n // 3, n // 2, n - 1}:
        assert kth_smallest_abs(a, k) == float(np.partition(np.abs(a), k)[k])
        assert kth_smallest(a, k) == float(np.partition(a, k)[k])


def test_ties_signed_zeros_infinities_and_nan_sort_as_numpy_does():
    # numpy.partition puts NaN last and treats -0.0 as 0.0 (numpy documentation of numpy.sort)
    a = np.array([-0.0, 0.0, 2.5, -2.5, np.inf, -np.inf, np.nan, 1e-45, -1e-45, 3.0, 3.0], np.float32)
    ref = np.sort(np.abs(a))
    signed = np.sort(a)
    for k in range(a.size):
        got = kth_smallest_abs(a, k)
        assert (np.isnan(got) and np.isnan(ref[k])) or got == float(ref[k])
        got = kth_smallest(a, k)
        assert (np.isnan(got) and np.isnan(signed[k])) or got == float(signed[k])
    negative_nan = np.array([1.0, -np.nan, -2.0], np.float32)  # NaN last whatever its sign bit
    assert kth_smallest(negative_nan, 0) == -2.0 and np.isnan(kth_smallest(negative_nan, 2))
    with pytest.raises(ValueError):
        kth_smallest_abs(a, a.size)
    assert np.isnan(median_abs(np.zeros(0, np.float32)))


@settings(max_examples=60, deadline=None)
@given(arrays(np.float32, st.integers(1, 300), elements=st.floats(width=32, allow_nan=False)))
def test_random_values_match_numpy(a):
    # Reference: numpy.median of |a| in float64, and of a (hypothesis draws ties, zeros, subnormals)
    assert median_abs(a) == float(np.median(np.abs(a).astype(np.float64)))
    with np.errstate(over="ignore"):  # numpy's float32 mean of two middle values may overflow too
        assert median(a) == float(np.median(a)) or np.isnan(float(np.median(a)))


@pytest.mark.parametrize("pair", [(1.0, 2.0), (1.0, float(np.nextafter(np.float32(1.0), np.float32(2.0)))),
                                  (3.0, 3.0), (-0.0, 0.0), (5.0, np.inf), (5.0, np.nan), (-np.inf, 7.0)])
@pytest.mark.parametrize("spread", [0, 1, 6])
def test_two_middle_elements_in_one_pass_pair(pair, spread):
    # The two middle elements of an even count come from one selection (_order_stats._two_keys): in
    # one bucket of the upper 16 bits, in neighbouring ones, in distant ones, tied, or with NaN as
    # the upper one.  Reference: numpy.median / numpy.partition (NaN sorts last).
    lo, hi = pair
    rng = np.random.default_rng(spread)
    below = -np.abs(rng.normal(size=spread)).astype(np.float32) - 10.0  # all below lo
    above = np.full(spread, np.nan, np.float32)  # all sort above hi
    a = np.concatenate([below, np.array([hi, lo], np.float32), above])
    rng.shuffle(a)
    ref = np.sort(a)
    m = a.size // 2
    lower, upper = ref[m - 1], ref[m]
    got = median(a)
    want = float(np.mean(np.array([lower, upper], np.float32)))
    assert (np.isnan(got) and np.isnan(want)) or got == want
    mags = np.sort(np.abs(a))
    got = median_abs(a)
    want = 0.5 * (float(mags[m - 1]) + float(mags[m]))
    assert (np.isnan(got) and np.isnan(want)) or got == want
