"""The HTML report builder: escaping, missing figures refused, tables
checked, the page parses (Python's html.parser) and links only to files
that exist.

No physics or statistics value is checked here.  The expected number
strings follow Python's own ``g`` presentation type (Python documentation,
"Format Specification Mini-Language"), which ``format_value`` uses."""
from html.parser import HTMLParser

import numpy as np
import pytest
from astropy import units as u
from astropy.table import Table

from edgefit.errors import ArgumentError
from edgefit.report import Report, format_interval, format_value


class _Collect(HTMLParser):
    def __init__(self):
        super().__init__()
        self.src, self.rows, self.cells = [], 0, []

    def handle_starttag(self, tag, attrs):
        if tag == "img":
            self.src.append(dict(attrs)["src"])
        if tag == "tr":
            self.rows += 1

    def handle_data(self, data):
        self.cells.append(data)


def _png(path):
    # a valid 1x1 PNG written by matplotlib
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig = plt.figure(figsize=(0.1, 0.1))
    fig.savefig(path)
    plt.close(fig)


def test_page_escapes_text_and_references_existing_images(tmp_path):
    (tmp_path / "img").mkdir()
    _png(tmp_path / "img" / "a.png")
    rep = Report("A <b>title</b>", subtitle="simulated & invented")
    rep.heading("Table")
    rep.table(["name", "value"], [["<script>x</script>", 1.5], ["b", float("nan")]],
              units=["", "cm-2"], table_id="t")
    t = Table({"name": ["p", "q"], "col": np.array([1.0, 2.0]) * u.cm ** -2})
    rep.astropy_table(t)
    rep.image("img/a.png", caption="fig")
    path = rep.write(tmp_path)
    text = path.read_text()
    assert "<script>" not in text and "&lt;script&gt;" in text and "<b>title" not in text
    p = _Collect()
    p.feed(text)
    assert p.src == ["img/a.png"] and (tmp_path / p.src[0]).is_file()
    assert p.rows == 2 + 1 + 2 + 1          # header + rows of both tables
    assert "[1 / cm2]" in text or "[cm-2]" in text
    assert "--" in p.cells                  # NaN shown as --
    embedded = Report("x")
    embedded.image(tmp_path / "img" / "a.png")
    assert "data:image/png;base64," in embedded.render(tmp_path, embed=True)


def test_missing_or_outside_images_and_bad_tables_are_refused(tmp_path):
    rep = Report("x")
    rep.image("nope.png")
    with pytest.raises(ArgumentError, match="does not exist"):
        rep.write(tmp_path / "r")
    outside = tmp_path / "o.png"
    _png(outside)
    rep = Report("x")
    rep.image(outside)
    with pytest.raises(ArgumentError, match="outside the report folder"):
        rep.write(tmp_path / "r")
    with pytest.raises(ArgumentError):
        Report("x").table(["a", "b"], [[1]])


def test_formatting():
    assert format_value(None) == "--" and format_value(float("inf")) == "--"
    assert format_value(1234.5678, 3) == "1.23e+03"
    assert format_interval(1.0, 0.5, 2.0) == "1 [0.5, 2]"
