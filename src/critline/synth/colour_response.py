"""A camera-like RGB response built from the CIE 1931 colour matching functions.

The CIE 1931 2-degree colour matching functions (from colour-science) are taken
to linear sRGB primaries with the IEC 61966-2-1 matrix; the negative lobes are
cut away (a real sensor's sensitivities are non-negative) and a small
crosstalk floor is added.  White light is CIE illuminant A (an incandescent
bulb, the usual white source of a refractometer).

References
----------
CIE 15:2004 *Colorimetry* (1931 standard observer, illuminant A);
IEC 61966-2-1:1999 (sRGB).
"""

from __future__ import annotations

import functools
import warnings

import numpy as np

from critline.optics import SODIUM_D_NM

#: Wavelength grid for white-light integration, nanometres.
WAVELENGTHS_NM = np.arange(400.0, 701.0, 10.0)
_CROSSTALK = 0.02


@functools.cache
def _tables():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        import colour
    cmfs = colour.MSDS_CMFS["CIE 1931 2 Degree Standard Observer"]
    to_rgb = np.asarray(colour.models.RGB_COLOURSPACE_sRGB.matrix_XYZ_to_RGB, dtype=float)
    illum = colour.SDS_ILLUMINANTS["A"]
    return (np.asarray(cmfs.wavelengths, float), np.asarray(cmfs.values, float), to_rgb,
            np.asarray(illum.wavelengths, float), np.asarray(illum.values, float))


def camera_response(wavelength_nm) -> np.ndarray:
    """Sensitivity of the R, G, B channels at each wavelength, shape ``(3, len)``."""
    wl, xyz, to_rgb, _, _ = _tables()
    full = np.clip(to_rgb @ xyz.T, 0.0, None)
    peak = full.max(axis=1, keepdims=True)
    lam = np.atleast_1d(np.asarray(wavelength_nm, dtype=float))
    xyz_at = np.stack([np.interp(lam, wl, xyz[:, i]) for i in range(3)])
    rgb = np.clip(to_rgb @ xyz_at, 0.0, None) / peak
    return rgb + _CROSSTALK * rgb.sum(axis=0, keepdims=True) / 3.0


def white_weights() -> np.ndarray:
    """Weights ``(3, len(WAVELENGTHS_NM))`` of illuminant A times the camera response.

    Each channel's weights sum to its raw response to a perfect reflector, so a
    white field gives the light's raw colour; :func:`light_colour` says which.
    """
    _, _, _, iwl, ivals = _tables()
    illum = np.interp(WAVELENGTHS_NM, iwl, ivals)
    w = camera_response(WAVELENGTHS_NM) * illum[None, :]
    return w / w.sum(axis=1).max()


def light_colour(light: str, white_balance: float) -> np.ndarray:
    """Colour (R, G, B gains, max 1) of a fully bright field after the phone's white balance.

    ``white_balance`` 0 leaves the raw colour of the light, 1 neutralises it
    (phones rarely neutralise a monochromatic lamp fully).
    """
    if light == "sodium":
        raw = camera_response(SODIUM_D_NM)[:, 0]
    else:
        raw = white_weights().sum(axis=1)
    raw = raw / raw.max()
    cast = raw ** (1.0 - float(white_balance))
    return cast / cast.max()
