"""The instrument's optics in one dimension: scale geometry and brightness along the scale.

Positions along the scale axis are in units of the field-stop radius, ``u``,
with the field centre at ``u = 0`` and values increasing with ``u``.

Scale geometry
--------------
A ray meeting the prism table at internal angle ``theta`` has the scale value
``s = N_D sin(theta)`` (``N_D``: prism index at 589.3 nm).  The exit face and
the objective send it to one point of the focal plane, where the reticle sits.
We model that angle-to-position mapping as a smooth monotonic cubic of ``s``
(equivalently of ``sin(theta)``)::

    u(s) = u_first + (u_last - u_first) * g(x),   x = (s - first) / (last - first)
    g(x) = (x + k x^2 + c x^3) / (1 + k + c)

so the spacing of the graduations changes by ``g'(1)/g'(0) - 1 = 2k + 3c`` end
to end (the *spacing change*).  A printed graduation with value ``v`` sits at
``u(T(v))`` with the instrument's true value ``T(v) = v + offset + gain (v -
mid)`` (``offset = gain = 0`` for a well-made scale).

Brightness
----------
Light reflected at the table: a prism / contact-liquid / stone stack with an
incoherent thin liquid film, from the Fresnel equations of
:mod:`critline.optics`.  Per polarisation ``R = R1 + T1^2 R2 / (1 - R1 R2)``
(``R1`` prism/liquid, ``R2`` liquid/stone, ``T1 = 1 - R1``), and 1 where the
light is totally reflected at either interface.  Unpolarised light: mean of s
and p.  A small fraction of the table (``liquid_line``) is wetted by liquid
that is not in optical contact with the stone; it shows the prism/liquid
reflectance alone, which gives the faint liquid line at ``n_L``.

References
----------
Snell's law and the Fresnel equations (Born and Wolf, *Principles of Optics*,
section 1.5); incoherent multiple reflection in a thick layer (e.g. Macleod,
*Thin-Film Optical Filters*, incoherent case).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from critline.instrument import Instrument
from critline.optics import SODIUM_D_NM, fresnel_reflectance


@dataclass(frozen=True)
class ScaleMap:
    """Angle-to-position mapping of the focal plane and the printed scale on it."""

    instrument: Instrument
    u_first: float = -0.8
    u_last: float = 0.8
    spacing_change: float = 0.12
    spacing_bow: float = 0.0
    offset: float = 0.0
    gain: float = 0.0

    @property
    def _k(self) -> float:
        return 0.5 * (self.spacing_change - 3.0 * self.spacing_bow)

    def _g(self, x):
        k, c = self._k, self.spacing_bow
        return (x + k * x**2 + c * x**3) / (1.0 + k + c)

    def position(self, value):
        """Focal-plane position ``u`` of the true scale value ``value`` (= N_D sin theta)."""
        inst = self.instrument
        x = (np.asarray(value, dtype=float) - inst.first) / (inst.last - inst.first)
        return self.u_first + (self.u_last - self.u_first) * self._g(x)

    def value(self, u):
        """True scale value at focal-plane position ``u`` (inverse of :meth:`position`)."""
        inst = self.instrument
        x = np.linspace(-1.5, 2.5, 8001)
        table_u = self.u_first + (self.u_last - self.u_first) * self._g(x)
        table_s = inst.first + x * (inst.last - inst.first)
        return np.interp(np.asarray(u, dtype=float), table_u, table_s)

    @property
    def _mid(self) -> float:
        return 0.5 * (self.instrument.first + self.instrument.last)

    def true_value(self, printed):
        """True scale value where the graduation printed ``printed`` sits."""
        printed = np.asarray(printed, dtype=float)
        return printed + self.offset + self.gain * (printed - self._mid)

    def printed_value(self, true):
        """Printed-scale value (interpolated) that sits at the true value ``true``."""
        return (np.asarray(true, dtype=float) - self.offset + self.gain * self._mid) / (1.0 + self.gain)

    def scale_position(self, true):
        """Position in graduation units from the first printed graduation."""
        return self.instrument.position(self.printed_value(true))

    def graduations(self):
        """``(index, printed value, true value, u)`` arrays of every printed graduation."""
        inst = self.instrument
        idx = np.arange(inst.count)
        printed = inst.first + inst.step * idx
        true = self.true_value(printed)
        return idx, printed, true, self.position(true)

    def spacing_ratio(self) -> float:
        """Last graduation spacing over first (1 + spacing change for an exact scale)."""
        _, _, _, u = self.graduations()
        d = np.diff(u)
        return float(d[-1] / d[0])


def stack_reflectance(s, stone_index, liquid_index, prism_index, liquid_line=0.0):
    """Unpolarised reflectance of the table as a function of scale value ``s``.

    Parameters
    ----------
    s : array_like
        Snell invariant ``N sin(theta)`` for this wavelength.
    stone_index, liquid_index, prism_index : float
        Indices at this wavelength.
    liquid_line : float
        Fraction of the table wetted by liquid that is not in optical contact
        with the stone.

    Returns
    -------
    ndarray
        Reflectance 0..1; 1 where either interface totally reflects.
    """
    s = np.asarray(s, dtype=float)
    r1s, r1p = fresnel_reflectance(s, liquid_index, prism_index)
    # liquid/stone interface: the same invariant s (Snell's law)
    r2s, r2p = fresnel_reflectance(np.minimum(s, liquid_index), stone_index, liquid_index)
    out = []
    for r1, r2 in ((r1s, r2s), (r1p, r2p)):
        t1 = 1.0 - r1
        with np.errstate(invalid="ignore", divide="ignore"):
            r = r1 + t1 * t1 * r2 / (1.0 - r1 * r2)
        r = np.where((s >= liquid_index) | (s >= stone_index) | (r1 * r2 >= 1.0), 1.0, r)
        out.append(r)
    stack = 0.5 * (out[0] + out[1])
    liquid_only = 0.5 * (r1s + r1p)
    return (1.0 - liquid_line) * stack + liquid_line * liquid_only


def ray_profile(s_d, stone_ri, liquid_ri, glass, wavelength_nm=SODIUM_D_NM,
                stone_abbe=55.0, liquid_abbe=19.0, material=None, liquid_line=0.0):
    """Reflectance along the scale (D-line scale values ``s_d``) for one stone ray at one wavelength.

    The ray at scale value ``s_d`` has internal angle ``arcsin(s_d / N_D)``; at
    this wavelength its Snell invariant is ``s_d N(lambda) / N_D``, and the
    stone and liquid take their own dispersed indices.  The exit optics are
    taken as achromatic, so the fringe of white light comes from the prism,
    liquid and stone dispersion only.
    """
    from critline.synth.dispersion import cauchy_index, stone_index

    n_prism_d = float(glass.index(SODIUM_D_NM))
    n_prism = float(glass.index(wavelength_nm))
    s = np.asarray(s_d, dtype=float) * (n_prism / n_prism_d)
    n_stone = float(stone_index(stone_ri, wavelength_nm, abbe=stone_abbe, material=material))
    n_liq = float(cauchy_index(liquid_ri, liquid_abbe, wavelength_nm))
    return stack_reflectance(np.minimum(s, n_prism * 0.9999), n_stone, n_liq, n_prism, liquid_line)
