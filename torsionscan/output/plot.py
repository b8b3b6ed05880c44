"""The profile figure: scan points, fitted curve, s-cis/s-trans regions, minima and barriers."""

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from ..profile import FourierSeries  # noqa: E402

_SCIS_SHADE = "#dfe9f5"
_STRANS_SHADE = "#f6eadb"
_WINDOW_SHADE = "#b9d0ea"


def profile_figure(name, entry, title=None):
    """A matplotlib Figure of one dihedral's relaxed profile from its summary entry (output.summary.bond_dict).

    Drawn from the summary alone (relative energies in kcal/mol), so a stored run can be re-plotted.
    """
    coefficients = entry["fourier"]["series_kcal_mol"]
    series = FourierSeries(coefficients["constant"], coefficients["cos"], coefficients["sin"])
    fig, (ax, lower) = plt.subplots(2, 1, figsize=(8.0, 7.6), dpi=110, sharex=True,
                                    gridspec_kw={"height_ratios": [3.0, 1.1]})
    populations = entry["populations"]
    window = populations[0]["scis_window_deg"] if populations else 30.0
    ax.axvspan(-90, 90, color=_SCIS_SHADE, zorder=0, label="s-cis region (|φ| < 90°)")
    ax.axvspan(-window, window, color=_WINDOW_SHADE, zorder=0, label=f"near-planar s-cis window (|φ| ≤ {window:g}°)")
    ax.axvspan(-180, -90, color=_STRANS_SHADE, zorder=0, label="s-trans region (|φ| > 90°)")
    ax.axvspan(90, 180, color=_STRANS_SHADE, zorder=0)

    dense = np.linspace(-180, 180, 721)
    ax.plot(dense, series.value(dense), color="#333333", lw=1.5,
            label=f"Fourier fit, order {series.order} (RMSE {entry['fourier']['rmse_kcal_mol']:.2f})")
    for mirrored, legend in ((False, "relaxed scan points"), (True, "mirror images")):
        pts = [p for p in entry["points"] if p["mirrored"] == mirrored and p["energy_rel_kcal_mol"] is not None]
        if not pts:
            continue
        x = [p["angle_deg"] for p in pts]
        y = [p["energy_rel_kcal_mol"] for p in pts]
        ax.plot(x, y, "o", ms=5, mfc="white" if mirrored else "#1f5fa8", mec="#1f5fa8", ls="none", label=legend)
        bad = [(p["angle_deg"], p["energy_rel_kcal_mol"]) for p in pts if not p["converged"]]
        if bad:
            ax.plot(*zip(*bad), "x", color="red", ms=8, ls="none", label="not converged")

    if "rescored" in entry:
        _rescored_overlay(ax, entry, dense)
    for records, marker, colour, prefix, offset in (
        (entry["minima"], "v", "#2a7f3f", "min ", -26), (entry["maxima"], "^", "#b23a2e", "", 8)
    ):
        for m in records:
            angle, e = m["angle_deg"], m["energy_rel_kcal_mol"]
            if e is None:
                continue
            shown = round(abs(angle) if abs(angle) > 179.5 else angle)  # int: no "-0"
            label = f"{prefix}{shown}°\n{e:.2f}"
            # a point at +-180 deg sits on both edges of the plot: mark both, label the inner side
            places = [-180.0, 180.0] if abs(angle) > 179.5 else [angle]
            for x in places:
                ax.plot(x, e, marker, color=colour, ms=8, zorder=5, clip_on=False)
                align = "left" if x == -180.0 else ("right" if x == 180.0 and len(places) == 2 else "center")
                ax.annotate(label, (x, e), textcoords="offset points", xytext=(0, offset), ha=align,
                            fontsize=8, color=colour)

    for p in populations:
        ax.plot([], [], " ", label=(f"{p['temperature_k']:g} K: s-cis {100 * p['s_cis']:.1f}%, "
                                    f"s-trans {100 * p['s_trans']:.1f}%, window {100 * p['scis_window']:.1f}%"))
    ax.set_xlim(-180, 180)
    ax.set_xticks(range(-180, 181, 45))
    ax.set_ylabel("relative energy / kcal mol⁻¹")
    _conjugation_panel(lower, entry["points"])
    lower.set_xlabel("dihedral φ / degrees   (0 = s-cis, ±180 = s-trans)")
    top = max(series.value(dense).max(), 1.0)
    if "rescored" in entry:
        rescored = entry["rescored"]["fourier"]["series_kcal_mol"]
        top = max(top, FourierSeries(rescored["constant"], rescored["cos"], rescored["sin"]).value(dense).max())
    ax.set_ylim(-0.12 * top - 0.3, 1.25 * top + 0.3)
    label = f"{name}: dihedral {'-'.join(str(a) for a in entry['dihedral_atoms'])}"
    ax.set_title(title or f"{label} — relaxed {entry['method']} scan (semi-empirical estimate)", fontsize=10)
    ax.legend(fontsize=7, loc="lower center", bbox_to_anchor=(0.5, 1.06), ncol=2, frameon=False)
    fig.tight_layout()
    return fig


def _rescored_overlay(ax, entry, dense):
    """The DFT re-scored profile (points and fit) over the semi-empirical one."""
    coefficients = entry["rescored"]["fourier"]["series_kcal_mol"]
    series = FourierSeries(coefficients["constant"], coefficients["cos"], coefficients["sin"])
    ax.plot(dense, series.value(dense), "--", color="#d95f02", lw=1.4, label=f"re-scored fit: {entry['rescore_level']}")
    shown = [p for p in entry["points"] if p.get("energy_rescored_rel_kcal_mol") is not None]
    ax.plot([p["angle_deg"] for p in shown], [p["energy_rescored_rel_kcal_mol"] for p in shown], "D", color="#d95f02",
            ms=4, ls="none", label="re-scored points (same geometries)")
    warning = entry["method_disagreement"]["warning"]
    if warning:
        ax.text(0.5, 0.97, "methods disagree: " + warning.split(":")[0], transform=ax.transAxes, ha="center", va="top",
                fontsize=7, color="#b23a2e", wrap=True)


def _conjugation_panel(ax, points):
    """Wiberg bond order of the scanned bond (left axis) and HOMO-LUMO gap (right axis) along the scan."""
    shown = sorted((p for p in points if p.get("central_bond_order") is not None), key=lambda p: p["angle_deg"])
    angles = [p["angle_deg"] for p in shown]
    ax.plot(angles, [p["central_bond_order"] for p in shown], "s-", color="#6a3d9a", ms=3, lw=1.2)
    ax.set_ylabel("bond order", color="#6a3d9a", fontsize=8)
    ax.tick_params(axis="y", labelcolor="#6a3d9a", labelsize=8)
    gaps = [(p["angle_deg"], p["homo_lumo_gap_ev"]) for p in shown if p.get("homo_lumo_gap_ev") is not None]
    if gaps:
        right = ax.twinx()
        right.plot(*zip(*gaps), "d--", color="#b15928", ms=3, lw=1.0)
        right.set_ylabel("HOMO–LUMO gap / eV", color="#b15928", fontsize=8)
        right.tick_params(axis="y", labelcolor="#b15928", labelsize=8)
    ax.set_title("conjugation along the scan: Wiberg bond order of the scanned bond and HOMO–LUMO gap", fontsize=8)


def populations_figure(name, entry, temperature_range_k):
    """s-cis and near-planar s-cis window populations against temperature (integrated over the fit),
    with the free-energy (RRHO) s-cis populations at the run's temperatures where computed."""
    from ..thermo import region_populations

    coefficients = entry["fourier"]["series_kcal_mol"]
    series = FourierSeries(coefficients["constant"], coefficients["cos"], coefficients["sin"])
    window = entry["populations"][0]["scis_window_deg"] if entry["populations"] else 30.0
    temperatures = np.linspace(*temperature_range_k, 41)
    integrated = [region_populations(series.value, t, window) for t in temperatures]
    fig, ax = plt.subplots(figsize=(7.0, 4.5), dpi=110)
    ax.plot(temperatures, [100 * p.s_cis for p in integrated], "-", color="#1f5fa8", lw=1.8,
            label="s-cis (|φ| < 90°), integrated over the profile")
    ax.plot(temperatures, [100 * p.scis_window for p in integrated], "--", color="#1f5fa8", lw=1.2,
            label=f"near-planar s-cis window (|φ| ≤ {window:g}°)")
    rrho = [(p["temperature_k"], 100 * p["s_cis_rrho"]) for p in entry["populations"] if "s_cis_rrho" in p]
    if rrho:
        ax.plot(*zip(*rrho), "D", color="#b15928", ms=6, label="s-cis from free energies of the minima (RRHO)")
    ax.set_xlim(*temperature_range_k)
    ax.set_ylim(0, None)
    ax.set_xlabel("temperature / K")
    ax.set_ylabel("population / %")
    ax.set_title(f"{name}: dihedral {'-'.join(str(a) for a in entry['dihedral_atoms'])} — populations vs temperature "
                 "(semi-empirical estimate)", fontsize=9)
    ax.legend(fontsize=8, frameon=False)
    fig.tight_layout()
    return fig
