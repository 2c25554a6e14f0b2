"""Reading table inputs (any QGIS vector or table layer, a GeoPackage table, a CSV file opened as a
layer) into plain Python columns or rows for the core. Values are passed as QGIS gives them
(numbers or text; NULL becomes None); the core parses and validates them.
"""

from __future__ import annotations

from ..core.errors import ChannelHabitatError


def _value(v):
    if v is None:
        return None
    if hasattr(v, "isNull") and v.isNull():  # QVariant NULL
        return None
    return v


def field_names(source) -> list[str]:
    return [f.name() for f in source.fields()]


def require_field(source, name: str, parameter: str, what: str = "field") -> str:
    """The layer's field matching ``name`` (exact, else case-insensitive); a clear error if none."""
    names = field_names(source)
    if name in names:
        return name
    for n in names:
        if n.lower() == str(name).lower():
            return n
    raise ChannelHabitatError(f"the table has no {what} '{name}'; its fields are: {', '.join(names) or 'none'}",
                              parameter)


def table_columns(source, fields=None, parameter: str = "") -> dict:
    """{field name: [values]} for ``fields`` (default all), in feature order."""
    if source is None:
        raise ChannelHabitatError("the table could not be opened", parameter or None)
    names = field_names(source)
    want = list(fields) if fields is not None else names
    idx = [names.index(f) for f in want]
    cols = {f: [] for f in want}
    for feat in source.getFeatures():
        attrs = feat.attributes()
        for f, i in zip(want, idx):
            cols[f].append(_value(attrs[i]))
    return cols


def table_rows(source, parameter: str = "") -> list[dict]:
    """[{field name: value}] per feature (e.g. a scenario table layer for core.scenario)."""
    cols = table_columns(source, None, parameter)
    names = list(cols)
    n = len(cols[names[0]]) if names else 0
    return [{k: cols[k][i] for k in names} for i in range(n)]
