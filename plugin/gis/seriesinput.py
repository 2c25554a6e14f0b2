"""Inputs of habitatseries: the flow series file (tables are read with gis/tableinput.py)."""

from __future__ import annotations

import os

from ..core.errors import ChannelHabitatError


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
