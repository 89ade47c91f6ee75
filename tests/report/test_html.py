"""Tests of spillgauge.report.html and write_report: a well-formed, self-contained page.

The page is parsed with the standard library's html.parser; embedded images are
decoded with base64 and compared byte for byte with the PNG files written.
"""

from __future__ import annotations

import base64
import dataclasses
import html
from html.parser import HTMLParser

import pytest

from spillgauge.report import write_report
from spillgauge.report.html import SECTION_IDS, render_html
from spillgauge.report.page import CAUTION
from spillgauge.statistics.recommend import Recommendation
from spillgauge.study.store import load_study

# Elements without an end tag (HTML Living Standard, "void elements").
_VOID = {"area", "base", "br", "col", "embed", "hr", "img", "input", "link", "meta", "source",
         "track", "wbr"}


class _Page(HTMLParser):
    """Collect tags, ids, images, links and per-section text; check that tags nest."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.stack: list[str] = []
        self.errors: list[str] = []
        self.ids: list[str] = []
        self.tags: list[tuple[str, dict]] = []
        self.section_text: dict[str, list[str]] = {}
        self.figure_of_img: list[str | None] = []
        self._sections: list[str] = []
        self._figure: str | None = None
        self.doctype = None

    def handle_decl(self, decl: str) -> None:
        self.doctype = decl

    def handle_starttag(self, tag: str, attrs: list) -> None:
        attributes = dict(attrs)
        self.tags.append((tag, attributes))
        if "id" in attributes:
            self.ids.append(attributes["id"])
        if tag == "section":
            self._sections.append(attributes.get("id", ""))
        if tag == "figure":
            self._figure = attributes.get("id")
        if tag == "img":
            self.figure_of_img.append(self._figure)
        if tag not in _VOID:
            self.stack.append(tag)

    def handle_startendtag(self, tag: str, attrs: list) -> None:
        self.handle_starttag(tag, attrs)
        if tag not in _VOID:
            self.stack.pop()

    def handle_endtag(self, tag: str) -> None:
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"</{tag}> closes <{self.stack[-1] if self.stack else None}>")
            return
        self.stack.pop()
        if tag == "section":
            self._sections.pop()
        if tag == "figure":
            self._figure = None

    def handle_data(self, data: str) -> None:
        for section in self._sections:
            self.section_text.setdefault(section, []).append(data)

    def text(self, section: str) -> str:
        return " ".join(" ".join(self.section_text.get(section, [])).split())


def _parse(page: str) -> _Page:
    parser = _Page()
    parser.feed(page)
    parser.close()
    return parser


@pytest.fixture(scope="module")
def page(report_dir):
    out, _ = report_dir
    return (out / "report.html").read_text(encoding="utf-8")


@pytest.fixture(scope="module")
def parsed(page):
    return _parse(page)


def test_page_parses_and_every_tag_is_closed(parsed):
    assert parsed.doctype.lower() == "doctype html"
    assert parsed.errors == []
    assert parsed.stack == []


def test_every_section_is_there_once(parsed):
    sections = [a["id"] for tag, a in parsed.tags if tag == "section"]
    # "launches" only appears when the scenario has designs that do not randomize
    assert sections == [s for s in SECTION_IDS if s != "launches"]
    links = [a["href"] for tag, a in parsed.tags if tag == "a" and a.get("href", "").startswith("#")]
    assert links == ["#" + s for s in sections]  # the menu names only sections on the page
    assert len(parsed.ids) == len(set(parsed.ids))  # ids are unique


def test_one_embedded_png_per_figure_with_a_caption(report_dir, parsed):
    out, written = report_dir
    pngs = [name for name in written if name.endswith(".png")]
    images = [a for tag, a in parsed.tags if tag == "img"]
    assert len(images) == len(pngs) == 4
    prefix = "data:image/png;base64,"
    for name, image in zip(pngs, images):
        assert image["src"].startswith(prefix)
        assert base64.b64decode(image["src"][len(prefix):]) == (out / name).read_bytes()
        assert image.get("alt")
    assert parsed.figure_of_img == [f"figure-{name[:-4]}" for name in pngs]
    captions = [tag for tag, _ in parsed.tags if tag == "figcaption"]
    assert len(captions) == len(pngs)
    assert "hours since a switch" in parsed.text("figures").lower()


def test_page_loads_nothing_from_the_network(page, parsed):
    for tag, attributes in parsed.tags:
        assert tag not in ("script", "link", "iframe", "object", "embed")
        for name in ("src", "href", "srcset", "action", "data"):
            value = (attributes.get(name) or "").strip().lower()
            assert not value.startswith(("http:", "https:", "//", "ftp:")), (tag, name, value)
    assert "@import" not in page and "url(" not in page


def test_sections_hold_the_study(study, parsed):
    summary = study.summary()
    scenario = parsed.text("scenario")
    assert study.scenario.name in scenario and "tiny market of four shops" in scenario
    assert "restock_every_hours" in scenario and "burn_in_hours" in scenario
    assert "users per pool" in parsed.text("market")
    truth = parsed.text("truth")
    assert f"{summary['truth']['gte']:.4g}" in truth
    assert "all control" in truth and "all treated" in truth
    designs = parsed.text("designs")
    assert all(d["label"] in designs for d in summary["designs"])
    recommendation = parsed.text("recommendation")
    assert study.recommendation.label in recommendation
    assert " ".join(study.recommendation.reason.split()) in recommendation
    assert parsed.text("caution") == "Caution " + CAUTION


def test_design_table_marks_trusted_and_recommended(study, page):
    rows = [row for row in page.split("<tr") if "trusted</span>" in row]
    assert len(rows) == len(study.scenario.designs)
    for spec, row in zip(study.scenario.designs, rows):
        is_trusted = spec.label in study.recommendation.trusted
        assert ("\u2713 trusted" in row) == is_trusted, spec.label
        assert ("\u2717 not trusted" in row) == (not is_trusted), spec.label
        assert row.startswith(' class="chosen"') == (spec.label == study.recommendation.label)
        # The verdict is the second cell, beside the label: a table wider than the page
        # scrolls, and its last columns are the ones a reader may not see.
        assert "trusted</span>" in row.split("<td")[2], spec.label


def test_text_is_escaped(study):
    nasty = '<script>alert("x")</script> & <b>bold</b>'
    scenario = dataclasses.replace(study.scenario, description=nasty)
    page = render_html(dataclasses.replace(study, scenario=scenario), {})
    assert "<script>" not in page and "<b>bold" not in page
    assert html.escape(nasty, quote=True) in page
    assert _parse(page).errors == []


def test_page_says_when_no_design_can_be_trusted(study):
    none = Recommendation(label=None, reason="Every design's interval under-covers.",
                          is_trustworthy=False, trusted=(),
                          ranking=study.recommendation.ranking)
    page = render_html(dataclasses.replace(study, recommendation=none), {})
    parsed = _parse(page)
    assert "No design can be trusted" in parsed.text("recommendation")
    assert "Every design's interval under-covers." in parsed.text("recommendation")
    assert 'class="chosen"' not in page and "\u2713 trusted" not in page
    assert "No figures were drawn" in parsed.text("figures")


def test_write_report_lists_what_the_folder_holds(report_dir):
    out, written = report_dir
    assert written == ["summary.json", "replications.csv", "summary.txt", "summary.md",
                       "estimates.png", "bias_sd.png", "stock.png", "switchback.png",
                       "report.html"]
    assert all((out / name).is_file() and (out / name).stat().st_size > 0 for name in written)


def test_write_report_in_a_fresh_folder_lists_only_its_own_files(bare_study, tmp_path):
    written = write_report(bare_study, tmp_path / "new")
    assert written == ["summary.txt", "summary.md", "estimates.png", "bias_sd.png",
                       "report.html"]
    assert sorted(p.name for p in (tmp_path / "new").iterdir()) == sorted(written)
    page = (tmp_path / "new" / "report.html").read_text(encoding="utf-8")
    assert page.count("data:image/png;base64,") == 2


def test_report_of_a_loaded_study_matches_the_run(report_dir, page):
    # The `spillgauge report DIR` path: rebuild the study from its folder, then write.
    out, _ = report_dir
    loaded = load_study(out)
    rendered = render_html(loaded, {})
    assert _parse(rendered).text("designs") == _parse(page).text("designs")
    assert _parse(rendered).text("recommendation") == _parse(page).text("recommendation")


def test_summary_markdown_ends_its_table_with_a_blank_line(report_dir):
    # GitHub Flavored Markdown spec, "Tables (extension)": a table is broken at the first
    # empty line; a non-blank line right after the rows would be read as another row.
    out, _ = report_dir
    lines = (out / "summary.md").read_text().splitlines()
    rows = [i for i, line in enumerate(lines) if line.startswith("|")]
    assert rows == list(range(rows[0], rows[-1] + 1))  # one block of rows
    assert lines[rows[-1] + 1] == ""
    assert lines[rows[0] - 1] == ""
