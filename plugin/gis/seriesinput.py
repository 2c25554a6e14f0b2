"""Inputs of habitatseries: table layers (CURVES, WUA) as column dicts, and the flow series file."""

from __future__ import annotations

import os

from ..core.errors import ChannelHabitatError


def table_columns(source, parameter: str) -> dict:
    """A feature source (a table layer, a GeoPackage table or a CSV) -> {field name: [values]}.

    Values are passed as QGIS gives them (numbers, text or None); the core parses them."""
    if source is None:
        raise ChannelHabitatError("the table could not be opened", parameter)
    names = [f.name() for f in source.fields()]
    cols = {n: [] for n in names}
    for feat in source.getFeatures():
        for n, v in zip(names, feat.attributes()):
            cols[n].append(None if v is None or (hasattr(v, "isNull") and v.isNull()) else v)
    return cols


def read_text_file(path: str, parameter: str) -> str:
    """The text of a CSV file (UTF-8, with or without a byte-order mark)."""
    if not path:
        raise ChannelHabitatError("give the daily flow series file (CSV: date, discharge, unit)", parameter)
    if not os.path.isfile(path):
        raise ChannelHabitatError(f"the file {path} does not exist", parameter)
    try:
        with open(path, encoding="utf-8-sig") as fh:
            return fh.read()
    except UnicodeDecodeError:
        raise ChannelHabitatError(f"{path} is not UTF-8 text; save it as UTF-8 CSV", parameter) from None
