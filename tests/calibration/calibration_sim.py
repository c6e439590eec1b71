"""Simulated reference pairs for the calibration tests (no images)."""

import numpy as np

from critline.calibration import ReferencePair

# RIs at 589.3 nm of a lab's reference set, from calibration/references.csv (each row cites its
# paper; test_references.py checks them against the papers' dispersion formulas).
REFERENCE_SET = {
    "magnesium-fluoride-o": 1.3777, "fluorite": 1.4338, "calcite-e": 1.4861,
    "glass-n-bk7": 1.5167, "quartz-o": 1.5442, "quartz-e": 1.5533, "calcite-o": 1.6583,
    "spinel-mgal2o4": 1.7161, "corundum-e": 1.7600, "corundum-o": 1.7681,
}


def simulate(known, *, offset=0.0, gain=0.0, curvature=0.0, noise=0.0, sigma=0.0003, seed=0,
             first=1.30, step=0.01, centre=1.55, field=True):
    """Reference pairs from a mis-scaled instrument.

    The instrument's printed value x relates to the true index by
    ``true = x + offset + gain (x - centre) + curvature (x - centre)**2``; the reader measures x
    with Gaussian noise of ``noise`` (RI) and reports ``sigma``.  The field position is a smooth
    non-linear function of x (the scale spacing varies along the field).
    """
    rng = np.random.default_rng(seed)
    out = []
    items = known.items() if isinstance(known, dict) else ((f"ref{i}", r) for i, r in enumerate(known))
    for label, ri in items:
        x = ri
        for _ in range(50):  # solve the true map for the printed value
            x = ri - offset - gain * (x - centre) - curvature * (x - centre) ** 2
        x_meas = x + rng.normal(0, noise) if noise else x
        f = (x - centre) / 0.30 + 0.08 * ((x - centre) / 0.30) ** 2 if field else None
        out.append(ReferencePair((x_meas - first) / step, max(sigma, 1e-6) / step, ri,
                                 field_position=f, label=label))
    return out


