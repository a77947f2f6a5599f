"""The detector's small array helpers against the plain numpy formulations they replace."""

import numpy as np
import pytest

from popmeter.detection import _cover, _percentile, _rows


@pytest.mark.parametrize("q", [5, 10, 25, 50, 75, 90, 95])
def test_percentile_equals_numpy(q):
    # reference: numpy.percentile, default "linear" method (Hyndman & Fan 1996, type 7)
    rng = np.random.default_rng(7)
    for n in list(range(1, 12)) + [103, 240, 1001]:
        for _ in range(20):
            x = (rng.standard_normal(n) * 10.0 ** rng.uniform(-4, 2)).astype(np.float32)
            if rng.integers(3) == 0:
                x = np.round(x, 1)  # ties
            expected = np.percentile(x, q)
            got = _percentile(x.copy(), q)
            assert got == expected
            assert got.dtype == expected.dtype


def test_cover_equals_difference_counts():
    # reference: +1 at each start, -1 at each end (numpy.add.at), running sum > 0
    rng = np.random.default_rng(8)
    n = 500
    for _ in range(200):
        starts = np.sort(rng.integers(-100, n + 100, rng.integers(0, 30)))
        ends = starts + rng.integers(0, 80, starts.size)
        edges = np.zeros(n + 1, dtype=np.int64)
        np.add.at(edges, np.clip(starts, 0, n), 1)
        np.add.at(edges, np.clip(ends, 0, n), -1)
        assert np.array_equal(_cover(starts, ends, n), np.cumsum(edges[:-1]) > 0)


def test_rows_equals_fancy_indexing():
    rng = np.random.default_rng(9)
    x = rng.standard_normal((6, 50)).astype(np.float32)
    starts = rng.integers(0, 41, 6)
    ref = x[np.arange(6)[:, None], starts[:, None] + np.arange(10)[None, :]]
    assert np.array_equal(_rows(x, starts, 10), ref)
    pick = np.array([4, 1, 1])
    ref = x[pick[:, None], starts[:3, None] + np.arange(10)[None, :]]
    assert np.array_equal(_rows(x, starts[:3], 10, pick), ref)
