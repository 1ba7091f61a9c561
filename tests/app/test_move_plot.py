"""The move plot draws a long run reduced to what its pixels can show, peaks included."""

from __future__ import annotations

import numpy as np
import pytest

from app.plots.move_plot import envelope, steps


@pytest.mark.parametrize("n, buckets", [(16001, 1500), (4000, 1500), (3001, 1500), (100, 1500), (50001, 777)])
def test_envelope_keeps_each_columns_lowest_and_highest_sample_in_time_order(n, buckets):
    """Reference: the minimum and maximum of every run of ceil(n / buckets) samples,
    found by a plain loop (derived)."""
    rng = np.random.default_rng(n)
    t = np.arange(n) / 16000.0
    y = np.cumsum(rng.normal(size=n))
    y[n // 3] += 1e3                                  # a single-sample spike
    tt, yy = envelope(t, y, buckets)
    assert np.all(np.diff(tt) >= 0)                   # time order kept
    np.testing.assert_array_equal(yy, y[np.searchsorted(t, tt)])   # every point is a real sample
    assert yy.max() == y.max() and yy.min() == y.min()
    k = -(-n // buckets)
    if k <= 2:
        assert len(tt) == n
        return
    assert len(tt) <= 2 * buckets + k
    for start in range(0, n - n % k, k):
        run = y[start:start + k]
        inside = yy[(tt >= t[start]) & (tt <= t[start + k - 1])]
        assert inside.min() == run.min() and inside.max() == run.max()


def test_steps_draw_a_band_exactly_with_two_points_per_change():
    """Reference: the band itself, read back at every sample from the step corners by a
    right-continuous lookup (derived)."""
    t = np.arange(1000) / 16000.0
    y = np.zeros(1000)
    y[100:250] = 11.5          # saturated at +limit
    y[600:601] = -11.5         # one saturated sample at -limit
    y[990:] = 11.5             # saturated to the end
    tt, yy = steps(t, y)
    assert len(tt) == 2 + 2 * 5
    assert np.all(np.diff(tt) >= 0)
    # at each sample time, the last corner at or before it carries the band's value
    read = yy[np.searchsorted(tt, t, side="right") - 1]
    np.testing.assert_array_equal(read, y)
