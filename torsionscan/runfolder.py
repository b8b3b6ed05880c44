"""The run-level outputs of a batch, rebuilt from its database alone: the results table (CSV),
an overview figure, every compound's folder and a self-contained HTML report."""

import csv
from pathlib import Path

import matplotlib.pyplot as plt

from .output import STRUCTURE_NAME, atomic_write, bond_stem, figure_bytes, write_results
from .output.html import html_report
from .output.report import compound_card, compound_rows, overview_figure, table_columns
from .store import RunStore, compound_folder, utc_now

TABLE_NAME = "scan_table.csv"
OVERVIEW_NAME = "overview.png"
REPORT_NAME = "report.html"
NO_RESULT_CAUTION = "No compound of this run has finished yet: there are no results to judge."


def _distinct(values):
    return list(dict.fromkeys(values))


def write_run_report(out_dir, rebuild_folders=False):
    """Write the table, overview and HTML report of a run folder from its database.

    rebuild_folders: rewrite every done compound's folder too (else only incomplete folders are
    written). Returns (path of the HTML report, number of table rows).
    """
    out_dir = Path(out_dir)
    with RunStore(out_dir, create=False) as store:
        info = store.run_info()
        settings = store.settings()
        records = [store.compound(name) for name in store.names()]
        results = {r["name"]: store.result(r["name"]) for r in records if r["status"] == "done"}
        counts = store.counts()
    extra = [key for r in records for key in r["extra"]]
    rows, plots, cards = [], {}, {}
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
        cards[record["name"]] = {**compound_card(result), "drawing_svg": drawing_svg.read_bytes(),
                                 "drawing_png": drawing_png.read_bytes() if drawing_png.is_file() else None}

    columns = table_columns(settings["temperatures_k"], _distinct(extra))

    def write_table(path):
        with path.open("w", newline="") as handle:
            writer = csv.DictWriter(handle, fieldnames=columns, extrasaction="ignore")
            writer.writeheader()
            writer.writerows(rows)

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
        columns=columns, rows=rows, plots=plots, overview_png=overview, cards=cards,
    )
    report = out_dir / REPORT_NAME
    atomic_write(report, lambda p: p.write_text(page, encoding="utf-8"))
    return report, len(rows)
