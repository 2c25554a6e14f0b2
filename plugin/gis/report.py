"""HTML reports: one self-contained page per algorithm run (no external files, no scripts).

Every algorithm that writes a REPORT builds it with :class:`Report`::

    rep = Report("Habitat map", algorithm="maphabitat", subtitle="weir, 3000 ML/d")
    rep.summary([("Wet area", 1.23e6, "m2"), ("Scheme", "velocity"), ...])
    rep.section("Segments", "Area-weighted statistics per 1 km segment.")
    rep.table(columns, caption="Per segment", units={"segment": ""})   # ordered column dict
    rep.figure(fig, caption="Speed percentiles along the reach")        # matplotlib Figure
    rep.note("SPEED was resampled onto the grid of DEPTH.")
    rep.write(path)                                                     # atomic

* Tables take ordered column dicts (name -> list/array), the form ``core.stats.summarise`` returns.
  Units come from the field-name suffix (``area_m2`` -> m², ``v_p50_ms`` -> m/s, ``q_mld`` -> ML/d,
  ``pct_fast`` -> %; see :func:`unit_of`) unless given. Numbers are formatted for reading (NaN -> –);
  every table carries a CSV download link with full precision.
* Figures are embedded inline: SVG (default, crisp, searchable text) or PNG (dense scatter plots).
* The caution (``algorithms/base.py: CAUTION``) is always shown; notes collected during the run are
  listed at the end; the page says which algorithm, version and time made it.
* ``write`` goes through a temporary file beside the target and an atomic rename, so a failed run
  never leaves a page that looks complete.
"""

from __future__ import annotations

import base64
import datetime as _dt
import html
import math
import os
import re
import tempfile
import urllib.parse
from pathlib import Path

import numpy as np

__all__ = ["Report", "unit_of", "format_value", "write_text_atomic", "plugin_version"]

# ----------------------------------------------------------------------------------------------
# Units and number formatting
# ----------------------------------------------------------------------------------------------

# (suffix, unit) checked longest first; field names carry units (DEVELOPERS.md).
_SUFFIX_UNITS = (
    ("_km2", "km²"), ("_m2", "m²"), ("_ha", "ha"), ("_m3s", "m³/s"), ("_mld", "ML/d"), ("_ml", "ML"),
    ("_gl", "GL"), ("_m3", "m³"), ("_ms", "m/s"), ("_km", "km"), ("_mm", "mm"), ("_m", "m"),
    ("_per_s", "1/s"), ("_days", "days"), ("_day", "days"), ("_d", "days"), ("_hours", "h"), ("_h", "h"),
    ("_min", "min"), ("_s", "s"), ("_pct", "%"), ("_percent", "%"), ("_deg", "°"),
)


def unit_of(name: str) -> str:
    """Display unit from a field name's suffix ('' when the name carries none).

    ``area_fast_m2`` -> 'm²', ``v_p50_ms`` -> 'm/s', ``pct_slow`` / ``percent`` -> '%',
    ``q_mld`` -> 'ML/d', ``residence_s`` -> 's'. Names like ``v_min_ms`` resolve on the last suffix.
    """
    n = name.lower()
    if n.startswith("pct_") or n in ("pct", "percent", "share_pct"):
        return "%"
    for suffix, unit in _SUFFIX_UNITS:
        if n.endswith(suffix) and len(n) > len(suffix):
            return unit
    return ""


def format_value(value, digits: int | None = None) -> str:
    """A number for reading: NaN/None -> '–'; ints with thin-space thousands; floats with a
    precision that suits their size (``digits`` forces decimals)."""
    if value is None:
        return "–"
    if isinstance(value, (bool, np.bool_)):
        return "yes" if value else "no"
    if isinstance(value, (int, np.integer)):
        return f"{int(value):,}".replace(",", "\u2009")
    if isinstance(value, (float, np.floating)):
        v = float(value)
        if not math.isfinite(v):
            return "–"
        if digits is not None:
            s = f"{v:,.{digits}f}"
        else:
            a = abs(v)
            if a == 0:
                s = "0"
            elif a >= 1000:
                s = f"{v:,.0f}"
            elif a >= 100:
                s = f"{v:,.1f}"
            elif a >= 1:
                s = f"{v:.2f}"
            elif a >= 0.001:
                s = f"{v:.3f}"
            else:
                s = f"{v:.2e}"
        return s.replace(",", "\u2009")
    return str(value)


def _csv_cell(value) -> str:
    if value is None:
        return ""
    if isinstance(value, (float, np.floating)):
        v = float(value)
        return "" if not math.isfinite(v) else repr(v)
    if isinstance(value, (bool, np.bool_)):
        return "true" if value else "false"
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    s = str(value)
    if any(ch in s for ch in ',"\n'):
        s = '"' + s.replace('"', '""') + '"'
    return s


# Unit codes as used in field names -> display text (summary() accepts either).
_UNIT_CODES = {"m2": "m²", "km2": "km²", "ms": "m/s", "m3s": "m³/s", "mld": "ML/d", "m3": "m³", "pct": "%"}

_COLOUR_RE = re.compile(r"^#[0-9a-fA-F]{6}$")


def plugin_version() -> str:
    """The version in metadata.txt (plugin folder in the zip, repository root in the source tree)."""
    here = Path(__file__).resolve().parent
    for cand in (here.parent / "metadata.txt", here.parent.parent / "metadata.txt"):
        try:
            for line in cand.read_text(encoding="utf-8").splitlines():
                if line.startswith("version="):
                    return line.split("=", 1)[1].strip()
        except OSError:
            continue
    return "?"


def _umask() -> int:
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


def default_digits(name: str):
    """Decimals a column gets unless told: none for chainages and areas (m, m²)."""
    n = name.lower()
    if n.endswith("_m2") or n == "length_m" or (n.startswith("chainage") and n.endswith("_m")):
        return 0
    return None


def write_text_atomic(path, text: str, encoding: str = "utf-8") -> str:
    """Write ``text`` to ``path`` through a temporary file beside it and an atomic rename."""
    path = str(path)
    d = os.path.dirname(os.path.abspath(path)) or "."
    os.makedirs(d, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=".partial-", suffix=os.path.splitext(path)[1], dir=d)
    try:
        with os.fdopen(fd, "w", encoding=encoding) as fh:
            fh.write(text)
        os.chmod(tmp, 0o666 & ~_umask())  # mkstemp makes 0600; give the file the usual permissions
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.remove(tmp)
        raise
    return path


# ----------------------------------------------------------------------------------------------
# The report
# ----------------------------------------------------------------------------------------------

_CSS = """
:root{--ink:#1f2328;--muted:#5b6470;--rule:#d8dde3;--band:#f5f7f9;--accent:#1F4E8C}
*{box-sizing:border-box}
body{font-family:"Segoe UI",Roboto,"Helvetica Neue",Arial,sans-serif;color:var(--ink);margin:0;
 background:#fff;line-height:1.45;font-size:15px}
main{max-width:72rem;margin:0 auto;padding:1.5rem 2rem 3rem}
header{border-bottom:3px solid var(--accent);padding-bottom:.6rem;margin-bottom:1rem}
h1{font-size:1.7rem;margin:.2rem 0}
h2{font-size:1.25rem;margin:2rem 0 .4rem;border-bottom:1px solid var(--rule);padding-bottom:.2rem}
h3{font-size:1.05rem;margin:1.4rem 0 .3rem}
.subtitle{font-size:1.1rem;color:var(--muted);margin:0}
.made{font-size:.8rem;color:var(--muted);margin:.3rem 0 0}
.caution{background:#fff8e6;border-left:4px solid #c98a00;padding:.5rem .8rem;font-size:.85rem;margin:1rem 0}
.tablewrap{overflow:auto;max-height:36rem;border:1px solid var(--rule);margin:.4rem 0}
table{border-collapse:collapse;font-size:.85rem;width:max-content;min-width:100%}
th,td{padding:.25rem .55rem;border-bottom:1px solid var(--rule);white-space:nowrap}
thead th{position:sticky;top:0;background:#eef1f4;text-align:left;vertical-align:bottom;z-index:1}
th .unit{display:block;font-weight:normal;color:var(--muted);font-size:.75rem}
td.num{text-align:right;font-variant-numeric:tabular-nums}
td:not(.num){white-space:normal;max-width:24rem}
tbody tr:nth-child(even){background:var(--band)}
table.summary{width:auto;min-width:0}
table.summary th{text-align:left;font-weight:600;color:var(--muted);background:none;position:static}
table.summary td{text-align:left}
.caption{font-size:.85rem;color:var(--muted);margin:.2rem 0 .1rem}
.caption a{margin-left:.6rem}
figure{margin:1rem 0}
figure svg,figure img{max-width:100%;height:auto}
figcaption{font-size:.85rem;color:var(--muted)}
.swatch{display:inline-block;width:.9em;height:.9em;border:1px solid #555;vertical-align:-.1em;margin-right:.35em}
ul.notes{font-size:.9rem}
@media print{.tablewrap{max-height:none;overflow:visible}thead th{position:static}a.csv{display:none}}
"""


class Report:
    """An HTML report under construction. Every method returns ``self`` so calls can chain."""

    def __init__(self, title: str, algorithm: str = "", subtitle: str = "", caution: str | None = None):
        self.title = title
        self.algorithm = algorithm
        self.subtitle = subtitle
        if caution is None:
            from ..algorithms.base import CAUTION

            caution = CAUTION
        self.caution = caution
        self._parts: list[str] = []
        self._notes: list[str] = []
        self._n_tables = 0
        self._n_figures = 0

    # -- text ------------------------------------------------------------------------------------
    def section(self, heading: str, text: str = "", level: int = 2) -> Report:
        """A heading (h2 by default, h3 with level=3) and an optional paragraph."""
        level = 3 if level >= 3 else 2
        self._parts.append(f"<h{level}>{html.escape(heading)}</h{level}>")
        if text:
            self.paragraph(text)
        return self

    def paragraph(self, text: str) -> Report:
        """A paragraph of plain text (escaped)."""
        self._parts.append(f"<p>{html.escape(text)}</p>")
        return self

    def bullets(self, items) -> Report:
        """A bullet list of plain-text items."""
        self._parts.append("<ul>" + "".join(f"<li>{html.escape(str(i))}</li>" for i in items) + "</ul>")
        return self

    def note(self, text: str) -> Report:
        """A note listed at the end under 'Notes' (resampling, reprojection, excluded cells, ...)."""
        if text and text not in self._notes:
            self._notes.append(text)
        return self

    def notes(self, texts) -> Report:
        for t in texts or ():
            self.note(t)
        return self

    def html(self, fragment: str) -> Report:
        """Insert a trusted HTML fragment as is (the caller escapes any user text)."""
        self._parts.append(fragment)
        return self

    # -- tables ----------------------------------------------------------------------------------
    def summary(self, items, heading: str = "Run") -> Report:
        """A two-column 'what was run' table. ``items``: dict label -> value, or a sequence of
        (label, value) or (label, value, unit)."""
        if isinstance(items, dict):
            items = list(items.items())
        rows = []
        for item in items:
            label, value = item[0], item[1]
            unit = item[2] if len(item) > 2 else ""
            unit = _UNIT_CODES.get(unit, unit)
            text = html.escape(format_value(value))
            if unit:
                text += f" {html.escape(unit)}"
            rows.append(f"<tr><th>{html.escape(str(label))}</th><td>{text}</td></tr>")
        if heading:
            self._parts.append(f"<h2>{html.escape(heading)}</h2>")
        self._parts.append('<table class="summary">' + "".join(rows) + "</table>")
        return self

    def table(self, columns: dict, caption: str = "", units: dict | None = None, labels: dict | None = None,
              digits: dict | None = None, csv_name: str | None = None, max_rows: int | None = None,
              hide: tuple = ()) -> Report:
        """A table from ordered columns ``{name: values}`` (all the same length).

        ``units``: name -> unit text, overriding :func:`unit_of`; ``labels``: name -> header text
        (default: the field name, so readers can match the GIS layer); ``digits``: name -> decimals;
        ``csv_name``: file name offered by the CSV link (default from the caption); ``max_rows``: show
        at most this many rows (the CSV link keeps all); ``hide``: columns left out of the page (kept
        in the CSV). Columns named ``colour``/``color`` holding #RRGGBB show a swatch.
        """
        names = list(columns)
        if not names:
            return self
        cols = [list(np.asarray(v).tolist()) if isinstance(v, np.ndarray) else list(v) for v in columns.values()]
        n = len(cols[0])
        if any(len(c) != n for c in cols):
            raise ValueError("report table columns differ in length: " +
                             ", ".join(f"{k}={len(c)}" for k, c in zip(names, cols)))
        units = units or {}
        labels = labels or {}
        digits = digits or {}
        self._n_tables += 1
        shown = [i for i, k in enumerate(names) if k not in hide]
        head = []
        for i in shown:
            k = names[i]
            unit = units.get(k, unit_of(k))
            u = f'<span class="unit">{html.escape(unit)}</span>' if unit else '<span class="unit">&nbsp;</span>'
            head.append(f"<th>{html.escape(labels.get(k, k))}{u}</th>")
        body = []
        limit = n if max_rows is None else min(n, max_rows)
        for r in range(limit):
            cells = []
            for i in shown:
                k, v = names[i], cols[i][r]
                if k.lower() in ("colour", "color") and isinstance(v, str) and _COLOUR_RE.match(v):
                    cells.append(f'<td><span class="swatch" style="background:{v}"></span>{v}</td>')
                elif isinstance(v, (int, float, np.integer, np.floating)) and not isinstance(v, bool):
                    d = digits.get(k, default_digits(k)) if isinstance(v, (float, np.floating)) else None
                    cells.append(f'<td class="num">{html.escape(format_value(v, d))}</td>')
                else:
                    cells.append(f"<td>{html.escape(format_value(v))}</td>")
            body.append("<tr>" + "".join(cells) + "</tr>")
        csv_lines = [",".join(_csv_cell(k) for k in names)]
        csv_lines += [",".join(_csv_cell(c[r]) for c in cols) for r in range(n)]
        csv_text = "\n".join(csv_lines) + "\n"
        fname = csv_name or (re.sub(r"[^0-9A-Za-z]+", "_", caption).strip("_").lower() or f"table_{self._n_tables}")
        if not fname.endswith(".csv"):
            fname += ".csv"
        href = "data:text/csv;charset=utf-8," + urllib.parse.quote(csv_text)
        more = f" (first {limit} of {n} rows; the CSV has all)" if limit < n else ""
        self._parts.append(
            f'<p class="caption">{html.escape(caption)}{html.escape(more)}'
            f'<a class="csv" download="{html.escape(fname)}" href="{href}">CSV</a></p>'
            f'<div class="tablewrap"><table><thead><tr>{"".join(head)}</tr></thead>'
            f'<tbody>{"".join(body)}</tbody></table></div>')
        return self

    # -- figures ---------------------------------------------------------------------------------
    def figure(self, fig, caption: str = "", fmt: str = "svg", alt: str = "") -> Report:
        """Embed a figure inline: a matplotlib Figure (closed afterwards), SVG text, or PNG bytes.
        ``fmt`` ('svg' or 'png') chooses how a matplotlib Figure is rendered."""
        self._n_figures += 1
        alt = alt or caption or f"figure {self._n_figures}"
        if isinstance(fig, (bytes, bytearray)):
            body = _png_img(bytes(fig), alt)
        elif isinstance(fig, str):
            body = _strip_svg_header(fig)
        else:
            from . import charts

            if fmt == "png":
                body = _png_img(charts.to_png(fig), alt)
            else:
                body = _strip_svg_header(charts.to_svg(fig))
        cap = f"<figcaption>{html.escape(caption)}</figcaption>" if caption else ""
        self._parts.append(f'<figure role="img" aria-label="{html.escape(alt)}">{body}{cap}</figure>')
        return self

    # -- output ----------------------------------------------------------------------------------
    def render(self) -> str:
        """The whole page as a string."""
        now = _dt.datetime.now().astimezone().strftime("%Y-%m-%d %H:%M %Z").strip()
        made = f"Channel Habitat {html.escape(plugin_version())}"
        if self.algorithm:
            made += f" · algorithm <code>{html.escape(self.algorithm)}</code>"
        made += f" · {html.escape(now)}"
        sub = f'<p class="subtitle">{html.escape(self.subtitle)}</p>' if self.subtitle else ""
        notes = ""
        if self._notes:
            notes = "<h2>Notes</h2><ul class=\"notes\">" + "".join(
                f"<li>{html.escape(t)}</li>" for t in self._notes) + "</ul>"
        caution = f'<div class="caution"><b>Caution.</b> {html.escape(self.caution)}</div>'
        return (
            "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
            f"<title>{html.escape(self.title)}</title><style>{_CSS}</style></head><body><main>"
            f"<header><h1>{html.escape(self.title)}</h1>{sub}<p class=\"made\">{made}</p></header>"
            f"{caution}{''.join(self._parts)}{notes}</main></body></html>\n")

    def write(self, path) -> str:
        """Write the page atomically; returns the path."""
        return write_text_atomic(path, self.render())


def _png_img(data: bytes, alt: str) -> str:
    b64 = base64.b64encode(data).decode("ascii")
    return f'<img alt="{html.escape(alt)}" src="data:image/png;base64,{b64}">'


def _strip_svg_header(svg: str) -> str:
    i = svg.find("<svg")
    return svg[i:] if i >= 0 else svg
