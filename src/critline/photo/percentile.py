"""One percentile of a large array by a single partition (private helper of the reader's stages).

``numpy.percentile`` partitions around four positions (both ends, and the two order statistics
it interpolates between), several times slower on the field-sized arrays of the reader than one
partition at the lower order statistic followed by the minimum of the part above it.
"""

from __future__ import annotations

import numpy as np


def percentile(values, q: float, wide: bool = False):
    """The ``q``-th percentile of ``values`` (all elements), as ``numpy.percentile`` gives it.

    ``numpy.percentile`` interpolates in the input's precision for a scalar ``q`` and in double
    precision for a list of them: ``wide=True`` gives the latter (a numpy float64).

    Method
    ------
    Numpy's default ``linear`` method, type 7 of Hyndman and Fan (1996): the order statistics
    ``k = floor(v)`` and ``k + 1`` around ``v = (n - 1) q / 100``, interpolated by ``v - k`` in
    the input's precision (from the upper one when the weight is at least one half, as numpy
    does).  ``values`` must hold no NaN.

    References
    ----------
    Hyndman, R. J. and Fan, Y. (1996) Sample quantiles in statistical packages.
    The American Statistician 50(4), 361-365.
    """
    a = np.asarray(values).ravel()
    n = a.size
    if n == 0:
        raise ValueError("percentile of an empty array")
    v = (n - 1) * (q / 100.0)
    k = min(int(np.floor(v)), n - 1)
    t = v - k
    part = np.partition(a, k)
    lo = part[k]
    hi = part[k + 1:].min() if k + 1 < n else lo
    diff = hi - lo
    if wide:
        lo, hi, diff = np.float64(lo), np.float64(hi), np.float64(diff)
    return hi - diff * (1 - t) if t >= 0.5 else lo + diff * t
