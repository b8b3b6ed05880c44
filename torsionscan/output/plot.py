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

from ..rotor import rotor_populations  # noqa: E402
from ..thermo import SCIS_LIMIT_DEG, region_populations  # noqa: E402
from .report import SYMMETRIC_ROTOR_REASON, leading_answer, symmetric_rotor_shape  # noqa: E402

_SCIS_SHADE = "#dfe9f5"
_STRANS_SHADE = "#f6eadb"
_WINDOW_SHADE = "#b9d0ea"
_RESCORED = "#d95f02"
_REFINED = "#1b9e77"
_ROTOR = "#7b3294"
ROTOR_CURVE_TEMPERATURES = 21  # quantum-rotor points over the temperature range of the populations figure


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
        ax.plot([p.angle_deg for p, _ in pts], [e for _, e in pts], "o", ms=5,
                mfc="white" if mirrored else "#1f5fa8", mec="#1f5fa8", ls="none", label=legend)
        bad = [(p.angle_deg, e) for p, e in pts if not p.converged]
        if bad:
            ax.plot(*zip(*bad), "x", color="red", ms=8, ls="none", label="not converged")

    top = max(float(series.value(dense).max()), 1.0)
    if bond.rescored is not None:
        top = max(top, _rescored_overlay(ax, bond, dense))
    if bond.refined is not None:
        top = max(top, _refined_overlay(ax, bond.refined, dense))
    for records, marker, colour, prefix, offset in (
        (analysis.minima, "v", "#2a7f3f", "min ", -26), (analysis.maxima, "^", "#b23a2e", "", 8)
    ):
        for m in records:
            e = analysis.relative_kcal_mol(m.energy_hartree)
            if not math.isfinite(e):
                continue
            angle = m.angle_deg
            shown = round(abs(angle) if abs(angle) > 179.5 else angle)  # int: no "-0"
            label = f"{prefix}{shown}°\n{e:.2f}"
            # a point at +-180 deg sits on both edges of the plot: mark both, label the inner side
            places = [-180.0, 180.0] if abs(angle) > 179.5 else [angle]
            for x in places:
                ax.plot(x, e, marker, color=colour, ms=8, zorder=5, clip_on=False)
                align = "left" if x == -180.0 else ("right" if x == 180.0 and len(places) == 2 else "center")
                ax.annotate(label, (x, e), textcoords="offset points", xytext=(0, offset), ha=align,
                            fontsize=8, color=colour)

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
    ax.set_ylim(-0.12 * top - 0.3, 1.25 * top + 0.3)
    ax.set_title(title or f"{_dihedral_text(result, bond)} — relaxed {result.method} scan (an estimate)", fontsize=10)
    ax.legend(fontsize=7, loc="lower center", bbox_to_anchor=(0.5, 1.06), ncol=2, frameon=False)
    fig.tight_layout()
    return fig


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
    (rotor.rotor_populations with ProfileAnalysis.rotor_inertia_amu_bohr2), or None when the
    moment of inertia is not known."""
    inertia = bond.profile.rotor_inertia_amu_bohr2
    if bond.profile.fit is None or inertia is None:
        return None
    series = bond.profile.fit.series
    return list(temperatures_k), [rotor_populations(series, inertia, t).s_cis for t in temperatures_k]


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
        ax.text(0.5, 0.5, f"symmetric rotor: {SYMMETRIC_ROTOR_REASON}", transform=ax.transAxes, ha="center",
                va="center", fontsize=8, wrap=True)
        fig.tight_layout()
        return fig
    series = bond.profile.fit.series
    window = result.settings.scis_window_deg
    temperatures = np.linspace(*temperature_range, 41)
    integrated = [region_populations(series.value, t, window) for t in temperatures]
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
    fig.tight_layout()
    return fig
