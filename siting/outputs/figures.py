"""Report figures as PNG bytes (matplotlib, Agg canvas, no pyplot global state).

Colours: the Okabe-Ito palette (B. Wong, "Points of view: Color blindness", Nature Methods 8, 441 (2011),
doi:10.1038/nmeth.1618), and every category also has its own marker shape, so the maps read in grey too.
"""

from __future__ import annotations

import io
from typing import Any

import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from .derive import PlanFigures
from .values import currency_label

OKABE_ITO = {
    "black": "#000000", "orange": "#E69F00", "sky_blue": "#56B4E9", "bluish_green": "#009E73",
    "yellow": "#F0E442", "blue": "#0072B2", "vermillion": "#D55E00", "reddish_purple": "#CC79A7",
}
BUILDING_FILL = "#D9D9D9"
BUILDING_EDGE = "#8C8C8C"
DPI = 110


def _png(fig: Figure, tight: bool = True, dpi: int = DPI) -> bytes:
    if fig.canvas is None or not isinstance(fig.canvas, FigureCanvasAgg):
        FigureCanvasAgg(fig)
    buf = io.BytesIO()
    # zlib level 3: about 30 % faster than the default 6 for about 20 % more bytes (measured on the demo map)
    fig.savefig(buf, format="png", dpi=dpi, metadata={"Software": None}, pil_kwargs={"compress_level": 3},
                bbox_inches="tight" if tight else None, pad_inches=0.08 if tight else None)
    return buf.getvalue()


def _building_paths(geoms, x0: float, y0: float) -> list:
    """Matplotlib paths (one per polygon, holes included) of footprints shifted by (x0, y0); a z coordinate is
    dropped and anything but polygons is skipped.  Vectorised over all rings (a city has tens of thousands)."""
    import shapely
    from matplotlib.path import Path as MPath

    geoms = np.asarray(geoms, dtype=object)
    if not geoms.size:
        return []
    parts = shapely.get_parts(shapely.force_2d(geoms))
    polys = parts[shapely.get_type_id(parts) == 3]  # Polygon
    polys = polys[~shapely.is_empty(polys)]
    if not polys.size:
        return []
    rings, ring_poly = shapely.get_rings(polys, return_index=True)
    n_coords = shapely.get_num_coordinates(rings)
    ok = n_coords >= 4  # a closed ring with at least three corners
    rings, ring_poly, n_coords = rings[ok], ring_poly[ok], n_coords[ok]
    if not rings.size:
        return []
    xy = shapely.get_coordinates(rings) - (x0, y0)
    codes = np.full(len(xy), MPath.LINETO, dtype=np.uint8)
    ends = np.cumsum(n_coords)
    codes[ends - n_coords] = MPath.MOVETO
    codes[ends - 1] = MPath.CLOSEPOLY
    # split into one path per polygon (its exterior and holes together)
    first_ring = np.flatnonzero(np.r_[True, ring_poly[1:] != ring_poly[:-1]])
    cut = (ends - n_coords)[first_ring[1:]]
    return [MPath(v, c) for v, c in zip(np.split(xy, cut), np.split(codes, cut))]


def _draw_buildings(ax, buildings, x0, y0, clip=None):
    from matplotlib.collections import PathCollection

    geoms = buildings.geometry
    if clip is not None and len(geoms):
        geoms = geoms.iloc[np.sort(geoms.sindex.query(clip, predicate="intersects"))]
    paths = _building_paths(geoms.to_numpy(), x0, y0)
    if paths:
        return ax.add_collection(PathCollection(paths, facecolor=BUILDING_FILL, edgecolor=BUILDING_EDGE,
                                                linewidth=0.5, zorder=1))
    return None


def _origin(bundle) -> tuple[float, float]:
    b = bundle.buildings.total_bounds if len(bundle.buildings) else [np.nan] * 4
    xs = np.r_[b[0], bundle.users["x"].to_numpy(float), bundle.base_stations["x"].to_numpy(float)]
    ys = np.r_[b[1], bundle.users["y"].to_numpy(float), bundle.base_stations["y"].to_numpy(float)]
    x0, y0 = np.nanmin(xs) if np.isfinite(xs).any() else 0.0, np.nanmin(ys) if np.isfinite(ys).any() else 0.0
    return float(np.floor(x0 / 10) * 10), float(np.floor(y0 / 10) * 10)


def nice_length(span_m: float) -> float:
    """A round scale-bar length (1, 2 or 5 x 10^k m) of about a fifth of ``span_m``."""
    target = max(float(span_m), 1e-9) / 5
    k = 10.0 ** np.floor(np.log10(target))
    return float(max(m * k for m in (1, 2, 5) if m * k <= target) if target >= k else k)


def _scale_bar(ax, span_m: float, loc: str = "lower right", size: float = 8):
    from matplotlib.font_manager import FontProperties
    from mpl_toolkits.axes_grid1.anchored_artists import AnchoredSizeBar

    length = nice_length(span_m)
    label = f"{length / 1000:g} km" if length >= 1000 else f"{length:g} m"
    bar = AnchoredSizeBar(ax.transData, length, label, loc, pad=0.4, sep=3, borderpad=0.6, frameon=True,
                          size_vertical=0, fontproperties=FontProperties(size=size))
    bar.patch.set_alpha(0.8)
    ax.add_artist(bar)
    return length


def _north_arrow(ax, xy=(0.95, 0.9), size: float = 9, label: str = "N") -> None:
    """Grid north (up the map); the projected CRS's grid north is within a few degrees of true north."""
    ax.annotate(label, xy=(xy[0], xy[1] + 0.005), xycoords="axes fraction", ha="center", va="bottom",
                fontsize=size, fontweight="bold", zorder=8)
    ax.annotate("", xy=(xy[0], xy[1]), xytext=(xy[0], xy[1] - 0.09), xycoords="axes fraction",
                arrowprops={"arrowstyle": "-|>", "lw": 1.2, "color": "black"}, zorder=8)


def meridian_convergence_deg(crs, x: float, y: float) -> float | None:
    """Angle between grid north and true north at (x, y) [deg], from pyproj's projection factors."""
    import pyproj

    try:
        crs = pyproj.CRS(crs)
        lon, lat = pyproj.Transformer.from_crs(crs, crs.geodetic_crs, always_xy=True).transform(x, y)
        return float(pyproj.Proj(crs).get_factors(lon, lat).meridian_convergence)
    except Exception:
        return None


def place_labels(ax, renderer, items, offsets=None, avoid=()) -> list[bool]:
    """Place text labels beside points without overlaps (greedy, in the order given).

    ``items`` are (x, y, text, text-kwargs) in data coordinates.  Each label tries the offsets (points) in
    turn and takes the first whose box overlaps no label already placed and no box of ``avoid`` (display
    coordinates); a label that fits nowhere is left out.  Returns, per item, whether it was placed.
    """
    from matplotlib.transforms import Bbox

    offsets = offsets or [(5, 5), (5, -12), (-12, 5), (-12, -12), (9, -3), (-16, -3), (-3, 9), (-3, -16),
                          (14, 14), (14, -20), (-20, 14), (-20, -20)]
    # boxes taken so far as rows (x0, y0, x1, y1), normalised; one vectorised overlap test per try (the same
    # closed-interval rule as matplotlib's Bbox.overlaps), so a city map with thousands of labels stays fast
    boxes = np.zeros((max(16, len(avoid) + len(items)), 4))
    n = 0
    for b in avoid:
        e = (b if isinstance(b, Bbox) else Bbox(b)).extents
        boxes[n] = (min(e[0], e[2]), min(e[1], e[3]), max(e[0], e[2]), max(e[1], e[3]))
        n += 1
    axbox = ax.get_window_extent(renderer)
    shown = []
    px_per_pt = renderer.points_to_pixels(1.0)
    for x, y, text, kw in items:
        # measured once at the first offset: an offset in points only translates the box
        t = ax.annotate(text, (x, y), xytext=offsets[0], textcoords="offset points", **kw)
        bb = t.get_window_extent(renderer).expanded(1.05, 1.1)
        bx0, by0, bx1, by1 = min(bb.x0, bb.x1), min(bb.y0, bb.y1), max(bb.x0, bb.x1), max(bb.y0, bb.y1)
        ok = False
        for dx, dy in offsets:
            sx, sy = (dx - offsets[0][0]) * px_per_pt, (dy - offsets[0][1]) * px_per_pt
            x0, y0, x1, y1 = bx0 + sx, by0 + sy, bx1 + sx, by1 + sy
            if not (axbox.contains(x0, y0) and axbox.contains(x1, y1)):
                continue
            o = boxes[:n]
            if not np.any((o[:, 0] <= x1) & (x0 <= o[:, 2]) & (o[:, 1] <= y1) & (y0 <= o[:, 3])):
                boxes[n] = (x0, y0, x1, y1)
                n += 1
                t.xyann = (dx, dy)
                ok = True
                break
        if not ok:
            t.remove()
        shown.append(ok)
    return shown


#: A4 landscape page inside 12 mm margins, at print resolution.
MAP_SIZE_IN = (10.8, 7.2)
MAP_DPI = 200


def district_map(bundle, fig_data: PlanFigures) -> bytes:
    """The district map as PNG bytes at print resolution (see :func:`district_figure`)."""
    return _png(district_figure(bundle, fig_data), tight=False, dpi=MAP_DPI)


def district_figure(bundle, fig_data: PlanFigures) -> Figure:
    """Print-ready map (A4 landscape at 200 dpi): buildings, labelled base stations, chosen surfaces with rank
    and facing, demand by coverage state, scale bar, north arrow, CRS name, non-overlapping labels."""
    import pyproj
    from matplotlib.lines import Line2D

    x0, y0 = _origin(bundle)
    fig = Figure(figsize=MAP_SIZE_IN)
    canvas = FigureCanvasAgg(fig)
    ax = fig.add_axes((0.06, 0.10, 0.66, 0.82))
    _draw_buildings(ax, bundle.buildings, x0, y0)
    u = fig_data.users
    handles: list[Any] = []  # scatter collections and one proxy line
    cats = [
        ("covered directly", u["covered_before"], OKABE_ITO["blue"], "o", 8),
        ("newly covered by the plan", u["newly_covered"], OKABE_ITO["bluish_green"], "D", 12),
        ("not covered", ~u["covered_after"], OKABE_ITO["orange"], "x", 12),
    ]
    for label, mask, color, marker, size in cats:
        m = mask.to_numpy(bool)
        h = ax.scatter(u["x"].to_numpy()[m] - x0, u["y"].to_numpy()[m] - y0, s=size, c=color, marker=marker,
                       linewidths=0.8, label=f"demand {label} ({int(m.sum())})", zorder=3)
        handles.append(h)
    bs = bundle.base_stations
    bsx, bsy = bs["x"].to_numpy(float) - x0, bs["y"].to_numpy(float) - y0
    handles.append(ax.scatter(bsx, bsy, s=70, c=OKABE_ITO["black"], marker="^", label="base station (id)",
                              zorder=4))
    s = fig_data.sites
    if len(s):
        handles.append(ax.scatter(s["x"] - x0, s["y"] - y0, s=55, c=OKABE_ITO["vermillion"], marker="s",
                                  edgecolors="white", linewidths=0.8, label="chosen surface (rank)", zorder=5))
        az = np.radians(s["facing_deg"].to_numpy(float))
        ax.quiver(s["x"] - x0, s["y"] - y0, np.sin(az), np.cos(az), color=OKABE_ITO["vermillion"], scale=30,
                  width=0.003, zorder=5)
        handles.append(Line2D([], [], color=OKABE_ITO["vermillion"], marker=r"$\rightarrow$", linestyle="none",
                              markersize=12, label="surface facing (outward wall normal)"))
    ax.set_aspect("equal", adjustable="datalim")
    ax.autoscale_view()
    ax.margins(0.04)
    ax.set_xlabel(f"easting - {x0:.0f} [m]")
    ax.set_ylabel(f"northing - {y0:.0f} [m]")
    ax.set_title("District: demand coverage with the plan")
    ax.grid(True, linewidth=0.3, alpha=0.5)
    ax.apply_aspect()
    xl, yl = ax.get_xlim(), ax.get_ylim()
    _scale_bar(ax, xl[1] - xl[0])
    _north_arrow(ax, (0.96, 0.88))
    crs = pyproj.CRS(bundle.crs)
    code = crs.to_authority()
    conv = meridian_convergence_deg(crs, float(x0 + np.mean(xl)), float(y0 + np.mean(yl)))
    caption = (f"CRS: {crs.name}" + (f" ({code[0]}:{code[1]})" if code else "") + f"; metres from easting "
               f"{x0:.0f}, northing {y0:.0f}. North arrow: grid north"
               + (f", {abs(conv):.1f}\u00b0 from true north here." if conv is not None else "."))
    fig.text(0.06, 0.015, caption, fontsize=8, ha="left", va="bottom")
    legend = ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.02, 1.0), fontsize=8, frameon=False)
    renderer = canvas.get_renderer()
    ax.set_xlim(xl)
    ax.set_ylim(yl)
    # labels: stations first, then surfaces in rank order; a label that collides with another is moved, and
    # left out only when no nearby position is free
    items = [(x, y, str(name), {"fontsize": 8, "color": OKABE_ITO["black"], "zorder": 7,
                                "bbox": {"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none", "alpha": 0.75}})
             for x, y, name in zip(bsx, bsy, derive_text(bs["bs_id"]))]
    items += [(x, y, str(r), {"fontsize": 8, "color": OKABE_ITO["black"], "fontweight": "bold", "zorder": 7})
              for r, x, y in zip(s["rank"], s["x"] - x0, s["y"] - y0)]
    from matplotlib.transforms import Bbox

    avoid = [legend.get_window_extent(renderer)] + [a.get_window_extent(renderer) for a in ax.artists]
    marks = np.column_stack([np.r_[bsx, s["x"].to_numpy(float) - x0], np.r_[bsy, s["y"].to_numpy(float) - y0]])
    half = 4.0 * fig.dpi / 72  # about the markers' half size, in pixels
    avoid += [Bbox([[px - half, py - half], [px + half, py + half]])
              for px, py in ax.transData.transform(marks)] if len(marks) else []
    shown = place_labels(ax, renderer, items, avoid=avoid)
    hidden = len(shown) - sum(shown)
    if hidden:
        fig.text(0.06, 0.045, f"{hidden} label(s) left out where labels would overlap; the survey list has every "
                 "site.", fontsize=8, ha="left", va="bottom")
    fig.placed_labels = [t for t, ok in zip(items, shown) if ok]  # type: ignore[attr-defined]
    return fig


def derive_text(values) -> list[str]:
    from .values import text_values

    return list(text_values(values))


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
    return _png(fig, tight=False)  # tight_layout above already fits everything: one draw less


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
    return _png(fig, tight=False)


#: What the survey list's small maps show (printed once on the survey page).
SITE_MAP_LEGEND = (
    (OKABE_ITO["vermillion"], "\u25a0", "the surface spot"),
    (OKABE_ITO["vermillion"], "\u2192", "its facing (outward wall normal)"),
    (OKABE_ITO["bluish_green"], "\u25c6", "demand points it serves"),
    (OKABE_ITO["reddish_purple"], "\u25a1", "backup spots, numbered as in the backup table"),
    ("#000000", "N\u2191", "grid north; the bar gives the scale; buildings grey"),
)


class SiteMaps:
    """Small maps around chosen sites, drawn on one reused figure (a field sheet needs one per site, and a
    figure's set-up costs more than its drawing): buildings, the spot and its facing, served demand, numbered
    backups, a scale bar and a north arrow.  The legend and the title are text of the survey page
    (:data:`SITE_MAP_LEGEND`), not drawn in every map: text is most of a small map's drawing time."""

    def __init__(self, bundle, fig_data: PlanFigures, radius_m: float = 60.0):
        self.bundle, self.fig_data, self.r = bundle, fig_data, float(radius_m)
        self.fig = Figure(figsize=(3.0, 3.0))
        FigureCanvasAgg(self.fig)
        ax = self.ax = self.fig.add_axes((0.01, 0.01, 0.98, 0.98))
        ax.set_xticks([])
        ax.set_yticks([])
        ax.set_xlim(-self.r, self.r)
        ax.set_ylim(-self.r, self.r)
        ax.set_aspect("equal", adjustable="box")
        _north_arrow(ax, (0.93, 0.86), size=8)
        _scale_bar(ax, 2 * self.r, loc="lower right", size=7)
        self.dynamic: list = []
        users = bundle.users
        self.ux, self.uy = users["x"].to_numpy(float), users["y"].to_numpy(float)
        self.sx, self.sy = bundle.sites["x"].to_numpy(float), bundle.sites["y"].to_numpy(float)

    def png(self, rank: int) -> bytes:
        from shapely.geometry import box

        for a in self.dynamic:
            a.remove()
        self.dynamic = []
        ax, r = self.ax, self.r
        s = self.fig_data.sites.iloc[rank - 1]
        x0, y0 = float(s["x"]), float(s["y"])
        coll = _draw_buildings(ax, self.bundle.buildings, x0, y0, clip=box(x0 - r, y0 - r, x0 + r, y0 + r))
        if coll is not None:
            self.dynamic.append(coll)
        lk = self.fig_data.links[self.fig_data.links["rank"] == rank]
        uid = lk["user_id"].to_numpy(np.int64)
        self.dynamic.append(ax.scatter(self.ux[uid] - x0, self.uy[uid] - y0, s=12, c=OKABE_ITO["bluish_green"],
                                       marker="D", zorder=3))
        bk = self.fig_data.backups[self.fig_data.backups["rank"] == rank]
        if len(bk):
            bid = bk["backup_site_id"].to_numpy(np.int64)
            bx, by = self.sx[bid] - x0, self.sy[bid] - y0
            self.dynamic.append(ax.scatter(bx, by, s=30, facecolors="none", edgecolors=OKABE_ITO["reddish_purple"],
                                           marker="s", zorder=4))
            for j, xx, yy in zip(bk["backup_rank"], bx, by):
                if abs(xx) < r and abs(yy) < r:
                    self.dynamic.append(ax.annotate(str(int(j)), (xx, yy), xytext=(4, 3), textcoords="offset points",
                                                    fontsize=6, color=OKABE_ITO["reddish_purple"], zorder=6))
        az = np.radians(float(s["facing_deg"]))
        self.dynamic.append(ax.scatter([0], [0], s=60, c=OKABE_ITO["vermillion"], marker="s", edgecolors="white",
                                       zorder=5))
        self.dynamic.append(ax.annotate("", xy=(0.2 * r * np.sin(az), 0.2 * r * np.cos(az)), xytext=(0, 0),
                                        arrowprops={"arrowstyle": "->", "color": OKABE_ITO["vermillion"], "lw": 1.5},
                                        zorder=5))
        return _png(self.fig, tight=False)


def site_map(bundle, fig_data: PlanFigures, rank: int, radius_m: float = 60.0) -> bytes:
    """A small map around one chosen site (see :class:`SiteMaps`, which draws many faster)."""
    return SiteMaps(bundle, fig_data, radius_m).png(rank)
