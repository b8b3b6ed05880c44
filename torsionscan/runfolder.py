"""The run-level outputs of a batch, rebuilt from its database alone: the results table (CSV),
an overview figure, every compound's folder and a self-contained HTML report."""

from pathlib import Path

import matplotlib.pyplot as plt

from .output import STRUCTURE_NAME, atomic_write, bond_stem, figure_bytes, write_results
from .output.html import html_report
from .output.report import compound_card, compound_rows, overview_figure, report_columns, table_columns, write_table_csv
from .output.viewer import viewer_data
from .store import RunStore, compound_folder, utc_now

TABLE_NAME = "scan_table.csv"
OVERVIEW_NAME = "overview.png"
REPORT_NAME = "report.html"
NO_RESULT_CAUTION = "No compound of this run has finished yet: there are no results to judge."


def _distinct(values):
    return list(dict.fromkeys(values))


class RunReport(tuple):
    """(path of the HTML report, number of table rows); .flagged: [(name, bond, flags text)] of the
    table rows with a quality flag other than "symmetric rotor"."""

    def __new__(cls, report, count, flagged):
        made = super().__new__(cls, (report, count))
        made.flagged = flagged
        return made


def write_run_report(out_dir, rebuild_folders=False):
    """Write the table, overview and HTML report of a run folder from its database.

    rebuild_folders: rewrite every done compound's folder too (else only incomplete folders are
    written). Returns a RunReport: (path of the HTML report, number of table rows) with .flagged.
    """
    out_dir = Path(out_dir)
    with RunStore(out_dir, create=False) as store:
        info = store.run_info()
        settings = store.settings()
        records = [store.compound(name) for name in store.names()]
        results = {r["name"]: store.result(r["name"]) for r in records if r["status"] == "done"}
        counts = store.counts()
    extra = [key for r in records for key in r["extra"]]
    rows, plots, cards, viewers = [], {}, {}, {}
    for record in records:
        result = results.get(record["name"])
        rows += compound_rows(record, result)
        if result is None:
            continue
        folder = compound_folder(out_dir, record["name"])
        images = [folder / f"{bond_stem(bond.label)}_profile.png" for bond in result.bonds]
        drawing_png, drawing_svg = folder / f"{STRUCTURE_NAME}.png", folder / f"{STRUCTURE_NAME}.svg"
        complete = (folder / "summary.json").is_file() and drawing_svg.is_file() and all(
            image.is_file() for image in images)
        if rebuild_folders or not complete:
            write_results(result, folder)
        plots[record["name"]] = [(bond.label, image.read_bytes()) for bond, image in zip(result.bonds, images)]
        populations = {bond.label: folder / f"{bond_stem(bond.label)}_populations.png" for bond in result.bonds}
        cards[record["name"]] = {**compound_card(result), "drawing_svg": drawing_svg.read_bytes(),
                                 "drawing_png": drawing_png.read_bytes() if drawing_png.is_file() else None,
                                 "populations": {label: path.read_bytes() for label, path in populations.items()
                                                 if path.is_file()}}
        views = [viewer_data(result, bond) for bond in result.bonds]
        viewers[record["name"]] = [v for v in views if v is not None]

    columns = table_columns(settings["temperatures_k"], _distinct(extra))

    def write_table(path):
        with path.open("w", newline="") as handle:
            write_table_csv(handle, columns, rows)

    atomic_write(out_dir / TABLE_NAME, write_table)
    method = ", ".join(_distinct(r.method for r in results.values())) or settings["method"]
    figure = overview_figure(rows, settings["temperatures_k"][0], method)
    overview = figure_bytes(figure, "png")
    plt.close(figure)
    atomic_write(out_dir / OVERVIEW_NAME, lambda p: p.write_bytes(overview))
    run_info = {
        "run folder": str(out_dir), "compound list": info.get("list_file", ""),
        "compounds done": counts["done"], "failed": counts["failed"], "pending": counts["pending"],
        "method": method, "package version": info.get("package_version", ""),
        "settings hash": info.get("settings_hash", "")[:16], "created": info.get("created_utc", ""),
        "generated": utc_now(),
    }
    caution = " ".join(_distinct(r.caution for r in results.values())) or NO_RESULT_CAUTION
    page = html_report(
        title=f"Torsion scans: {out_dir.name}", run_info=run_info, settings=settings, caution=caution,
        columns=report_columns(settings["temperatures_k"], _distinct(extra)), rows=rows, plots=plots,
        overview_png=overview, cards=cards, viewers=viewers,
    )
    report = out_dir / REPORT_NAME
    atomic_write(report, lambda p: p.write_text(page, encoding="utf-8"))
    flagged = []
    for row in rows:
        flags = [f.strip() for f in str(row.get("flags") or "").split(",") if f.strip() and f.strip() != "symmetric rotor"]
        if flags:
            flagged.append((row["name"], row.get("bond"), ", ".join(flags)))
    return RunReport(report, len(rows), flagged)
