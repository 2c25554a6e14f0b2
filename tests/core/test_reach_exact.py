"""Chainage of 2 m grid cells against the exact cross-section-bounded chainage of an analytic
meandering channel (straights and circular arcs: a tight bend of radius 60 m and an omega loop
whose arms' channels overlap at a neck), digitised as a polyline with vertices every 5 m.

Exact reference: the arc length at the foot of the normal through each cell, in closed form per
piece (tests/core/channels.py). Criteria from the task: 99th percentile error under 1 m, fewer
than 0.05 % of cells in the wrong 1 km segment, the neck reported."""

import numpy as np
import pytest
from pyproj import CRS

from plugin.core.reach import Reach, ReachAxis, axis_features, segment_edges
from tests.core.channels import cells_within, meander_with_neck_and_tight_bend

UTM = CRS.from_epsg(32755).to_wkt()


@pytest.fixture(scope="module")
def case():
    ch = meander_with_neck_and_tight_bend()
    x, y, _ = ch.polyline(5.0)
    axis = ReachAxis(x, y, UTM)
    X, Y, s, d, second = cells_within(ch, 40.0, 2.0)
    return ch, axis, X, Y, s, d, second, axis.locate(X, Y, spacing=2.0)


def test_chainage_error_and_wrong_segment(case):
    ch, axis, X, Y, s, d, second, loc = case
    err = np.abs(loc.chainage - s)
    p99 = float(np.quantile(err, 0.99))
    print(f"cells {len(X)}, error median {np.median(err):.3f} m, p99 {p99:.3f} m, max {err.max():.3f} m")
    assert p99 < 1.0
    reach = Reach(axis, segment_edges(axis.start_m, axis.end_m, 1000.0))
    wrong = np.mean(reach.segment_of(loc.chainage) != reach.segment_of(s))
    print(f"wrong segment {100 * wrong:.4f} %")
    assert wrong < 0.0005
    # distance to the centreline: the polyline's chords are within 5^2/(8 R) of the arcs
    assert np.max(np.abs(loc.distance - d)) < 25.0 / (8 * 60.0) + 1e-9


def test_neck_is_reported(case):
    ch, axis, X, Y, s, d, second, loc = case
    necks = [f for f in axis_features(axis, 40.0) if f.kind == "neck"]
    assert len(necks) == 1
    # reference: closest approach of the two arms of the omega loop (fine resampling of the curve)
    ss = np.arange(0.0, ch.length, 0.5)
    px, py = ch.point(ss)
    a = (ss > 3000) & (ss < 3500)
    b = (ss > 4000) & (ss < 4500)
    dd = np.hypot(px[a][:, None] - px[b][None, :], py[a][:, None] - py[b][None, :])
    i, j = np.unravel_index(np.argmin(dd), dd.shape)
    assert necks[0].size_m == pytest.approx(dd[i, j], abs=1.5)
    assert abs(necks[0].chainage_m - ss[a][i]) < 15 and abs(necks[0].other_chainage_m - ss[b][j]) < 15
    # cells where the other arm is within 10 % of the nearest are flagged as a neck
    tie = second <= 1.05 * d
    assert tie.sum() > 20
    assert np.mean(loc.ambiguity[tie] == 1) > 0.9
    # and hardly anything else is flagged
    assert np.count_nonzero(loc.ambiguous & (second > 1.3 * d)) == 0
