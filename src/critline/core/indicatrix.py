"""The optical indicatrix (index ellipsoid) and the readings it gives on a refractometer.

On a critical-angle refractometer the light that grazes the table facet of the
stone propagates in the facet plane.  For a propagation direction ``k`` the two
refractive indices of the waves it carries are the semi-axes of the central
section of the index ellipsoid perpendicular to ``k``.  Turning the stone on
the prism turns ``k`` in the facet plane; so every reading the instrument can
show follows from three principal indices, the facet orientation and the
azimuth of the grazing direction.

The ellipsoid is ``x^T B x = 1`` with the impermeability tensor
``B = R diag(1/n_x^2, 1/n_y^2, 1/n_z^2) R^T``.  Restricting ``B`` to the plane
perpendicular to ``k`` and taking the eigenvalues ``lambda`` of the 2 x 2 block
gives the section's semi-axes ``1/sqrt(lambda)``.

References
----------
Standard crystal optics (the Fresnel index ellipsoid), e.g. M. Born and E. Wolf,
"Principles of Optics", chapter on the optics of crystals; applied to the
refractometer in every gemmology text (e.g. B. W. Anderson, "Gem Testing";
R. Webster, "Gems").
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

__all__ = [
    "facet_reference",
    "grazing_direction",
    "section_indices",
    "section_series",
]


def _unit(vector, name: str) -> np.ndarray:
    v = np.asarray(vector, dtype=float).reshape(3)
    norm = float(np.linalg.norm(v))
    if not np.isfinite(norm) or norm == 0.0:
        raise ValueError(f"{name} must be a finite non-zero 3-vector, got {vector!r}")
    return v / norm


def _principal(principal: Sequence[float]) -> np.ndarray:
    n = np.asarray(principal, dtype=float).reshape(-1)
    if n.shape != (3,) or not np.all(np.isfinite(n)) or np.any(n <= 0):
        raise ValueError(f"principal must be three positive indices (n_x, n_y, n_z), got {principal!r}")
    return n


def _orientation(orientation) -> np.ndarray:
    if orientation is None:
        return np.eye(3)
    rot = np.asarray(orientation, dtype=float)
    if rot.shape != (3, 3) or not np.allclose(rot @ rot.T, np.eye(3), atol=1e-9):
        raise ValueError("orientation must be a 3 x 3 orthonormal matrix")
    return rot


def facet_reference(facet_normal) -> np.ndarray:
    """A fixed unit direction in the facet plane: azimuth 0 of :func:`section_indices`.

    The choice is deterministic: the frame axis least aligned with the facet
    normal (lowest index on ties) is projected into the facet plane.  That axis
    makes an angle of at least ``arccos(1/sqrt(3))`` with the normal, so the
    projection never degenerates.

    Parameters
    ----------
    facet_normal : array_like, shape (3,)
        Normal of the facet, in the frame of the principal axes.

    Returns
    -------
    ndarray, shape (3,)
        Unit vector perpendicular to ``facet_normal``.
    """
    normal = _unit(facet_normal, "facet_normal")
    axis = np.zeros(3)
    axis[int(np.argmin(np.abs(normal)))] = 1.0
    ref = axis - np.dot(axis, normal) * normal
    return ref / np.linalg.norm(ref)


def grazing_direction(facet_normal, azimuth_deg) -> np.ndarray:
    """Unit propagation direction(s) in the facet plane at ``azimuth_deg`` from the reference.

    The azimuth turns from :func:`facet_reference` towards ``normal x reference``.
    Returns shape ``(3,)`` for a scalar azimuth, ``(m, 3)`` for ``m`` azimuths.
    """
    normal = _unit(facet_normal, "facet_normal")
    ref = facet_reference(normal)
    other = np.cross(normal, ref)
    a = np.radians(np.asarray(azimuth_deg, dtype=float))
    return np.cos(a)[..., None] * ref + np.sin(a)[..., None] * other


def section_series(principal, facet_normal, azimuths_deg, orientation=None):
    """Vectorised :func:`section_indices` for many azimuths.

    Returns
    -------
    low, high : ndarray, shape (m,)
        The smaller and the larger section semi-axis for each azimuth.
    """
    n = _principal(principal)
    rot = _orientation(orientation)
    normal = _unit(facet_normal, "facet_normal")
    impermeability = rot @ np.diag(1.0 / n**2) @ rot.T
    k = np.atleast_2d(grazing_direction(normal, azimuths_deg))
    # Basis of the plane perpendicular to k: the facet normal (perpendicular to
    # every grazing k) and k x normal, which lies in the facet plane.
    u1 = np.broadcast_to(normal, k.shape)
    u2 = np.cross(k, normal)
    b11 = np.einsum("mi,ij,mj->m", u1, impermeability, u1)
    b22 = np.einsum("mi,ij,mj->m", u2, impermeability, u2)
    b12 = np.einsum("mi,ij,mj->m", u1, impermeability, u2)
    mean = 0.5 * (b11 + b22)
    radius = np.sqrt((0.5 * (b11 - b22)) ** 2 + b12**2)
    # larger impermeability eigenvalue -> smaller index
    low = 1.0 / np.sqrt(mean + radius)
    high = 1.0 / np.sqrt(mean - radius)
    return low, high


def section_indices(principal, facet_normal, azimuth_deg, orientation=None) -> tuple[float, float]:
    """The two refractive indices read at one rotation of the stone.

    They are the semi-axes of the central section of the index ellipsoid
    perpendicular to the grazing propagation direction.  That direction lies
    in the facet plane at ``azimuth_deg`` from :func:`facet_reference`.

    Parameters
    ----------
    principal : sequence of 3 floats
        Principal indices ``(n_x, n_y, n_z)`` along the principal axes;
        uniaxial ``(omega, omega, epsilon)`` (optic axis along z), isotropic
        ``(n, n, n)``, biaxial e.g. ``(alpha, beta, gamma)``.
    facet_normal : array_like, shape (3,)
        Facet normal in the frame of the principal axes (or, with
        ``orientation``, in the frame that matrix maps into).
    azimuth_deg : float
        Rotation of the stone on the prism, degrees.
    orientation : array_like, shape (3, 3), optional
        Orthonormal matrix whose columns are the principal axes x, y, z
        expressed in the frame of ``facet_normal``; identity when omitted.

    Returns
    -------
    (low, high) : tuple of float
    """
    low, high = section_series(principal, facet_normal, [azimuth_deg], orientation)
    return float(low[0]), float(high[0])
