"""HydraulicField: the wet elements of one hydraulic model run, as flat arrays.

Every algorithm reads its source (rasters or a mesh) into a HydraulicField through ``gis/`` and
then works on plain arrays. An *element* is a raster cell or a mesh face. Only wet elements are
kept (depth finite and >= the wet-depth threshold): x, y (element centre), area, depth, speed and,
when the source has a vector, u and v. ``support`` remembers where the elements came from (grid or
mesh) so classes can be written back as a raster or face polygons, and so chainage can be cached
per grid/mesh.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field

import numpy as np

from .errors import ChannelHabitatError

DEFAULT_WET_DEPTH_M = 0.05
G = 9.80665  # standard gravity, m/s2 (CGPM 1901)


@dataclass(frozen=True)
class GridSupport:
    """A north-up regular grid. ``transform`` is GDAL's geotransform (x0, dx, 0, y0, 0, dy<0).

    ``index`` holds the flat (row-major) index of every wet element in the full grid.
    """

    transform: tuple
    shape: tuple  # (rows, cols)
    index: np.ndarray

    @property
    def cell_area(self) -> float:
        return abs(self.transform[1] * self.transform[5])

    @property
    def rows_cols(self):
        return np.divmod(self.index, self.shape[1])

    def geometry_key(self) -> str:
        """Identifies the grid geometry (not the wet mask): same key -> same cell centres."""
        t = ",".join(repr(float(v)) for v in self.transform)
        return f"grid:{t}:{self.shape[0]}x{self.shape[1]}"


@dataclass(frozen=True)
class MeshSupport:
    """An unstructured mesh. ``face_nodes`` is (n_faces, max_nodes) with -1 padding.

    ``index`` holds the face number of every wet element in the full mesh.
    """

    node_x: np.ndarray
    node_y: np.ndarray
    face_nodes: np.ndarray
    index: np.ndarray

    def geometry_key(self) -> str:
        h = hashlib.sha1()
        for a in (self.node_x, self.node_y, self.face_nodes):
            h.update(np.ascontiguousarray(a).tobytes())
        return f"mesh:{len(self.node_x)}:{len(self.face_nodes)}:{h.hexdigest()}"


@dataclass
class HydraulicField:
    """Wet elements of one run. Arrays are 1-D, aligned, float64 for x, y, area, float32 else."""

    x: np.ndarray
    y: np.ndarray
    area: np.ndarray
    depth: np.ndarray
    speed: np.ndarray
    crs_wkt: str = ""
    support: GridSupport | MeshSupport | None = None
    u: np.ndarray | None = None
    v: np.ndarray | None = None
    name: str = ""
    wet_depth_m: float = DEFAULT_WET_DEPTH_M
    notes: list = field(default_factory=list)

    def __post_init__(self):
        n = len(self.x)
        for key in ("y", "area", "depth", "speed"):
            if len(getattr(self, key)) != n:
                raise ValueError(f"HydraulicField.{key} has {len(getattr(self, key))} values, x has {n}")
        for key in ("u", "v"):
            a = getattr(self, key)
            if a is not None and len(a) != n:
                raise ValueError(f"HydraulicField.{key} has {len(a)} values, x has {n}")

    @property
    def n(self) -> int:
        return len(self.x)

    @property
    def wet_area_m2(self) -> float:
        return float(np.sum(self.area, dtype=np.float64))

    @property
    def weight_unit_m2(self) -> float:
        """Reference area for frequency weights (one 'sample' per unit): the grid cell area, or the
        median face area of a mesh. See :func:`core.stats.weighted_percentiles`."""
        if isinstance(self.support, GridSupport):
            return self.support.cell_area
        if self.n == 0:
            return 1.0
        return float(np.median(self.area))

    def froude(self) -> np.ndarray:
        """Fr = V / sqrt(g D) per element, g = 9.80665 m/s2."""
        d = self.depth.astype(np.float64)
        return (self.speed / np.sqrt(G * d)).astype(np.float32)

    def subset(self, mask: np.ndarray) -> HydraulicField:
        """The elements where ``mask`` is True (support index subset accordingly)."""
        sup = self.support
        if isinstance(sup, GridSupport):
            sup = GridSupport(sup.transform, sup.shape, sup.index[mask])
        elif isinstance(sup, MeshSupport):
            sup = MeshSupport(sup.node_x, sup.node_y, sup.face_nodes, sup.index[mask])
        return HydraulicField(
            x=self.x[mask], y=self.y[mask], area=self.area[mask], depth=self.depth[mask],
            speed=self.speed[mask], crs_wkt=self.crs_wkt, support=sup,
            u=None if self.u is None else self.u[mask], v=None if self.v is None else self.v[mask],
            name=self.name, wet_depth_m=self.wet_depth_m, notes=list(self.notes),
        )


def wet_mask(depth: np.ndarray, wet_depth_m: float = DEFAULT_WET_DEPTH_M, nodata=None) -> np.ndarray:
    """Wet: depth finite and >= threshold. NaN, +-inf, nodata and fill values are dry."""
    d = np.asarray(depth)
    m = np.isfinite(d) & (d >= wet_depth_m)
    if nodata is not None and np.isfinite(nodata):
        m &= d != nodata
    return m


def check_values(depth: np.ndarray, speed: np.ndarray, *, depth_param: str = "DEPTH",
                 speed_param: str = "SPEED", raw_depth_min: float | None = None) -> None:
    """Refuse values that say the input is wrong rather than the river unusual.

    * negative depths (below -1 mm, after nodata removal): probably water level or bed elevation
      instead of depth;
    * speeds above 15 m/s among wet elements: probably cm/s or ft/s, or a wrong band;
    * negative speeds: a speed magnitude cannot be negative.
    """
    if raw_depth_min is not None and raw_depth_min < -1e-3:
        raise ChannelHabitatError(
            f"depth has negative values (minimum {raw_depth_min:.3f} m): this looks like a water "
            "level or bed elevation, not a depth. Give water depth in metres (level minus bed).",
            depth_param,
        )
    if speed.size:
        smax = float(np.nanmax(speed))
        smin = float(np.nanmin(speed))
        if smin < -1e-6:
            raise ChannelHabitatError(
                f"speed has negative values (minimum {smin:.3f}): a speed is a magnitude; give "
                "the speed raster/group, or the u and v components instead.", speed_param)
        if smax > 15.0:
            raise ChannelHabitatError(
                f"speeds up to {smax:.1f} found among wet elements: this looks like cm/s or ft/s, "
                "not m/s. Convert the layer to metres per second (e.g. divide cm/s by 100).",
                speed_param,
            )


def require_wet(fld: HydraulicField, parameter: str = "DEPTH") -> None:
    if fld.n == 0:
        raise ChannelHabitatError(
            f"the run is dry everywhere: no element has depth >= {fld.wet_depth_m} m. Check the "
            "depth layer (units, band, time step) or lower the wet-depth threshold.", parameter)
