"""core/locate.py: the nearest point on a polyline, checked against brute force over every segment
(numpy, written independently here), on lines chosen to break shortcuts: tight overlapping loops,
hairpins, a spiral, rough lines with tiny segments, points far away and beyond the ends."""

import math

import numpy as np
import pytest

from plugin.core.locate import AMBIGUITY_NONE, PolylineIndex


def brute(vx, vy, X, Y):
    """Distance to the polyline, and the along-line position of the nearest point, by testing every
    segment (chunks of points)."""
    ax, ay = vx[:-1], vy[:-1]
    dx, dy = np.diff(vx), np.diff(vy)
    L2 = dx * dx + dy * dy
    cum = np.concatenate([[0.0], np.cumsum(np.sqrt(L2))])
    dist = np.empty(len(X))
    along = np.empty(len(X))
    second = np.empty(len(X))
    for i in range(0, len(X), 256):
        x = X[i:i + 256, None]
        y = Y[i:i + 256, None]
        t = np.clip(((x - ax) * dx + (y - ay) * dy) / L2, 0.0, 1.0)
        d2 = (x - ax - t * dx) ** 2 + (y - ay - t * dy) ** 2
        k = np.argmin(d2, axis=1)
        r = np.arange(len(k))
        dist[i:i + 256] = np.sqrt(d2[r, k])
        along[i:i + 256] = cum[k] + t[r, k] * np.sqrt(L2[k])
        # nearest distance among segments whose nearest point is elsewhere along the line
        pos = cum[None, :-1] + t * np.sqrt(L2)[None, :]
        other = np.abs(pos - along[i:i + 256, None]) > 1e-6
        second[i:i + 256] = np.sqrt(np.min(np.where(other, d2, np.inf), axis=1))
    return dist, along, second


def check(x, y, px, py, spacing=None):
    idx = PolylineIndex(x, y)
    res = idx.nearest(px, py, spacing=spacing)
    d, along, second = brute(x - idx.ox, y - idx.oy, px - idx.ox, py - idx.oy)
    # the distance is the minimum over all segments
    np.testing.assert_allclose(np.abs(res.offset), d, rtol=0, atol=1e-8)
    # the nearest point itself, wherever it is unique (no other part of the line as near)
    unique = second > d + 1e-6
    got = idx.cum[res.segment] + res.along
    np.testing.assert_allclose(got[unique], along[unique], rtol=0, atol=1e-6)
    return idx, res


def meander(length, step, wavelength, amplitude_deg):
    s = np.arange(0.0, length + step, step)
    th = np.radians(amplitude_deg) * np.sin(2 * np.pi * s / wavelength)
    return (np.concatenate([[0.0], np.cumsum(step * np.cos(th[:-1]))]),
            np.concatenate([[0.0], np.cumsum(step * np.sin(th[:-1]))]))


def test_tight_overlapping_meander_on_a_grid():
    x, y = meander(4000.0, 5.0, 1200.0, 110.0)  # loops tighter than the grid's distance to them
    gx, gy = np.meshgrid(np.arange(x.min() - 120, x.max() + 120, 3.0), np.arange(y.min() - 120, y.max() + 120, 3.0))
    _, res = check(x, y, gx.ravel(), gy.ravel(), spacing=3.0)
    assert res.n_fast > 0.5 * len(gx.ravel())


def test_smooth_meander_is_certified_on_the_fast_path():
    x, y = meander(6000.0, 5.0, 2600.0, 70.0)
    gx, gy = np.meshgrid(np.arange(x.min() - 80, x.max() + 80, 2.0), np.arange(y.min() - 80, y.max() + 80, 2.0))
    px, py = gx.ravel(), gy.ravel()
    idx = PolylineIndex(x, y)
    res = idx.nearest(px, py, spacing=2.0)
    near = np.abs(res.offset) < 60
    # within a realistic channel every point is certified without the tree search
    assert res.n_exact <= np.count_nonzero(~near)
    sub = np.random.default_rng(0).choice(len(px), 20000, replace=False)
    d, _, _ = brute(x - idx.ox, y - idx.oy, px[sub] - idx.ox, py[sub] - idx.oy)
    np.testing.assert_allclose(np.abs(res.offset[sub]), d, atol=1e-8)


def test_hairpins_few_long_segments():
    x = np.array([0, 1000, 1000, 0, 0, 1000.0])
    y = np.array([0, 0, 100, 100, 200, 200.0])
    rng = np.random.default_rng(1)
    check(x, y, rng.uniform(-300, 1300, 60000), rng.uniform(-300, 500, 60000))


def test_spiral_every_loop_nested():
    th = np.linspace(0, 6 * np.pi, 1500)
    r = 50 + 20 * th
    rng = np.random.default_rng(2)
    check(r * np.cos(th), r * np.sin(th), rng.uniform(-450, 450, 40000), rng.uniform(-450, 450, 40000))


def test_rough_line_with_tiny_segments_and_far_points():
    rng = np.random.default_rng(3)
    t = np.cumsum(rng.exponential(8.0, 600))
    t[::37] += 1e-3
    x = t + rng.normal(0, 3, len(t))
    y = 200 * np.sin(t / 300) + rng.normal(0, 3, len(t))
    keep = np.r_[True, (np.diff(x) != 0) | (np.diff(y) != 0)]
    x, y = x[keep], y[keep]
    px = np.concatenate([rng.uniform(x.min() - 100, x.max() + 100, 30000), rng.normal(0, 5000, 2000)])
    py = np.concatenate([rng.uniform(y.min() - 300, y.max() + 300, 30000), rng.normal(0, 5000, 2000)])
    check(x, y, px, py)


def test_large_projected_coordinates():
    x, y = meander(3000.0, 7.0, 1800.0, 60.0)
    rng = np.random.default_rng(4)
    px = rng.uniform(x.min() - 100, x.max() + 100, 50000)
    py = rng.uniform(y.min() - 100, y.max() + 100, 50000)
    check(x + 734512.25, y + 6123456.75, px + 734512.25, py + 6123456.75)


def test_points_beyond_the_ends_are_flagged():
    x = np.array([0.0, 100.0, 200.0])
    y = np.zeros(3)
    px = np.array([-50.0, -1e-3, 0.0, 50.0, 200.0, 200.5, 300.0] * 1000)
    py = np.array([10.0, -5.0, 3.0, 2.0, 0.0, 1.0, -7.0] * 1000)
    res = PolylineIndex(x, y).nearest(px, py)
    expected = np.array([-1, -1, 0, 0, 0, 1, 1] * 1000)
    np.testing.assert_array_equal(res.end, expected)
    np.testing.assert_allclose(np.abs(res.offset[:7]), [math.hypot(50, 10), math.hypot(1e-3, 5), 3, 2, 0,
                                                        math.hypot(0.5, 1), math.hypot(100, 7)])
    # + left of the vertex order
    assert res.offset[0] > 0 and res.offset[1] < 0 and res.offset[6] < 0


def test_ambiguity_flags_follow_their_definition():
    """Flags from the per-piece tables agree with the definition applied point by point
    (another part of the line, more than 1.5 d further along, within 1.1 d)."""
    x, y = meander(4000.0, 5.0, 1200.0, 110.0)
    rng = np.random.default_rng(5)
    px = rng.uniform(x.min() - 100, x.max() + 100, 40000)
    py = rng.uniform(y.min() - 100, y.max() + 100, 40000)
    idx = PolylineIndex(x, y)
    res = idx.nearest(px, py)
    X, Y = px - idx.ox, py - idx.oy
    d, along, _ = brute(idx.vx, idx.vy, X, Y)
    # definition, by brute force on a fine resampling of the line (0.5 m)
    s = np.arange(0.0, idx.length, 0.5)
    seg = np.clip(np.searchsorted(idx.cum, s, side="right") - 1, 0, idx.n_seg - 1)
    qx = idx.ax[seg] + (s - idx.cum[seg]) * idx.ux[seg]
    qy = idx.ay[seg] + (s - idx.cum[seg]) * idx.uy[seg]
    sub = rng.choice(len(px), 3000, replace=False)
    truth = np.zeros(len(sub), dtype=bool)
    for n, i in enumerate(sub):
        dq = np.hypot(qx - X[i], qy - Y[i])
        truth[n] = np.any((dq <= 1.1 * d[i]) & (np.abs(s - along[i]) > 1.5 * d[i]))
    got = res.ambiguity[sub] != AMBIGUITY_NONE
    assert truth.sum() > 100  # the test line has plenty of ambiguous points
    agree = np.mean(got == truth)
    assert agree > 0.97, agree


def test_empty_and_bad_input():
    idx = PolylineIndex([0.0, 10.0], [0.0, 0.0])
    res = idx.nearest(np.zeros(0), np.zeros(0))
    assert len(res.segment) == 0
    with pytest.raises(ValueError):
        idx.nearest(np.array([np.nan]), np.array([0.0]))
    with pytest.raises(ValueError):
        PolylineIndex([0.0, 0.0], [1.0, 1.0])


def test_index_pickles_after_use_and_locates_the_same():
    """A used index (ambiguity tables possibly still being built in a thread) is sent to worker
    processes with the reach: it must pickle, and the copy must give the same answers."""
    import pickle

    x, y = meander(4000.0, 5.0, 1200.0, 110.0)
    rng = np.random.default_rng(5)
    px = np.concatenate([rng.uniform(x.min() - 100, x.max() + 100, 20000), rng.normal(0, 5000, 500)])
    py = np.concatenate([rng.uniform(y.min() - 300, y.max() + 300, 20000), rng.normal(0, 5000, 500)])
    idx = PolylineIndex(x, y)
    first = idx.nearest(px, py)
    from concurrent.futures import Future

    for t in (idx._tables, idx._wide):  # as left by a build in a thread whose result nobody collected yet
        if t is not None:
            t.ambiguity_ready()
            f = Future()
            f.set_result((t.amb_step, t.amb_t, t.amb_code))
            t.amb_pending = f
    copy = pickle.loads(pickle.dumps(idx))
    again = copy.nearest(px, py)
    np.testing.assert_array_equal(first.segment, again.segment)
    np.testing.assert_array_equal(first.along, again.along)
    np.testing.assert_array_equal(first.offset, again.offset)
    np.testing.assert_array_equal(first.ambiguity, again.ambiguity)
