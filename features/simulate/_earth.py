"""A curved Earth for the mapped sources: local positions and apparent elevations.

The simulator places a source by its ground-arc position from the station (``x_m``
east, ``y_m`` north along the surface, so the arc distance is ``D = hypot(x, y)``) and
its altitude ``h`` above the surface. A mapping instrument at the station reports:

- the geometric position in the station's local east/north/up tangent frame, on a
  sphere of the true radius ``R`` (:data:`EARTH_RADIUS_M`)::

      horizontal distance = (R + h) sin(D / R),   z = (R + h) cos(D / R) - R

  (the horizontal distance is split into east and north by the azimuth);
- the apparent elevation of the ray, bent by the standard atmosphere, modelled by a
  sphere of the effective radius ``a = (4/3) R`` (:data:`EFFECTIVE_EARTH_RADIUS_M`)::

      theta = D / a,   el = atan2((a + h) cos(theta) - a, (a + h) sin(theta))

  (4/3 effective Earth radius: common radar practice; from memory);
- the azimuth, clockwise from north, unchanged by the curvature.

A source whose apparent elevation is below zero lies under the radio horizon and is
not seen. For ``D`` much smaller than ``sqrt(2 a h)`` both formulas tend to the flat
Earth (``el = atan2(h, D)``, ``z = h``).
"""

from __future__ import annotations

import numpy as np

__all__ = ["EARTH_RADIUS_M", "EFFECTIVE_EARTH_RADIUS_M", "apparent_elevation_deg",
           "azimuth_deg", "local_xyz_m", "slant_distance_m"]

#: Mean Earth radius in m (IUGG mean radius 6371.0 km; from memory).
EARTH_RADIUS_M = 6.371e6
#: Effective Earth radius for VHF rays in a standard atmosphere, 4/3 of the true radius
#: (common radar practice; from memory).
EFFECTIVE_EARTH_RADIUS_M = 4.0 / 3.0 * EARTH_RADIUS_M


def _up_offset(radius_m, distance_m, altitude_m):
    """``(r + h) cos(D/r) - r`` without cancellation: ``h cos(t) - 2 r sin^2(t/2)``."""
    theta = np.asarray(distance_m, float) / radius_m
    h = np.asarray(altitude_m, float)
    return h * np.cos(theta) - 2.0 * radius_m * np.sin(0.5 * theta) ** 2, theta


def apparent_elevation_deg(distance_m, altitude_m,
                           effective_radius_m=EFFECTIVE_EARTH_RADIUS_M):
    """Apparent elevation of a source seen from the station, in degrees.

    Parameters
    ----------
    distance_m : float or ndarray
        Ground-arc distance ``D`` from the station to the point below the source, in m.
    altitude_m : float or ndarray
        Altitude ``h`` of the source above the surface, in m.
    effective_radius_m : float, default=EFFECTIVE_EARTH_RADIUS_M
        Effective Earth radius ``a`` in m (4/3 of the true radius by default).

    Returns
    -------
    ndarray
        ``atan2((a + h) cos(D/a) - a, (a + h) sin(D/a))`` in degrees; negative below
        the radio horizon.

    References
    ----------
    4/3 effective Earth radius: common radar practice (from memory).

    Examples
    --------
    >>> round(float(apparent_elevation_deg(100e3, 10e3)), 2)
    5.37
    """
    up, theta = _up_offset(effective_radius_m, distance_m, altitude_m)
    across = (effective_radius_m + np.asarray(altitude_m, float)) * np.sin(theta)
    return np.degrees(np.arctan2(up, across))


def azimuth_deg(x_m, y_m):
    """Azimuth clockwise from north of the ground position (x east, y north), degrees in
    [0, 360)."""
    az = np.mod(np.degrees(np.arctan2(np.asarray(x_m, float), np.asarray(y_m, float))), 360.0)
    return np.where(az >= 360.0, 0.0, az)


def local_xyz_m(x_m, y_m, altitude_m, radius_m=EARTH_RADIUS_M):
    """Geometric position in the station's local east/north/up frame, in m.

    Parameters
    ----------
    x_m, y_m : float or ndarray
        Ground-arc position of the point below the source, east and north, in m.
    altitude_m : float or ndarray
        Altitude above the surface, in m.
    radius_m : float, default=EARTH_RADIUS_M
        Earth radius in m.

    Returns
    -------
    ndarray, shape (..., 3)
        East, north, up: horizontal distance ``(R + h) sin(D/R)`` along the azimuth and
        ``z = (R + h) cos(D/R) - R``.
    """
    x = np.asarray(x_m, float)
    y = np.asarray(y_m, float)
    h = np.asarray(altitude_m, float)
    up, theta = _up_offset(radius_m, np.hypot(x, y), h)
    # (R + h) sin(D/R) / D, finite at D = 0: sinc(theta/pi) = sin(theta)/theta
    per_arc = (radius_m + h) * np.sinc(theta / np.pi) / radius_m
    return np.stack(np.broadcast_arrays(x * per_arc, y * per_arc, up), axis=-1)


def slant_distance_m(distance_m, altitude_m, radius_m=EARTH_RADIUS_M):
    """Straight-line distance from the station to a source, in m.

    ``sqrt(h^2 + 4 R (R + h) sin^2(D / 2R))`` (the chord of the curved geometry of
    :func:`local_xyz_m`; ``sqrt(D^2 + h^2)`` on a flat Earth).
    """
    h = np.asarray(altitude_m, float)
    half = np.sin(0.5 * np.asarray(distance_m, float) / radius_m)
    return np.sqrt(h * h + 4.0 * radius_m * (radius_m + h) * half * half)
