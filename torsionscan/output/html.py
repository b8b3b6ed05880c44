"""A self-contained HTML report of a batch run: one page, no external resources.

The page holds the run information, the settings, the method caution, a sortable results table
(one row per compound and bond) and one section per compound: its card (numbered SMILES, the
numbered drawing, what each bond's numbers say) and its profile plots, every image embedded as
base64 data. `html_report` is a pure function of its inputs; writing the file is the caller's job.
"""

import base64
import html
import json
import math
import numbers
import re
import unicodedata

MISSING = "\u2014"  # em dash, shown for None and NaN

_STYLE = """
:root { color-scheme: light; }
body { font-family: system-ui, -apple-system, "Segoe UI", Roboto, "Helvetica Neue", Arial, sans-serif;
       color: #222; background: #fff; margin: 0 auto; padding: 1rem 1.5rem 2rem; max-width: 72rem;
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
table.results { border-collapse: collapse; font-size: 0.85rem; width: 100%; }
table.results th, table.results td { padding: 0.25rem 0.6rem; border-bottom: 1px solid #eee;
                                     white-space: nowrap; }
table.results thead th { position: sticky; top: 0; z-index: 1; background: #f3f4f6; text-align: left;
                         border-bottom: 1px solid #ccc; cursor: pointer; user-select: none; }
table.results thead th:hover, table.results thead th:focus { background: #e6e8eb; }
table.results thead th[aria-sort="ascending"]::after { content: " \\25B2"; font-size: 0.7em; }
table.results thead th[aria-sort="descending"]::after { content: " \\25BC"; font-size: 0.7em; }
table.results td.num { text-align: right; font-variant-numeric: tabular-nums; }
table.results td.na { color: #999; text-align: center; }
table.results tbody tr:hover { background: #f7f9fc; }
table.results tr.failed { background: #fbeceb; }
table.results tr.failed:hover { background: #f7e0de; }
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
.plots figure { flex: 0 1 34rem; }
.back { font-size: 0.8rem; }
footer { margin-top: 2.5rem; padding-top: 0.5rem; border-top: 1px solid #ddd; font-size: 0.8rem; color: #666; }
@media print {
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


def _img(data, alt, mime="image/png"):
    encoded = base64.b64encode(bytes(data)).decode("ascii")
    return f'<img src="data:{mime};base64,{encoded}" alt="{_e(alt)}">'


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


def _card(name, card):
    """A compound's card: numbered SMILES, the drawing (PNG, else SVG, as data) and each bond's sentences."""
    lines = []
    if card.get("smiles"):
        lines.append(f'<p class="smiles">{_e(card["smiles"])}</p>')
    lines.append('<div class="card">')
    alt = f"structure of {name} with atom numbers"
    if card.get("drawing_png"):
        lines.append(f'<figure class="structure">{_img(card["drawing_png"], alt)}</figure>')
    elif card.get("drawing_svg"):
        lines.append(f'<figure class="structure">{_img(card["drawing_svg"], alt, "image/svg+xml")}</figure>')
    bonds = list(card.get("bonds", ()))
    if bonds:
        lines.append('<div class="facts">')
        for label, texts in bonds:
            lines.append(f"<h4>bond {_e(label)}</h4><ul>{_fact_items(texts)}</ul>")
        lines.append("</div>")
    lines.append("</div>")
    return "\n".join(lines)


def _results_table(columns, rows, slugs):
    lines = ['<div class="table-wrap"><table class="results" id="results">', "<thead><tr>"]
    for column in columns:
        lines.append(f'<th scope="col" tabindex="0" title="Sort by {_e(column)}">{_e(column)}</th>')
    lines.append("</tr></thead>")
    lines.append("<tbody>")
    for row in rows:
        failed = row.get("status") == "failed"
        attrs = ' class="failed"' if failed else ""
        if failed and row.get("reason"):
            attrs += f' title="{_e(row["reason"])}"'
        cells = []
        for column in columns:
            value = row.get(column)
            text, raw = _cell(value)
            classes = [f"col-{column}"] if re.fullmatch(r"[A-Za-z0-9_-]+", str(column)) else []
            if text is None:
                classes.append("na")
                content = MISSING
            elif column == "name":
                content = f'<a href="#c-{slugs[row.get("name")]}">{_e(text)}</a>'
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


def _compound_section(name, slug, compound_rows, compound_plots, card=None):
    failed = [row for row in compound_rows if row.get("status") == "failed"]
    section_class = "compound failed" if failed and not compound_plots else "compound"
    lines = [f'<section id="c-{slug}" class="{section_class}">', f"<h3>{_e(name)}</h3>"]
    if card:
        lines.append(_card(name, card))
    for row in failed:
        bond = row.get("bond")
        reason = row.get("reason") or "no reason recorded"
        where = "Failed" if bond in (None, "") else f"Bond {_e(bond)} failed"
        lines.append(f'<p class="failure"><strong>{where}:</strong> {_e(reason)}</p>')
    if compound_plots:
        lines.append('<div class="plots">')
        for bond, png in compound_plots:
            lines.append(
                f"<figure>{_img(png, f'profile of {name}, bond {bond}')}"
                f"<figcaption>bond {_e(bond)}</figcaption></figure>"
            )
        lines.append("</div>")
    elif not failed:
        lines.append('<p class="note">No plots.</p>')
    lines.append('<p class="back"><a href="#results">back to the table</a></p>')
    lines.append("</section>")
    return "\n".join(lines)


def html_report(*, title, run_info, settings, caution, columns, rows, plots, overview_png=None, cards=None) -> str:
    """One self-contained HTML page (opens offline) for a batch run.

    `rows` are dicts keyed by `columns` (plus at least name, bond, status and reason); `plots` maps
    a compound name to [(bond label, PNG bytes)]; `cards` (optional) maps a compound name to its
    card: {"smiles": str, "bonds": [(bond label, sentences as output.report.bond_texts)],
    "drawing_png": bytes or None, "drawing_svg": bytes or None}. The footer shows
    run_info["generated"] (or "updated") when present; the clock is never read here.
    """
    cards = cards or {}
    names = list(dict.fromkeys(row.get("name") for row in rows))
    slugs = _slugs(names)
    n_failed = sum(1 for row in rows if row.get("status") == "failed")

    parts = [
        "<!DOCTYPE html>",
        '<html lang="en">',
        "<head>",
        '<meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{_e(title)}</title>",
        f"<style>{_STYLE}</style>",
        "</head>",
        "<body>",
        "<header>",
        f"<h1>{_e(title)}</h1>",
        f'<div class="caution" role="note"><strong>Caution</strong>{_e(caution)}</div>',
        '<div class="meta">',
        _kv_table(run_info.items(), "Run"),
        _kv_table(_flatten(settings), "Settings"),
        "</div>",
        "</header>",
        "<main>",
    ]
    if overview_png is not None:
        parts.append(f'<figure class="overview">{_img(overview_png, "overview of all compounds")}</figure>')

    parts.append("<h2>Results</h2>")
    summary = f"{_count(len(rows), 'row')} for {_count(len(names), 'compound')}"
    if n_failed:
        summary += f", {n_failed} failed"
    parts.append(f'<p class="note">{summary}. Click a column header to sort; click again to reverse.</p>')
    parts.append(_results_table(columns, rows, slugs))

    if names:
        parts.append("<h2>Compounds</h2>")
    for name in names:
        compound_rows = [row for row in rows if row.get("name") == name]
        parts.append(_compound_section(name, slugs[name], compound_rows, list(plots.get(name, ())), cards.get(name)))

    parts.append("</main>")
    generated = run_info.get("generated", run_info.get("updated"))
    footer = "Generated by torsionscan"
    if generated is not None:
        footer += f" at {_e(generated)}"
    parts.append(f"<footer>{footer}.</footer>")
    parts.append(f"<script>{_SCRIPT}</script>")
    parts.append("</body>")
    parts.append("</html>")
    return "\n".join(parts) + "\n"
