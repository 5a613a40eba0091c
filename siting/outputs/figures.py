"""Report figures as PNG bytes (matplotlib, Agg canvas, no pyplot global state).

Colours: the Okabe-Ito palette (B. Wong, "Points of view: Color blindness", Nature Methods 8, 441 (2011),
doi:10.1038/nmeth.1618), and every category also has its own marker shape, so the maps read in grey too.
"""

from __future__ import annotations

import io

import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from .derive import PlanFigures, currency_label

OKABE_ITO = {
    "black": "#000000", "orange": "#E69F00", "sky_blue": "#56B4E9", "bluish_green": "#009E73",
    "yellow": "#F0E442", "blue": "#0072B2", "vermillion": "#D55E00", "reddish_purple": "#CC79A7",
}
BUILDING_FILL = "#D9D9D9"
BUILDING_EDGE = "#8C8C8C"
DPI = 110


def _png(fig: Figure, tight: bool = True) -> bytes:
    FigureCanvasAgg(fig)
    buf = io.BytesIO()
    extra = {"bbox_inches": "tight", "pad_inches": 0.08} if tight else {}
    fig.savefig(buf, format="png", dpi=DPI, metadata={"Software": None}, **extra)
    return buf.getvalue()


def _draw_buildings(ax, buildings, x0, y0, clip=None) -> None:
    from matplotlib.collections import PathCollection
    from matplotlib.path import Path as MPath

    geoms = buildings.geometry
    if clip is not None:
        geoms = geoms[geoms.intersects(clip)]
    paths = []
    for geom in geoms.explode(index_parts=False):
        if geom is None or geom.is_empty:
            continue
        verts, codes = [], []
        for ring in [geom.exterior, *geom.interiors]:
            xy = np.asarray(ring.coords) - (x0, y0)
            verts.append(xy)
            codes.append(np.r_[MPath.MOVETO, np.full(len(xy) - 2, MPath.LINETO), MPath.CLOSEPOLY])
        paths.append(MPath(np.concatenate(verts), np.concatenate(codes)))
    if paths:
        ax.add_collection(PathCollection(paths, facecolor=BUILDING_FILL, edgecolor=BUILDING_EDGE, linewidth=0.5,
                                         zorder=1))


def _origin(bundle) -> tuple[float, float]:
    b = bundle.buildings.total_bounds if len(bundle.buildings) else [np.nan] * 4
    xs = np.r_[b[0], bundle.users["x"].to_numpy(float), bundle.base_stations["x"].to_numpy(float)]
    ys = np.r_[b[1], bundle.users["y"].to_numpy(float), bundle.base_stations["y"].to_numpy(float)]
    x0, y0 = np.nanmin(xs) if np.isfinite(xs).any() else 0.0, np.nanmin(ys) if np.isfinite(ys).any() else 0.0
    return float(np.floor(x0 / 10) * 10), float(np.floor(y0 / 10) * 10)


def district_map(bundle, fig_data: PlanFigures) -> bytes:
    """Map of buildings, base stations, chosen surfaces (with rank) and demand by coverage state."""
    x0, y0 = _origin(bundle)
    fig = Figure(figsize=(7.5, 6.5))
    ax = fig.add_subplot()
    _draw_buildings(ax, bundle.buildings, x0, y0)
    u = fig_data.users
    cats = [
        ("covered directly", u["covered_before"], OKABE_ITO["blue"], "o", 10),
        ("newly covered by the plan", u["newly_covered"], OKABE_ITO["bluish_green"], "D", 14),
        ("not covered", ~u["covered_after"], OKABE_ITO["orange"], "x", 16),
    ]
    for label, mask, color, marker, size in cats:
        m = mask.to_numpy(bool)
        ax.scatter(u["x"].to_numpy()[m] - x0, u["y"].to_numpy()[m] - y0, s=size, c=color, marker=marker,
                   linewidths=1.0, label=f"{label} ({int(m.sum())})", zorder=3)
    bs = bundle.base_stations
    ax.scatter(bs["x"] - x0, bs["y"] - y0, s=70, c=OKABE_ITO["black"], marker="^", label="base station", zorder=4)
    s = fig_data.sites
    if len(s):
        ax.scatter(s["x"] - x0, s["y"] - y0, s=60, c=OKABE_ITO["vermillion"], marker="s", edgecolors="white",
                   linewidths=0.8, label="chosen surface (rank)", zorder=5)
        az = np.radians(s["facing_deg"].to_numpy(float))
        ax.quiver(s["x"] - x0, s["y"] - y0, np.sin(az), np.cos(az), color=OKABE_ITO["vermillion"], scale=25,
                  width=0.004, zorder=5)
        for r, x, y in zip(s["rank"], s["x"] - x0, s["y"] - y0):
            ax.annotate(str(r), (x, y), xytext=(4, 4), textcoords="offset points", fontsize=8, zorder=6,
                        color=OKABE_ITO["black"], fontweight="bold")
    ax.set_aspect("equal")
    ax.autoscale_view()
    ax.set_xlabel(f"easting - {x0:.0f} [m]")
    ax.set_ylabel(f"northing - {y0:.0f} [m]")
    ax.set_title("District: demand coverage with the plan")
    ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=8, frameon=False)
    ax.grid(True, linewidth=0.3, alpha=0.5)
    fig.tight_layout()
    return _png(fig)


def coverage_curve(sweep: pd.DataFrame | None, summary: dict, currency: str = "") -> bytes | None:
    """Covered weight against budget from the sweep (None when there is no sweep)."""
    if sweep is None or not len(sweep) or not {"budget", "covered_weight"} <= set(sweep.columns):
        return None
    sw = sweep_table(sweep, summary)
    fig = Figure(figsize=(7.0, 4.2))
    ax = fig.add_subplot()
    ax.plot(sw["budget"], 100 * sw["covered_share"], color=OKABE_ITO["blue"], marker="o",
            label="covered with the best plan per budget")
    if sw["bound_share"].notna().any():
        ax.plot(sw["budget"], 100 * sw["bound_share"], color=OKABE_ITO["vermillion"], linestyle="--",
                marker="v", label="proven upper bound")
    ax.axhline(100 * summary["covered_share_before"], color=OKABE_ITO["black"], linestyle=":",
               label="covered without surfaces")
    if summary.get("budget") is not None:
        ax.axvline(summary["budget"], color=OKABE_ITO["bluish_green"], linestyle="-.", label="this plan's budget")
        ax.plot([summary["plan_cost"]], [100 * summary["covered_share_after"]], linestyle="none", marker="*",
                markersize=12, color=OKABE_ITO["bluish_green"], label="this plan")
    ax.set_xlabel(f"budget [{currency_label(currency)}]")
    ax.set_ylabel("covered demand weight [% of total]")
    ax.set_title("Coverage against budget")
    ax.grid(True, linewidth=0.3, alpha=0.5)
    ax.legend(fontsize=8, frameon=False)
    fig.tight_layout()
    return _png(fig)


def sweep_table(sweep: pd.DataFrame, summary: dict) -> pd.DataFrame:
    """The sweep with total coverage: the optimiser's covered weight and bound count only demand the
    surfaces add (users covered directly carry no weight in the model), so the directly covered weight is
    added back for the shares."""
    sw = sweep.sort_values("budget", kind="stable").reset_index(drop=True)
    total = summary["total_weight"] or 1.0
    before = summary["covered_weight_before"]
    bound = sw["bound"].astype(float) if "bound" in sw.columns else pd.Series(np.nan, index=sw.index)
    return pd.DataFrame({
        "budget": sw["budget"].astype(float), "newly_covered_weight": sw["covered_weight"].astype(float),
        "covered_share": (before + sw["covered_weight"].astype(float)) / total,
        "bound_share": (before + bound) / total,
        "gap": sw["gap"].astype(float) if "gap" in sw.columns else np.nan,
        "n_sites": sw["n_sites"] if "n_sites" in sw.columns else -1,
        "status": sw["status"].astype(str) if "status" in sw.columns else "",
    })


def _weighted_cdf(values: np.ndarray, weights: np.ndarray):
    order = np.argsort(values, kind="stable")
    v, w = values[order], weights[order]
    total = w.sum()
    return v, (np.cumsum(w) / total if total > 0 else np.linspace(0, 1, len(v)))


def snr_cdf(fig_data: PlanFigures, snr_target_db: float) -> bytes:
    """Weighted CDF of user SNR without and with the plan; -inf (no signal) is drawn at the left edge."""
    u = fig_data.users
    fig = Figure(figsize=(7.0, 4.2))
    ax = fig.add_subplot()
    finite = np.r_[u["snr_direct_db"].to_numpy(float), u["snr_plan_db"].to_numpy(float)]
    finite = finite[np.isfinite(finite)]
    has_none = not np.isfinite(u["snr_direct_db"].to_numpy(float)).all()
    lo = (np.floor(finite.min() / 10) * 10 - (10 if has_none else 0)) if finite.size else snr_target_db - 30
    w = u["weight"].to_numpy(float)
    for col, label, color, ls in (("snr_direct_db", "without surfaces", OKABE_ITO["orange"], "--"),
                                  ("snr_plan_db", "with the plan", OKABE_ITO["blue"], "-")):
        v = np.maximum(u[col].to_numpy(float), lo)
        if v.size:
            x, p = _weighted_cdf(v, w)
            ax.step(x, 100 * p, where="post", color=color, linestyle=ls, label=label)
    ax.axvline(snr_target_db, color=OKABE_ITO["black"], linestyle=":", label=f"target {snr_target_db:g} dB")
    ax.set_xlabel(f"SNR [dB] (no signal drawn at {lo:g} dB)" if has_none else "SNR [dB]")
    ax.set_ylabel("demand weight at or below [%]")
    ax.set_title("SNR distribution of demand points")
    ax.grid(True, linewidth=0.3, alpha=0.5)
    ax.legend(fontsize=8, frameon=False, loc="upper left")
    fig.tight_layout()
    return _png(fig)


def site_map(bundle, fig_data: PlanFigures, rank: int, radius_m: float = 60.0) -> bytes:
    """A small map around one chosen site: buildings, the spot and its facing, served users, backups."""
    from shapely.geometry import box

    s = fig_data.sites.iloc[rank - 1]
    x0, y0 = float(s["x"]), float(s["y"])
    fig = Figure(figsize=(3.4, 3.4))
    ax = fig.add_subplot()
    _draw_buildings(ax, bundle.buildings, x0, y0, clip=box(x0 - radius_m, y0 - radius_m, x0 + radius_m, y0 + radius_m))
    lk = fig_data.links[fig_data.links["rank"] == rank]
    ux = bundle.users["x"].to_numpy(float)[lk["user_id"].to_numpy()] - x0
    uy = bundle.users["y"].to_numpy(float)[lk["user_id"].to_numpy()] - y0
    ax.scatter(ux, uy, s=12, c=OKABE_ITO["bluish_green"], marker="D", label="served demand", zorder=3)
    bk = fig_data.backups[fig_data.backups["rank"] == rank]
    if len(bk):
        bx = bundle.sites["x"].to_numpy(float)[bk["backup_site_id"].to_numpy()] - x0
        by = bundle.sites["y"].to_numpy(float)[bk["backup_site_id"].to_numpy()] - y0
        ax.scatter(bx, by, s=30, facecolors="none", edgecolors=OKABE_ITO["reddish_purple"], marker="s",
                   label="backup spot", zorder=4)
    az = np.radians(float(s["facing_deg"]))
    ax.scatter([0], [0], s=60, c=OKABE_ITO["vermillion"], marker="s", edgecolors="white", label="surface", zorder=5)
    ax.annotate("", xy=(12 * np.sin(az), 12 * np.cos(az)), xytext=(0, 0),
                arrowprops={"arrowstyle": "->", "color": OKABE_ITO["vermillion"], "lw": 1.5}, zorder=5)
    ax.annotate("N", xy=(0.93, 0.93), xycoords="axes fraction", ha="center", fontsize=9, fontweight="bold")
    ax.annotate("", xy=(0.93, 0.91), xytext=(0.93, 0.78), xycoords="axes fraction",
                arrowprops={"arrowstyle": "->", "lw": 1.0})
    ax.set_xlim(-radius_m, radius_m)
    ax.set_ylim(-radius_m, radius_m)
    ax.set_aspect("equal")
    ax.set_xlabel("east of spot [m]", fontsize=8)
    ax.set_ylabel("north of spot [m]", fontsize=8)
    ax.tick_params(labelsize=7)
    ax.set_title(f"site {int(s['site_id'])} (rank {rank}), facing {s['facing']}", fontsize=9)
    ax.legend(fontsize=6, loc="lower left", frameon=True, framealpha=0.8)
    fig.subplots_adjust(left=0.17, right=0.97, bottom=0.13, top=0.91)  # fixed layout: one draw per map
    return _png(fig, tight=False)
