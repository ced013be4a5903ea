"""One self-contained HTML page (layer 6): headings, paragraphs, tables
with units and figures, written as ``DIR/report.html``.

The page needs nothing but a browser: no scripts, no web fonts, no
remote style sheets; figures are PNG files beside the page (in ``DIR``
or below it) and referenced by relative paths, or embedded as data URIs
with ``embed=True``.  :meth:`Report.write` refuses to reference a figure
that does not exist.  Text is HTML-escaped; nothing from a table or a
file is interpreted as markup.
"""
from __future__ import annotations

import base64
import html
import math
import os
from pathlib import Path
from typing import Any

from ..errors import ArgumentError

__all__ = ["Report", "format_value", "format_interval"]

_CSS = """
body { font-family: sans-serif; margin: 2em auto; max-width: 1100px; color: #222;
       line-height: 1.4; }
h1 { font-size: 1.6em; border-bottom: 2px solid #446; }
h2 { font-size: 1.25em; margin-top: 1.8em; border-bottom: 1px solid #aab; }
table { border-collapse: collapse; margin: 0.8em 0; font-size: 0.86em; }
th, td { border: 1px solid #ccd; padding: 0.25em 0.5em; text-align: right; }
th { background: #eef; }
td.text, th.text { text-align: left; }
tr.bad td { background: #fee; }
tr.sum td { font-weight: bold; background: #f4f4fa; }
caption { caption-side: bottom; font-size: 0.85em; color: #555; text-align: left;
          padding-top: 0.3em; }
figure { margin: 1em 0; display: inline-block; vertical-align: top; }
figure img { max-width: 100%; border: 1px solid #ddd; }
figcaption { font-size: 0.85em; color: #555; max-width: 640px; }
.note { background: #ffd; border-left: 4px solid #cc8; padding: 0.4em 0.8em; }
"""


def format_value(x: Any, digits: int = 4) -> str:
    """A number for a table cell ('--' for None/NaN)."""
    if x is None:
        return "--"
    try:
        xf = float(x)
    except (TypeError, ValueError):
        return str(x)
    if not math.isfinite(xf):
        return "--"
    return f"{xf:.{digits}g}"


def format_interval(value: Any, lo: Any, hi: Any, digits: int = 3) -> str:
    """'value [lo, hi]' for a table cell."""
    return f"{format_value(value, digits)} [{format_value(lo, digits)}, " \
           f"{format_value(hi, digits)}]"


class Report:
    """Builder of one HTML page.  Add blocks in order, then :meth:`write`."""

    def __init__(self, title, subtitle=None):
        self.title = str(title)
        self.subtitle = subtitle
        self._blocks = []
        self.images = []

    def heading(self, text, anchor=None):
        self._blocks.append(("h2", str(text), anchor))

    def text(self, text, note=False):
        self._blocks.append(("p", str(text), note))

    def table(self, header, rows, *, units=None, caption=None, text_columns=(0,),
              row_class=None, table_id=None):
        """A table: ``header`` names, ``rows`` lists of cell strings or
        numbers, ``units`` one unit string per column (shown under the
        names), ``row_class`` an optional list of CSS classes per row."""
        n = len(header)
        if any(len(r) != n for r in rows):
            raise ArgumentError("every table row needs one cell per header name")
        if units is not None and len(units) != n:
            raise ArgumentError("units: one per column")
        self._blocks.append(("table", list(header), [list(r) for r in rows], units, caption,
                             set(text_columns), row_class, table_id))

    def astropy_table(self, table, columns=None, caption=None, table_id=None):
        """An astropy Table (units from its columns)."""
        columns = columns or table.colnames
        units = [str(table[c].unit) if getattr(table[c], "unit", None) is not None else ""
                 for c in columns]
        rows = [[format_value(table[c][i]) if table[c].dtype.kind in "fiu" else str(table[c][i])
                 for c in columns] for i in range(len(table))]
        text_cols = [j for j, c in enumerate(columns) if table[c].dtype.kind not in "fiu"]
        self.table(columns, rows, units=units, caption=caption, text_columns=text_cols,
                   table_id=table_id)

    def image(self, path, caption=None, width=None):
        """A figure; ``path`` relative to the report folder or absolute
        (it must lie inside the report folder unless embedded)."""
        self._blocks.append(("img", Path(path), caption, width))

    # ------------------------------------------------------------------
    def _img_src(self, path, folder, embed):
        full = path if path.is_absolute() else folder / path
        if not full.is_file():
            raise ArgumentError(f"report figure {full} does not exist")
        if embed:
            data = base64.b64encode(full.read_bytes()).decode("ascii")
            return f"data:image/png;base64,{data}"
        rel = os.path.relpath(full, folder)
        if rel.startswith(".."):
            raise ArgumentError(f"report figure {full} lies outside the report folder "
                                f"{folder}; copy it there or embed it")
        self.images.append(rel)
        return rel.replace(os.sep, "/")

    def render(self, folder, embed=False):
        """The page as a string (figures checked against ``folder``)."""
        folder = Path(folder)
        e = html.escape
        out = ["<!DOCTYPE html>", "<html lang=\"en\"><head><meta charset=\"utf-8\">",
               f"<title>{e(self.title)}</title>", f"<style>{_CSS}</style></head><body>",
               f"<h1>{e(self.title)}</h1>"]
        if self.subtitle:
            out.append(f"<p class=\"note\">{e(self.subtitle)}</p>")
        self.images = []
        for block in self._blocks:
            kind = block[0]
            if kind == "h2":
                anchor = f" id=\"{e(block[2])}\"" if block[2] else ""
                out.append(f"<h2{anchor}>{e(block[1])}</h2>")
            elif kind == "p":
                cls = " class=\"note\"" if block[2] else ""
                out.append(f"<p{cls}>{e(block[1])}</p>")
            elif kind == "table":
                _, header, rows, units, caption, text_cols, row_class, table_id = block
                tid = f" id=\"{e(table_id)}\"" if table_id else ""
                out.append(f"<table{tid}>")
                if caption:
                    out.append(f"<caption>{e(caption)}</caption>")
                out.append("<thead><tr>" + "".join(
                    f"<th class=\"{'text' if j in text_cols else 'num'}\">{e(str(h))}"
                    + (f"<br><small>[{e(units[j])}]</small>" if units and units[j] else "")
                    + "</th>" for j, h in enumerate(header)) + "</tr></thead><tbody>")
                for i, r in enumerate(rows):
                    cls = f" class=\"{e(row_class[i])}\"" if row_class and row_class[i] else ""
                    out.append(f"<tr{cls}>" + "".join(
                        f"<td class=\"{'text' if j in text_cols else 'num'}\">"
                        f"{e(format_value(c) if isinstance(c, float) else str(c))}</td>"
                        for j, c in enumerate(r)) + "</tr>")
                out.append("</tbody></table>")
            elif kind == "img":
                _, path, caption, width = block
                src = self._img_src(path, folder, embed)
                w = f" width=\"{int(width)}\"" if width else ""
                alt = e(caption or path.name)
                out.append(f"<figure><img src=\"{e(src)}\" alt=\"{alt}\"{w}>"
                           + (f"<figcaption>{e(caption)}</figcaption>" if caption else "")
                           + "</figure>")
        out.append("</body></html>")
        return "\n".join(out) + "\n"

    def write(self, folder, name="report.html", embed=False):
        """Write ``folder/name`` (atomically: a temporary file, then a
        rename); returns its path."""
        folder = Path(folder)
        folder.mkdir(parents=True, exist_ok=True)
        text = self.render(folder, embed)
        path = folder / name
        tmp = folder / f".{name}.tmp"
        tmp.write_text(text, encoding="utf-8")
        os.replace(tmp, path)
        return path
