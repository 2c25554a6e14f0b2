"""mappanels: habitat results -> print layouts (zone pages or an atlas along the river) -> PDF/PNG."""

from __future__ import annotations

import datetime as _dt
import os
import re

from qgis.core import (
    QgsCoordinateReferenceSystem,
    QgsProcessing,
    QgsProcessingAlgorithm,
    QgsProcessingOutputNumber,
    QgsProcessingOutputString,
    QgsProcessingParameterBoolean,
    QgsProcessingParameterDefinition,
    QgsProcessingParameterEnum,
    QgsProcessingParameterFeatureSink,
    QgsProcessingParameterFeatureSource,
    QgsProcessingParameterFile,
    QgsProcessingParameterFileDestination,
    QgsProcessingParameterFolderDestination,
    QgsProcessingParameterMapLayer,
    QgsProcessingParameterMultipleLayers,
    QgsProcessingParameterNumber,
    QgsProcessingParameterString,
    QgsProcessingUtils,
    QgsProject,
    QgsRectangle,
    QgsWkbTypes,
)
from shapely import Polygon

from ..core import panels
from ..core.errors import Cancelled, ChannelHabitatError
from ..gis import layouts, outputs, runinput
from ..gis.reachinput import CENTRELINE, add_reach_parameters, read_reach_parameters
from ..gis.report import plugin_version
from ..gis.schemeinput import add_scheme_parameters, read_scheme_parameters
from .base import CAUTION, ChannelHabitatAlgorithm

MODES = ("zones", "atlas")
PAPERS = ("A4", "A3")


class MapPanels(ChannelHabitatAlgorithm):
    ALG_ID = "mappanels"
    DISPLAY_NAME = "Map panels (print layouts, PDF and PNG)"
    GROUP_ID = "maps"
    HELP = """
<p>Builds publication-ready map panels from habitat results in one step: a QGIS print layout with a page per
reach zone, or an atlas of pages along the river with the map rotated to follow the channel; exported to one
PDF (all pages) and a PNG per page. Each page has the class legend (from the class table), a scale bar, a north
arrow, labelled km posts, a locator map, a caption (regime, discharge in ML/d and m3/s, date), a data note and
the caution. The layout is kept in the current project for editing (Project &gt; Layouts).</p>
<h3>Parameters</h3>
<ul>
<li><b>HABITAT</b>: the layer the panels show: maphabitat CLASSES (a class raster with a colour table) or PATCHES
(polygons with a <i>class</i> field), or compareregimes SPEED_CHANGE (a raster without colour table is drawn
with diverging colours symmetric about 0) or TRANSITIONS (kept in its own style unless it has a <i>class</i>
field).</li>
<li><b>SCHEME</b>, <b>CLASS_TABLE</b>, <b>CLASS_FILE</b>: the class scheme: its colours colour class polygons
(a class raster keeps its colour table) and its rules label the legend.</li>
<li><b>CENTRELINE</b>: buildreach AXIS (or any centreline, digitised in any direction is not enough: the axis
runs upstream to downstream); <b>ZONE_BREAKS</b>: the reach zones ('0 upper, 12000 middle, 25000 lower';
empty = thirds); <b>SEGMENT_LENGTH</b> is not used here.</li>
<li><b>POSTS</b> (optional): buildreach POSTS (points with a <i>label</i> field such as 'km 12'). Without it,
posts are placed every <b>POST_SPACING</b> metres of chainage (default 1000).</li>
<li><b>BANKS</b> (optional): the channel outline (polygons) or bank lines. <b>VEGETATION</b> (optional):
vegetation polygons, drawn hatched so the classes stay visible. <b>EXTRA_LAYERS</b> (optional): any other
layers, drawn on top in their own styles (layers with a <i>class</i> field take the class colours, e.g.
vegetationoverlay EDGES).</li>
<li><b>PAGES_MODE</b>: one page per reach zone, or an atlas of pages along the river. <b>PAGE_LENGTH</b>
(atlas, m of chainage, default 2000): the reach is cut into equal windows no longer than this.
<b>SCALE</b>: map scale denominator; 0 = automatic (zone pages each get the nice scale that fits them; atlas
pages share the largest). <b>ROTATE</b>: turn each map so the channel runs across the page (north stays
within 90&deg; of up; the subtitle says which way the water flows).</li>
<li><b>PAPER</b>: A4 or A3 landscape. <b>TEMPLATE</b> (optional): your own .qpt (edit a shipped one in the
layout designer and save it as a template); it needs a map item with the id <i>main_map</i>; the other items
are used when present (ids: locator_map, legend, title, subtitle, page_number, caption, data_note, caution,
scalebar, scale_text, north_arrow).</li>
<li><b>TITLE</b> (empty: from the scheme, regime and discharge), <b>REGIME</b>, <b>DISCHARGE</b> with
<b>DISCHARGE_UNIT</b> (the caption gives both ML/d and m3/s, 1 ML/d = 1000/86400 m3/s), <b>DATE</b> (empty:
today), <b>DATA_NOTE</b> (empty: composed from the inputs).</li>
<li><b>DPI</b>: resolution of the PNG pages (and of rasters in the PDF), default 150.</li>
<li><b>ADD_TO_PROJECT</b>: keep the layout (and panel copies of its layers, in a hidden-by-default group) in
the current project for editing.</li>
</ul>
<h3>Outputs</h3>
<ul>
<li><b>PDF</b>: all pages in one file (text as text, so it can be searched).</li>
<li><b>PNG_FOLDER</b> (optional): one PNG per page, <i>&lt;regime&gt;_q&lt;ML/d&gt;_pageNN.png</i>.</li>
<li><b>PAGES</b>: the page rectangles (the atlas coverage): page, label, zone, chainage_from_m,
chainage_to_m, km_text, rotation_deg (map rotation, degrees clockwise), scale (denominator), flow.</li>
<li><b>LAYOUT_NAME</b>, <b>PAGE_COUNT</b>, <b>PNG_FILES</b> (the PNG paths, separated by ';').</li>
</ul>
<h3>Method</h3>
<p>Each page window is framed along the channel: the principal direction of the reach axis over the window
gives the map rotation; the axis points, rotated, are boxed with a margin (6 % of the window, at least
50 m) and widened to the map frame's shape; the scale that fits is rounded up to 1, 1.25, 1.5, 2, 2.5, 3, 4, 5,
6 or 7.5 &times; 10<sup>k</sup>. The pages drive a QGIS atlas, so the layout can be edited and exported again
in QGIS. Class colours are the project's own colour-blind-safe scheme (resources/COLOURS.md); vegetation,
banks, axis and km posts use neutral colours that do not compete with the classes.</p>
"""

    def flags(self):
        # layouts and projects belong to the main thread
        return super().flags() | QgsProcessingAlgorithm.FlagNoThreading

    def define(self, config):
        self.addParameter(QgsProcessingParameterMapLayer(
            "HABITAT", "Habitat layer (maphabitat CLASSES or PATCHES, compareregimes SPEED_CHANGE or TRANSITIONS)"))
        add_scheme_parameters(self, advanced_table=True)
        add_reach_parameters(self)
        self.addParameter(QgsProcessingParameterFeatureSource(
            "POSTS", "km posts (buildreach POSTS, field 'label') [empty: every POST_SPACING m]",
            [QgsProcessing.SourceType.TypeVectorPoint], optional=True))
        self.addParameter(QgsProcessingParameterNumber(
            "POST_SPACING", "Spacing of generated km posts (m)", QgsProcessingParameterNumber.Type.Double, 1000.0,
            minValue=1.0))
        self.addParameter(QgsProcessingParameterFeatureSource(
            "BANKS", "Channel outline or bank lines", [QgsProcessing.SourceType.TypeVectorPolygon,
                                                        QgsProcessing.SourceType.TypeVectorLine], optional=True))
        self.addParameter(QgsProcessingParameterFeatureSource(
            "VEGETATION", "Vegetation polygons", [QgsProcessing.SourceType.TypeVectorPolygon], optional=True))
        self.addParameter(QgsProcessingParameterMultipleLayers(
            "EXTRA_LAYERS", "Other layers to draw on top", QgsProcessing.SourceType.TypeMapLayer, optional=True))
        self.addParameter(QgsProcessingParameterEnum(
            "PAGES_MODE", "Pages", ["One page per reach zone", "Atlas of pages along the river"], defaultValue=0))
        self.addParameter(QgsProcessingParameterNumber(
            "PAGE_LENGTH", "Atlas page length (m of chainage)", QgsProcessingParameterNumber.Type.Double, 2000.0,
            minValue=1.0))
        self.addParameter(QgsProcessingParameterNumber(
            "SCALE", "Map scale 1:N (0 = automatic)", QgsProcessingParameterNumber.Type.Double, 0.0, minValue=0.0))
        self.addParameter(QgsProcessingParameterBoolean("ROTATE", "Rotate maps to follow the channel", True))
        self.addParameter(QgsProcessingParameterEnum("PAPER", "Paper", ["A4 landscape", "A3 landscape"],
                                                     defaultValue=0))
        self.addParameter(QgsProcessingParameterString("TITLE", "Title [empty: from scheme, regime, discharge]",
                                                       optional=True))
        runinput.add_run_label_parameters(self, "Regime (caption)", "Discharge (caption) [empty: not stated]")
        self.addParameter(QgsProcessingParameterString("DATE", "Date (caption) [empty: today]", optional=True))
        self.addParameter(QgsProcessingParameterString(
            "DATA_NOTE", "Data note [empty: composed from the inputs]", optional=True, multiLine=True))
        adv = [
            QgsProcessingParameterFile("TEMPLATE", "Layout template (.qpt) [empty: the shipped one for the paper]",
                                       QgsProcessingParameterFile.File, "qpt", optional=True,
                                       fileFilter="Layout templates (*.qpt)"),
        ]
        for p in adv:
            p.setFlags(p.flags() | QgsProcessingParameterDefinition.FlagAdvanced)
            self.addParameter(p)
        self.addParameter(QgsProcessingParameterNumber("DPI", "Resolution (dpi)",
                                                       QgsProcessingParameterNumber.Type.Integer, 150,
                                                       minValue=72, maxValue=600))
        self.addParameter(QgsProcessingParameterBoolean(
            "ADD_TO_PROJECT", "Keep the layout in the current project for editing", True))
        self.addParameter(QgsProcessingParameterFileDestination("PDF", "PDF (all pages)", "PDF files (*.pdf)"))
        self.addParameter(QgsProcessingParameterFolderDestination("PNG_FOLDER", "PNG pages folder", optional=True,
                                                                  createByDefault=True))
        self.addParameter(QgsProcessingParameterFeatureSink(
            "PAGES", "Pages (atlas coverage)", QgsProcessing.SourceType.TypeVectorPolygon))
        self.addOutput(QgsProcessingOutputString("LAYOUT_NAME", "Layout name"))
        self.addOutput(QgsProcessingOutputNumber("PAGE_COUNT", "Number of pages"))
        self.addOutput(QgsProcessingOutputString("PNG_FILES", "PNG files"))

    # ------------------------------------------------------------------------------------------
    def compute(self, parameters, context, feedback):
        reach = read_reach_parameters(self, parameters, context, feedback)
        axis_crs = self.parameterAsSource(parameters, CENTRELINE, context).sourceCrs()
        if axis_crs.isValid() and axis_crs.isGeographic():
            raise ChannelHabitatError("the reach axis is in a geographic CRS (degrees); map panels need metres: "
                                      "reproject the axis to a projected CRS", CENTRELINE)
        scheme = read_scheme_parameters(self, parameters, context, feedback)
        habitat = self.parameterAsLayer(parameters, "HABITAT", context)
        if habitat is None or not habitat.isValid():
            raise ChannelHabitatError("give the habitat layer to map (e.g. maphabitat CLASSES)", "HABITAT")
        mode = MODES[self.parameterAsEnum(parameters, "PAGES_MODE", context)]
        paper = PAPERS[self.parameterAsEnum(parameters, "PAPER", context)]
        template = self.parameterAsFile(parameters, "TEMPLATE", context) or layouts.default_template(paper)
        frame_mm = layouts.template_frame_mm(template)
        windows, frames = panels.plan_pages(
            reach, mode, frame_mm, self.parameterAsDouble(parameters, "PAGE_LENGTH", context),
            self.parameterAsDouble(parameters, "SCALE", context),
            rotate=self.parameterAsBoolean(parameters, "ROTATE", context))
        page_cols, rings = panels.page_table(windows, frames)
        feedback.pushInfo(f"{len(windows)} page(s) on {paper} landscape; scales 1:"
                          + ", 1:".join(f"{s:g}" for s in page_cols["scale"]))

        # caption and texts
        regime, q, unit = runinput.read_run_label(self, parameters, context)
        q_text = panels.discharge_text(q, unit, "DISCHARGE") if q else "not stated"
        date = self.parameterAsString(parameters, "DATE", context).strip() or _dt.date.today().isoformat()
        title = self.parameterAsString(parameters, "TITLE", context).strip() or _title(
            layouts.habitat_kind(habitat), scheme, habitat, regime, q, unit)
        caption = f"Regime: {regime or 'not stated'}  ·  Discharge: {q_text}  ·  Date: {date}"
        dpi = self.parameterAsInt(parameters, "DPI", context)

        # layers (panel copies: inputs are never restyled)
        crs = axis_crs if axis_crs.isValid() else QgsCoordinateReferenceSystem(reach.axis.crs_wkt)
        hab = layouts.panel_copy(habitat)
        in_project = context.project() is not None and context.project().mapLayer(habitat.id()) is not None
        kind, legend_title = layouts.style_habitat(hab, scheme, feedback, from_project=in_project)
        posts_src = self.parameterAsVectorLayer(parameters, "POSTS", context)
        if posts_src is not None:
            if posts_src.fields().indexOf("label") < 0:
                raise ChannelHabitatError("the km-post layer has no 'label' field (buildreach POSTS has one)", "POSTS")
            posts = layouts.panel_copy(posts_src)
        else:
            posts = layouts.posts_layer(crs, *panels.km_posts(
                reach.axis, self.parameterAsDouble(parameters, "POST_SPACING", context)))
        layouts.apply_qml(posts, "panel_km_posts.qml")
        axis_src = self.parameterAsVectorLayer(parameters, CENTRELINE, context)
        axis = layouts.panel_copy(axis_src)
        layouts.apply_qml(axis, "panel_axis.qml")
        locator_axis = layouts.panel_copy(axis_src)
        layouts.apply_qml(locator_axis, "panel_locator_axis.qml")
        banks = None
        banks_src = self.parameterAsVectorLayer(parameters, "BANKS", context)
        if banks_src is not None:
            banks = layouts.panel_copy(banks_src)
            poly = banks.geometryType() == QgsWkbTypes.PolygonGeometry
            layouts.apply_qml(banks, "panel_banks_polygon.qml" if poly else "panel_banks_line.qml")
        veg = veg_outline = None
        veg_src = self.parameterAsVectorLayer(parameters, "VEGETATION", context)
        if veg_src is not None:
            # hatched stands under the water classes (wetted parts show the class of the water over
            # them), a thin outline over them so every stand stays visible
            veg = layouts.panel_copy(veg_src)
            layouts.apply_qml(veg, "veg_stands.qml")
            veg_outline = layouts.panel_copy(veg_src)
            layouts.apply_qml(veg_outline, "veg_outline.qml")
        extras = []
        for lyr in self.parameterAsLayerList(parameters, "EXTRA_LAYERS", context):
            c = layouts.panel_copy(lyr)
            name = layouts.style_extra(c, scheme, context.project() is not None
                                       and context.project().mapLayer(lyr.id()) is not None)
            extras.append((c, name))

        data_note = self.parameterAsString(parameters, "DATA_NOTE", context).strip() or _data_note(
            habitat, scheme, kind, reach, crs, posts_src is not None,
            self.parameterAsDouble(parameters, "POST_SPACING", context))

        # --- write: the pages, then the layout and its exports ------------------------------------
        geoms = [Polygon(r) for r in rings]
        pages_dest = outputs.write_features(self, parameters, context, "PAGES", page_cols, geoms, crs,
                                            QgsWkbTypes.Polygon)
        if os.path.exists(str(pages_dest).split("|")[0]):
            self.will_write(str(pages_dest).split("|")[0])
        coverage = QgsProcessingUtils.mapLayerFromString(pages_dest, context)
        if coverage is None:
            raise ChannelHabitatError("the PAGES output could not be opened again for the atlas", "PAGES")
        locator_pages = layouts.panel_copy(coverage)
        layouts.apply_qml(locator_pages, "panel_pages.qml")

        habitat_item = layouts.PanelLayer(hab, legend_title)
        stack = [layouts.PanelLayer(posts, "Chainage post (km)")]
        stack += [layouts.PanelLayer(e, name) for e, name in extras]
        if veg_outline is not None:
            stack.append(layouts.PanelLayer(veg_outline))
        stack.append(layouts.PanelLayer(axis, "Reach axis (centreline)"))
        if banks is not None:
            stack.append(layouts.PanelLayer(banks, "Bank top (channel outline)"))
        stack.append(habitat_item)
        if veg is not None:
            stack.append(layouts.PanelLayer(veg, "Bank vegetation"))
        legend_order = [habitat_item] + [pl for pl in stack if pl is not habitat_item]
        extent = QgsRectangle(*_bounds(reach))
        stem = _file_stem(regime, q, unit)
        add = self.parameterAsBoolean(parameters, "ADD_TO_PROJECT", context) and context.project() is not None
        project = context.project() if add else QgsProject()
        name = _unique_name(project, f"Channel Habitat — {title}")
        spec = layouts.PanelSpec(
            title=title, caption=caption, data_note=data_note, caution=CAUTION, layers=stack,
            coverage=coverage, locator_layers=[locator_pages, locator_axis], locator_extent=extent,
            name=name, file_stem=stem, scalebar_km=min(page_cols["scale"]) >= 25000,
            legend_order=legend_order)
        layout = layouts.build_layout(project, template, spec, feedback)

        pdf = self.parameterAsFileOutput(parameters, "PDF", context)
        png_dir = self.parameterAsString(parameters, "PNG_FOLDER", context)
        if png_dir:
            png_dir = self.parameterAsFileOutput(parameters, "PNG_FOLDER", context)
        self.will_write(pdf)
        pdf_out, pngs = layouts.export_layout(layout, pdf, png_dir or None, dpi, feedback)
        if feedback.isCanceled():
            raise Cancelled("cancelled by the user")
        feedback.pushInfo(f"PDF: {pdf_out}")
        if pngs:
            feedback.pushInfo(f"{len(pngs)} PNG page(s) in {png_dir}")
        if add:
            layouts.keep_in_project(project, layout, spec, context, pages_dest)
            feedback.pushInfo(f"The layout '{name}' is in the project (Project > Layouts) for editing.")
        return {"PDF": pdf_out, "PNG_FOLDER": png_dir or None, "PAGES": pages_dest, "LAYOUT_NAME": name,
                "PAGE_COUNT": len(windows), "PNG_FILES": ";".join(pngs)}


# --------------------------------------------------------------------------------------------
def _title(kind, scheme, layer, regime, q, unit) -> str:
    if kind in ("class_raster", "class_vector"):
        what = {"velocity": "Velocity classes", "froude": "Mesohabitats (Jowett 1993)"}.get(scheme.name,
                                                                                           "Habitat classes")
    else:
        what = layouts.pretty_name(layer.name())
    bits = [b for b in (regime, panels.discharge_text(q, unit).split(" (")[0] if q else "") if b]
    return f"{what} — {', '.join(bits)}" if bits else what


def _file_stem(regime: str, q, unit: str) -> str:
    base = re.sub(r"[^0-9A-Za-z_-]+", "_", regime).strip("_") or "panel"
    if q:
        from ..core.units import to_mld

        base += f"_q{int(round(float(to_mld(q, unit)))):05d}"
    return base


def _bounds(reach):
    a = reach.axis
    return float(a.x.min()), float(a.y.min()), float(a.x.max()), float(a.y.max())


def _unique_name(project, name: str) -> str:
    manager = project.layoutManager()
    if manager.layoutByName(name) is None:
        return name
    i = 2
    while manager.layoutByName(f"{name} ({i})") is not None:
        i += 1
    return f"{name} ({i})"


def _data_note(habitat, scheme, kind, reach, crs, posts_given: bool, spacing: float) -> str:
    src = os.path.basename(habitat.source().split("|")[0])
    what = {"class_raster": "class raster", "class_vector": "class polygons", "change_raster": "change raster"}.get(
        kind, "layer")
    classes = ""
    if kind in ("class_raster", "class_vector"):
        classes = f"Classes: {scheme.name} scheme ({scheme.source.rstrip('.')})."
    posts = "km posts from the POSTS layer" if posts_given else f"posts every {spacing:g} m"
    crs_text = crs.authid() or crs.description() or "CRS not stated"
    return (f"Data: {habitat.name()} ({what}, {src}). {classes} Chainage along the reach axis from its upstream "
            f"end ({reach.axis.length_m / 1000:.1f} km; {posts}). {crs_text}. "
            f"Channel Habitat {plugin_version()}.").replace("  ", " ")
