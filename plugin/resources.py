"""Where the plugin's resources (icons, QML styles, templates, help) live.

In the release zip they sit in ``channel_habitat/resources``; in the source tree they sit at the
repository root next to ``plugin/``. Both layouts are searched.
"""

from __future__ import annotations

from pathlib import Path

_HERE = Path(__file__).resolve().parent
_CANDIDATES = (Path(__file__).parent / "resources", _HERE / "resources", _HERE.parent / "resources")


def resource_dir() -> Path:
    for c in _CANDIDATES:
        if c.is_dir():
            return c
    raise FileNotFoundError("Channel Habitat resources folder not found next to the plugin")


def resource_path(*parts: str) -> Path:
    return resource_dir().joinpath(*parts)
