"""Growth geometry mapping, section correction and beam weights."""

import numpy as np
from numpy.testing import assert_allclose

from zoning.geometry import beam_offsets, fraction_from_distance, zone_fraction


def test_sphere_volume_fractions():
    # (r/R)^3: 0.5 -> 12.5 %, 0.794 -> 50 %, 0.9 -> 72.9 % (geometry, science ref. sec. 10)
    f = fraction_from_distance(np.array([0.5, 0.794, 0.9]), 1.0, 0.0, 1.0, 3.0)
    assert_allclose(f, [0.125, 0.5, 0.729], atol=6e-4)


def test_exponents_and_core_fraction():
    x = np.array([0.0, 25.0, 50.0])
    assert_allclose(fraction_from_distance(x, 50.0, 0.1, 0.3, 1.0), [0.1, 0.2, 0.3])
    assert_allclose(fraction_from_distance(x, 50.0, 0.0, 0.4, 2.0), [0.0, 0.1, 0.4])


def test_core_offset_clips_and_distance_is_mirrored():
    xi = zone_fraction(np.array([-20.0, 5.0, 20.0, 120.0]), 100.0, core_offset_um=10.0)
    assert_allclose(xi, [0.1, 0.0, 0.1, 1.0])


def test_off_centre_section():
    # plane at h from the centre: true radius sqrt(rho^2 + h^2); apparent radius a
    a, h = 86.6, 50.0  # R = 100: a = sqrt(R^2 - h^2) = 86.6
    xi = zone_fraction(np.array([0.0, a]), a, section_offset_um=h)
    assert_allclose(xi, [h / np.hypot(a, h), 1.0])
    assert_allclose(xi[0], 0.5, atol=1e-4)
    # the apparent core misses the inner (h/R)^3 = 12.5 % of the volume
    assert_allclose(xi[0] ** 3, 0.125, atol=1e-3)


def test_beam_weights_are_a_gaussian():
    off, wt = beam_offsets(2.0)
    sigma = 2.0 / (2 * np.sqrt(2 * np.log(2)))
    assert_allclose(wt.sum(), 1.0)
    assert_allclose(np.sum(wt * off), 0.0, atol=1e-14)
    assert_allclose(np.sum(wt * off**2), sigma**2, rtol=1e-12)
    assert_allclose(np.sum(wt * off**4), 3 * sigma**4, rtol=1e-12)
