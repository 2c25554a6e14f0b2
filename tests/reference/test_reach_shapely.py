"""Chainage and distance against shapely (GEOS) line_locate_point / distance, the reference
library, on random points near a meandering line (a sine-generated curve, Langbein and Leopold
1966, used here only as a plausible shape)."""

import numpy as np
import shapely
from pyproj import CRS

from plugin.core.reach import ReachAxis


def test_against_shapely_line_locate_point():
    s = np.arange(0.0, 8000.0, 6.0)
    th = np.radians(75) * np.sin(2 * np.pi * s / 2200.0)
    x = 500000 + np.concatenate([[0.0], np.cumsum(6.0 * np.cos(th[:-1]))])
    y = 6000000 + np.concatenate([[0.0], np.cumsum(6.0 * np.sin(th[:-1]))])
    axis = ReachAxis(x, y, CRS.from_epsg(32755).to_wkt())
    line = shapely.linestrings(np.column_stack([x, y]))
    rng = np.random.default_rng(11)
    k = rng.integers(0, len(x), 60000)
    px = x[k] + rng.normal(0, 60, len(k))
    py = y[k] + rng.normal(0, 60, len(k))
    loc = axis.locate(px, py)
    pts = shapely.points(px, py)
    ref_ch = shapely.line_locate_point(line, pts)
    ref_d = shapely.distance(line, pts)
    # source: shapely 2.0 (GEOS) distance, reference library
    np.testing.assert_allclose(loc.distance, ref_d, rtol=0, atol=1e-6)
    # chainage where the nearest point is unique: points not flagged and not at a vertex tie
    foot = shapely.line_interpolate_point(line, ref_ch)
    ok = ~loc.ambiguous & (np.abs(shapely.distance(foot, pts) - ref_d) < 1e-9)
    diff = np.abs(loc.chainage - ref_ch)
    # source: shapely 2.0 (GEOS) line_locate_point, reference library
    assert np.mean(diff[ok] < 1e-6) > 0.999
    # where they differ, both feet are equally near (a tie between two parts of the line)
    bad = ok & (diff >= 1e-6)
    ours = shapely.line_interpolate_point(line, loc.chainage[bad])
    # source: shapely 2.0 (GEOS) line_interpolate_point + distance, reference library
    np.testing.assert_allclose(shapely.distance(ours, pts[bad]), ref_d[bad], atol=1e-6)
