"""The self-contained HTML report: structure, embedded plots, escaping, no external resources."""

import base64
import io
import re
from html.parser import HTMLParser

import pytest
from matplotlib.figure import Figure

from torsionscan.output.html import html_report

VOID = {"area", "base", "br", "col", "embed", "hr", "img", "input", "link", "meta", "source", "track", "wbr"}
COLUMNS = ["name", "bond", "status", "barrier_kcal_mol", "p_s_cis", "planar", "reason"]
EVIL = '<script>alert("x")</script> & "co"'


def _png(seed):
    fig = Figure(figsize=(1.2, 0.9), dpi=40)
    fig.add_subplot().plot([0, 1, 2], [0, seed, 0])
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png")
    return buffer.getvalue()


class Page(HTMLParser):
    """Start tags, balance errors, the results table, sections with their images, script text."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.starts, self.errors, self.stack = [], [], []
        self.head, self.body_rows, self.sections, self.scripts = [], [], {}, []
        self._cell = None
        self._section = None
        self._in = None  # "thead" / "tbody" while inside the results table
        self.texts = []

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        self.starts.append((tag, attrs))
        if tag not in VOID:
            self.stack.append(tag)
        if tag in ("thead", "tbody") and self._in_results():
            self._in = tag
        elif tag == "tr" and self._in == "tbody":
            self.body_rows.append({"attrs": attrs, "cells": []})
        elif tag in ("th", "td") and self._in:
            self._cell = {"attrs": attrs, "text": "", "links": []}
        elif tag == "a" and self._cell is not None:
            self._cell["links"].append(attrs.get("href"))
        elif tag == "section":
            self._section = attrs.get("id")
            self.sections[self._section] = {"attrs": attrs, "imgs": [], "text": ""}
        elif tag == "img" and self._section:
            self.sections[self._section]["imgs"].append(attrs)
        elif tag == "script":
            self.scripts.append("")

    def _in_results(self):
        return any(tag == "table" and attrs.get("id") == "results" for tag, attrs in self.starts) and (
            "table" in self.stack
        )

    def handle_endtag(self, tag):
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"unexpected </{tag}> with open {self.stack[-3:]}")
            return
        self.stack.pop()
        if tag in ("th", "td") and self._cell is not None:
            if self._in == "thead":
                self.head.append(self._cell["text"])
            else:
                self.body_rows[-1]["cells"].append(self._cell)
            self._cell = None
        elif tag in ("thead", "tbody"):
            self._in = None
        elif tag == "section":
            self._section = None

    def handle_data(self, data):
        self.texts.append(data)
        if self._cell is not None:
            self._cell["text"] += data
        if self._section:
            self.sections[self._section]["text"] += data
        if self.stack and self.stack[-1] == "script":
            self.scripts[-1] += data


def parse(page):
    parser = Page()
    parser.feed(page)
    parser.close()
    return parser


@pytest.fixture(scope="module")
def inputs():
    pngs = {key: _png(i + 1) for i, key in enumerate(["b1", "b2", "bi", "ov"])}
    rows = [
        {"name": "butadiene", "bond": "2-3", "status": "done", "barrier_kcal_mol": 5.87654,
         "p_s_cis": 0.0004567, "planar": True, "reason": ""},
        {"name": "butadiene", "bond": "5-6", "status": "done", "barrier_kcal_mol": 1234567.0,
         "p_s_cis": None, "planar": False, "reason": ""},
        {"name": "biphenyl", "bond": "1-7", "status": "done", "barrier_kcal_mol": 2.0,
         "p_s_cis": 0.5, "planar": False, "reason": ""},
        {"name": EVIL, "bond": None, "status": "failed", "barrier_kcal_mol": None,
         "p_s_cis": None, "planar": None, "reason": "SMILES <parse> error & more"},
    ]
    plots = {"butadiene": [("2-3", pngs["b1"]), ("5-6", pngs["b2"])], "biphenyl": [("1-7", pngs["bi"])]}
    return dict(
        title="Torsion scans: results/<demo>",
        run_info={"list file": "inputs/demo.txt", "done": 2, "failed": 1, "pending": 0,
                  "method": "GFN2-xTB", "generated": "2026-05-09T07:35:25+00:00"},
        settings={"step_deg": 15.0, "conformers": 2, "optimizer": {"gtol": 0.00045, "max_steps": 200},
                  "grid": [0, 180]},
        caution="Semi-empirical estimate; confirm with higher-level methods.",
        columns=COLUMNS, rows=rows, plots=plots, overview_png=pngs["ov"],
    )


@pytest.fixture(scope="module")
def page(inputs):
    return html_report(**inputs)


@pytest.fixture(scope="module")
def parsed(page):
    return parse(page)


def _section_of(parsed, row):
    """The section linked from a row's name cell."""
    (href,) = parsed_links(row)
    assert href.startswith("#c-")
    return parsed.sections[href[1:]]


def parsed_links(row):
    return row["cells"][COLUMNS.index("name")]["links"]


def test_page_parses_with_balanced_tags(page, parsed):
    assert page.startswith("<!DOCTYPE html>")
    assert parsed.errors == []
    assert parsed.stack == []
    tags = [tag for tag, _ in parsed.starts]
    assert tags.count("html") == tags.count("body") == 1
    assert ("meta", {"charset": "utf-8"}) in parsed.starts


def test_table_has_one_row_per_input_row_with_columns_in_order(inputs, parsed):
    assert parsed.head == COLUMNS
    assert len(parsed.body_rows) == len(inputs["rows"])
    for row, source in zip(parsed.body_rows, inputs["rows"]):
        assert len(row["cells"]) == len(COLUMNS)
        assert row["cells"][0]["text"] == source["name"]
        assert row["cells"][1]["text"] == (source["bond"] or "\u2014")


def test_values_are_formatted(parsed):
    first, second, third, failed = ([cell["text"] for cell in row["cells"]] for row in parsed.body_rows)
    barrier, p_cis, planar = (COLUMNS.index(key) for key in ("barrier_kcal_mol", "p_s_cis", "planar"))
    assert first[barrier] == "5.877"
    assert first[p_cis] == "0.000457"
    assert second[barrier] == "1.23e+06"
    assert third[barrier] == "2" and third[p_cis] == "0.5"
    assert (first[planar], second[planar]) == ("yes", "no")
    assert second[p_cis] == "\u2014"
    assert failed[barrier] == failed[p_cis] == failed[planar] == "\u2014"
    # numeric cells carry their raw value for sorting, missing and text cells do not
    cells = parsed.body_rows[0]["cells"]
    assert float(cells[barrier]["attrs"]["data-sort"]) == 5.87654
    assert "data-sort" not in cells[0]["attrs"]
    assert "data-sort" not in parsed.body_rows[1]["cells"][p_cis]["attrs"]


def test_failed_row_stands_out_and_shows_reason(parsed):
    failed = [row for row in parsed.body_rows if "failed" in (row["attrs"].get("class") or "").split()]
    assert len(failed) == 1
    (row,) = failed
    assert row["cells"][COLUMNS.index("reason")]["text"] == "SMILES <parse> error & more"
    assert row["cells"][COLUMNS.index("status")]["text"] == "failed"
    section = _section_of(parsed, row)
    assert section["imgs"] == []
    assert "SMILES <parse> error & more" in section["text"]
    assert "failed" in section["attrs"]["class"].split()


def test_every_compound_has_a_section_with_its_plots(inputs, parsed):
    names = list(dict.fromkeys(row["name"] for row in inputs["rows"]))
    sections = [attrs["id"] for tag, attrs in parsed.starts if tag == "section"]
    assert len(sections) == len(names) == len(set(sections))
    first_rows = {}
    for row in parsed.body_rows:
        first_rows.setdefault(row["cells"][0]["text"], row)
    assert list(first_rows) == names
    for position, name in enumerate(names):
        section = _section_of(parsed, first_rows[name])
        assert section["attrs"]["id"] == sections[position]  # order of first appearance
        assert re.fullmatch(r"c-[A-Za-z0-9_-]+", section["attrs"]["id"])
        expected = inputs["plots"].get(name, [])
        assert len(section["imgs"]) == len(expected)
        for img, (bond, png) in zip(section["imgs"], expected):
            prefix = "data:image/png;base64,"
            assert img["src"].startswith(prefix)
            assert base64.b64decode(img["src"][len(prefix):], validate=True) == png
            assert img["alt"] == f"profile of {name}, bond {bond}"
        assert name in section["text"]


def test_all_rows_of_a_compound_link_to_the_same_section(parsed):
    links = {}
    for row in parsed.body_rows:
        links.setdefault(row["cells"][0]["text"], set()).update(parsed_links(row))
    assert all(len(hrefs) == 1 for hrefs in links.values())
    assert len({href for hrefs in links.values() for href in hrefs}) == len(links)


def test_overview_is_embedded_near_the_top(inputs, parsed):
    imgs = [attrs for tag, attrs in parsed.starts if tag == "img"]
    prefix = "data:image/png;base64,"
    assert base64.b64decode(imgs[0]["src"][len(prefix):]) == inputs["overview_png"]
    tags = [(tag, attrs.get("id")) for tag, attrs in parsed.starts]
    assert [tag for tag, _ in tags].index("img") < tags.index(("table", "results"))
    without = parse(html_report(**{**inputs, "overview_png": None}))
    assert len([tag for tag, _ in without.starts if tag == "img"]) == len(imgs) - 1


def test_user_text_is_escaped(page, parsed):
    scripts = [attrs for tag, attrs in parsed.starts if tag == "script"]
    assert len(scripts) == 1  # only the sort script
    assert "alert" not in parsed.scripts[0]
    assert not any(tag == "parse" for tag, _ in parsed.starts)
    assert "<script>alert" not in page and "<parse>" not in page
    assert EVIL in "".join(parsed.texts)
    assert "Torsion scans: results/<demo>" in "".join(parsed.texts)
    # attribute values survive the round trip too
    titles = [attrs.get("title") for tag, attrs in parsed.starts if tag == "tr"]
    assert "SMILES <parse> error & more" in titles


def test_no_external_resources(page, parsed):
    for tag, attrs in parsed.starts:
        for key in ("src", "href"):
            value = (attrs.get(key) or "").strip().lower()
            assert not value.startswith(("http:", "https:", "//")), (tag, key, value)
        assert not (tag == "link" and "stylesheet" in (attrs.get("rel") or ""))
    assert "@import" not in page and "url(" not in page
    assert not any(tag in ("link", "iframe", "object") for tag, _ in parsed.starts)


def test_sort_script_is_present(parsed):
    assert [tag for tag, _ in parsed.starts].count("style") == 1
    (script,) = parsed.scripts
    assert "addEventListener(\"click\"" in script
    assert "data-sort" in script
    assert "getElementById(\"results\")" in script


def test_settings_and_run_info_are_listed(parsed):
    text = "".join(parsed.texts)
    for expected in ("optimizer.gtol", "optimizer.max_steps", "step_deg", "0.00045", "[0, 180]", "list file",
                     "inputs/demo.txt", "GFN2-xTB", "Semi-empirical estimate"):
        assert expected in text
    assert "optimizer" not in [piece.strip() for piece in parsed.texts]  # flattened, not a bare key
    footer = text[text.rindex("Generated by"):]
    assert "2026-05-09T07:35:25+00:00" in footer


def test_slugs_are_unique_and_id_safe():
    names = ["A b", "a-b", "a b!", "", "Ünïcode", "1,3-butadiene", "compound"]
    rows = [{"name": name, "bond": "1-2", "status": "done", "reason": ""} for name in names]
    parsed = parse(html_report(title="t", run_info={}, settings={}, caution="c", columns=["name", "bond"],
                               rows=rows, plots={}))
    ids = [attrs["id"] for tag, attrs in parsed.starts if tag == "section"]
    assert len(ids) == len(set(ids)) == len(names)
    assert all(re.fullmatch(r"c-[a-z0-9-]+", value) for value in ids)
    hrefs = [link for row in parsed.body_rows for link in row["cells"][0]["links"]]
    assert hrefs == ["#" + value for value in ids]


def test_pure_function_of_inputs(inputs):
    assert html_report(**inputs) == html_report(**inputs)


def test_empty_run():
    page = html_report(title="empty", run_info={}, settings={}, caution="c", columns=COLUMNS, rows=[], plots={})
    parsed = parse(page)
    assert parsed.errors == [] and parsed.body_rows == [] and parsed.head == COLUMNS
    assert not any(tag == "section" for tag, _ in parsed.starts)
