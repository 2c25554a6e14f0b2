"""Checks the development venv right after `pip install`: the compiled bindings must be the
Debian ones, shapely must be 2.x. Exits non-zero with a message that says what to do."""

import sys


def main() -> int:
    problems = []
    import numpy

    if not numpy.__file__.startswith("/usr/lib/python3/dist-packages"):
        problems.append(
            f"numpy comes from {numpy.__file__}, not Debian's python3-numpy; GDAL and scipy "
            "bindings need the system numpy. Remove .venv and run `make setup` again."
        )
    try:
        from osgeo import gdal  # noqa: F401
        from qgis.core import Qgis  # noqa: F401
    except ImportError as exc:  # pragma: no cover - message path
        problems.append(f"QGIS/GDAL Python bindings missing ({exc}); run tools/install_sysdeps.sh")
    import shapely

    if int(shapely.__version__.split(".")[0]) < 2:
        problems.append(f"shapely {shapely.__version__} found; Channel Habitat needs shapely>=2")
    for p in problems:
        print("environment check:", p, file=sys.stderr)
    return 1 if problems else 0


if __name__ == "__main__":
    sys.exit(main())
