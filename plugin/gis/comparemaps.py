"""Map products of a comparison: change grids, transition polygons, segment/zone footprints.

* ``change_grids(cmp)``: SPEED_CHANGE, DEPTH_CHANGE (float32, nodata -9999 where dry in both) and
  WET_DRY_CHANGE (Byte: 1 wet in both, 2 wet only in base, 3 wet only in alternative, 0 nodata) as full
  arrays on a grid. Grid comparisons use their own grid; a face-by-face mesh comparison is sampled onto a
  grid of the mesh's typical face size (or a given cell) by face-constant sampling at cell centres.
* ``transition_patches(cmp)``: TRANSITIONS -- polygons dissolved per (segment, transition), made by
  ``gis/patches.habitat_patches`` on a code per element (the dense transition code of
  ``core/compare.transition_codes``). A thin adapter (:class:`_CodeRun`) gives ``patches`` the few
  attributes of a ``RunAnalysis`` it reads, so the polygonizing code is shared, not copied.
* ``footprints(cmp)``: the wet area (union of both runs) of every segment and zone, for SEGMENT_CHANGE
  and ZONE_CHANGE when the reach brings no segment polygons.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from types import SimpleNamespace

import numpy as np

from ..core import regrid
from ..core.compare import Comparison, transition_codes
from ..core.field import GridSupport, MeshSupport
from . import patches

NODATA = -9999.0


@dataclass
class _CodeRun:
    """What gis/patches.py reads from a RunAnalysis: a field with its support, one code per element,
    segment and zone per element, the reach, class names (here: transition labels) and per-segment wet area
    and zone."""

    field: object
    reach: object
    scheme: object
    codes: np.ndarray
    segment: np.ndarray
    zone: np.ndarray
    segment_stats: dict


def _adapter(cmp: Comparison, codes=None, names=()):
    seg_stats = {"wet_area_m2": np.asarray(cmp.segment_change["union_wet_m2"], dtype=float),
                 "zone": list(cmp.segment_change["zone"])}
    codes = np.zeros(cmp.union.n, np.uint8) if codes is None else codes
    return _CodeRun(cmp.union, cmp.reach, SimpleNamespace(names=list(names)), codes, cmp.segment, cmp.zone, seg_stats)


def face_polygons(cmp: Comparison):
    """Shapely polygons of the union faces (mesh comparisons), else None."""
    sup = cmp.union.support
    return patches.face_polygons(sup) if isinstance(sup, MeshSupport) else None


def transition_patches(cmp: Comparison, progress=None, threads: int = 2, polygons=None):
    """(columns, geometries) of TRANSITIONS: one MultiPolygon per (segment, transition) with transition,
    from_class, to_class, from_code, to_code, changed, segment, zone, chainage_from_m, chainage_to_m,
    area_m2, pct_segment (% of the segment's union wet area), n_parts."""
    codes, info = transition_codes(cmp)
    run = _adapter(cmp, codes, [lab for _, _, lab in info])
    p = patches.habitat_patches(run, 0.0, progress=progress, threads=threads, polygons=polygons)
    c = p.columns
    k = np.asarray(c["class_code"], dtype=np.int64) - 1
    frm = np.array([info[i][0] for i in k], dtype=np.int64)
    to = np.array([info[i][1] for i in k], dtype=np.int64)
    cols = {"transition": list(c["class"]),
            "from_class": [cmp.states[i] for i in frm], "to_class": [cmp.states[i] for i in to],
            "from_code": frm, "to_code": to, "changed": frm != to}
    for key in ("segment", "zone", "chainage_from_m", "chainage_to_m", "area_m2", "pct_segment", "n_parts"):
        cols[key] = c[key]
    return cols, p.geometries


def footprints(cmp: Comparison, polygons=None, threads: int = 2):
    """(segment geometries, zone geometries): the union wet area of each segment and zone."""
    return patches.wet_footprints(_adapter(cmp), threads=threads, polygons=polygons)


def nice_cell(size: float) -> float:
    """A round cell size near ``size`` (1, 2, 2.5, 5 x 10^k), not larger than it."""
    if not size > 0:
        return 1.0
    e = math.floor(math.log10(size))
    for m in (5.0, 2.5, 2.0, 1.0):
        if m * 10 ** e <= size * (1 + 1e-9):
            return m * 10 ** e
    return 10 ** e


def change_grids(cmp: Comparison, cell_m: float = 0.0, progress=None):
    """(GridSpec, {'speed': float32, 'depth': float32, 'wet_dry': uint8} full arrays, method sentence)."""
    uf = cmp.union
    sup = uf.support
    values = {"speed": cmp.speed_change, "depth": cmp.depth_change, "wet_dry": cmp.wet_dry}
    if isinstance(sup, GridSupport):
        spec = regrid.GridSpec.of(sup)
        cells = sup.index
        text = ""
    else:
        size = cell_m or nice_cell(regrid.element_size_m(uf))
        spec = regrid.snap_grid(regrid.wet_bounds(uf), size)
        cells, values = regrid.faces_to_grid_values(sup, spec, values, progress=progress)
        text = (f"The change rasters sample the faces on a {size:g} m grid (about the mesh's typical face size) by "
                "face-constant sampling at cell centres; MESH_CHANGE holds the exact face values.")
    n = spec.n_cells
    out = {}
    for k, v in values.items():
        if k == "wet_dry":
            a = np.zeros(n, dtype=np.uint8)
            a[cells] = v
        else:
            a = np.full(n, NODATA, dtype=np.float32)
            a[cells] = np.asarray(v, dtype=np.float32)
        out[k] = a.reshape(spec.shape)
    return spec, out, text


def symmetric_limit(values, quantile: float = 98.0, floor: float = 0.01) -> float:
    """A round symmetric colour-scale limit: the ``quantile`` of |values| rounded up to 1, 2, 2.5 or 5 x 10^k."""
    v = np.abs(np.asarray(values, dtype=float))
    v = v[np.isfinite(v)]
    q = float(np.percentile(v, quantile)) if v.size else 0.0
    q = max(q, floor)
    e = math.floor(math.log10(q))
    for m in (1.0, 2.0, 2.5, 5.0, 10.0):
        if m * 10 ** e >= q * (1 - 1e-9):
            return m * 10 ** e
    return 10 ** (e + 1)
