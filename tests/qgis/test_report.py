"""gis/report.py and gis/charts.py: the shared HTML report builder and chart helpers."""

import csv
import html
import io
import os
import re
import urllib.parse
from pathlib import Path

import numpy as np
import pytest

from plugin.algorithms.base import CAUTION
from plugin.core.classes import froude_preset, velocity_preset
from plugin.gis import charts
from plugin.gis.report import Report, format_value, unit_of, write_text_atomic


@pytest.mark.parametrize("name,unit", [
    ("area_fast_m2", "m²"), ("wet_area_m2", "m²"), ("v_p50_ms", "m/s"), ("v_min_ms", "m/s"), ("d_p90_m", "m"),
    ("q_mld", "ML/d"), ("q_m3s", "m³/s"), ("pct_very_slow", "%"), ("residence_s", "s"), ("shannon", ""),
    ("chainage_from_m", "m"), ("segment", ""), ("fr_mean", ""), ("length_km", "km"),
])
def test_unit_from_field_name(name, unit):
    assert unit_of(name) == unit


def test_format_value():
    assert format_value(float("nan")) == "–"
    assert format_value(None) == "–"
    assert format_value(1234567.8) == "1\u2009234\u2009568"
    assert format_value(0.04567) == "0.046"
    assert format_value(12.345) == "12.35"
    assert format_value(3, None) == "3"
    assert format_value(True) == "yes"
    assert format_value(0.5, digits=1) == "0.5"


def _csv_of(page, index=0):
    hrefs = re.findall(r'href="data:text/csv;charset=utf-8,([^"]*)"', page)
    text = urllib.parse.unquote(html.unescape(hrefs[index]))
    return list(csv.reader(io.StringIO(text)))


def test_report_tables_figures_caution_and_atomic_write(tmp_path):
    rep = Report("Habitat <map>", algorithm="maphabitat", subtitle="weir & pool")
    rep.summary([("Wet area", 1234.5, "m2"), ("Scheme", "velocity")])
    cols = {"zone": ["upper", "lower"], "wet_area_m2": np.array([10.0, np.nan]),
            "pct_fast": np.array([12.5, 0.0]), "colour": ["#1F4E8C", "#8E4A1C"]}
    rep.section("Zones", "Per zone.")
    rep.table(cols, caption="Zone statistics", max_rows=1)
    s = velocity_preset()
    fig = charts.class_share_bars(["upper", "lower"], np.array([[0.1, 0.2, 0.3, 0.4], [1, 0, 0, 0]]), s)
    rep.figure(fig, caption="Shares")
    fig2 = charts.class_share_bars(["upper"], np.array([[0.5, 0.5, 0, 0]]), s)
    rep.figure(fig2, caption="As PNG", fmt="png")
    rep.note("SPEED was resampled.")
    rep.note("SPEED was resampled.")  # duplicates are listed once
    out = rep.write(tmp_path / "sub" / "r.html")
    page = Path(out).read_text(encoding="utf-8")
    assert page.startswith("<!DOCTYPE html>")
    assert "Habitat &lt;map&gt;" in page and "weir &amp; pool" in page
    assert html.escape(CAUTION) in page
    assert page.count("SPEED was resampled.") == 1
    assert "<svg" in page and "data:image/png;base64," in page
    assert page.count("<figure") == 2
    # units under headers, NaN as a dash, swatch for colours, only one row shown
    assert '<span class="unit">m²</span>' in page and '<span class="unit">%</span>' in page
    assert "first 1 of 2 rows" in page
    assert 'class="swatch" style="background:#1F4E8C"' in page
    # the CSV link holds every row at full precision, NaN empty
    rows = _csv_of(page)
    assert rows[0] == ["zone", "wet_area_m2", "pct_fast", "colour"]
    assert rows[2] == ["lower", "", "0.0", "#8E4A1C"]
    assert float(rows[1][2]) == 12.5
    assert not [f for f in os.listdir(tmp_path / "sub") if f.startswith(".partial")]


def test_table_rejects_ragged_columns():
    with pytest.raises(ValueError):
        Report("x", caution="c").table({"a": [1, 2], "b": [1]})


def test_atomic_write_leaves_old_file_on_failure(tmp_path, monkeypatch):
    p = tmp_path / "r.html"
    p.write_text("old")

    def boom(*a, **k):
        raise OSError("disk full")

    monkeypatch.setattr(os, "replace", boom)
    with pytest.raises(OSError):
        write_text_atomic(p, "new")
    assert p.read_text() == "old"
    assert [f.name for f in tmp_path.iterdir()] == ["r.html"]


def test_speed_profile_marks_thresholds_and_handles_gaps():
    s = velocity_preset()
    edges = np.arange(0, 5001, 500.0)
    prof = {"chainage_from_m": edges[:-1], "chainage_to_m": edges[1:]}
    for k, f in (("v_p10_ms", 0.5), ("v_p25_ms", 0.8), ("v_p50_ms", 1.0), ("v_p75_ms", 1.2), ("v_p90_ms", 1.5)):
        prof[k] = np.linspace(0.4, 0.05, 10) * f
        prof[k][3] = np.nan
    svg = charts.to_svg(charts.speed_profile(prof, s, [0, 2000, 5000], ["upper", "lower"]))
    for label in ("fast ≥ 0.3 m/s", "moderate ≥ 0.2 m/s", "slow ≥ 0.05 m/s", "upper", "lower", "median"):
        assert label in svg
    # Froude scheme has no speed thresholds: nothing marked, chart still drawn
    svg2 = charts.to_svg(charts.speed_profile(prof, froude_preset()))
    assert "m/s" in svg2 and "≥" not in svg2


def test_text_colour_contrast():
    assert charts.text_colour_for("#1F4E8C") == "#ffffff"
    assert charts.text_colour_for("#E3B35F") == "#000000"
