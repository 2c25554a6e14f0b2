"""Geodesic chainage against published geodesic inverse problems.

* Geoscience Australia, Geocentric Datum of Australia technical manual: the worked example of
  Vincenty's inverse formula between two geodetic stations on the GRS80 ellipsoid, distance
  54 972.271 m (station coordinates as published: -37 57 03.72030, 144 25 29.52440 and
  -37 39 10.15610, 143 55 35.38390).
* Karney C.F.F. (2013) Algorithms for geodesics. Journal of Geodesy 87:43-55, worked inverse
  example on WGS84 (-41.32, 174.81) to (40.96, -5.50): s12 = 19 959 679.267 m.

Chainage along a two-vertex line in a geographic CRS must match to a millimetre.
"""

import numpy as np
import pytest
from pyproj import CRS

from plugin.core.reach import ReachAxis


def dms(d, m, s):
    sign = -1 if d < 0 else 1
    return sign * (abs(d) + m / 60 + s / 3600)


def test_vincenty_example_grs80():
    lat1, lon1 = dms(-37, 57, 3.72030), dms(144, 25, 29.52440)
    lat2, lon2 = dms(-37, 39, 10.15610), dms(143, 55, 35.38390)
    axis = ReachAxis([lon1, lon2], [lat1, lat2], CRS.from_epsg(4283).to_wkt())  # GDA94 (GRS80)
    assert axis.method == "geodesic"
    assert axis.length_m == pytest.approx(54972.271, abs=0.001)
    # and the chainage of the second vertex located as a point
    assert axis.locate(np.array([lon2]), np.array([lat2])).chainage[0] == pytest.approx(54972.271, abs=0.001)


def test_karney_example_wgs84():
    axis = ReachAxis([174.81, -5.50], [-41.32, 40.96], CRS.from_epsg(4326).to_wkt())
    assert axis.length_m == pytest.approx(19959679.267, abs=0.001)


def test_datum_offset_is_added_exactly():
    axis = ReachAxis([174.81, -5.50], [-41.32, 40.96], CRS.from_epsg(4326).to_wkt(), datum_m=1000.0)
    assert axis.end_m == pytest.approx(19959679.267 + 1000.0, abs=0.001)
