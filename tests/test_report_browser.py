"""The batch report in a real browser (headless Chromium, 1400 x 900 px): the s-cis column is in the
first screen, a click on its header sorts the table, every compound shows a drawing and a profile,
and the 3-D viewer (the vendored 3Dmol.js, WebGL in software) loads the frames of a scan.

The run is three model-engine compounds stored in a real run database (one failed with a long
reason, one with hysteresis), so the page is the one `torsionscan report` writes. A probe script
appended to a copy of the page runs the checks after load and writes them into the DOM, which
Chromium prints with --dump-dom. Skipped when Chromium is not installed.
"""

import dataclasses
import json
import re
import shutil
import subprocess

import pytest

import torsionscan
from torsionscan.compounds import CompoundEntry
from torsionscan.engines.model import ModelEngine
from torsionscan.molecule import find_conjugated_bonds, load_molecule
from torsionscan.profile import FourierSeries
from torsionscan.records import Hysteresis
from torsionscan.runfolder import write_run_report
from torsionscan.settings import ScanSettings
from torsionscan.store import RunStore

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser") or shutil.which("google-chrome")
pytestmark = pytest.mark.skipif(CHROMIUM is None, reason="headless Chromium is not installed "
                                "(apt-get install chromium); the report's browser checks need it")
SETTINGS = ScanSettings(conformers=2, frequencies=False, step_deg=30.0)
WIDTH, HEIGHT = 1400, 900
LONG_REASON = ("no conjugated single bond: the molecule has no C=C-C=C, C=C-C=O or aryl-vinyl single bond "
               "that could be scanned; give --bond j-k to scan another single bond")
FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync", "--hide-scrollbars",
         f"--window-size={WIDTH},{HEIGHT}"]

PROBE = """<script>
window.addEventListener("load", function () {
  var out = {width: window.innerWidth, height: window.innerHeight};
  try {
    var heads = Array.prototype.slice.call(document.querySelectorAll("#results thead th"));
    var scis = heads.filter(function (h) { return /^s-cis at /.test(h.textContent); })[0];
    var r = scis.getBoundingClientRect();
    out.scis = {left: r.left, right: r.right, top: r.top, bottom: r.bottom};
    var index = heads.indexOf(scis);
    function column() {
      return Array.prototype.map.call(document.querySelectorAll("#results tbody tr"), function (row) {
        var cell = row.cells[index];
        return cell.classList.contains("na") ? null : parseFloat(cell.getAttribute("data-sort"));
      });
    }
    out.before = column();
    scis.click();
    out.ascending = column();
    scis.click();
    out.descending = column();
    out.sections = Array.prototype.map.call(document.querySelectorAll("section.compound"), function (s) {
      var img = function (selector) {
        var found = s.querySelector(selector);
        return found ? found.naturalWidth : 0;
      };
      return {id: s.id, drawing: img("figure.structure img"), profile: img('.plots img[alt^="profile of"]'),
              failed: s.classList.contains("failed")};
    });
    out.thumbs = Array.prototype.map.call(document.querySelectorAll("img.thumb"), function (t) { return t.naturalWidth; });
    var block = document.querySelector(".scan-viewer");
    out.expectedFrames = JSON.parse(block.querySelector("script.scan-frames").textContent).angles.length;
    block.querySelector(".open-viewer").click();
    window.torsionscanViewer.show(3);
    out.status = block.querySelector(".viewer-status").textContent;
    out.canvas = !!block.querySelector(".mol3d canvas");
  } catch (e) { out.error = String(e); }
  setTimeout(function () {
    out.frames = document.body.dataset.viewerFrames;
    out.atoms = document.body.dataset.viewerAtoms;
    out.frame = document.body.dataset.viewerFrame;
    var mark = document.querySelector(".scan-viewer svg .current");
    var dot = document.querySelector('.scan-viewer svg .pt[data-frame="3"]');
    out.marked = !!(mark && dot && mark.getAttribute("cx") === dot.getAttribute("cx"));
    out.text = document.querySelector(".scan-viewer .frame-text").textContent;
    var pre = document.createElement("pre");
    pre.id = "probe";
    pre.textContent = JSON.stringify(out);
    document.body.appendChild(pre);
  }, 300);
});
</script>"""


def _model(smiles, name, coefficients):
    molecule = load_molecule(smiles)
    bond = find_conjugated_bonds(molecule)[0]
    engine = ModelEngine(molecule.mol, [(bond.atoms, FourierSeries(0.0, coefficients, (0.0,) * len(coefficients)))])
    return torsionscan.scan(smiles, name=name, engine=engine, settings=SETTINGS)


@pytest.fixture(scope="module")
def report(tmp_path_factory):
    out = tmp_path_factory.mktemp("browser") / "run"
    butadiene = _model("C=CC=C", "butadiene", (1.0, 2.0, 0.3))
    acrolein = _model("C=CC=O", "acrolein", (-0.8, 1.5, 0.2))
    bond = dataclasses.replace(acrolein.bonds[0], hysteresis=(Hysteresis(60.0, 0.8),))
    acrolein = dataclasses.replace(acrolein, bonds=(bond,))
    with RunStore(out) as store:
        store.claim_settings(SETTINGS.as_dict(), "list.csv")
        store.add_compounds([CompoundEntry(name=n, where=str(k), smiles=s, extra={"supplier": f"S-{k}"})
                             for k, (n, s) in enumerate([("butadiene", "C=CC=C"), ("acrolein", "C=CC=O"),
                                                         ("ethane", "CC")])])
        session = store.start_session("t")
        store.record_done("butadiene", butadiene, session, 1.0)
        store.record_done("acrolein", acrolein, session, 1.0)
        store.record_failed("ethane", LONG_REASON, session)
    page, _ = write_run_report(out)
    return page


def _chromium(args, tmp_path):
    command = [CHROMIUM, *FLAGS, f"--user-data-dir={tmp_path / 'profile'}", *args]
    return subprocess.run(command, capture_output=True, text=True, timeout=120)


def test_the_report_in_a_browser(report, tmp_path):
    probe = tmp_path / "probe.html"
    probe.write_text(report.read_text(encoding="utf-8").replace("</body>", PROBE + "</body>"), encoding="utf-8")
    shot = tmp_path / "report.png"
    _chromium([f"--screenshot={shot}", report.as_uri()], tmp_path)
    assert shot.is_file() and shot.stat().st_size > 10_000  # the first screen, for a person to look at
    done = _chromium(["--virtual-time-budget=5000", "--dump-dom", probe.as_uri()], tmp_path)
    found = re.search(r'<pre id="probe">(.*?)</pre>', done.stdout, re.S)
    assert found, done.stderr[-2000:]
    out = json.loads(found.group(1).replace("&quot;", '"').replace("&amp;", "&").replace("&lt;", "<")
                     .replace("&gt;", ">"))
    assert "error" not in out, out.get("error")
    # the s-cis share is in the first screen, not pushed past the right edge by a long reason
    assert 0 <= out["scis"]["left"] and out["scis"]["right"] <= out["width"]
    assert 0 <= out["scis"]["top"] and out["scis"]["bottom"] <= out["height"]
    # sorting: numbers ascending, then descending; the failed row (no value) stays last
    values = [v for v in out["before"] if v is not None]
    assert len(values) == 2 and out["ascending"] == sorted(values) + [None]
    assert out["descending"] == sorted(values, reverse=True) + [None]
    done_sections = [s for s in out["sections"] if not s["failed"]]
    assert len(done_sections) == 2 and len(out["sections"]) == 3
    assert all(s["drawing"] > 100 and s["profile"] > 300 for s in done_sections), out["sections"]
    assert len(out["thumbs"]) == 2 and all(width > 0 for width in out["thumbs"])
    # the 3-D view: every frame of the scan loaded, the chosen one shown and marked on the profile
    assert out["canvas"] and out["status"] == ""
    assert int(out["frames"]) == out["expectedFrames"] == 12  # 30 degree grid, full circle
    assert int(out["atoms"]) == 10 and out["frame"] == "3" and out["marked"]
    assert "frame 4 of 12" in out["text"] and "kcal/mol" in out["text"]
