"""RunSource: where one hydraulic model run's depth and velocity come from (pure data).

Rasters (``depth`` + ``speed``, or ``depth`` + ``u`` and ``v``) or a UGRID NetCDF ``mesh`` with
dataset group names and a time-step index. Scenario tables are lists of RunSources.
``gis/runs.py`` reads a RunSource into a HydraulicField.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field

# Parameter names reported in error messages (the single-run algorithms' names).
DEFAULT_PARAMS = {
    "depth": "DEPTH", "speed": "SPEED", "u": "VELOCITY_U", "v": "VELOCITY_V", "mesh": "MESH",
    "depth_group": "MESH_DEPTH_GROUP", "velocity_group": "MESH_VELOCITY_GROUP",
    "u_group": "MESH_U_GROUP", "v_group": "MESH_V_GROUP", "time_index": "MESH_TIME_INDEX",
    "mesh_crs": "MESH_CRS",
}


@dataclass
class RunSource:
    """Where one run's depth and velocity come from. Paths are absolute (or relative to cwd)."""

    depth: str | None = None
    speed: str | None = None
    u: str | None = None
    v: str | None = None
    mesh: str | None = None
    depth_group: str | None = None
    velocity_group: str | None = None  # a vector group, or a scalar speed group
    u_group: str | None = None
    v_group: str | None = None
    time_index: int = -1
    mesh_crs_wkt: str | None = None
    label: str = ""
    params: dict = field(default_factory=lambda: dict(DEFAULT_PARAMS))

    @property
    def is_mesh(self) -> bool:
        return bool(self.mesh)

    def grid_key(self) -> str:
        """Files that share geometry share a key (used to cache chainage per grid/mesh)."""
        return f"mesh:{os.path.abspath(self.mesh)}" if self.mesh else f"raster:{os.path.abspath(self.depth)}"
