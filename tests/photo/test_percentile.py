"""The one-partition percentile gives numpy.percentile's values (numpy's default 'linear' method,
Hyndman and Fan 1996 type 7, is the reference)."""

import numpy as np
import pytest

from critline.photo.percentile import percentile


@pytest.mark.parametrize("dtype", [np.float32, np.float64, np.uint8])
def test_same_values_as_numpy(dtype):
    rng = np.random.default_rng(7)
    for n in (1, 2, 3, 10, 101, 4096, 12345):
        x = (rng.random(n) ** 3 * 200).astype(dtype)
        for q in (0, 2, 50, 80, 98, 99.5, 100):
            got, ref = percentile(x, q), np.percentile(x, q)
            assert got == ref and np.asarray(got).dtype == np.asarray(ref).dtype, (n, q)


def test_wide_matches_a_list_of_percentiles():
    rng = np.random.default_rng(8)
    x = rng.random((300, 500)).astype(np.float32)
    ref = np.percentile(x, [2, 99.5])
    got = (percentile(x, 2, wide=True), percentile(x, 99.5, wide=True))
    assert got[0] == ref[0] and got[1] == ref[1]
    assert isinstance(got[0], np.float64)


def test_ties_and_empty():
    assert percentile(np.array([5.0, 5.0, 5.0, 1.0]), 80) == np.percentile([5.0, 5.0, 5.0, 1.0], 80)
    with pytest.raises(ValueError):
        percentile(np.array([]), 50)
