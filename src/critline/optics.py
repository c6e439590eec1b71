"""Optics of the critical-angle refractometer, shared by the synthesizer and the reader.

Everything is written in terms of the *scale value* ``s = N sin(theta)``, where
``N`` is the prism index and ``theta`` the internal angle of incidence on the
prism table.  The printed scale is graduated in ``s`` directly, so the onset of
total reflection for a stone of index ``n`` lies at ``s = n`` (Snell's law).
"""

from __future__ import annotations

import numpy as np

#: Wavelength of the sodium D line (mean of D1 and D2), in nanometres.
SODIUM_D_NM = 589.3


def fresnel_reflectance(s, n, prism_index):
    """Fresnel reflectance at the prism/stone interface as a function of scale value.

    Parameters
    ----------
    s : array_like
        Scale value ``N sin(theta)``, with ``0 <= s < N``.
    n : float
        Refractive index of the stone (the medium below the prism table).
    prism_index : float
        Refractive index ``N`` of the prism, ``N > n``.

    Returns
    -------
    rs, rp : ndarray
        Reflectance for s- and p-polarised light.  Both equal 1 where ``s >= n``
        (total internal reflection).

    Notes
    -----
    Fresnel equations for a dielectric interface.  With ``N cos(theta_i) =
    sqrt(N**2 - s**2)`` and ``n cos(theta_t) = sqrt(n**2 - s**2)``::

        rs = ((a - b) / (a + b))**2,  a = sqrt(N^2 - s^2), b = sqrt(n^2 - s^2)
        rp = ((n^2 a - N^2 b) / (n^2 a + N^2 b))**2

    References
    ----------
    Born and Wolf, *Principles of Optics*, section 1.5 (Fresnel formulae).
    """
    s = np.asarray(s, dtype=float)
    big_n = float(prism_index)
    a = np.sqrt(np.clip(big_n**2 - s**2, 0.0, None))
    b = np.sqrt(np.clip(n**2 - s**2, 0.0, None))
    with np.errstate(invalid="ignore", divide="ignore"):
        rs = ((a - b) / (a + b)) ** 2
        rp = ((n**2 * a - big_n**2 * b) / (n**2 * a + big_n**2 * b)) ** 2
    tir = s >= n
    rs = np.where(tir, 1.0, np.nan_to_num(rs, nan=1.0))
    rp = np.where(tir, 1.0, np.nan_to_num(rp, nan=1.0))
    return rs, rp


def unpolarised_reflectance(s, n, prism_index):
    """Mean of the s and p Fresnel reflectances (unpolarised light).

    See :func:`fresnel_reflectance`.
    """
    rs, rp = fresnel_reflectance(s, n, prism_index)
    return 0.5 * (rs + rp)


def critical_angle(n, prism_index):
    """Critical angle in radians, ``arcsin(n / N)`` (Snell's law)."""
    return float(np.arcsin(n / prism_index))
