"""The run-level outputs of a batch, rebuilt from its database alone: the results table (CSV),
an overview figure, every compound's folder and a self-contained HTML report."""

import csv
from pathlib import Path

import matplotlib.pyplot as plt

from ..store import RunStore, compound_folder, utc_now
from . import atomic_write, bond_stem, figure_bytes, write_compound_folder
from .html import html_report
from .summary import METHOD_CAUTION

TABLE_NAME = "scan_table.csv"
OVERVIEW_NAME = "overview.png"
REPORT_NAME = "report.html"
_OVERVIEW_ROWS = 40  # bars drawn in the overview; a longer run shows its highest s-cis populations


def _temperature_key(temperature_k):
    return f"{temperature_k:g}K"


def table_columns(temperatures_k, extra_columns):
    """Columns of the results table, in order."""
    columns = ["name", "smiles", "bond", "dihedral_atoms", "status", "reason", "global_min_deg",
               "scis_min_deg", "scis_min_rel_kcal_mol", "strans_min_rel_kcal_mol",
               "barrier_to_other_region_kcal_mol", "rotation_max_kcal_mol"]
    for t in temperatures_k:
        key = _temperature_key(t)
        columns += [f"s_cis_{key}", f"scis_window_{key}", f"dG_scis_minus_strans_{key}_kcal_mol",
                    f"s_cis_rrho_{key}", f"dG_to_planar_scis_{key}_kcal_mol"]
    columns += ["fit_rmse_kcal_mol", "fit_target_met", "hysteresis", "rescore_level", "rescored_global_min_deg",
                "rescored_barrier_to_other_region_kcal_mol"]
    columns += [f"rescored_s_cis_{_temperature_key(t)}" for t in temperatures_k]
    columns += ["method_disagreement_max_kcal_mol", "method_disagreement_warning", "compound_wall_time_s"]
    return columns + [c for c in extra_columns if c not in columns]


def _lowest(minima, in_region):
    chosen = [m for m in minima if m["energy_rel_kcal_mol"] is not None and in_region(abs(m["angle_deg"]))]
    return min(chosen, key=lambda m: m["energy_rel_kcal_mol"], default=None)


def bond_row(entry):
    """The table values of one scanned bond (summary entry), and of its re-scored profile if any."""
    row = _profile_row(entry)
    if "rescored" in entry:
        rescored = _profile_row({**entry, **entry["rescored"], "points": []})
        row.update({"rescore_level": entry["rescore_level"],
                    "rescored_global_min_deg": rescored["global_min_deg"],
                    "rescored_barrier_to_other_region_kcal_mol": rescored["barrier_to_other_region_kcal_mol"],
                    "method_disagreement_max_kcal_mol": entry["method_disagreement"]["max_kcal_mol"],
                    "method_disagreement_warning": entry["method_disagreement"]["warning"] or ""})
        for p in entry["rescored"]["populations"]:
            row[f"rescored_s_cis_{_temperature_key(p['temperature_k'])}"] = p["s_cis"]
    return row


def _profile_row(entry):
    minima = entry["minima"]
    best = _lowest(minima, lambda a: True)
    scis = _lowest(minima, lambda a: a < 90.0)
    strans = _lowest(minima, lambda a: a > 90.0)
    crossing = None
    if best is not None:
        best_is_cis = abs(best["angle_deg"]) < 90.0
        heights = [
            b["height_kcal_mol"] for b in entry["barriers"]
            if abs(b["from_minimum_deg"] - best["angle_deg"]) < 1e-3
            and (abs(b["to_minimum_deg"]) < 90.0) != best_is_cis
        ]
        crossing = min(heights, default=None)
    energies = [p["energy_rel_kcal_mol"] for p in entry["points"] if p["energy_rel_kcal_mol"] is not None]
    energies += [m["energy_rel_kcal_mol"] for m in entry["maxima"] if m["energy_rel_kcal_mol"] is not None]
    row = {
        "bond": entry["bond"], "dihedral_atoms": "-".join(str(a) for a in entry["dihedral_atoms"]),
        "global_min_deg": best and best["angle_deg"],
        "scis_min_deg": scis and scis["angle_deg"],
        "scis_min_rel_kcal_mol": scis and scis["energy_rel_kcal_mol"],
        "strans_min_rel_kcal_mol": strans and strans["energy_rel_kcal_mol"],
        "barrier_to_other_region_kcal_mol": crossing,
        "rotation_max_kcal_mol": max(energies, default=None),
        "fit_rmse_kcal_mol": entry["fourier"]["rmse_kcal_mol"],
        "fit_target_met": entry["fourier"]["target_met"],
        "hysteresis": entry["hysteresis"]["flagged"],
    }
    for p in entry["populations"]:
        key = _temperature_key(p["temperature_k"])
        row[f"s_cis_{key}"] = p["s_cis"]
        row[f"scis_window_{key}"] = p["scis_window"]
        row[f"dG_scis_minus_strans_{key}_kcal_mol"] = p["delta_g_scis_minus_strans_kcal_mol"]
        row[f"s_cis_rrho_{key}"] = p.get("s_cis_rrho")
    for r in entry.get("cycloaddition_readiness", []):
        row[f"dG_to_planar_scis_{_temperature_key(r['temperature_k'])}_kcal_mol"] = r["dG_to_planar_scis_kcal_mol"]
    return row


def compound_rows(record, summary):
    """Table rows of one compound (record: RunStore.compound; summary: None unless done)."""
    # list columns first, so a column of the same name as one of ours cannot replace our value
    base = {**record["extra"], "name": record["name"], "smiles": record["smiles"],
            "compound_wall_time_s": record["wall_time_s"]}
    if summary is None:
        return [{**base, "status": record["status"], "reason": record["reason"]}]
    base["smiles"] = summary["smiles"]
    rows = [{**base, **bond_row(entry), "status": "done", "reason": ""} for entry in summary["bonds"]]
    rows += [{**base, "bond": f["bond"], "status": "failed", "reason": f["reason"]} for f in summary["failed_bonds"]]
    return rows


def overview_figure(rows, temperature_k):
    """Ranked bars: s-cis population of every scanned bond at one temperature, barrier beside it."""
    key = f"s_cis_{_temperature_key(temperature_k)}"
    done = sorted((r for r in rows if r.get(key) is not None), key=lambda r: r[key], reverse=True)
    shown = done[:_OVERVIEW_ROWS]
    fig, ax = plt.subplots(figsize=(8.0, 1.2 + 0.32 * max(len(shown), 1)), dpi=110)
    labels = [f"{r['name']}  (bond {r['bond']})" for r in shown]
    values = [100.0 * r[key] for r in shown]
    positions = range(len(shown))
    ax.barh(positions, values, color="#1f5fa8", height=0.65)
    for y, row, value in zip(positions, shown, values):
        barrier = row["barrier_to_other_region_kcal_mol"]
        note = f"{value:.1f}%" + (f"   barrier {barrier:.1f} kcal/mol" if barrier is not None else "")
        ax.text(value + 1.0, y, note, va="center", fontsize=7, color="#333333")
    ax.set_yticks(list(positions), labels, fontsize=8)
    ax.invert_yaxis()
    ax.set_xlim(0, 150)
    ax.set_xticks(range(0, 101, 20))
    ax.set_xlabel(f"s-cis population (|φ| < 90°) at {temperature_k:g} K / %")
    more = f" (highest {len(shown)} of {len(done)})" if len(done) > len(shown) else ""
    ax.set_title(f"s-cis population by bond{more}; barrier from the global minimum into the other region\n"
                 "GFN2-xTB relaxed scans: semi-empirical estimates", fontsize=9)
    fig.tight_layout()
    return fig


def write_run_report(out_dir, rebuild_folders=False):
    """Write the table, overview and HTML report of a run folder from its database.

    rebuild_folders: rewrite every done compound's folder too (else only missing plots are redrawn).
    Returns (path of the HTML report, number of table rows).
    """
    out_dir = Path(out_dir)
    with RunStore(out_dir, create=False) as store:
        info = store.run_info()
        settings = store.settings()
        records = [store.compound(name) for name in store.names()]
        summaries = {r["name"]: store.summary(r["name"]) for r in records if r["status"] == "done"}
        extra = [key for r in records for key in r["extra"]]
        rows, plots = [], {}
        for record in records:
            summary = summaries.get(record["name"])
            rows += compound_rows(record, summary)
            if summary is None:
                continue
            folder = compound_folder(out_dir, record["name"])
            images = [folder / f"{bond_stem(entry['bond'])}_profile.png" for entry in summary["bonds"]]
            complete = (folder / "summary.json").is_file() and all(image.is_file() for image in images)
            if rebuild_folders or not complete:
                write_compound_folder(summary, store.structures(record["name"]), folder)
            plots[record["name"]] = [(entry["bond"], image.read_bytes()) for entry, image in zip(summary["bonds"], images)]
        counts = store.counts()

    columns = table_columns(settings["temperatures_k"], list(dict.fromkeys(extra)))

    def write_table(path):
        with path.open("w", newline="") as handle:
            writer = csv.DictWriter(handle, fieldnames=columns, extrasaction="ignore")
            writer.writeheader()
            writer.writerows(rows)

    atomic_write(out_dir / TABLE_NAME, write_table)
    figure = overview_figure(rows, settings["temperatures_k"][0])
    overview = figure_bytes(figure, "png")
    plt.close(figure)
    atomic_write(out_dir / OVERVIEW_NAME, lambda p: p.write_bytes(overview))
    run_info = {
        "run folder": str(out_dir), "compound list": info.get("list_file", ""),
        "compounds done": counts["done"], "failed": counts["failed"], "pending": counts["pending"],
        "method": settings["method"], "package version": info.get("package_version", ""),
        "settings hash": info.get("settings_hash", "")[:16], "created": info.get("created_utc", ""),
        "generated": utc_now(),
    }
    page = html_report(
        title=f"Torsion scans: {out_dir.name}", run_info=run_info, settings=settings, caution=METHOD_CAUTION,
        columns=columns, rows=rows, plots=plots, overview_png=overview,
    )
    report = out_dir / REPORT_NAME
    atomic_write(report, lambda p: p.write_text(page, encoding="utf-8"))
    return report, len(rows)

