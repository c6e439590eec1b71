"""Indicatrix sections: the two readings the refractometer shows at one stone rotation."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from critline.core.indicatrix import (
    facet_reference,
    grazing_direction,
    section_indices,
    section_series,
)

# Quartz omega/epsilon and calcite omega/epsilon near 589 nm (from memory; the
# dispersion-formula checks in test_reference_indices.py tie them to published papers).
QUARTZ = (1.5443, 1.5443, 1.5534)
CALCITE = (1.6584, 1.6584, 1.4864)
# Topaz alpha/beta/gamma, a biaxial positive example (from memory, typical gem topaz).
TOPAZ = (1.619, 1.620, 1.627)

unit_vectors = st.tuples(
    st.floats(-1, 1), st.floats(-1, 1), st.floats(-1, 1)
).filter(lambda v: np.linalg.norm(v) > 0.1)
azimuths = st.floats(0, 360, allow_nan=False)


def test_isotropic_gives_the_same_index_twice():
    for normal in ([0, 0, 1], [1, 2, 3], [-0.3, 0.9, 0.1]):
        for az in (0, 37, 90, 181):
            low, high = section_indices((1.718, 1.718, 1.718), normal, az)
            assert low == pytest.approx(1.718, abs=1e-12)
            assert high == pytest.approx(1.718, abs=1e-12)


@pytest.mark.parametrize("principal", [QUARTZ, CALCITE])
def test_facet_perpendicular_to_optic_axis_shows_omega_and_epsilon_at_every_azimuth(principal):
    # textbook rule (domain.md): both edges constant, full birefringence shown
    omega, epsilon = principal[0], principal[2]
    low, high = section_series(principal, [0, 0, 1], np.arange(0, 360, 15))
    np.testing.assert_allclose(low, min(omega, epsilon), atol=1e-12)
    np.testing.assert_allclose(high, max(omega, epsilon), atol=1e-12)


@settings(max_examples=60, deadline=None)
@given(normal=unit_vectors, az=azimuths)
def test_omega_is_seen_at_every_azimuth_on_any_facet(normal, az):
    # textbook rule: the ordinary ray's index omega does not depend on direction;
    # the other reading (epsilon prime) lies between omega and epsilon.
    for principal in (QUARTZ, CALCITE):
        omega, epsilon = principal[0], principal[2]
        low, high = section_indices(principal, normal, az)
        constant = low if abs(low - omega) < abs(high - omega) else high
        moving = high if constant is low else low
        assert constant == pytest.approx(omega, abs=1e-12)
        assert min(omega, epsilon) - 1e-12 <= moving <= max(omega, epsilon) + 1e-12


@settings(max_examples=60, deadline=None)
@given(normal=unit_vectors, az=azimuths)
def test_biaxial_section_straddles_beta(normal, az):
    # textbook rule (domain.md, and the circular sections of the triaxial ellipsoid):
    # every central section has one semi-axis <= beta and one >= beta, both in [alpha, gamma].
    alpha, beta, gamma = TOPAZ
    low, high = section_indices(TOPAZ, normal, az)
    assert alpha - 1e-12 <= low <= beta + 1e-12
    assert beta - 1e-12 <= high <= gamma + 1e-12


def test_uniaxial_edge_reaches_epsilon_when_grazing_perpendicular_to_the_axis():
    # facet containing the optic axis: turning the stone, epsilon prime sweeps the full range
    low, high = section_series(QUARTZ, [1, 0, 0], np.arange(0, 180.5, 0.5))
    assert low.max() == pytest.approx(1.5443, abs=1e-12)  # omega constant
    assert high.max() == pytest.approx(1.5534, abs=1e-9)  # reaches epsilon
    assert high.min() == pytest.approx(1.5443, abs=1e-9)  # and omega when k is along the axis


def test_reference_direction_is_deterministic_and_in_the_facet_plane():
    for normal in ([0, 0, 1], [1, 1, 1], [0.2, -0.7, 0.1]):
        ref = facet_reference(normal)
        assert np.dot(ref, normal) == pytest.approx(0, abs=1e-12)
        assert np.linalg.norm(ref) == pytest.approx(1)
        np.testing.assert_array_equal(ref, facet_reference(normal))
        k = grazing_direction(normal, 90)
        assert np.dot(k, normal) == pytest.approx(0, abs=1e-12)
        assert np.dot(k, ref) == pytest.approx(0, abs=1e-12)


def test_orientation_matrix_rotates_the_indicatrix():
    # principal axes rotated so that the optic axis lies along frame x
    rot = np.array([[0, 0, 1], [0, 1, 0], [-1, 0, 0]], dtype=float)  # columns: axes x, y, z
    low, high = section_series(QUARTZ, [1, 0, 0], np.arange(0, 360, 30), orientation=rot)
    np.testing.assert_allclose(low, 1.5443, atol=1e-12)
    np.testing.assert_allclose(high, 1.5534, atol=1e-12)


def test_readings_repeat_every_180_degrees():
    low0, high0 = section_series(TOPAZ, [0.3, 0.5, 0.8], np.arange(0, 180, 10))
    low1, high1 = section_series(TOPAZ, [0.3, 0.5, 0.8], np.arange(180, 360, 10))
    np.testing.assert_allclose(low0, low1, atol=1e-12)
    np.testing.assert_allclose(high0, high1, atol=1e-12)


def test_bad_input_is_rejected():
    with pytest.raises(ValueError):
        section_indices((1.5, 1.5), [0, 0, 1], 0)
    with pytest.raises(ValueError):
        section_indices((1.5, 1.5, 1.5), [0, 0, 0], 0)


@settings(max_examples=60, deadline=None)
@given(normal=unit_vectors, az=azimuths)
def test_section_indices_solve_fresnels_equation_of_wave_normals(normal, az):
    # independent check (M. Born and E. Wolf, "Principles of Optics", optics of crystals):
    # the two indices n for wave normal k satisfy sum_i k_i^2 / (1/n^2 - 1/n_i^2) = 0,
    # used here with the denominators cleared: sum_i k_i^2 prod_{j != i} (1/n^2 - 1/n_j^2) = 0
    principal = np.array(TOPAZ)
    k = grazing_direction(normal, az)
    inv = 1.0 / principal**2
    scale = np.ptp(inv) ** 2
    for n in section_indices(TOPAZ, normal, az):
        d = 1.0 / n**2 - inv
        residual = k[0] ** 2 * d[1] * d[2] + k[1] ** 2 * d[0] * d[2] + k[2] ** 2 * d[0] * d[1]
        assert abs(residual) <= 1e-9 * scale
