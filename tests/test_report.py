"""The run report page: self-contained, the same figures as the JSON report, user text escaped."""

from __future__ import annotations

import json
from html.parser import HTMLParser

import pytest
from typer.testing import CliRunner

from geonorm.batch.clean import clean_file
from geonorm.cli import app
from geonorm.figures.report import BINS, _histogram, _rate, report_html

runner = CliRunner()

SCRIPT = "<script>alert(1)</script>"
DOUBTFUL_SCRIPT = f"Springfield {SCRIPT}"  # a best guess in review, so listed as doubtful
# Attributes through which a page can make the browser fetch something.
FETCHING = {"src", "href", "xlink:href", "srcset", "action", "formaction", "poster", "data"}


class Page(HTMLParser):
    """Every tag with its attributes, the data-field figures, and the text of each table cell."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict[str, str]]] = []
        self.fields: list[tuple[str, str, str]] = []  # (field, data-value, shown text)
        self.cells: list[str] = []
        self.text: list[str] = []
        self._field: tuple[str, str] | None = None
        self._cell: list[str] | None = None
        self._in_script = False

    def handle_starttag(self, tag, attrs):
        a = {k: v or "" for k, v in attrs}
        self.tags.append((tag, a))
        if "data-field" in a:
            self._field = (a["data-field"], a["data-value"])
        if tag == "td":
            self._cell = []
        self._in_script = self._in_script or tag == "script"

    def handle_endtag(self, tag):
        if tag == "td" and self._cell is not None:
            self.cells.append("".join(self._cell).strip())
            self._cell = None

    def handle_data(self, data):
        self.text.append(data)
        if self._field is not None:
            self.fields.append((*self._field, data))
            self._field = None
        if self._cell is not None:
            self._cell.append(data)


def _input(tmp_path):
    rows = (
        ["Paris"] * 5
        + ["Berlin"] * 3
        + ["Europe"] * 3
        + ["europe"]
        + [DOUBTFUL_SCRIPT] * 2
        + ["Lisbon / Berlin"]
        + ["", "asdfgh"]
    )
    path = tmp_path / "people.csv"
    path.write_text(
        "id,where <i>\n" + "".join(f'{i},"{r}"\n' for i, r in enumerate(rows)), encoding="utf-8"
    )
    return path


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("report")
    src = _input(tmp)
    summary = clean_file(
        src,
        "where <i>",
        tmp / "people_geo.csv",
        cache=tmp / "cache.sqlite",
        report=tmp / "run.json",
        workers=1,
    )
    page = report_html(summary, source=str(src), column="where <i>", accept=0.7)
    parsed = Page()
    parsed.feed(page)
    return page, parsed, json.loads((tmp / "run.json").read_text(encoding="utf-8")), tmp


def _at(report: dict, dotted: str):
    value = report
    for part in dotted.split("."):
        value = value[part]
    return value


def test_page_fetches_nothing_from_anywhere(run):
    page, parsed, _, _ = run
    assert page.startswith("<!DOCTYPE html>")
    tags = {t for t, _ in parsed.tags}
    assert not tags & {"script", "link", "iframe", "img", "object", "embed"}
    for tag, attrs in parsed.tags:
        for name, value in attrs.items():
            if name in FETCHING:
                assert value.startswith(("data:", "#")), (tag, name, value)
            if "url(" in value:
                assert value.replace(" ", "").startswith("url(#"), (tag, name, value)
    # The only address on the page is the SVG namespace name, which is never fetched.
    assert "//" not in page.replace("http://www.w3.org/2000/svg", "")
    csp = [a["content"] for t, a in parsed.tags if a.get("http-equiv") == "Content-Security-Policy"]
    assert csp and "default-src 'none'" in csp[0]


def test_figures_equal_the_json_report(run):
    _, parsed, report, _ = run
    shown = {f for f, _, _ in parsed.fields}
    for field, value, text in parsed.fields:
        expected = _at(report, field)
        if isinstance(expected, bool) or not isinstance(expected, (int, float)):
            assert value == str(expected) and text == str(expected), field
        elif isinstance(expected, int):
            assert int(value) == expected and text == f"{expected:,}", field
        elif field.startswith("status_share."):
            assert float(value) == expected and text == f"{expected:.1%}", field
        else:
            assert float(value) == expected and text == f"{expected:,.2f}", field
    # Every figure of the JSON report is on the page.
    numbers = {k for k, v in report.items() if isinstance(v, (int, float))}
    assert numbers <= shown
    assert {f"status.{s}" for s in report["status"]} <= shown
    assert {f"status_share.{s}" for s in report["status_share"]} <= shown
    assert {f"versions.{k}" for k in report["versions"]} <= shown
    assert report["rows"] == 17 and report["status"]["matched"] == 8


def test_user_text_is_escaped(run):
    page, parsed, _, _ = run
    assert SCRIPT not in page and "<i>\n" not in page
    assert "Springfield &lt;script&gt;alert(1)&lt;/script&gt;" in page
    assert "where &lt;i&gt;" in page  # the column name
    assert DOUBTFUL_SCRIPT in parsed.cells  # read back as text, it is the string as typed


def test_doubtful_strings_count_spellings_together(run):
    _, parsed, _, _ = run
    # Europe ×3 and europe ×1 share one cache key: one line of 4 rows, shown by the commoner
    # spelling; the Springfield string (in review) has 2 rows; "Lisbon / Berlin" (several
    # countries) 1.
    cells = parsed.cells
    europe = cells.index("Europe and 1 other spelling")
    assert cells[europe + 1] == "4" and cells[europe + 2] == "unmatched"
    script = cells.index(DOUBTFUL_SCRIPT)
    assert cells[script + 1] == "2"
    assert europe < script < cells.index("Lisbon / Berlin")


def test_histogram_marks_the_threshold_and_cuts_a_towering_bar():
    bins = [0] * BINS
    bins[19], bins[15], bins[10] = 10_000, 40, 5
    svg = _histogram(bins, 0.75)
    parsed = Page()
    parsed.feed(svg)
    texts = "".join(parsed.text)
    assert "accept ≥ 0.75" in texts and "10,000" in texts  # the cut bar says its count
    bars = [
        a
        for t, a in parsed.tags
        if t == "rect" and float(a["height"]) > 0 and a["fill"] != "#ffffff"
    ]
    colours = [a["fill"] for a in bars]
    # Bins whose middle is at or above 0.75 are drawn as matched, the rest as review.
    assert colours == ["#e3a72f", "#2c6e9b", "#2c6e9b"]
    heights = [float(a["height"]) for a in bars]
    assert heights[2] < 10 * heights[1]  # the scale follows the second-tallest bin


def test_small_rates_keep_their_digits():
    assert [_rate(v) for v in (0.0724, 0.5, 3.64, 27.0, 1250.2)] == [
        "0.072",
        "0.5",
        "3.6",
        "27.0",
        "1,250",
    ]


def test_clean_command_writes_html_or_json_by_extension(tmp_path):
    src = _input(tmp_path)
    for name in ("run.html", "run.json"):
        r = runner.invoke(
            app,
            [
                "clean", str(src), "--column", "where <i>", "--out", str(tmp_path / "o.csv"),
                "--cache", str(tmp_path / "c.sqlite"), "--report", str(tmp_path / name), "--quiet",
            ],
        )  # fmt: skip
        assert r.exit_code == 0, r.output
    assert (tmp_path / "run.html").read_text(encoding="utf-8").startswith("<!DOCTYPE html>")
    assert json.loads((tmp_path / "run.json").read_text(encoding="utf-8"))["rows"] == 17


def test_report_without_a_cleaned_file_shows_what_the_summary_has(tmp_path, capsys):
    src = _input(tmp_path)
    summary = clean_file(src, "where <i>", "-", cache=tmp_path / "c.sqlite", workers=1)
    capsys.readouterr()
    page = report_html(summary, source="-", column="where <i>", accept=0.7)
    parsed = Page()
    parsed.feed(page)
    assert "standard input" in page and "not shown" in page
    assert ("rows", "17", "17") in parsed.fields


def test_demo_writes_a_report_and_prints_its_path(tmp_path):
    r = runner.invoke(app, ["demo", "--out", str(tmp_path), "--quiet"])
    assert r.exit_code == 0, r.output
    report = tmp_path / "run_report.html"
    assert report.exists()
    assert f"run report (HTML): {report}" in r.stdout
    parsed = Page()
    parsed.feed(report.read_text(encoding="utf-8"))
    assert ("rows", "20000", "20,000") in parsed.fields
