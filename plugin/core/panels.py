"""Map-panel geometry: which part of the river each page shows, at what scale and rotation.

Pages
-----
* *Zone pages*: one page per reach zone (the zone's chainage range).
* *Atlas pages*: the reach cut into equal chainage windows no longer than the page length.

Each page window [c0, c1] becomes a *frame*: the map rectangle on the ground. Its direction
follows the channel: the principal direction (largest-variance axis) of points sampled along the
reach axis in the window, oriented downstream, then turned by 180 degrees when needed so that
north points up the page (the map rotation stays within -90..+90 degrees); the page says whether
the flow runs left to right or right to left. Without rotation the frame is north-up.
The sampled points, rotated into the frame's direction, are boxed, a margin is added, and the box
is widened to the paper frame's aspect ratio. The scale that fits the box in the paper frame is
rounded up to a "nice" denominator (1, 1.25, 1.5, 2, 2.5, 3, 4, 5, 6, 7.5 x 10^k); atlas pages
share one scale (the largest any page needs), zone pages each get their own, unless a scale is
given. The frame rectangle is then exactly the paper frame at that scale.

Angles: ``angle`` is the direction of the page's x axis on the ground, radians counter-clockwise
from east. QGIS rotates map content clockwise, so its map rotation in degrees is degrees(angle).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .errors import ChannelHabitatError
from .units import mld_to_m3s, to_mld

NICE_STEPS = (1.0, 1.25, 1.5, 2.0, 2.5, 3.0, 4.0, 5.0, 6.0, 7.5, 10.0)
PAPERS_MM = {"A4": (297.0, 210.0), "A3": (420.0, 297.0)}  # landscape width, height (ISO 216)


def nice_scale(denominator: float) -> float:
    """The smallest 'nice' scale denominator >= ``denominator`` (1, 1.25, 1.5, 2, 2.5, 3, 4, 5, 6,
    7.5 times a power of ten)."""
    if not denominator > 0 or not math.isfinite(denominator):
        raise ValueError("a scale denominator must be positive")
    k = math.floor(math.log10(denominator))
    for _ in range(2):
        for s in NICE_STEPS:
            v = s * 10.0 ** k
            if v >= denominator * (1 - 1e-12):
                return float(round(v, 6))
        k += 1
    return float(10.0 ** k)  # pragma: no cover


@dataclass
class PageWindow:
    chainage_from_m: float
    chainage_to_m: float
    zone: str


@dataclass
class Frame:
    """A page's map rectangle on the ground."""

    cx: float
    cy: float
    angle: float  # radians, CCW from east: direction of the page's x axis
    width_m: float
    height_m: float
    scale: float  # denominator
    flow_left_to_right: bool

    @property
    def rotation_deg(self) -> float:
        """QGIS map rotation (degrees clockwise of the map content)."""
        return math.degrees(self.angle)

    def corners(self) -> np.ndarray:
        """(5, 2) closed ring of the rectangle, counter-clockwise."""
        c, s = math.cos(self.angle), math.sin(self.angle)
        hw, hh = self.width_m / 2.0, self.height_m / 2.0
        local = np.array([(-hw, -hh), (hw, -hh), (hw, hh), (-hw, hh), (-hw, -hh)])
        return np.column_stack([self.cx + local[:, 0] * c - local[:, 1] * s,
                                self.cy + local[:, 0] * s + local[:, 1] * c])


def zone_windows(reach) -> list:
    """One window per reach zone."""
    e = reach.zone_edges
    return [PageWindow(float(e[i]), float(e[i + 1]), reach.zone_names[i]) for i in range(reach.n_zones)]


def atlas_windows(reach, page_length_m: float) -> list:
    """Equal windows no longer than ``page_length_m`` covering the reach; each names the zone of
    its middle."""
    if not page_length_m > 0:
        raise ChannelHabitatError("the atlas page length must be positive (metres of chainage)", "PAGE_LENGTH")
    a = reach.axis
    n = max(int(math.ceil(a.length_m / page_length_m - 1e-9)), 1)
    if n > 500:
        raise ChannelHabitatError(f"{n} atlas pages of {page_length_m:g} m: choose a longer page length "
                                  "(at most 500 pages)", "PAGE_LENGTH")
    edges = np.linspace(a.start_m, a.end_m, n + 1)
    mids = 0.5 * (edges[:-1] + edges[1:])
    zones = reach.zone_of(mids)
    return [PageWindow(float(edges[i]), float(edges[i + 1]),
                       reach.zone_names[zones[i]] if zones[i] >= 0 else "") for i in range(n)]


def _window_points(axis, c0: float, c1: float) -> np.ndarray:
    ch = np.linspace(c0, c1, 64)
    inner = axis.chainage[(axis.chainage > c0) & (axis.chainage < c1)]
    ch = np.unique(np.concatenate([ch, inner]))
    x, y, _ = axis.point_at(ch)
    return np.column_stack([x, y])


def channel_direction(axis, c0: float, c1: float) -> float:
    """Direction (radians CCW from east) of the channel over [c0, c1]: the principal axis of the
    axis points, oriented downstream (the way chainage increases, turned round for an axis whose
    chainage origin is at the downstream end)."""
    pts = _window_points(axis, c0, c1)
    centred = pts - pts.mean(axis=0)
    if np.allclose(centred, 0):
        return 0.0
    _, _, vt = np.linalg.svd(centred, full_matrices=False)
    d = vt[0]
    if np.dot(pts[-1] - pts[0], d) * getattr(axis, "flow_sign", 1) < 0:
        d = -d
    return float(math.atan2(d[1], d[0]))


def fit_frame(axis, window: PageWindow, frame_mm, margin_m: float, rotate: bool = True,
              extra_points=None) -> Frame:
    """The ground rectangle of a page before its scale is chosen (scale = what it needs)."""
    pts = _window_points(axis, window.chainage_from_m, window.chainage_to_m)
    if extra_points is not None and len(extra_points):
        pts = np.vstack([pts, np.asarray(extra_points, dtype=float)])
    flow = 0.0
    angle = 0.0
    if rotate:
        flow = channel_direction(axis, window.chainage_from_m, window.chainage_to_m)
        angle = flow
        # keep north up the page: rotation within (-90, 90] degrees
        if angle > math.pi / 2 + 1e-12:
            angle -= math.pi
        elif angle <= -math.pi / 2:
            angle += math.pi
    c, s = math.cos(angle), math.sin(angle)
    u = pts[:, 0] * c + pts[:, 1] * s
    v = -pts[:, 0] * s + pts[:, 1] * c
    u0, u1 = u.min() - margin_m, u.max() + margin_m
    v0, v1 = v.min() - margin_m, v.max() + margin_m
    w, h = max(u1 - u0, 1e-6), max(v1 - v0, 1e-6)
    aspect = frame_mm[0] / frame_mm[1]
    if w / h < aspect:
        w = h * aspect
    else:
        h = w / aspect
    uc, vc = 0.5 * (u0 + u1), 0.5 * (v0 + v1)
    cx, cy = uc * c - vc * s, uc * s + vc * c
    need = w / (frame_mm[0] / 1000.0)
    if rotate:
        ltr = math.cos(flow - angle) > 0
    else:
        x0, _, _ = axis.point_at(window.chainage_from_m)
        x1, _, _ = axis.point_at(window.chainage_to_m)
        ltr = bool((x1 - x0) * getattr(axis, "flow_sign", 1) >= 0)
    return Frame(cx, cy, angle, w, h, need, bool(ltr))


def plan_pages(reach, mode: str, frame_mm, page_length_m: float = 2000.0, scale: float = 0.0,
               margin_m: float | None = None, rotate: bool = True) -> tuple:
    """(windows, frames) for 'zones' or 'atlas'. Frames carry the final nice (or given) scale and
    are exactly the paper frame at that scale."""
    if mode == "zones":
        windows = zone_windows(reach)
    elif mode == "atlas":
        windows = atlas_windows(reach, page_length_m)
    else:
        raise ValueError(f"unknown page mode {mode!r}")
    if scale and scale < 0:
        raise ChannelHabitatError("the map scale must be positive (e.g. 10000 for 1:10 000), or 0 for "
                                  "automatic", "SCALE")
    frames = []
    for w in windows:
        length = w.chainage_to_m - w.chainage_from_m
        m = margin_m if margin_m is not None else max(0.06 * length, 50.0)
        frames.append(fit_frame(reach.axis, w, frame_mm, m, rotate))
    if scale:
        scales = [float(scale)] * len(frames)
        too_small = [i for i, f in enumerate(frames) if f.scale > scale * 1.0001]
        if too_small:
            i = too_small[0]
            raise ChannelHabitatError(
                f"at 1:{scale:g} page {i + 1} (chainage {windows[i].chainage_from_m:.0f}-"
                f"{windows[i].chainage_to_m:.0f} m) does not fit the map frame; it needs about "
                f"1:{nice_scale(frames[i].scale):g}. Give a smaller scale, a shorter page length, or 0 for "
                "automatic", "SCALE")
    elif mode == "atlas":
        common = nice_scale(max(f.scale for f in frames))
        scales = [common] * len(frames)
    else:
        scales = [nice_scale(f.scale) for f in frames]
    out = []
    for f, sc in zip(frames, scales):
        out.append(Frame(f.cx, f.cy, f.angle, frame_mm[0] / 1000.0 * sc, frame_mm[1] / 1000.0 * sc, sc,
                         f.flow_left_to_right))
    return windows, out


def km_posts(axis, spacing_m: float = 1000.0):
    """(chainage, x, y, label) of posts every ``spacing_m`` from the first multiple at or after the
    axis start; labels 'km 12' (or 'km 12.5' for non-whole kilometres)."""
    if not spacing_m > 0:
        raise ChannelHabitatError("the km-post spacing must be positive", "POST_SPACING")
    first = math.ceil(axis.start_m / spacing_m - 1e-9) * spacing_m
    ch = np.arange(first, axis.end_m + 1e-9, spacing_m)
    x, y, _ = axis.point_at(ch)
    labels = [f"km {c / 1000.0:g}" for c in ch]
    return ch, x, y, labels


def format_number(v: float, digits: int = 3) -> str:
    """A discharge for a caption: thousands separated by a thin space, about ``digits`` significant
    figures for small numbers (3000 -> '3 000', 34.7222 -> '34.7', 0.5 -> '0.5')."""
    if not math.isfinite(v):
        return "–"
    a = abs(v)
    if a >= 10 ** digits or float(v).is_integer():
        return f"{round(v):,}".replace(",", "\u2009")
    decimals = max(digits - 1 - int(math.floor(math.log10(a))), 0) if a > 0 else 0
    return f"{v:.{decimals}f}"


def discharge_text(q, unit: str, parameter: str = "DISCHARGE") -> str:
    """'3 000 ML/d (34.7 m³/s)' from a discharge in either unit (1 ML/d = 1000/86400 m3/s)."""
    q_mld = float(to_mld(q, unit, parameter))
    q_m3s = float(mld_to_m3s(q_mld))
    return f"{format_number(q_mld)} ML/d ({format_number(q_m3s)} m³/s)"


def page_table(windows, frames) -> tuple:
    """(columns, rings) of the page coverage: one row per page (fields of the PAGES output) and the
    (5, 2) ring of its rectangle."""
    cols = {"page": [], "label": [], "zone": [], "chainage_from_m": [], "chainage_to_m": [], "km_text": [],
            "rotation_deg": [], "scale": [], "flow": []}
    rings = []
    for i, (w, f) in enumerate(zip(windows, frames)):
        cols["page"].append(i + 1)
        cols["label"].append(f"{w.zone[:1].upper()}{w.zone[1:]} zone" if w.zone else "Reach")
        cols["zone"].append(w.zone)
        cols["chainage_from_m"].append(w.chainage_from_m)
        cols["chainage_to_m"].append(w.chainage_to_m)
        cols["km_text"].append(f"chainage km {w.chainage_from_m / 1000:.1f}–{w.chainage_to_m / 1000:.1f}")
        cols["rotation_deg"].append(f.rotation_deg)
        cols["scale"].append(f.scale)
        cols["flow"].append("flow left to right →" if f.flow_left_to_right else "← flow right to left")
        rings.append(f.corners())
    out = {k: (np.asarray(v) if k in ("page", "chainage_from_m", "chainage_to_m", "rotation_deg", "scale") else v)
           for k, v in cols.items()}
    return out, rings
