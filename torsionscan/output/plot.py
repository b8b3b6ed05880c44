"""Figures of a scanned bond: the profile (points, fit, regions, minima, barriers, optional
conjugation panel and re-scored overlay) and the populations against temperature.

Drawn from the records alone (ScanResult, BondScan), so a stored run can be re-plotted;
energies in kcal/mol relative to the profile's zero, angles in degrees.
"""

import math

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
from matplotlib.transforms import ScaledTranslation  # noqa: E402

from ..rotor import s_cis_over_temperatures  # noqa: E402
from ..thermo import SCIS_LIMIT_DEG, region_populations_over  # noqa: E402
from .report import SYMMETRIC_ROTOR_REASON, leading_answer, symmetric_rotor_shape  # noqa: E402

_SCIS_SHADE = "#dfe9f5"
_STRANS_SHADE = "#f6eadb"
_WINDOW_SHADE = "#b9d0ea"
_RESCORED = "#d95f02"
_REFINED = "#1b9e77"
_ROTOR = "#7b3294"
ROTOR_CURVE_TEMPERATURES = 21  # quantum-rotor points over the temperature range of the populations figure
# fixed margins (inches) that hold these figures' tick and axis labels
_LEFT_IN, _RIGHT_IN, _BOTTOM_IN = 0.75, 0.3, 0.6
_SECOND_AXIS_IN = 0.7  # right margin beside a second y axis and its label
_PANEL_GAP_IN = 0.4  # between the profile and the conjugation panel below it (its title)
_LEGEND_GAP_PT, _EDGE_IN = 2.0, 0.06  # legend above the title; room left above the highest text


def _lay_out(fig, axes, legend=None, right_in=_RIGHT_IN):
    """Place the axes of a figure (one column, top to bottom) with fixed margins for tick and axis
    labels and a top margin measured from the first axes' title and a legend set above it: the
    job of tight_layout without its draw of the whole figure (as costly as saving the figure)."""
    renderer = fig.canvas.get_renderer()
    width, height = fig.get_size_inches()
    to_points = 72.0 / fig.dpi
    above_pt = axes[0].title.get_window_extent(renderer).height * to_points + matplotlib.rcParams["axes.titlepad"]
    if legend is not None:
        above_pt += _LEGEND_GAP_PT
        legend.set_bbox_to_anchor((0.5, 1.0), transform=axes[0].transAxes + ScaledTranslation(
            0.0, above_pt / 72.0, fig.dpi_scale_trans))
        above_pt += legend.get_window_extent(renderer).height * to_points
    top_in = above_pt / 72.0 + _EDGE_IN
    gaps_in = _PANEL_GAP_IN * (len(axes) - 1)
    mean_axes_in = (height - top_in - _BOTTOM_IN - gaps_in) / len(axes)
    fig.subplots_adjust(left=_LEFT_IN / width, right=1.0 - right_in / width, bottom=_BOTTOM_IN / height,
                        top=1.0 - top_in / height, hspace=_PANEL_GAP_IN / mean_axes_in)


def _dihedral_text(result, bond):
    return f"{result.name}: dihedral {'-'.join(str(a + 1) for a in bond.dihedral_atoms)}"


def has_conjugation_data(bond):
    """True when the points of a BondScan carry finite Wiberg bond orders (engines with that capability)."""
    return any(math.isfinite(p.central_bond_order) for p in bond.points)


def profile_figure(result, bond, title=None):
    """A matplotlib Figure of one bond's relaxed profile (a BondScan of the ScanResult).

    Two panels when the points carry bond orders (the lower one: bond order and HOMO-LUMO gap
    along the scan), one otherwise.
    """
    analysis = bond.profile
    series = analysis.fit.series
    conjugation = has_conjugation_data(bond)
    if conjugation:
        fig, (ax, lower) = plt.subplots(2, 1, figsize=(8.0, 7.6), dpi=110, sharex=True,
                                        gridspec_kw={"height_ratios": [3.0, 1.1]})
    else:
        fig, ax = plt.subplots(figsize=(8.0, 5.8), dpi=110)
        lower = None
    window = result.settings.scis_window_deg
    limit = SCIS_LIMIT_DEG
    if not bond.symmetric_rotor:  # a symmetric rotor's circle has no s-cis and s-trans halves
        ax.axvspan(-limit, limit, color=_SCIS_SHADE, zorder=0, label=f"s-cis region (|φ| < {limit:g}°)")
        ax.axvspan(-window, window, color=_WINDOW_SHADE, zorder=0,
                   label=f"near-planar s-cis window (|φ| ≤ {window:g}°)")
        ax.axvspan(-180, -limit, color=_STRANS_SHADE, zorder=0, label=f"s-trans region (|φ| > {limit:g}°)")
        ax.axvspan(limit, 180, color=_STRANS_SHADE, zorder=0)

    dense = np.linspace(-180, 180, 721)
    ax.plot(dense, series.value(dense), color="#333333", lw=1.5,
            label=f"Fourier fit, order {series.order} (RMSE {analysis.fit.rmse_kcal_mol:.2f})")
    for mirrored, legend in ((False, "relaxed scan points"), (True, "mirror images")):
        pts = [(p, analysis.relative_kcal_mol(p.energy_hartree)) for p in bond.points
               if p.mirrored == mirrored and math.isfinite(p.energy_hartree)]
        if not pts:
            continue
        ax.plot([p.angle_deg for p, _ in pts], [e for _, e in pts], "o", ms=5, zorder=6,
                mfc="white" if mirrored else "#1f5fa8", mec="#1f5fa8", ls="none", label=legend)
        bad = [(p.angle_deg, e) for p, e in pts if not p.converged]
        if bad:
            ax.plot(*zip(*bad), "x", color="red", ms=8, ls="none", zorder=7, label="not converged")

    top = max(float(series.value(dense).max()), 1.0)
    if bond.rescored is not None:
        top = max(top, _rescored_overlay(ax, bond, dense))
    if bond.refined is not None:
        top = max(top, _refined_overlay(ax, bond.refined, dense))
    ax.set_xlim(-180, 180)
    ax.set_ylim(-0.12 * top - 0.3, 1.25 * top + 0.3)
    _stationary_marks(ax, analysis, series, top)

    for label in population_legend(bond):
        ax.plot([], [], " ", label=label)
    ax.set_xlim(-180, 180)
    ax.set_xticks(range(-180, 181, 45))
    ax.set_ylabel("relative energy / kcal mol⁻¹")
    axis_label = ("dihedral φ / degrees   (0 and ±180 = planar)" if bond.symmetric_rotor
                  else "dihedral φ / degrees   (0 = s-cis, ±180 = s-trans)")
    if lower is not None:
        _conjugation_panel(lower, bond)
        lower.set_xlabel(axis_label)
    else:
        ax.set_xlabel(axis_label)
    ax.set_title(title or f"{_dihedral_text(result, bond)} — relaxed {result.method} scan (an estimate)", fontsize=11)
    legend = ax.legend(fontsize=8.5, loc="lower center", ncol=2, frameon=False, borderaxespad=0.0)
    second_axis = lower is not None and len(fig.axes) > 2  # the conjugation panel's HOMO-LUMO gap axis
    _lay_out(fig, [ax] if lower is None else [ax, lower], legend, _SECOND_AXIS_IN if second_axis else _RIGHT_IN)
    return fig


_OFF_FIT_KCAL_MOL = 0.05  # a stationary point this far from the fit gets a legend line saying why


def _angle_label(angle_deg):
    """Whole degrees for a marker label; a point at +-180 deg is "±180°", never "-180°" beside "180°"."""
    if abs(angle_deg) > 179.5:
        return "±180°"
    return f"{round(angle_deg) + 0:d}°"


def _mirror_merged(records, analysis):
    """[(angle label, energy, [angles])] of stationary points, a mirror pair (±a at equal energy) as one
    "±a" label so two labels never sit on top of each other near 0 or 180 deg."""
    items = [(m.angle_deg, analysis.relative_kcal_mol(m.energy_hartree)) for m in records]
    items = [(a, e) for a, e in items if math.isfinite(e)]
    used, merged = set(), []
    for n, (angle, energy) in enumerate(items):
        if n in used:
            continue
        used.add(n)
        partner = next((k for k, (a, e) in enumerate(items) if k not in used and abs(a + angle) < 0.6
                        and abs(e - energy) < 0.01 and abs(angle) > 0.3), None)
        if abs(angle) > 179.5:
            merged.append(("±180°", energy, [-180.0, 180.0]))
        elif partner is not None:
            used.add(partner)
            merged.append((f"±{round(abs(angle)):d}°", energy, [-abs(angle), abs(angle)]))
        else:
            merged.append((_angle_label(angle), energy, [angle]))
    return merged


def _stationary_marks(ax, analysis, series, top):
    """Minima (green, label below) and barrier tops (red, label above) as open markers that leave the
    scan point under them visible; a label per point (mirror pairs and ±180 once), moved up or down
    by one label height when it would overlap a label already placed; a legend line when a refined
    stationary point sits off the fitted curve."""
    fig = ax.figure  # the limits are set: transData gives the pixel positions of the data
    placed = []  # (x0, x1, y0, y1) in pixels of the labels drawn so far
    width_px, height_px = 52.0, 26.0
    off_fit = 0.0
    for records, marker, colour, prefix, below in ((analysis.minima, "v", "#2a7f3f", "min ", True),
                                                   (analysis.maxima, "^", "#b23a2e", "", False)):
        for label, energy, angles in _mirror_merged(records, analysis):
            if series is not None:
                off_fit = max(off_fit, max(abs(float(series.value(np.array([a])) [0]) - energy) for a in angles))
            for x in angles:
                ax.plot(x, energy, marker, mfc="none", mec=colour, mew=1.6, ms=11, zorder=5, clip_on=False)
            anchor = angles[-1] if len(angles) == 1 or abs(angles[0]) < 179.5 else 180.0
            if len(angles) == 2 and abs(angles[0]) < 179.5:
                anchor = 0.0 if abs(angles[0]) < 30.0 else angles[-1]
            px, py = ax.transData.transform((anchor, energy))
            step = -1 if below else 1
            offset = step * 18.0 - (height_px if below else 0.0)
            for _ in range(6):
                box = (px - width_px / 2, px + width_px / 2, py + offset, py + offset + height_px)
                if not any(box[0] < b[1] and b[0] < box[1] and box[2] < b[3] and b[2] < box[3] for b in placed):
                    break
                offset += step * height_px
            placed.append(box)
            align = "right" if anchor >= 179.5 else ("left" if anchor <= -179.5 else "center")
            dx = -4 if align == "right" else (4 if align == "left" else 0)
            ax.annotate(f"{prefix}{label}\n{energy:.2f}", (anchor, energy), textcoords="offset points",
                        xytext=(dx * 72 / fig.dpi, (offset + (height_px if below else 0.0)) * 72 / fig.dpi),
                        ha=align, va="top" if below else "bottom", fontsize=8.5, color=colour, zorder=8)
    ax.plot([], [], "v", mfc="none", mec="#2a7f3f", mew=1.6, ms=9, ls="none", label="minimum (kcal/mol)")
    ax.plot([], [], "^", mfc="none", mec="#b23a2e", mew=1.6, ms=9, ls="none", label="barrier top (kcal/mol)")
    if off_fit > _OFF_FIT_KCAL_MOL:
        ax.plot([], [], " ", label=f"minima and tops: relaxed off the grid, up to {off_fit:.2f} kcal/mol from the fit")


def population_legend(bond):
    """Legend lines of a BondScan's populations: the leading answer per temperature after the name of
    its model, or, for a symmetric rotor, why there is no s-cis split and its twist."""
    if bond.symmetric_rotor:
        twist, _, _ = symmetric_rotor_shape(bond.profile)
        return ["symmetric rotor, no s-cis/s-trans split: E(φ) = E(180° − φ)"
                + ("" if twist is None else f"; twist {twist:.1f}°")]
    entries, model = leading_answer(bond.profile)
    if not entries:
        return []
    lines = [f"populations: {model}"]
    for p in entries:
        line = f"{p.temperature_k:g} K: s-cis {100 * p.s_cis:.1f}%, s-trans {100 * p.s_trans:.1f}%"
        if getattr(p, "scis_window", None) is not None:
            line += f", window {100 * p.scis_window:.1f}%"
        lines.append(line)
    return lines


def _rescored_overlay(ax, bond, dense):
    """The re-scored profile (its fit and its points at the same geometries) over the scan's;
    returns the highest value of its fit (kcal/mol)."""
    rescored = bond.rescored
    series = rescored.analysis.fit.series
    values = series.value(dense)
    ax.plot(dense, values, "--", color=_RESCORED, lw=1.4, label=f"re-scored fit: {rescored.level}")
    shown = [(p.angle_deg, rescored.analysis.relative_kcal_mol(rescored.energies_hartree[frame]))
             for p, frame in bond.points_with_frames()]
    shown = [(x, e) for x, e in shown if math.isfinite(e)]
    if shown:
        ax.plot(*zip(*shown), "D", color=_RESCORED, ms=4, ls="none", label="re-scored points (same geometries)")
    warning = rescored.disagreement.warning
    if warning:
        ax.text(0.5, 0.97, "methods disagree: " + warning.split(":")[0], transform=ax.transAxes, ha="center",
                va="top", fontsize=7, color="#b23a2e", wrap=True)
    return float(values.max())


def _refined_overlay(ax, refined, dense):
    """The refined profile over the scan's: its fit and re-optimised points ("all"), or its
    re-optimised stationary points ("stationary"); returns the highest value drawn (kcal/mol)."""
    analysis = refined.analysis
    drawn = [0.0]
    if analysis.fit is not None:
        values = analysis.fit.series.value(dense)
        ax.plot(dense, values, "-.", color=_REFINED, lw=1.4, label=f"refined fit: {refined.level}")
        drawn.append(float(values.max()))
    shown = [(p.angle_deg, analysis.relative_kcal_mol(p.energy_hartree)) for p in refined.points]
    if not shown:
        shown = [(m.angle_deg, analysis.relative_kcal_mol(m.energy_hartree)) for m in analysis.minima + analysis.maxima]
        if analysis.planar_scis is not None:
            shown.append((0.0, analysis.relative_kcal_mol(analysis.planar_scis.energy_hartree)))
    shown = [(x, e) for x, e in shown if math.isfinite(e)]
    if shown:
        ax.plot(*zip(*shown), "s", color=_REFINED, ms=4, ls="none",
                label="re-optimised points" if refined.points else "re-optimised stationary points")
        drawn.append(max(e for _, e in shown))
    return max(drawn)


def _conjugation_panel(ax, bond):
    """Wiberg bond order of the scanned bond (left axis) and HOMO-LUMO gap (right axis, eV) along the scan."""
    shown = sorted((p for p in bond.points if math.isfinite(p.central_bond_order)), key=lambda p: p.angle_deg)
    ax.plot([p.angle_deg for p in shown], [p.central_bond_order for p in shown], "s-", color="#6a3d9a", ms=3, lw=1.2)
    ax.set_ylabel("bond order", color="#6a3d9a", fontsize=8)
    ax.tick_params(axis="y", labelcolor="#6a3d9a", labelsize=8)
    gaps = [(p.angle_deg, p.homo_lumo_gap_ev) for p in shown if math.isfinite(p.homo_lumo_gap_ev)]
    if gaps:
        right = ax.twinx()
        right.plot(*zip(*gaps), "d--", color="#b15928", ms=3, lw=1.0)
        right.set_ylabel("HOMO–LUMO gap / eV", color="#b15928", fontsize=8)
        right.tick_params(axis="y", labelcolor="#b15928", labelsize=8)
    ax.set_title("conjugation along the scan: Wiberg bond order of the scanned bond and HOMO–LUMO gap", fontsize=8)


def rotor_curve(bond, temperatures_k):
    """(temperatures, s-cis fractions) of the torsion as a quantum hindered rotor on the fit
    (rotor.s_cis_over_temperatures with ProfileAnalysis.rotor_inertia_amu_bohr2), or None when the
    moment of inertia is not known."""
    inertia = bond.profile.rotor_inertia_amu_bohr2
    if bond.profile.fit is None or inertia is None:
        return None
    series = bond.profile.fit.series
    return list(temperatures_k), s_cis_over_temperatures(series, inertia, temperatures_k)


def populations_figure(result, bond):
    """s-cis populations (%) against temperature (K, over result.settings.temperature_range_k):
    the classical integral over the fit and its near-planar window, the quantum hindered rotor on
    the fit (ROTOR_CURVE_TEMPERATURES points, when the moment of inertia is known), and at the
    run's temperatures the rotor-plus-other-modes free energies and the all-harmonic (RRHO)
    estimate where computed. A symmetric rotor gets a note instead of curves."""
    temperature_range = tuple(result.settings.temperature_range_k)
    fig, ax = plt.subplots(figsize=(7.0, 4.5), dpi=110)
    ax.set_xlim(*temperature_range)
    ax.set_xlabel("temperature / K")
    ax.set_ylabel("population / %")
    ax.set_title(f"{_dihedral_text(result, bond)} — populations vs temperature ({result.method} estimate)",
                 fontsize=9)
    if bond.symmetric_rotor:
        ax.set_ylim(0, 100)
        ax.text(0.5, 0.5, f"symmetric rotor:\n{SYMMETRIC_ROTOR_REASON}", transform=ax.transAxes, ha="center",
                va="center", fontsize=8, wrap=True)
        _lay_out(fig, [ax])
        return fig
    series = bond.profile.fit.series
    window = result.settings.scis_window_deg
    temperatures = np.linspace(*temperature_range, 41)
    integrated = region_populations_over(series.value, temperatures, window)
    ax.plot(temperatures, [100 * p.s_cis for p in integrated], "-", color="#1f5fa8", lw=1.8,
            label=f"s-cis (|φ| < {SCIS_LIMIT_DEG:g}°), classical integral over the profile")
    ax.plot(temperatures, [100 * p.scis_window for p in integrated], "--", color="#1f5fa8", lw=1.2,
            label=f"near-planar s-cis window (|φ| ≤ {window:g}°), classical")
    curve = rotor_curve(bond, np.linspace(*temperature_range, ROTOR_CURVE_TEMPERATURES))
    if curve is not None:
        ax.plot(curve[0], [100 * x for x in curve[1]], "-.", color=_ROTOR, lw=1.5,
                label="s-cis, quantum hindered rotor on the profile")
    free = [(r.temperature_k, 100 * r.s_cis) for r in bond.profile.free_energies]
    if free:
        ax.plot(*zip(*free), "o", color=_ROTOR, ms=6, label="s-cis, quantum rotor with harmonic other modes")
    rrho = [(r.temperature_k, 100 * r.s_cis) for r in bond.profile.rrho_populations]
    if rrho:
        ax.plot(*zip(*rrho), "D", color="#b15928", ms=6, label="s-cis, all-harmonic free energies of the minima")
    ax.set_ylim(0, None)
    ax.legend(fontsize=8, frameon=False)
    _lay_out(fig, [ax])
    return fig
