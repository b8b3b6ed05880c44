"""The interactive 3-D view of a scan: the relaxed structures along the circle in the browser.

viewer_data turns a BondScan into the frames the page shows (every point of the full circle by
angle, a mirrored point as the mirror image of its computed structure, coordinates in Angstrom);
viewer_block is the HTML of one bond's view (3-D canvas, a small profile whose points select the
frame, a slider, the current point marked); VIEWER_SCRIPT is the page code that drives it with the
vendored 3Dmol.js (assets/3Dmol-min.js, BSD-3-Clause), which library_script returns for embedding
once per page. viewer_page is the standalone page of one compound. Only one view is live at a
time (a browser allows few WebGL contexts), so a report with many compounds stays responsive.
"""

import html
import json
import math
from functools import lru_cache
from importlib import resources

from ..units import BOHR_ANGSTROM

LIBRARY_NAME = "3Dmol.js 2.5.5 (BSD-3-Clause)"
_PROFILE_SIZE = (340, 160)  # pixels of the small profile under the 3-D view
_MARGIN = (34, 10, 20, 22)  # left, right, top, bottom


@lru_cache(maxsize=1)
def library_script():
    """The vendored 3Dmol.js (minified) as text for a <script> element.

    The library names the addresses of its optional download functions (PDB, PubChem), which a
    report never calls; every "://" of them (all inside string literals) is written ":\\/\\/", the
    same string to JavaScript, so the page holds no address that reads as an external resource."""
    text = resources.files(__package__).joinpath("assets", "3Dmol-min.js").read_text(encoding="utf-8")
    return text.replace("://", ":\\/\\/")


def _xyz_frame(symbols, coords_angstrom, comment):
    lines = [str(len(symbols)), comment]
    lines += [f"{s} {x:.4f} {y:.4f} {z:.4f}" for s, (x, y, z) in zip(symbols, coords_angstrom)]
    return "\n".join(lines) + "\n"


def viewer_data(result, bond):
    """The 3-D view of a BondScan as plain data: {"label", "atoms" (0-based i, j, k, l), "angles"
    (deg), "energies" (kcal/mol, relative), "converged", "xyz" (multi-frame XYZ in Angstrom, one
    frame per angle), "start" (frame of the global minimum)}; None when no point has a structure."""
    relaxed = bond.relaxed_points
    pairs = sorted(bond.points_with_frames(), key=lambda pair: pair[0].angle_deg)
    angles, energies, converged, frames = [], [], [], []
    for point, frame in pairs:
        coords = relaxed[frame].coords_bohr * BOHR_ANGSTROM
        if point.mirrored:  # the mirror image through a plane turns phi into -phi
            coords = coords * (1.0, 1.0, -1.0)
        energy = bond.profile.relative_kcal_mol(point.energy_hartree)
        angles.append(round(float(point.angle_deg), 3))
        energies.append(round(float(energy), 4))
        converged.append(bool(point.converged))
        frames.append(_xyz_frame(result.symbols, coords, f"{result.name} phi={point.angle_deg:.1f}"))
    if not frames:
        return None
    lowest = bond.profile.lowest_minimum()
    target = 0.0 if lowest is None else lowest.angle_deg
    start = min(range(len(angles)), key=lambda n: abs((angles[n] - target + 180.0) % 360.0 - 180.0))
    return {"label": bond.label, "atoms": [int(a) for a in bond.dihedral_atoms], "angles": angles,
            "energies": energies, "converged": converged, "xyz": "".join(frames), "start": start}


def _json_script(data):
    """JSON for a <script type="application/json"> element: no "</" or "<!--" can end it early."""
    return json.dumps(data, separators=(",", ":")).replace("<", "\\u003c").replace(">", "\\u003e")


def _profile_svg(data):
    """A small SVG of the profile: points (the frames) joined in order, axes in degrees and kcal/mol,
    and the marker of the current frame. Each point carries its frame number (data-frame)."""
    width, height = _PROFILE_SIZE
    left, right, top, bottom = _MARGIN
    energies = [e for e in data["energies"] if math.isfinite(e)]
    high = max(max(energies, default=1.0), 1.0)
    span = high * 1.1

    def x(angle):
        return left + (angle + 180.0) / 360.0 * (width - left - right)

    def y(energy):
        return top + (1.0 - energy / span) * (height - top - bottom)

    parts = [f'<svg class="profile-mini" viewBox="0 0 {width} {height}" width="{width}" height="{height}" '
             f'role="img" aria-label="energy profile; click a point to show its structure">']
    parts.append(f'<rect x="{left}" y="{top}" width="{width - left - right}" height="{height - top - bottom}" '
                 'fill="#fafafa" stroke="#ccc"/>')
    for tick in (-180, -90, 0, 90, 180):
        parts.append(f'<text x="{x(tick):.1f}" y="{height - 6}" font-size="9" text-anchor="middle" '
                     f'fill="#555">{tick}°</text>')
    for value in (0.0, high):
        parts.append(f'<text x="{left - 3}" y="{y(value) + 3:.1f}" font-size="9" text-anchor="end" '
                     f'fill="#555">{value:.1f}</text>')
    parts.append(f'<text x="4" y="{top - 8}" font-size="9" fill="#555">kcal/mol</text>')
    path = " ".join(f"{x(a):.1f},{y(e):.1f}" for a, e in zip(data["angles"], data["energies"]) if math.isfinite(e))
    parts.append(f'<polyline points="{path}" fill="none" stroke="#888" stroke-width="1"/>')
    for n, (a, e, ok) in enumerate(zip(data["angles"], data["energies"], data["converged"])):
        if math.isfinite(e):
            parts.append(f'<circle class="pt" data-frame="{n}" cx="{x(a):.1f}" cy="{y(e):.1f}" r="4" '
                         f'fill="{"#1f5fa8" if ok else "#d62728"}"><title>{a:.1f}°, {e:.2f} kcal/mol</title></circle>')
    parts.append('<circle class="current" r="7" fill="none" stroke="#f28e2b" stroke-width="2.5" cx="-20" cy="-20"/>')
    parts.append("</svg>")
    return "".join(parts)


def viewer_block(data, name):
    """The HTML of one bond's 3-D view (data from viewer_data): closed until its button is pressed."""
    label = html.escape(data["label"], quote=True)
    count = len(data["angles"])
    return (
        f'<div class="scan-viewer" data-bond="{label}">'
        f'<script type="application/json" class="scan-frames">{_json_script(data)}</script>'
        f'<button type="button" class="open-viewer">Turn the molecule: 3-D view of bond {label}</button>'
        '<div class="viewer-body">'
        f'<div class="mol3d" aria-label="{html.escape(f"3-D structure of {name} along the scan of bond {label}", quote=True)}"></div>'
        '<div class="viewer-side">'
        f'{_profile_svg(data)}'
        f'<label class="frame-pick">frame <input type="range" class="frame" min="0" max="{count - 1}" '
        f'step="1" value="{data["start"]}"></label>'
        '<p class="frame-text" aria-live="polite"></p>'
        '<p class="note">Drag the slider or click a point of the profile. Scanned bond in orange, the other two '
        'dihedral atoms in blue; drag the structure to turn it, scroll to zoom.</p>'
        '<p class="viewer-status"></p>'
        "</div></div></div>"
    )


VIEWER_STYLE = """
.scan-viewer { margin: 0.6rem 0; }
.scan-viewer .viewer-body { display: none; gap: 0.6rem 1.2rem; flex-wrap: wrap; align-items: flex-start; }
.scan-viewer.open .viewer-body { display: flex; }
.scan-viewer.open .open-viewer { display: none; }
.scan-viewer .mol3d { position: relative; width: 420px; height: 320px; border: 1px solid #ddd; overflow: hidden; }
.scan-viewer .frame-pick { display: block; margin: 0.3rem 0; }
.scan-viewer .viewer-side { flex: 1 1 20rem; font-size: 0.85rem; }
.scan-viewer input.frame { width: 240px; vertical-align: middle; }
.scan-viewer svg .pt { cursor: pointer; }
.scan-viewer .viewer-status { color: #9b2c2c; }
.open-viewer { font: inherit; font-size: 0.85rem; padding: 0.25rem 0.7rem; cursor: pointer; }
"""

# One live 3Dmol viewer at a time: opening a view closes the previous one (and frees its WebGL context).
# document.body.dataset.viewerFrames tells how many frames the open view holds (a test reads it).
VIEWER_SCRIPT = """
(function () {
  var active = null;
  var ORANGE = "#f28e2b", BLUE = "#4e9ad6";
  function close(state) {
    try { state.viewer.clear(); } catch (e) {}
    var canvas = state.block.querySelector(".mol3d canvas");
    if (canvas) {
      var gl = canvas.getContext("webgl2") || canvas.getContext("webgl");
      var lose = gl && gl.getExtension("WEBGL_lose_context");
      if (lose) { lose.loseContext(); }
    }
    state.block.querySelector(".mol3d").innerHTML = "";
    state.block.classList.remove("open");
    active = null;
  }
  function show(state, n) {
    var data = state.data;
    n = Math.max(0, Math.min(data.angles.length - 1, n));
    state.frame = n;
    state.block.querySelector("input.frame").value = n;
    var dot = state.block.querySelector('svg .pt[data-frame="' + n + '"]');
    var mark = state.block.querySelector("svg .current");
    if (dot && mark) { mark.setAttribute("cx", dot.getAttribute("cx")); mark.setAttribute("cy", dot.getAttribute("cy")); }
    state.block.querySelector(".frame-text").textContent = "\\u03c6 = " + data.angles[n].toFixed(1) + "\\u00b0, " +
      data.energies[n].toFixed(2) + " kcal/mol (frame " + (n + 1) + " of " + data.angles.length + ")" +
      (data.converged[n] ? "" : ", not converged");
    var done = state.viewer.setFrame(n);
    var render = function () { state.viewer.render(); document.body.dataset.viewerFrame = String(n); };
    if (done && typeof done.then === "function") { done.then(render); } else { render(); }
  }
  function open(block) {
    if (active && active.block === block) { return; }
    if (active) { close(active); }
    var status = block.querySelector(".viewer-status");
    var data = JSON.parse(block.querySelector("script.scan-frames").textContent);
    block.classList.add("open");
    if (typeof $3Dmol === "undefined") { status.textContent = "The 3-D viewer library is missing from this page."; return; }
    var viewer = null;
    try { viewer = $3Dmol.createViewer(block.querySelector(".mol3d"), {backgroundColor: "white"}); } catch (e) { viewer = null; }
    if (!viewer) { status.textContent = "This browser offers no WebGL, so the 3-D view cannot be drawn."; return; }
    viewer.addModelsAsFrames(data.xyz, "xyz");
    viewer.setStyle({}, {stick: {radius: 0.14, colorscheme: "grayCarbon"}, sphere: {scale: 0.22, colorscheme: "grayCarbon"}});
    viewer.setStyle({index: [data.atoms[1], data.atoms[2]]}, {stick: {radius: 0.2, color: ORANGE}, sphere: {scale: 0.3, color: ORANGE}});
    viewer.setStyle({index: [data.atoms[0], data.atoms[3]]}, {stick: {radius: 0.16, color: BLUE}, sphere: {scale: 0.27, color: BLUE}});
    viewer.zoomTo();
    active = {block: block, viewer: viewer, data: data, frame: data.start};
    document.body.dataset.viewerFrames = String(viewer.getModel().getNumFrames());
    document.body.dataset.viewerAtoms = String(viewer.getModel().selectedAtoms({}).length);
    show(active, data.start);
  }
  Array.prototype.forEach.call(document.querySelectorAll(".scan-viewer"), function (block) {
    block.querySelector(".open-viewer").addEventListener("click", function () { open(block); });
    block.querySelector("input.frame").addEventListener("input", function (event) {
      if (active && active.block === block) { show(active, parseInt(event.target.value, 10)); }
    });
    Array.prototype.forEach.call(block.querySelectorAll("svg .pt"), function (dot) {
      dot.addEventListener("click", function () {
        open(block);
        if (active && active.block === block) { show(active, parseInt(dot.getAttribute("data-frame"), 10)); }
      });
    });
  });
  var first = document.querySelector(".scan-viewer[data-autoopen]");
  if (first) { open(first); }
  window.torsionscanViewer = {open: open, show: function (n) { if (active) { show(active, n); } }};
})();
"""


def viewer_page(result, style=""):
    """A standalone HTML page of one compound: one 3-D view per scanned bond, the first open,
    the viewer library embedded (opens offline). None when no bond has a structure."""
    blocks = []
    for bond in result.bonds:
        data = viewer_data(result, bond)
        if data is not None:
            block = viewer_block(data, result.name)
            if not blocks:
                block = block.replace('<div class="scan-viewer"', '<div class="scan-viewer" data-autoopen', 1)
            blocks.append(f"<h2>bond {html.escape(bond.label)} (dihedral "
                          f"{'-'.join(str(a + 1) for a in bond.dihedral_atoms)})</h2>{block}")
    if not blocks:
        return None
    title = html.escape(f"{result.name}: relaxed structures along the scan ({result.method})")
    return "\n".join([
        "<!DOCTYPE html>", '<html lang="en">', "<head>", '<meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">', f"<title>{title}</title>",
        f"<style>body {{ font-family: system-ui, sans-serif; margin: 1rem 1.5rem; color: #222; }}"
        f" h2 {{ font-size: 1.1rem; }} .note {{ color: #555; }}{VIEWER_STYLE}{style}</style>",
        "</head>", "<body>", f"<h1>{title}</h1>",
        f'<p class="note">Angles in degrees, energies in kcal/mol relative to the lowest point of the profile. '
        f"3-D view: {LIBRARY_NAME}.</p>",
        *blocks,
        f'<script id="viewer-library">{library_script()}</script>',
        f"<script>{VIEWER_SCRIPT}</script>", "</body>", "</html>",
    ]) + "\n"
