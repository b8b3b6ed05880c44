"""The self-contained HTML report: structure, embedded plots, escaping, no external resources;
and the run's table rows, overview and report built from records (model-engine results: plumbing only):
the leading population answer and its named cross-checks in the table, symmetric rotors (their own
columns, left out of the overview), numbered SMILES, and each compound's card with its drawing."""

import base64
import csv
import dataclasses
import io
import json
import math
import re
from html.parser import HTMLParser

import matplotlib.pyplot as plt
import pytest
from matplotlib.figure import Figure

import torsionscan
from torsionscan import rotor
from torsionscan.compounds import CompoundEntry
from torsionscan.engines.model import MODEL_CAUTION, ModelEngine
from torsionscan.molecule import find_conjugated_bonds, load_molecule, numbered_smiles
from torsionscan.output.html import html_report
from torsionscan.output.report import (
    SLOW_INTERCONVERSION_NOTE, SYMMETRIC_ROTOR_REASON, compound_rows, overview_figure, symmetric_rotor_shape,
    table_columns,
)
from torsionscan.profile import FourierSeries
from torsionscan.records import Interconversion, MethodDisagreement, RescoredProfile, RrhoPopulations
from torsionscan.runfolder import write_run_report
from torsionscan.units import rt_kcal_mol
from torsionscan.settings import ScanSettings
from torsionscan.store import RunStore

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
        self._results_open = False  # inside the results table (it holds no other table)

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        self.starts.append((tag, attrs))
        if tag == "table" and attrs.get("id") == "results":
            self._results_open = True
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
        return self._results_open

    def handle_endtag(self, tag):
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"unexpected </{tag}> with open {self.stack[-3:]}")
            return
        self.stack.pop()
        if tag == "table":
            self._results_open = False
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


def test_the_table_comes_first_then_the_overview(inputs, parsed):
    imgs = [attrs for tag, attrs in parsed.starts if tag == "img"]
    prefix = "data:image/png;base64,"
    assert base64.b64decode(imgs[0]["src"][len(prefix):]) == inputs["overview_png"]
    tags = [(tag, attrs.get("id")) for tag, attrs in parsed.starts]
    assert tags.index(("table", "results")) < [tag for tag, _ in tags].index("img")
    assert tags.index(("table", "results")) < [tag for tag, _ in tags].index("caption")  # run and settings after it
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


# -- the run's table rows, overview and report from records ---------------------------------------
MODEL_SETTINGS = ScanSettings(conformers=2, frequencies=False)


@pytest.fixture(scope="module")
def model_scan():
    """Butadiene on the model potential: minima at +-90.72 deg, barriers 2.70 (180) and 5.30 (0) kcal/mol."""
    molecule = load_molecule("C=CC=C")
    (bond,) = find_conjugated_bonds(molecule)
    engine = ModelEngine(molecule.mol, [(bond.atoms, FourierSeries(0.0, (1.0, 2.0, 0.3), (0.0, 0.0, 0.0)))])
    return torsionscan.scan("C=CC=C", name="butadiene", engine=engine, settings=MODEL_SETTINGS)


def _record(name, status="done", reason="", **extra):
    return {"name": name, "smiles": "C=CC=C", "status": status, "reason": reason, "extra": extra,
            "wall_time_s": 1.25, "rescore_failure": ""}


@pytest.fixture(scope="module")
def biaryl_scan():
    """A biphenyl-shaped symmetric rotor on the model potential, V = -0.3 cos 2phi + 0.6 cos 4phi kcal/mol
    (minima where cos 2phi = 1/8; V(0) = 0.3, V(90) = 0.9, V(min) = -0.61875), marked symmetric."""
    molecule = load_molecule("c1ccccc1-c1ccccc1")
    (bond,) = find_conjugated_bonds(molecule)
    engine = ModelEngine(molecule.mol, [(bond.atoms, FourierSeries(0.0, (0.0, -0.3, 0.0, 0.6), (0.0,) * 4))])
    result = torsionscan.scan("c1ccccc1-c1ccccc1", name="biaryl", engine=engine,
                              settings=dataclasses.replace(MODEL_SETTINGS, step_deg=30.0))
    return dataclasses.replace(result, bonds=(dataclasses.replace(result.bonds[0], symmetric_rotor=True),))


INERTIA = 20.0  # amu Bohr^2, made up


def _filled(result, barrier_kcal=22.0):
    """The result with its quantum-rotor fields filled by hand (torsionscan.rotor, inertia INERTIA): rotor
    populations, wells, region free energies (s-cis other modes +0.4 kcal/mol), an all-harmonic estimate
    and an Eyring interconversion over barrier_kcal (hours at 298 K for 22 kcal/mol)."""
    (bond,) = result.bonds
    series = bond.profile.fit.series
    t = result.settings.temperatures_k[0]
    window = rotor.BOLTZMANN_WINDOW_RT * rt_kcal_mol(t)
    levels, vectors = rotor.torsional_levels(series, INERTIA, window_kcal_mol=window)
    rates = [rotor.eyring_rate(g, t) for g in (barrier_kcal, barrier_kcal - 0.5)]
    profile = dataclasses.replace(
        bond.profile, rotor_inertia_amu_bohr2=INERTIA, rotor=(rotor.rotor_populations(series, INERTIA, t),),
        wells=rotor.well_fundamentals(series, INERTIA),
        free_energies=(rotor.conformer_free_energies(levels, rotor.region_weights(vectors), 0.4, 0.0, t),),
        rrho_populations=(RrhoPopulations(t, 0.3, 0.7, -rt_kcal_mol(t) * math.log(0.3 / 0.7)),),
        interconversion=(Interconversion(t, barrier_kcal, barrier_kcal - 0.5, *rates, 1.0, 1.0,
                                         rotor.half_life_s(sum(rates))),))
    return dataclasses.replace(result, bonds=(dataclasses.replace(bond, profile=profile),))


def test_numbered_smiles_and_the_meaning_of_zero_go_into_the_table(model_scan):
    (row,) = compound_rows(_record("butadiene"), model_scan)
    assert row["smiles"] == numbered_smiles(model_scan.mol) == "[CH2:1]=[CH:2][CH:3]=[CH2:4]"
    assert row["scis_meaning"] == model_scan.bonds[0].scis_meaning == "s-cis: C1=C2 syn to C3=C4"
    (failed,) = compound_rows(_record("x", status="failed", reason="no"), None)
    assert failed["smiles"] == "C=CC=C"  # no result: the list's SMILES as given


def test_the_leading_answer_and_named_cross_checks_fill_the_table(model_scan):
    result = _filled(model_scan)
    (bond,) = result.bonds
    profile = bond.profile
    (row,) = compound_rows(_record("butadiene"), result)
    lead, (rate,) = profile.free_energies[0], profile.interconversion
    assert row["population_model"] == profile.population_model == "quantum hindered rotor with harmonic other modes"
    assert row["s_cis_298.15K"] == lead.s_cis
    assert row["dG_scis_minus_strans_298.15K_kcal_mol"] == round(lead.delta_g_kcal_mol, 4)
    assert row["scis_window_298.15K"] == profile.rotor[0].scis_window
    assert row["s_cis_classical_298.15K"] == profile.populations[0].s_cis
    assert row["s_cis_harmonic_298.15K"] == 0.3
    assert rate.half_life_s > 60.0
    assert row["half_life_298.15K_s"] == pytest.approx(rate.half_life_s, rel=1e-3)
    assert (row["symmetric_rotor"], row["twist_deg"], row["planar_barrier_kcal_mol"]) == (False, None, None)
    assert set(row) <= set(table_columns([298.15], []))


def test_a_symmetric_rotor_row_has_its_own_columns_and_no_s_cis_split(biaryl_scan):
    (row,) = compound_rows(_record("biaryl"), biaryl_scan)
    twist, planar, perpendicular = symmetric_rotor_shape(biaryl_scan.bonds[0].profile)
    assert row["symmetric_rotor"] is True
    # closed form of the model series (fixture docstring); 0.2 deg: the model's minimum refinement on a
    # flat well; 0.005 kcal/mol: the fit of a 30-degree grid
    assert row["twist_deg"] == round(twist, 3) and twist == pytest.approx(0.5 * math.degrees(math.acos(0.125)), abs=0.2)
    assert row["planar_barrier_kcal_mol"] == round(planar, 4) and planar == pytest.approx(0.91875, abs=5e-3)
    assert row["perpendicular_barrier_kcal_mol"] == round(perpendicular, 4)
    assert perpendicular == pytest.approx(1.51875, abs=5e-3)
    for key in ("s_cis_298.15K", "scis_window_298.15K", "dG_scis_minus_strans_298.15K_kcal_mol",
                "s_cis_classical_298.15K", "s_cis_harmonic_298.15K", "dG_to_planar_scis_298.15K_kcal_mol",
                "half_life_298.15K_s", "population_model", "scis_min_deg", "barrier_to_other_region_kcal_mol"):
        assert row.get(key) is None, key
    assert row["scis_meaning"] == biaryl_scan.bonds[0].scis_meaning and row["global_min_deg"] is not None


def test_the_overview_leaves_symmetric_rotors_out_and_says_why(model_scan, biaryl_scan):
    rows = compound_rows(_record("butadiene"), model_scan) + compound_rows(_record("biaryl"), biaryl_scan)
    figure = overview_figure(rows, 298.15, model_scan.method)
    labels = [t.get_text() for t in figure.axes[0].get_yticklabels()]
    notes = [t.get_text() for t in figure.texts]
    title = figure.axes[0].get_title()
    plt.close(figure)
    assert labels == ["butadiene  (bond 2-3)"]
    assert notes == [f"1 symmetric rotor bond not ranked: {SYMMETRIC_ROTOR_REASON}"]
    assert model_scan.bonds[0].profile.population_model in title
    figure = overview_figure(compound_rows(_record("butadiene"), model_scan), 298.15, model_scan.method)
    assert figure.texts == []
    plt.close(figure)


def test_cards_are_escaped_nested_and_embedded(inputs):
    png, svg = _png(7), b"<svg xmlns='http://www.w3.org/2000/svg'><text>1</text></svg>"
    cards = {"butadiene": {"smiles": "[CH2:1]=[CH:2]<x>", "drawing_png": png, "drawing_svg": svg,
                           "bonds": [("2-3", ["0° = s-cis: C1=C2 syn to C3=C4",
                                              ("populations (model <m>):", ["298.15 K: s-cis 1.0%"])])]},
             "biphenyl": {"smiles": "c", "drawing_png": None, "drawing_svg": svg, "bonds": []}}
    page = html_report(**{**inputs, "cards": cards})
    parsed = parse(page)
    assert parsed.errors == [] and "<x>" not in page and "<m>" not in page
    butadiene, biphenyl = (next(s for key, s in parsed.sections.items() if name in s["text"])
                           for name in ("butadiene", "biphenyl"))
    structure = butadiene["imgs"][0]
    assert structure["alt"] == "structure of butadiene with atom numbers"
    assert base64.b64decode(structure["src"].split(",", 1)[1]) == png
    assert len(butadiene["imgs"]) == 1 + len(inputs["plots"]["butadiene"])
    assert "[CH2:1]=[CH:2]<x>" in butadiene["text"] and "298.15 K: s-cis 1.0%" in butadiene["text"]
    assert "populations (model <m>):" in butadiene["text"] and "C1=C2 syn to C3=C4" in butadiene["text"]
    lists = [tag for tag, _ in parsed.starts].count("ul")
    assert lists == 2  # butadiene's bond list and its population sub-list; biphenyl has no bonds
    # no PNG: the SVG as data, so the page stays one file with no address in it
    assert biphenyl["imgs"][0]["src"].startswith("data:image/svg+xml;base64,")
    assert base64.b64decode(biphenyl["imgs"][0]["src"].split(",", 1)[1]) == svg
    assert "http://" not in page


def test_compound_rows_from_a_result(model_scan):
    (row,) = compound_rows(_record("butadiene", supplier="S-1", bond="list value"), model_scan)
    (bond,) = model_scan.bonds
    assert (row["name"], row["bond"], row["status"], row["reason"]) == ("butadiene", "2-3", "done", "")
    assert row["supplier"] == "S-1"  # list columns kept; ours win on a clash
    assert row["dihedral_atoms"] == "-".join(str(a + 1) for a in bond.dihedral_atoms)
    assert abs(row["global_min_deg"]) == pytest.approx(90.72, abs=0.01)
    assert row["global_min_deg"] == round(bond.profile.lowest_minimum().angle_deg, 3)
    assert row["scis_min_deg"] is None and row["scis_min_rel_kcal_mol"] is None  # both minima are beyond 90 deg
    assert row["strans_min_rel_kcal_mol"] == pytest.approx(0.0, abs=1e-4)
    # the two minima are both s-trans: no barrier into the other region
    assert row["barrier_to_other_region_kcal_mol"] is None
    assert row["rotation_max_kcal_mol"] == pytest.approx(5.30, abs=0.01)
    p, lead = bond.profile.populations[0], bond.profile.leading_populations()[0]
    window = (bond.profile.rotor or bond.profile.populations)[0].scis_window
    assert row["s_cis_298.15K"] == lead.s_cis and row["scis_window_298.15K"] == window
    assert row["s_cis_classical_298.15K"] == p.s_cis
    assert row.get("s_cis_harmonic_298.15K") is None and row.get("half_life_298.15K_s") is None  # no frequencies
    assert row["population_model"] == bond.profile.population_model
    assert row["fit_target_met"] is True and row["hysteresis"] is False
    assert row["compound_wall_time_s"] == 1.25
    assert "rescore_level" not in row
    assert set(row) - {"supplier"} <= set(table_columns([298.15], []))


def test_rescored_columns_come_from_the_rescored_profile(model_scan):
    (bond,) = model_scan.bonds
    energies = tuple(-1.0 + 0.0 * n for n in range(len(bond.relaxed_points)))  # stand-ins: plumbing only
    rescored = RescoredProfile("X/def2-svp", "", energies, bond.profile,
                               MethodDisagreement(0.1, 0.23456, 1.0, "differ"), 0.5)
    result = dataclasses.replace(model_scan, bonds=(dataclasses.replace(bond, rescored=rescored),))
    (row,) = compound_rows({**_record("butadiene"), "rescore_failure": ""}, result)
    assert row["rescore_level"] == "X/def2-svp"
    assert row["rescored_global_min_deg"] == round(bond.profile.lowest_minimum().angle_deg, 3)
    assert row["rescored_s_cis_298.15K"] == bond.profile.leading_populations()[0].s_cis
    assert (row["method_disagreement_max_kcal_mol"], row["method_disagreement_warning"]) == (0.2346, "differ")


def test_rows_of_failed_compounds_bonds_and_rescoring(model_scan):
    (row,) = compound_rows(_record("x", status="failed", reason="SCF failed"), None)
    assert (row["status"], row["reason"], row["compound_wall_time_s"]) == ("failed", "SCF failed", 1.25)
    partial = dataclasses.replace(model_scan, failed_bonds=(("5-6", "only 3 scan points converged"),))
    done, failed = compound_rows({**_record("butadiene"), "rescore_failure": "re-scoring at X/y failed: z"}, partial)
    assert (done["status"], done["reason"]) == ("done", "re-scoring at X/y failed: z")
    assert (failed["bond"], failed["status"], failed["reason"]) == ("5-6", "failed", "only 3 scan points converged")


def test_overview_is_titled_with_the_method(model_scan):
    rows = compound_rows(_record("butadiene"), model_scan)
    figure = overview_figure(rows, 298.15, model_scan.method)
    title = figure.axes[0].get_title()
    plt.close(figure)
    assert "model potential" in title and "GFN2" not in title


def test_the_run_report_is_rebuilt_from_the_store(tmp_path, model_scan):
    out = tmp_path / "run"
    with RunStore(out) as store:
        store.claim_settings(MODEL_SETTINGS.as_dict(), "list.csv")
        store.add_compounds([CompoundEntry(name="butadiene", where="line 2", smiles="C=CC=C", extra={"code": "A"}),
                             CompoundEntry(name=EVIL, where="line 3", smiles="C=C", extra={"code": "B"})])
        session = store.start_session("t")
        store.record_done("butadiene", model_scan, session, 1.0)
        store.record_failed(EVIL, "no conjugated single bond <here>", session)
    report, count = write_run_report(out)
    assert count == 2
    folder = out / "compounds" / "butadiene"
    written = (folder / "summary.json").read_bytes()
    assert json.loads(written) == model_scan.to_dict()
    with (out / "scan_table.csv").open() as handle:
        rows = list(csv.DictReader(handle))
    assert [(r["name"], r["status"], r["code"]) for r in rows] == [("butadiene", "done", "A"), (EVIL, "failed", "B")]
    assert math.isclose(float(rows[0]["rotation_max_kcal_mol"]), 5.30, abs_tol=0.01)
    page = report.read_text()
    parsed = parse(page)
    assert parsed.errors == []
    assert MODEL_CAUTION in "".join(parsed.texts)  # the caution of the results, not a fixed GFN text
    assert "<script>alert" not in page and "no conjugated single bond &lt;here&gt;" in page
    assert "http://" not in page and "https://" not in page
    assert (out / "overview.png").stat().st_size > 0
    # everything comes back from the database alone
    for path in [report, out / "scan_table.csv", out / "overview.png", *folder.iterdir()]:
        path.unlink()
    folder.rmdir()
    write_run_report(out, rebuild_folders=True)
    assert (folder / "summary.json").read_bytes() == written
    for name in ("bond_2-3_profile.png", "bond_2-3_scan.xyz", "bond_2-3_minima.sdf", "bond_2-3_profile.csv",
                 "structure.svg", "structure.png", "bond_2-3_structure.svg", "bond_2-3_structure.png"):
        assert (folder / name).stat().st_size > 0
    assert report.is_file() and (out / "scan_table.csv").is_file()


def test_the_report_card_shows_the_drawing_and_what_each_bond_says(tmp_path, model_scan, biaryl_scan):
    out = tmp_path / "run"
    filled = _filled(model_scan)
    with RunStore(out) as store:
        store.claim_settings(MODEL_SETTINGS.as_dict(), "list.csv")
        store.add_compounds([CompoundEntry(name="butadiene", where="line 2", smiles="C=CC=C", extra={}),
                             CompoundEntry(name="biaryl", where="line 3", smiles="c1ccccc1-c1ccccc1", extra={})])
        session = store.start_session("t")
        store.record_done("butadiene", filled, session, 1.0)
        store.record_done("biaryl", biaryl_scan, session, 1.0)
    report, _ = write_run_report(out)
    page = report.read_text()
    parsed = parse(page)
    assert parsed.errors == [] and "http://" not in page and "https://" not in page
    sections = {key[len("c-"):]: section for key, section in parsed.sections.items()}
    butadiene, biaryl = sections["butadiene"], sections["biaryl"]
    (bond,) = filled.bonds
    profile = bond.profile
    drawing = butadiene["imgs"][0]
    assert drawing["alt"] == "structure of butadiene with atom numbers"
    prefix = "data:image/png;base64,"
    assert drawing["src"].startswith(prefix)
    folder = out / "compounds" / "butadiene"
    assert base64.b64decode(drawing["src"][len(prefix):]) == (folder / "structure.png").read_bytes()
    text = butadiene["text"]
    lead, (well,), (rate,) = profile.free_energies[0], profile.wells, profile.interconversion
    assert numbered_smiles(filled.mol) in text and bond.scis_meaning in text
    assert f"populations ({profile.population_model}):" in text
    assert text.index(f"298.15 K: s-cis {100 * lead.s_cis:.1f}%") < text.index("cross-checks")
    assert "classical integral" in text and "all-harmonic, from free energies of the minima 30.0%" in text
    assert f"±{abs(well.angle_deg):.1f}° {well.fundamental_cm1:.1f} cm⁻¹" in text
    assert f"half-life {rate.half_life_s:.3g} s" in text and SLOW_INTERCONVERSION_NOTE in text
    assert f"symmetric rotor: {SYMMETRIC_ROTOR_REASON}" in biaryl["text"] and "populations (" not in biaryl["text"]
    twist, _, _ = symmetric_rotor_shape(biaryl_scan.bonds[0].profile)
    assert f"twist {twist:.1f}°" in biaryl["text"]
    with (out / "scan_table.csv").open() as handle:
        rows = {row["name"]: row for row in csv.DictReader(handle)}
    assert rows["biaryl"]["symmetric_rotor"] == "True" and rows["biaryl"]["s_cis_298.15K"] == ""
    assert rows["butadiene"]["smiles"] == "[CH2:1]=[CH:2][CH:3]=[CH2:4]"



def test_a_formula_name_is_text_in_the_run_table(tmp_path, model_scan):
    formula = '=HYPERLINK("http://x","y")'
    out = tmp_path / "run"
    with RunStore(out) as store:
        store.claim_settings(MODEL_SETTINGS.as_dict(), "list.csv")
        store.add_compounds([CompoundEntry(name=formula, where="line 2", smiles="C=CC=C", extra={"note": "+1 cup"}),
                             CompoundEntry(name="ethane", where="line 3", smiles="CC", extra={"note": "-5"})])
        session = store.start_session("t")
        store.record_done(formula, model_scan, session, 1.0)
        store.record_failed("ethane", "no conjugated single bond", session)
    write_run_report(out)
    text = (out / "scan_table.csv").read_text()
    rows = list(csv.DictReader(io.StringIO(text)))
    assert rows[0]["name"] == "'" + formula and rows[0]["note"] == "'+1 cup"  # read as text by spreadsheets
    assert rows[1]["note"] == "-5"  # a number stays a number
    assert float(rows[0]["rotation_max_kcal_mol"]) == pytest.approx(5.30, abs=0.01)
    assert "\n=" not in text and ",=" not in text


def test_the_viewer_library_is_embedded_once_and_names_no_address(tmp_path, model_scan):
    from torsionscan.output.viewer import library_script

    out = tmp_path / "run"
    with RunStore(out) as store:
        store.claim_settings(MODEL_SETTINGS.as_dict(), "list.csv")
        store.add_compounds([CompoundEntry(name=n, where="l", smiles="C=CC=C", extra={}) for n in ("a", "b")])
        session = store.start_session("t")
        for name in ("a", "b"):
            store.record_done(name, model_scan, session, 1.0)
    report, _ = write_run_report(out)
    page = report.read_text()
    assert page.count('<script id="viewer-library">') == 1 and library_script() in page
    assert page.count('class="scan-viewer"') == 2  # one 3-D view per compound and bond
    # the library's own download addresses are written with escaped slashes: the same JavaScript strings
    assert "http://" not in page and "https://" not in page and "https:\\/\\/files.rcsb.org" in page
    parsed = parse(page)
    thumbs = [attrs for tag, attrs in parsed.starts if tag == "img" and "thumb" in (attrs.get("class") or "")]
    assert len(thumbs) == 2 and all(t["src"].startswith("data:image/png;base64,") for t in thumbs)
