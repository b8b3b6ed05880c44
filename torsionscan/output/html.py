"""A self-contained HTML report of a batch run: one page, no external resources.

The page holds the run information, the settings (plain names with units), the method caution, a
sortable results table (one row per compound and bond; with typed columns the answer comes first,
the compound column stays in view while scrolling sideways, long reasons wrap and columns with no
value are left out) and one section per compound: its card (numbered SMILES, the numbered drawing,
the key numbers, warnings in words, what each bond's numbers say), its profile and
populations-vs-temperature figures (click to enlarge) and the 3-D view of the scan (output.viewer),
every image embedded as base64 data and the viewer library once per page. `html_report` is a pure
function of its inputs; writing the file is the caller's job.
"""

import base64
import html
import json
import math
import numbers
import re
import unicodedata

from ..quality import FLAG_MEANINGS
from .viewer import LIBRARY_NAME, VIEWER_SCRIPT, VIEWER_STYLE, library_script, viewer_block

MISSING = "\u2014"  # em dash, shown for None and NaN
# a 1 x 1 transparent PNG: the table's drawing until the page script copies the card's image in
_BLANK_PNG = ("data:image/png;base64,iVBORw0KGgoAAAANSUhEUgAAAAEAAAABCAQAAAC1HAwCAAAAC0lEQVR42mNkYAAAAAYAAjCB0C8AAAAASUVORK5CYII=")

_STYLE = """
:root { color-scheme: light; }
body { font-family: system-ui, -apple-system, "Segoe UI", Roboto, "Helvetica Neue", Arial, sans-serif;
       color: #222; background: #fff; margin: 0 auto; padding: 1rem 1.5rem 2rem; max-width: 96rem;
       line-height: 1.45; font-size: 15px; }
h1 { font-size: 1.5rem; margin: 0.5rem 0 1rem; font-weight: 600; }
h2 { font-size: 1.2rem; margin: 2rem 0 0.5rem; font-weight: 600; border-bottom: 1px solid #ddd;
     padding-bottom: 0.2rem; }
h3 { font-size: 1.05rem; margin: 1.6rem 0 0.4rem; font-weight: 600; }
a { color: #1f5f99; }
.caution { border: 1px solid #d9b44a; border-left: 5px solid #d9b44a; background: #fdf8e7;
           padding: 0.6rem 0.9rem; margin: 0 0 1.2rem; max-width: 60rem; }
.caution strong { display: block; margin-bottom: 0.2rem; }
.meta { display: flex; flex-wrap: wrap; gap: 1rem 2.5rem; align-items: flex-start; }
table.kv { border-collapse: collapse; font-size: 0.9rem; }
table.kv th, table.kv td { text-align: left; padding: 0.15rem 0.8rem 0.15rem 0; vertical-align: top;
                            border-bottom: 1px solid #eee; }
table.kv caption { text-align: left; font-size: 0.85rem; color: #555; padding-bottom: 0.2rem; }
table.kv th { font-weight: 600; color: #555; white-space: nowrap; }
table.kv td { font-family: ui-monospace, SFMono-Regular, Menlo, Consolas, monospace; font-size: 0.85rem;
              word-break: break-word; }
figure { margin: 0.8rem 0; }
figure img { max-width: 100%; height: auto; border: 1px solid #eee; }
figcaption { font-size: 0.85rem; color: #555; }
.note { font-size: 0.85rem; color: #555; margin: 0.3rem 0; }
.table-wrap { max-height: 75vh; overflow: auto; border: 1px solid #ddd; }
table.results { border-collapse: separate; border-spacing: 0; font-size: 0.85rem; width: 100%; }
table.results th, table.results td { padding: 0.25rem 0.6rem; border-bottom: 1px solid #eee;
                                     white-space: nowrap; background: #fff; }
table.results thead th { position: sticky; top: 0; z-index: 2; background: #f3f4f6; text-align: left;
                         border-bottom: 1px solid #ccc; cursor: pointer; user-select: none;
                         white-space: normal; min-width: 4.5rem; max-width: 9rem; vertical-align: bottom; }
table.results th:first-child, table.results td:first-child { position: sticky; left: 0; z-index: 1;
                                                             border-right: 1px solid #ddd; }
table.results thead th:first-child { z-index: 3; }
table.results td.col-reason, table.results td.col-flags, table.results td.col-smiles,
table.results td.col-population_model, table.results td.col-scis_meaning { white-space: normal;
                                                                           min-width: 10rem; max-width: 22rem; }
table.results td.col-flags { color: #8a5a00; }
table.results td.col-name a { display: inline-flex; align-items: center; gap: 0.4rem; }
table.results img.thumb { height: 60px; width: auto; border: none; background: #fff; }
table.results img.thumb[data-drawing] { display: none; }
table.results img.thumb.shown { display: inline; }
table.results thead th:hover, table.results thead th:focus { background: #e6e8eb; }
table.results thead th[aria-sort="ascending"]::after { content: " \\25B2"; font-size: 0.7em; }
table.results thead th[aria-sort="descending"]::after { content: " \\25BC"; font-size: 0.7em; }
table.results td.num { text-align: right; font-variant-numeric: tabular-nums; }
table.results td.na { color: #999; text-align: center; }
table.results tbody tr:hover { background: #f7f9fc; }
table.results tr.failed td { background: #fbeceb; }
table.results tr.flagged td.col-flags { background: #fdf3dc; }
table.results tr.failed td.col-status { color: #9b2c2c; font-weight: 600; }
.failure { border-left: 4px solid #c96a6a; background: #fbeceb; padding: 0.4rem 0.8rem; margin: 0.5rem 0; }
.plots { display: flex; flex-wrap: wrap; gap: 0.5rem 1.5rem; }
.card { display: flex; flex-wrap: wrap; gap: 0.5rem 1.5rem; align-items: flex-start; }
.card figure.structure { flex: 0 0 auto; }
.card .facts { flex: 1 1 28rem; font-size: 0.9rem; }
.card .facts h4 { font-size: 0.95rem; margin: 0.4rem 0 0.2rem; font-weight: 600; }
.card .facts ul { margin: 0.1rem 0 0.4rem; padding-left: 1.2rem; }
.smiles { font-family: ui-monospace, SFMono-Regular, Menlo, Consolas, monospace; font-size: 0.85rem;
          word-break: break-all; }
.plots figure { flex: 1 1 34rem; max-width: 46rem; }
figure img.zoomable { cursor: zoom-in; }
.zoom { position: fixed; inset: 0; background: rgba(0, 0, 0, 0.75); display: flex; align-items: center;
        justify-content: center; z-index: 10; cursor: zoom-out; }
.zoom img { max-width: 96vw; max-height: 96vh; background: #fff; }
.card .numbers { border-collapse: collapse; font-size: 0.85rem; margin: 0.2rem 0 0.5rem; }
.card .numbers th { text-align: left; font-weight: normal; color: #555; padding: 0.1rem 1rem 0.1rem 0; }
.card .numbers td { font-variant-numeric: tabular-nums; padding: 0.1rem 0; }
.warnings { border-left: 4px solid #d9b44a; background: #fdf8e7; padding: 0.3rem 0.8rem; margin: 0.4rem 0;
            font-size: 0.85rem; }
.warnings ul { margin: 0.1rem 0; padding-left: 1.1rem; }
.flag-legend { font-size: 0.85rem; }
.flag-legend dt { font-weight: 600; }
.flag-legend dd { margin: 0 0 0.3rem 1rem; color: #444; }
.card figure.structure img { width: 360px; }
.back { font-size: 0.8rem; }
footer { margin-top: 2.5rem; padding-top: 0.5rem; border-top: 1px solid #ddd; font-size: 0.8rem; color: #666; }
@media print {
  .scan-viewer { display: none; }
  .table-wrap { max-height: none; overflow: visible; border: none; }
  table.results thead th { position: static; }
  .back { display: none; }
}
"""

# Click (or Enter/Space on) a header: sort by that column, again to reverse. Cells with a
# data-sort attribute sort numerically, others as text; empty cells and the dash always sort last.
_SCRIPT = """
(function () {
  var table = document.getElementById("results");
  if (!table || !table.tHead || !table.tBodies.length) { return; }
  var body = table.tBodies[0];
  var heads = table.tHead.rows[0].cells;
  function key(cell) {
    if (!cell || cell.classList.contains("na")) { return null; }
    var raw = cell.getAttribute("data-sort");
    if (raw !== null) {
      var x = parseFloat(raw);
      if (!isNaN(x)) { return x; }
    }
    var text = cell.textContent.trim();
    return (text === "" || text === "\\u2014") ? null : text;
  }
  function compare(a, b) {
    var an = typeof a === "number", bn = typeof b === "number";
    if (an && bn) { return a < b ? -1 : (a > b ? 1 : 0); }
    if (an) { return -1; }
    if (bn) { return 1; }
    return a.localeCompare(b, undefined, {numeric: true, sensitivity: "base"});
  }
  function sortBy(index) {
    var head = heads[index];
    var dir = head.getAttribute("aria-sort") === "ascending" ? -1 : 1;
    for (var i = 0; i < heads.length; i++) { heads[i].removeAttribute("aria-sort"); }
    head.setAttribute("aria-sort", dir === 1 ? "ascending" : "descending");
    var items = Array.prototype.map.call(body.rows, function (row, position) {
      return {row: row, key: key(row.cells[index]), position: position};
    });
    items.sort(function (p, q) {
      if (p.key === null || q.key === null) {
        if (p.key === q.key) { return p.position - q.position; }
        return p.key === null ? 1 : -1;
      }
      return dir * compare(p.key, q.key) || p.position - q.position;
    });
    items.forEach(function (item) { body.appendChild(item.row); });
  }
  Array.prototype.forEach.call(heads, function (head, index) {
    head.addEventListener("click", function () { sortBy(index); });
    head.addEventListener("keydown", function (event) {
      if (event.key === "Enter" || event.key === " ") { event.preventDefault(); sortBy(index); }
    });
  });
})();
(function () {
  // the table's small drawings reuse the cards' images (each drawing is embedded once)
  Array.prototype.forEach.call(document.querySelectorAll("img.thumb[data-drawing]"), function (thumb) {
    var source = document.getElementById(thumb.getAttribute("data-drawing"));
    if (source) { thumb.src = source.src; thumb.classList.add("shown"); }
  });
  // click a figure to see it at full size, click again (or Escape) to close
  function closeZoom() { var z = document.querySelector(".zoom"); if (z) { z.remove(); } }
  Array.prototype.forEach.call(document.querySelectorAll("img.zoomable"), function (img) {
    img.addEventListener("click", function () {
      closeZoom();
      var overlay = document.createElement("div");
      overlay.className = "zoom";
      var big = document.createElement("img");
      big.src = img.src;
      big.alt = img.alt;
      overlay.appendChild(big);
      overlay.addEventListener("click", closeZoom);
      document.body.appendChild(overlay);
    });
  });
  document.addEventListener("keydown", function (event) { if (event.key === "Escape") { closeZoom(); } });
})();
"""


def _e(value):
    """Escaped text of any value, quotes included (safe in text and attributes)."""
    return html.escape(str(value), quote=True)


def _format_float(value):
    """Short display form of a finite float: 3 decimals, or 3 significant digits when tiny or huge."""
    if value == 0:
        return "0"
    if abs(value) < 1e-3 or abs(value) >= 1e6:
        return f"{value:.3g}"
    return f"{value:.3f}".rstrip("0").rstrip(".")


def _cell(value):
    """(display text, raw sort value or None) of one table value; display None means missing."""
    if value is None:
        return None, None
    if isinstance(value, bool) or getattr(getattr(value, "dtype", None), "kind", "") == "b":
        return ("yes" if value else "no"), None
    if isinstance(value, numbers.Integral):
        return str(int(value)), str(int(value))
    if isinstance(value, numbers.Real):
        value = float(value)
        if math.isnan(value):
            return None, None
        if math.isinf(value):
            return ("\u221e" if value > 0 else "\u2212\u221e"), ("Infinity" if value > 0 else "-Infinity")
        return _format_float(value), repr(value)
    return str(value), None


def _angle_display(value):
    if abs(value) > 179.95:
        value = 180.0  # the same point as -180: shown once
    return f"{round(value, 1) + 0.0:.1f}"


def _typed_cell(value, kind):
    """(display text, raw sort value or None) of a value of a typed column (output.report.report_columns):
    "pct" a fraction shown as percent with one decimal, "kcal" two decimals, "deg" one decimal
    (never -180.0), "time" three significant figures, "text" as _cell."""
    if kind == "text" or value is None or isinstance(value, (bool, str)) or not isinstance(value, numbers.Real):
        return _cell(value)
    value = float(value)
    if not math.isfinite(value):
        return _cell(value)
    if kind == "pct":
        return f"{100.0 * value:.1f}", repr(value)
    if kind == "kcal":
        return f"{round(value, 2) + 0.0:.2f}", repr(value)
    if kind == "deg":
        return _angle_display(value), repr(value)
    if kind == "time":
        return f"{value:.3g}", repr(value)
    return _cell(value)


# plain names (with units) of the settings keys; a key not listed is shown as it is
SETTING_NAMES = {
    "step_deg": "grid step (°)", "conformers": "start structures embedded", "seed": "embedding seed",
    "method": "method", "engine": "engine", "temperatures_k": "temperatures (K)",
    "scis_window_deg": "near-planar s-cis window, half-width (°)", "solvent": "solvent",
    "solvation_model": "solvation model", "frequencies": "harmonic frequencies and free energies",
    "temperature_range_k": "temperature range of the populations figure (K)",
    "hysteresis_kcal_mol": "hysteresis threshold (kcal/mol)",
}
_CONVERGENCE_NAMES = {"point_convergence": "scan points", "start_convergence": "start structure",
                      "refine_convergence": "stationary points"}
_CONVERGENCE_FIELDS = {"max_gradient": "largest gradient (Eh/Bohr)", "rms_gradient": "RMS gradient (Eh/Bohr)",
                       "max_evaluations": "gradient evaluations at most"}


def settings_pairs(settings):
    """[(plain name with unit, value)] of a settings dict (ScanSettings.as_dict); keys without a plain
    name stay as dotted keys."""
    pairs = []
    for key, value in settings.items():
        if key in _CONVERGENCE_NAMES and isinstance(value, dict):
            pairs += [(f"convergence, {_CONVERGENCE_NAMES[key]}: {_CONVERGENCE_FIELDS.get(k, k)}", v)
                      for k, v in value.items()]
        elif key in SETTING_NAMES:
            if key == "solvent" and value is None:
                value = "none (gas phase)"
            elif key == "solvation_model" and value is None:
                value = "ALPB when a solvent is given"
            elif key == "engine" and value == "auto":
                value = "auto (xtb-python if installed, else tblite)"
            elif isinstance(value, (list, tuple)):
                value = ", ".join(f"{v:g}" if isinstance(v, (int, float)) else str(v) for v in value)
            pairs.append((SETTING_NAMES[key], value))
        else:
            pairs.extend(_flatten({key: value}))
    return pairs


def _plain(value):
    """Display text of a settings or run-info value."""
    if isinstance(value, (list, tuple, dict)):
        return json.dumps(value, ensure_ascii=False)
    text, _ = _cell(value)
    return MISSING if text is None else text


def _flatten(mapping, prefix=""):
    """[(dotted key, value)] of a nested dict, in insertion order."""
    items = []
    for key, value in mapping.items():
        dotted = f"{prefix}{key}"
        if isinstance(value, dict) and value:
            items.extend(_flatten(value, dotted + "."))
        else:
            items.append((dotted, value))
    return items


def _kv_table(pairs, caption):
    lines = [f'<table class="kv"><caption>{_e(caption)}</caption><tbody>']
    for key, value in pairs:
        lines.append(f"<tr><th scope=\"row\">{_e(key)}</th><td>{_e(_plain(value))}</td></tr>")
    lines.append("</tbody></table>")
    return "\n".join(lines)


def _slugs(names):
    """A unique, id-safe slug per distinct name (ASCII letters, digits and hyphens)."""
    used, slugs = set(), {}
    for name in names:
        ascii_text = unicodedata.normalize("NFKD", str(name)).encode("ascii", "ignore").decode()
        base = re.sub(r"[^a-z0-9]+", "-", ascii_text.lower()).strip("-") or "compound"
        slug, count = base, 1
        while slug in used:
            count += 1
            slug = f"{base}-{count}"
        used.add(slug)
        slugs[name] = slug
    return slugs


def _count(n, word):
    return f"{n} {word}" + ("" if n == 1 else "s")


def _img(data, alt, mime="image/png", ident=None, css=None):
    encoded = base64.b64encode(bytes(data)).decode("ascii")
    extra = (f' id="{_e(ident)}"' if ident else "") + (f' class="{_e(css)}"' if css else "")
    return f'<img src="data:{mime};base64,{encoded}" alt="{_e(alt)}"{extra}>'


def _fact_items(texts):
    """<li> items of a card's sentences; a (heading, [sentences]) item becomes a nested list."""
    items = []
    for text in texts:
        if isinstance(text, (tuple, list)):
            heading, inner = text
            items.append(f"<li>{_e(heading)}<ul>{''.join(f'<li>{_e(t)}</li>' for t in inner)}</ul></li>")
        else:
            items.append(f"<li>{_e(text)}</li>")
    return "".join(items)


def _numbers_table(rows):
    lines = ['<table class="numbers"><tbody>']
    lines += [f"<tr><th scope=\"row\">{_e(k)}</th><td>{_e(v)}</td></tr>" for k, v in rows]
    lines.append("</tbody></table>")
    return "".join(lines)


def _card(name, card, slug="compound"):
    """A compound's card: numbered SMILES, the drawing (PNG, else SVG, as data), per bond its key
    numbers, its warnings in words and its sentences."""
    lines = []
    if card.get("smiles"):
        lines.append(f'<p class="smiles">{_e(card["smiles"])}</p>')
    lines.append('<div class="card">')
    alt = f"structure of {name} with atom numbers"
    drawing_id = f"draw-{slug}"
    if card.get("drawing_png"):
        lines.append(f'<figure class="structure">{_img(card["drawing_png"], alt, ident=drawing_id)}</figure>')
    elif card.get("drawing_svg"):
        lines.append(f'<figure class="structure">{_img(card["drawing_svg"], alt, "image/svg+xml", ident=drawing_id)}'
                     "</figure>")
    bonds = list(card.get("bonds", ()))
    numbers = card.get("numbers") or {}
    warnings = card.get("warnings") or {}
    if bonds:
        lines.append('<div class="facts">')
        for label, texts in bonds:
            lines.append(f"<h4>bond {_e(label)}</h4>")
            if numbers.get(label):
                lines.append(_numbers_table(numbers[label]))
            if warnings.get(label):
                items = "".join(f"<li>{_e(t)}</li>" for t in warnings[label])
                lines.append(f'<div class="warnings" role="note"><strong>Warnings</strong><ul>{items}</ul></div>')
            lines.append(f"<ul>{_fact_items(texts)}</ul>")
        lines.append("</div>")
    lines.append("</div>")
    return "\n".join(lines)


def _visible(columns, rows):
    """Columns that hold a value in at least one row (all of them when there is no row)."""
    if not rows:
        return columns
    failed = any(row.get("status") == "failed" for row in rows)
    return [c for c in columns if any(row.get(c[0]) not in (None, "") for row in rows)
            and (failed or c[0] != "status")]  # "done" in every row says nothing


def _results_table(columns, rows, slugs, drawings=()):
    """columns: [(key, header, kind)]; drawings: names whose card has a drawing (a thumbnail in the name cell)."""
    lines = ['<div class="table-wrap"><table class="results" id="results">', "<thead><tr>"]
    for key, header, _ in columns:
        lines.append(f'<th scope="col" tabindex="0" class="col-{_e(_class_safe(key))}" '
                     f'data-key="{_e(key)}" title="Sort by {_e(header)}">{_e(header)}</th>')
    lines.append("</tr></thead>")
    lines.append("<tbody>")
    for row in rows:
        failed = row.get("status") == "failed"
        classes = ["failed"] if failed else []
        if _warning_flags(row):
            classes.append("flagged")
        attrs = f' class="{" ".join(classes)}"' if classes else ""
        if failed and row.get("reason"):
            attrs += f' title="{_e(row["reason"])}"'
        cells = []
        for key, _, kind in columns:
            value = row.get(key)
            text, raw = _typed_cell(value, kind)
            classes = [f"col-{key}"] if re.fullmatch(r"[A-Za-z0-9_-]+", str(key)) else []
            if text is None:
                classes.append("na")
                content = MISSING
            elif key == "name":
                slug = slugs[row.get("name")]
                thumb = (f'<img class="thumb" src="{_BLANK_PNG}" data-drawing="draw-{slug}" alt="">'
                         if row.get("name") in drawings else "")
                content = f'<a href="#c-{slug}">{thumb}{_e(text)}</a>'
            else:
                content = _e(text)
            if raw is not None:
                classes.append("num")
            attr = f' class="{" ".join(classes)}"' if classes else ""
            if raw is not None:
                attr += f' data-sort="{_e(raw)}"'
            cells.append(f"<td{attr}>{content}</td>")
        lines.append(f"<tr{attrs}>{''.join(cells)}</tr>")
    lines.append("</tbody></table></div>")
    return "\n".join(lines)


def _class_safe(key):
    return re.sub(r"[^A-Za-z0-9_-]", "_", str(key))


def _warning_flags(row):
    """The flags of a table row that call for care (all but "symmetric rotor", which says what the row holds)."""
    return [f.strip() for f in str(row.get("flags") or "").split(",") if f.strip() and f.strip() != "symmetric rotor"]


def _flag_legend(rows):
    """What each flag raised in the table means (None when no row has a flag)."""
    raised = {flag.strip() for row in rows for flag in str(row.get("flags") or "").split(",") if flag.strip()}
    known = [flag for flag in FLAG_MEANINGS if flag in raised]
    if not known:
        return None
    items = "".join(f"<dt>{_e(flag)}</dt><dd>{_e(FLAG_MEANINGS[flag])}</dd>" for flag in known)
    return f'<dl class="flag-legend">{items}</dl>'


def _compound_section(name, slug, compound_rows, compound_plots, card=None, viewers=()):
    failed = [row for row in compound_rows if row.get("status") == "failed"]
    section_class = "compound failed" if failed and not compound_plots else "compound"
    lines = [f'<section id="c-{slug}" class="{section_class}">', f"<h3>{_e(name)}</h3>"]
    if card:
        lines.append(_card(name, card, slug))
    for row in failed:
        bond = row.get("bond")
        reason = row.get("reason") or "no reason recorded"
        where = "Failed" if bond in (None, "") else f"Bond {_e(bond)} failed"
        lines.append(f'<p class="failure"><strong>{where}:</strong> {_e(reason)}</p>')
    populations = (card or {}).get("populations") or {}
    if compound_plots:
        lines.append('<div class="plots">')
        for bond, png in compound_plots:
            lines.append(
                f"<figure>{_img(png, f'profile of {name}, bond {bond}', css='zoomable')}"
                f"<figcaption>bond {_e(bond)}: energy profile (click to enlarge)</figcaption></figure>"
            )
            if populations.get(bond):
                lines.append(
                    f"<figure>{_img(populations[bond], f'populations of {name}, bond {bond}', css='zoomable')}"
                    f"<figcaption>bond {_e(bond)}: s-cis populations against temperature (click to enlarge)"
                    "</figcaption></figure>")
        lines.append("</div>")
    elif not failed:
        lines.append('<p class="note">No plots.</p>')
    for data in viewers:
        lines.append(viewer_block(data, name))
    lines.append('<p class="back"><a href="#results">back to the table</a></p>')
    lines.append("</section>")
    return "\n".join(lines)


def html_report(*, title, run_info, settings, caution, columns, rows, plots, overview_png=None, cards=None,
                viewers=None) -> str:
    """One self-contained HTML page (opens offline) for a batch run.

    `rows` are dicts keyed by `columns` (plus at least name, bond, status and reason). `columns` are
    table keys shown as they are (header = key), or (key, header with unit, kind) triples
    (output.report.report_columns): then values are shown in the kind's unit and precision and
    columns with no value in any row are left out. `plots` maps a compound name to [(bond label,
    PNG bytes)]; `cards` (optional) maps a compound name to its card: {"smiles": str, "bonds":
    [(bond label, sentences as output.report.bond_texts)], "drawing_png": bytes or None,
    "drawing_svg": bytes or None, and optionally "numbers", "warnings" ({label: ...} as
    output.report.compound_card) and "populations" ({label: PNG bytes})}. `viewers` (optional) maps
    a compound name to [output.viewer.viewer_data]: the 3-D views, with the viewer library embedded
    once. The footer shows run_info["generated"] (or "updated") when present; the clock is never read here.
    """
    cards = cards or {}
    viewers = viewers or {}
    typed = all(isinstance(c, (tuple, list)) for c in columns) and bool(columns)
    shown = _visible([tuple(c) for c in columns], rows) if typed else [(c, c, "text") for c in columns]
    names = list(dict.fromkeys(row.get("name") for row in rows))
    slugs = _slugs(names)
    n_failed = sum(1 for row in rows if row.get("status") == "failed")
    n_flagged = sum(1 for row in rows if _warning_flags(row))
    drawings = {name for name, card in cards.items() if card.get("drawing_png") or card.get("drawing_svg")}
    settings_rows = settings_pairs(settings) if typed else _flatten(settings)

    parts = [
        "<!DOCTYPE html>",
        '<html lang="en">',
        "<head>",
        '<meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{_e(title)}</title>",
        f"<style>{_STYLE}{VIEWER_STYLE if viewers else ''}</style>",
        "</head>",
        "<body>",
        "<header>",
        f"<h1>{_e(title)}</h1>",
        f'<div class="caution" role="note"><strong>Caution</strong>{_e(caution)}</div>',
        "</header>",
        "<main>",
    ]
    parts.append("<h2>Results</h2>")
    summary = f"{_count(len(rows), 'row')} for {_count(len(names), 'compound')}"
    if n_failed:
        summary += f", {n_failed} failed"
    if n_flagged:
        summary += f", {n_flagged} flagged"
    parts.append(f'<p class="note">{summary}. Click a column header to sort; click again to reverse. '
                 "Click a compound for its card, figures and 3-D view.</p>")
    parts.append(_results_table(shown, rows, slugs, drawings))
    legend = _flag_legend(rows)
    if legend:
        parts.append("<h3>Flags</h3>")
        parts.append(legend)
    if overview_png is not None:
        parts.append(f'<figure class="overview">{_img(overview_png, "overview of all compounds", css="zoomable")}'
                     "</figure>")
    parts += ['<h2>Run and settings</h2>', '<div class="meta">', _kv_table(run_info.items(), "Run"),
              _kv_table(settings_rows, "Settings"), "</div>"]

    if names:
        parts.append("<h2>Compounds</h2>")
    for name in names:
        compound_rows = [row for row in rows if row.get("name") == name]
        parts.append(_compound_section(name, slugs[name], compound_rows, list(plots.get(name, ())), cards.get(name),
                                       viewers.get(name, ())))

    parts.append("</main>")
    generated = run_info.get("generated", run_info.get("updated"))
    footer = "Generated by torsionscan"
    if generated is not None:
        footer += f" at {_e(generated)}"
    if viewers:
        footer += f". 3-D view: {_e(LIBRARY_NAME)}, embedded"
    parts.append(f"<footer>{footer}.</footer>")
    parts.append(f"<script>{_SCRIPT}</script>")
    if viewers:
        parts.append(f'<script id="viewer-library">{library_script()}</script>')
        parts.append(f"<script>{VIEWER_SCRIPT}</script>")
    parts.append("</body>")
    parts.append("</html>")
    return "\n".join(parts) + "\n"
