"""Demo: map panels for the weir and natural regimes at the lowest discharge of the ladder.

Panels come last: they draw what the other steps make. For each regime the velocity classes come
from maphabitat (run here on the demo rasters, so the step stands on its own); the reach axis, km
posts and zones from the buildreach step (or buildreach run here: the demo centreline is digitised
downstream to upstream on purpose, and buildreach orients it). Each regime gets one page per reach
zone (A4) and an atlas of 3 km pages along the river (A4, maps rotated to follow the channel, with
the water beside the bank vegetation from vegetationoverlay's EDGES drawn over the stands); PDF and
PNG pages.
"""

from __future__ import annotations

from pathlib import Path

TITLE = "Map panels: weir and natural regimes at 3000 ML/d (mappanels)"

REGIMES = ("weir", "natural")
DISCHARGE_MLD = 3000
DATE = "2026-12-01"


def _reach(demo):
    """Reach parameters for mappanels: buildreach's AXIS, POSTS and ZONES from the buildreach demo
    step (demo_output/buildreach), else buildreach run here (the demo centreline is digitised
    downstream to upstream: DIRECTION = reversed)."""
    folder = Path(demo.out) / "buildreach"
    names = ("axis", "posts", "zones")
    found = {n: folder / f"{n}.gpkg" for n in names}
    if not all(p.exists() for p in found.values()):
        found = {n: Path(demo.path("mappanels", "reach", f"{n}.gpkg")) for n in names}
        demo.run("buildreach", {
            "CENTRELINE": str(demo.sample / "centreline.gpkg"), "DIRECTION": 1,
            "EXTENT": str(demo.sample / "channel.gpkg"), "ZONE_BREAKS": "0 upper, 12000 middle, 25000 lower",
            "AXIS": str(found["axis"]), "POSTS": str(found["posts"]), "SEGMENTS": "TEMPORARY_OUTPUT",
            "ZONES": str(found["zones"])})
    return {"CENTRELINE": str(found["axis"]), "POSTS": str(found["posts"]), "ZONES": str(found["zones"])}


def _folder(demo, *parts) -> str:
    folder = Path(demo.out).joinpath(*parts)
    folder.mkdir(parents=True, exist_ok=True)
    return str(folder)


def run(demo):
    rasters = demo.sample / "rasters"
    if not rasters.exists() or not (demo.sample / "centreline.gpkg").exists():
        demo.log("  skipped: the demo rasters or centreline are not there (run `make sample`)")
        return []
    reach = _reach(demo)
    items = []
    for regime in REGIMES:
        stem = f"{regime}_q{DISCHARGE_MLD:05d}"
        classes = demo.path("mappanels", regime, f"{stem}_classes.tif")
        depth = str(rasters / regime / f"q{DISCHARGE_MLD:05d}_depth.tif")
        speed = str(rasters / regime / f"q{DISCHARGE_MLD:05d}_speed.tif")
        demo.run("maphabitat", {
            "DEPTH": depth, "SPEED": speed, "CENTRELINE": reach["CENTRELINE"], "ZONES": reach["ZONES"],
            "CLASSES": classes, "PATCHES": "TEMPORARY_OUTPUT",
            "SEGMENT_STATS": "TEMPORARY_OUTPUT", "ZONE_STATS": "TEMPORARY_OUTPUT", "REPORT": None})
        # the water beside the bank vegetation, drawn over the classes
        edges = demo.run("vegetationoverlay", {
            "VEGETATION": str(demo.sample / "vegetation.gpkg"), "DEPTH": depth, "SPEED": speed, "REGIME": regime,
            "DISCHARGE": DISCHARGE_MLD, "VEGETATION_STATS": "TEMPORARY_OUTPUT", "COMMUNITY_SUMMARY": "TEMPORARY_OUTPUT",
            "EDGES": demo.path("mappanels", regime, f"{stem}_vegetation_edges.gpkg"), "REPORT": None})["EDGES"]
        common = {
            "HABITAT": classes, **reach, "BANKS": str(demo.sample / "channel.gpkg"),
            "VEGETATION": str(demo.sample / "vegetation.gpkg"), "REGIME": regime, "DISCHARGE": DISCHARGE_MLD,
            "DISCHARGE_UNIT": 0, "DATE": DATE, "PAPER": 0, "DPI": 150, "ADD_TO_PROJECT": False}
        zones = demo.run("mappanels", {
            **common, "PAGES_MODE": 0, "PDF": demo.path("mappanels", regime, f"{stem}_zones.pdf"),
            "PNG_FOLDER": _folder(demo, "mappanels", regime, "zones"),
            "PAGES": demo.path("mappanels", regime, f"{stem}_zone_pages.gpkg")})
        atlas = demo.run("mappanels", {
            **common, "PAGES_MODE": 1, "PAGE_LENGTH": 3000.0, "EXTRA_LAYERS": [edges],
            "PDF": demo.path("mappanels", regime, f"{stem}_atlas.pdf"),
            "PNG_FOLDER": _folder(demo, "mappanels", regime, "atlas"),
            "PAGES": demo.path("mappanels", regime, f"{stem}_atlas_pages.gpkg")})
        demo.log(f"  {regime}: {zones['PAGE_COUNT']} zone pages, {atlas['PAGE_COUNT']} atlas pages")
        items += [(f"{regime}: zone pages (PDF)", zones["PDF"]),
                  (f"{regime}: atlas along the river (PDF)", atlas["PDF"])]
        items += [(f"{regime}: zone page {i + 1} (PNG)", p) for i, p in enumerate(zones["PNG_FILES"].split(";"))]
        pngs = atlas["PNG_FILES"].split(";")
        items += [(f"{regime}: atlas page {i + 1} (PNG)", p) for i, p in enumerate(pngs)]
    return items
