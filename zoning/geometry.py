r"""Growth geometry: map distance from the core to crystallized fraction.

For self-similar growth from one nucleus the volume inside a zone at
distance :math:`x` from the core is :math:`(x/R)^3` of the crystal, whatever
its shape; if the crystal population grew together, the crystallized fraction
when the zone formed is

.. math:: F(x) = F_{core} + (F_{rim} - F_{core})\left(\frac{x - x_0}{R}\right)^n

with :math:`n = 3` (equant, "sphere"), 2 (tabular growth in two directions,
"cylinder") or 1 (growth in one direction, "slab"), :math:`x_0` an offset of
the true core from the apparent core (negative values clip to 0).

Off-centre sections: a plane cutting a sphere at distance :math:`h` from its
centre shows a disc of apparent radius :math:`a = \sqrt{R^2 - h^2}`; a spot at
apparent radius :math:`\rho` lies at true radius :math:`\sqrt{\rho^2 + h^2}`,
so with :math:`s = h/R` the relative zone radius is

.. math:: \xi = \sqrt{s^2 + (1 - s^2)(\rho/a)^2}.

The apparent core is the zone at :math:`h`; the innermost :math:`(h/R)^3` of
the crystal is not seen. For planes of random position and orientation that
meet a sphere, :math:`s` is uniform on [0, 1). The same mapping holds for a
prism growing radially ("cylinder") when the traverse runs across the prism
(perpendicular to its long axis) and :math:`h` is the distance of the plane
from the axis, for any tilt of the plane about that traverse; :math:`s` is
again uniform on [0, 1) for random planes meeting a long prism. For a
"slab" (growth in one direction) the offset of a cut changes nothing (zones
are planes) and is not a parameter; an oblique cut stretches the profile by
:math:`1/\sin\varphi` instead, which is not modelled.

The electron beam samples a finite volume; a measured spot is the true
profile averaged over a Gaussian of full width at half maximum ``beam_um``
(2 µm is a typical effective lateral resolution with a focused beam in
silicates). :func:`beam_offsets` gives Gauss-Hermite offsets and weights for
that average. Spots are mirrored at the core; beyond the rim the rim value is
used (the beam partly samples the host there, which is not modelled), and
within about one beam width of the rim the 7-node average is good to a few
hundredths of a mol% only, because the profile ends with a kink.

Assumptions that can mislead: all crystals nucleate at ``F_core`` and grow
self-similarly; the section passes through the core unless ``h`` is given;
growth rate does not vary between crystal faces; the cut is normal to the
growth faces (no stretch). Diffusion after growth is in
:mod:`zoning.diffusion`.

References
----------
.. [1] Pearce, T. H. (1984). The analysis of zoning in magmatic crystals with
   emphasis on olivine. Contrib. Mineral. Petrol. 86, 149-154.
.. [2] Shea, T., Costa, F., Krimer, D. & Hammer, J. E. (2015). Accuracy of
   timescales retrieved from diffusion modeling in olivine: a 3D
   perspective. Am. Mineral. 100, 2026-2042.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np

__all__ = [
    "GEOMETRY_EXPONENT",
    "zone_fraction",
    "section_h_over_r_from_offset",
    "true_radius",
    "fraction_from_distance",
    "fraction_from_zone",
    "beam_offsets",
    "FWHM_PER_SIGMA",
]

#: Citation keys (:mod:`zoning.references`) of the distance-to-F mapping and
#: the off-centre section treatment.
CITATIONS = ("pearce_1984", "shea_2015")

#: Growth exponent n of each named geometry.
GEOMETRY_EXPONENT = {"sphere": 3.0, "cylinder": 2.0, "slab": 1.0}

#: Full width at half maximum of a Gaussian in units of its standard deviation.
FWHM_PER_SIGMA = 2.0 * np.sqrt(2.0 * np.log(2.0))


def section_h_over_r_from_offset(section_offset_um, radius_um):
    r"""Relative section offset h/R from the offset in µm [fraction].

    .. math:: s = h / \sqrt{a^2 + h^2}

    Parameters
    ----------
    section_offset_um : float or ndarray
        Distance h of the section plane from the crystal centre [µm].
    radius_um : float or ndarray
        Apparent (section) core-to-rim distance a [µm].

    Returns
    -------
    ndarray
        h divided by the true radius R = sqrt(a^2 + h^2).
    """
    h = np.asarray(section_offset_um, dtype=float)
    return h / np.hypot(radius_um, h)


def true_radius(radius_um, section_h_over_r):
    r"""Return the true crystal radius from the section radius [µm].

    .. math:: R = a / \sqrt{1 - s^2}

    Parameters
    ----------
    radius_um : float or ndarray
        Apparent core-to-rim distance a in the section [µm].
    section_h_over_r : float or ndarray
        Section offset s = h/R [fraction], in [0, 1).

    Returns
    -------
    ndarray
        R [µm].
    """
    s = np.asarray(section_h_over_r, dtype=float)
    return radius_um / np.sqrt(1.0 - s * s)


def zone_fraction(distance_um, radius_um, core_offset_um=0.0, section_offset_um=0.0,
                  section_h_over_r=0.0):
    r"""Relative radius of the zone sampled at a distance from the core [fraction].

    .. math:: \xi = \sqrt{s^2 + (1 - s^2)\left(\frac{\max(x - x_0, 0)}{a}\right)^2}

    clipped to [0, 1], with s = h/R the section offset relative to the true
    radius; an offset given in µm is converted with
    :func:`section_h_over_r_from_offset` (the two forms are the same mapping,
    :math:`\sqrt{(x-x_0)^2 + h^2}/\sqrt{a^2 + h^2}`).

    Parameters
    ----------
    distance_um : ndarray
        Apparent distance from the core along the traverse [µm] (absolute
        value is used, so the profile is symmetric about the core).
    radius_um : float or ndarray
        Apparent core-to-rim distance a of the section [µm].
    core_offset_um : float or ndarray, optional
        Offset x0 of the zone centre from the apparent core [µm].
    section_offset_um : float, optional
        Distance h of the section plane from the crystal centre [µm].
    section_h_over_r : float or ndarray, optional
        Section offset relative to the true radius, s = h/R [fraction] (give
        this or ``section_offset_um``).

    Returns
    -------
    ndarray
        Relative zone radius in [0, 1].
    """
    x = np.abs(distance_um)
    if np.any(core_offset_um):
        x = np.maximum(x - core_offset_um, 0.0)
    if np.any(section_offset_um):
        section_h_over_r = section_h_over_r_from_offset(section_offset_um, radius_um)
    s2 = np.square(section_h_over_r)
    if np.any(s2 > 0):
        xi = np.sqrt(s2 + (1.0 - s2) * np.square(x / radius_um))
    else:
        xi = x / radius_um
    # x >= 0 here, so only the upper bound needs applying
    return np.minimum(xi, 1.0)


def fraction_from_distance(distance_um, radius_um, f_core, f_rim, growth_exponent,
                           core_offset_um=0.0, section_offset_um=0.0, section_h_over_r=0.0):
    r"""Crystallized fraction when the zone at ``distance_um`` grew [fraction].

    .. math:: F = F_{core} + (F_{rim} - F_{core})\,\xi^n

    Parameters
    ----------
    distance_um : ndarray
        Distance from the core [µm].
    radius_um : float or ndarray
        Core-to-rim distance [µm].
    f_core, f_rim : float or ndarray
        Crystallized fraction at nucleation and at the rim [fraction].
    growth_exponent : float or ndarray
        Exponent n (3 equant, 2 tabular, 1 one-directional) [1].
    core_offset_um : float or ndarray, optional
        Offset of the zone centre from the apparent core [µm].
    section_offset_um : float, optional
        Distance of the section plane from the crystal centre [µm].
    section_h_over_r : float or ndarray, optional
        Section offset relative to the true radius [fraction].

    Returns
    -------
    ndarray
        F at each distance, broadcast shape of the inputs.

    References
    ----------
    .. [1] Pearce, T. H. (1984). Contrib. Mineral. Petrol. 86, 149-154.
    """
    xi = zone_fraction(distance_um, radius_um, core_offset_um, section_offset_um,
                       section_h_over_r)
    return fraction_from_zone(xi**growth_exponent, f_core, f_rim)


def fraction_from_zone(zone_power, f_core, f_rim):
    r"""Crystallized fraction from the zone's share of the crystal [fraction].

    .. math:: F = F_{core} + (F_{rim} - F_{core})\,\xi^n

    Parameters
    ----------
    zone_power : ndarray
        :math:`\xi^n`, the volume share of the crystal inside the zone [fraction].
    f_core, f_rim : float or ndarray
        Crystallized fraction at nucleation and at the rim [fraction].

    Returns
    -------
    ndarray
        F, broadcast shape of the inputs.
    """
    if np.ndim(f_core) == 0 and f_core == 0.0:
        return f_rim * zone_power
    return f_core + (f_rim - f_core) * zone_power


@lru_cache(maxsize=8)
def _hermite(order: int) -> tuple[np.ndarray, np.ndarray]:
    z, wt = np.polynomial.hermite_e.hermegauss(order)
    return z, wt / wt.sum()


def beam_offsets(beam_um: float, order: int = 7) -> tuple[np.ndarray, np.ndarray]:
    """Offsets and weights averaging a profile over a Gaussian beam.

    Parameters
    ----------
    beam_um : float
        Full width at half maximum of the sampled region [µm].
    order : int, optional
        Number of Gauss-Hermite nodes (7 integrates polynomials to degree 13
        exactly).

    Returns
    -------
    offsets_um, weights : ndarray, shape (order,)
        Distance offsets [µm] and weights summing to 1.
    """
    z, wt = _hermite(order)
    return z * (beam_um / FWHM_PER_SIGMA), wt
