"""Survey list for field teams: one row per chosen site in rank order (CSV) and a printable HTML version.

CSV columns (UTF-8, comma-separated, header row):

rank, site_id, lon, lat, building_id, name, address, <any further name / address tags of the input>,
facing_deg (outward wall normal, clockwise from north), facing (16-point name), mount_height_m, size_id,
width_m, height_m, area_m2, elements, cost, currency (the job's currency, or "cost units"), weight_gained (newly
covered weight the site adds in rank order), exclusive_weight, shared_weight, cumulative_covered_weight and
cumulative_covered_share (covered after the sites up to this one, the weight covered directly included),
serving_bs_id, feed_below_peak_db (feeding station's
boresight gain minus its gain toward the panel), guessed_height_links (links of the surface that lose line of
sight when guessed building heights stand at the top of their band), exposure_w_m2 (highest RF power density
from the surface or its feed where people may stand, a screening value), exposure_share (that density over the
ICNIRP 2020 general-public whole-body reference level), for each backup k in the optimiser's order:
backup_<k>_site_id, _building_id, _name, _address, _lon, _lat, _distance_m (horizontal distance from the
primary spot), _facing_deg, _mount_height_m, _size_id, _width_m, _height_m, _placement (another building,
another wall of the same building, or the primary's own wall), _recovered_weight, _recovered_share (share of
the primary's exclusive weight the swap keeps), _kept_weight (the plan's covered weight after the swap),
_weak (true below 50 %) and any further column the optimiser gives; notes.  Ids print as integers.  The
four check columns are empty when the run computed no site checks.  Text cells that a spreadsheet would read as
a formula (starting with = + - @, tab or carriage return) get a leading apostrophe.
"""

from __future__ import annotations

import base64
import html
from pathlib import Path

import numpy as np
import pandas as pd

from .. import tables as T
from . import atomic, figures
from .backups import WEAK_SHARE
from .derive import PlanFigures
from .values import currency_label

#: Per backup k, the survey list's columns ``backup_<k>_<name>`` from :attr:`PlanFigures.backups` column ``<column>``.
BACKUP_CSV = (("site_id", "backup_site_id"), ("building_id", "backup_building_id"), ("name", "backup_name"),
              ("address", "backup_address"), ("lon", "backup_lon"), ("lat", "backup_lat"),
              ("distance_m", "backup_distance_m"), ("facing_deg", "backup_facing_deg"),
              ("mount_height_m", "backup_mount_height_m"), ("size_id", "backup_size_id"),
              ("width_m", "backup_width_m"), ("height_m", "backup_height_m"), ("placement", "placement"),
              ("recovered_weight", "recovered_weight"), ("recovered_share", "recovered_share"),
              ("kept_weight", "kept_weight"), ("weak", "weak"))
#: Backup columns shown under their own names; any other column of :attr:`PlanFigures.backups` is the optimiser's.
BACKUP_FIXED = ("rank", "site_id", "backup_rank", "backup_option_id", "backup_facing", "same_building",
                *(c for _, c in BACKUP_CSV))
PLACEMENT_TEXT = {"other_building": "another building", "other_wall": "another wall, same building",
                  "same_wall": "same wall", "same_building": "same building"}

BASE_COLUMNS = ["rank", "site_id", "lon", "lat", "building_id", "name", "address"]
AFTER_TAGS = ["facing_deg", "facing", "mount_height_m", "size_id", "width_m", "height_m", "area_m2", "elements",
              "cost", "currency", "weight_gained", "exclusive_weight", "shared_weight", "cumulative_covered_weight",
              "cumulative_covered_share", "serving_bs_id", "feed_below_peak_db", "guessed_height_links", "exposure_w_m2",
              "exposure_share"]


def tag_columns(buildings) -> list[str]:
    """Input name / address tags beyond the contract's 'name' and 'address' (e.g. 'addr:street')."""
    known = set(T.SCHEMAS["buildings"]) | {"geometry"}
    return [c for c in buildings.columns if c not in known and ("addr" in c.lower() or "name" in c.lower())]


def survey_frame(bundle, fig: PlanFigures) -> pd.DataFrame:
    """The survey list as a DataFrame (the CSV's rows and columns)."""
    s = fig.sites.assign(currency=currency_label(getattr(bundle, "currency", "")))
    out = s[BASE_COLUMNS].copy()
    tags = tag_columns(bundle.buildings)
    if tags:
        bidx = bundle.sites["building_idx"].to_numpy(np.int64)[s["site_id"].to_numpy(np.int64)]
        bld = bundle.buildings.reset_index(drop=True)
        for c in tags:
            vals = bld[c].astype(object).where(bld[c].notna(), "").astype(str).to_numpy()
            out[c] = np.where((bidx >= 0) & (bidx < len(bld)), vals[np.clip(bidx, 0, max(len(bld) - 1, 0))], "")
    for c in AFTER_TAGS:
        out[c] = s[c].to_numpy()
    out["guessed_height_links"] = s["guessed_height_links"].astype("Int64").array  # empty cell when not computed
    out["elements"] = pd.array(np.where(s["elements"] >= 0, s["elements"], 0), dtype="Int64")
    out.loc[(s["elements"] < 0).to_numpy(), "elements"] = pd.NA  # unknown pitch: empty cell
    _backup_columns(out, fig.backups, s["rank"].to_numpy())
    out["notes"] = s["notes"].to_numpy()
    return out.reset_index(drop=True)


def _backup_columns(out: pd.DataFrame, bk: pd.DataFrame, ranks: np.ndarray) -> None:
    """Add the ``backup_<k>_*`` columns of every backup rank k to the survey frame ``out`` (in place)."""
    extra = [c for c in bk.columns if c not in BACKUP_FIXED]
    for j in range(1, int(bk["backup_rank"].max()) + 1 if len(bk) else 1):
        sub = bk[bk["backup_rank"] == j].drop_duplicates("rank").set_index("rank").reindex(ranks)
        for name, col in BACKUP_CSV:
            v = sub[col]
            if col == "backup_site_id":
                out[f"backup_{j}_{name}"] = v.astype("Int64").array
            elif col == "weak":
                out[f"backup_{j}_{name}"] = v.astype("boolean").array
            elif v.dtype == object:
                out[f"backup_{j}_{name}"] = v.where(v.notna(), "").to_numpy(object)
            else:
                out[f"backup_{j}_{name}"] = v.to_numpy(float)
        for c in extra:
            out[f"backup_{j}_{c.removeprefix('backup_')}"] = sub[c].to_numpy()


#: First characters that make a spreadsheet read a cell as a formula (OWASP, "CSV Injection").
FORMULA_START = ("=", "+", "-", "@", "\t", "\r")


def neutralise_formulas(frame: pd.DataFrame) -> pd.DataFrame:
    """Text cells that a spreadsheet would run as a formula get a leading apostrophe (OWASP, "CSV Injection");
    numeric columns are left alone, so negative numbers stay numbers."""
    out = frame.copy()
    for c in out.columns:
        col = out[c]
        if col.dtype == object or pd.api.types.is_string_dtype(col):
            text = col.astype(object)
            risky = text.map(lambda v: isinstance(v, str) and v.startswith(FORMULA_START)).to_numpy(bool)
            if risky.any():
                out[c] = text.where(~risky, "'" + text.where(risky, "").astype(str))
    return out


def write_survey_csv(path, frame: pd.DataFrame) -> Path:
    """Write the survey list atomically (UTF-8, '.' decimal point, lon/lat with 7 decimals); text cells that a
    spreadsheet would read as a formula are written with a leading apostrophe."""
    safe = neutralise_formulas(frame)
    return atomic.write_with(path, lambda fh: safe.to_csv(fh, index=False, lineterminator="\n"))


_CSS = """
body { font-family: system-ui, -apple-system, "Segoe UI", Roboto, Arial, sans-serif; color: #111; margin: 1.5em; }
h1 { font-size: 1.4em; } h2 { font-size: 1.15em; margin: 0 0 .4em 0; }
table { border-collapse: collapse; font-size: .85em; }
td, th { border: 1px solid #999; padding: 2px 6px; text-align: left; vertical-align: top; }
.site { border-top: 2px solid #000; padding: .8em 0; page-break-inside: avoid; break-inside: avoid; }
.site .top { display: flex; gap: 1em; align-items: flex-start; }
td { overflow-wrap: anywhere; } table.backups { width: 100%; }
.site img { width: 300px; height: auto; border: 1px solid #ccc; }
.check { margin-top: .4em; font-size: .85em; } .check span { display: inline-block; width: 1em; height: 1em;
        border: 1px solid #000; margin-right: .4em; vertical-align: middle; }
table.backups { margin-top: .5em; font-size: .78em; } caption { text-align: left; font-weight: bold; }
.notes { min-height: 3em; border: 1px dashed #999; margin-top: .4em; font-size: .8em; padding: 2px; }
tr.weak td { background: #fdecea; }
@page { size: A4; margin: 12mm; }
@media print { body { margin: 0; font-size: 9pt; } .site { page-break-inside: avoid; } .site img { width: 55mm; }
  table { font-size: 7.5pt; max-width: 100%; page-break-inside: auto; }
  tr, td, th { page-break-inside: avoid; break-inside: avoid; } thead { display: table-header-group; }
  td, th { padding: 1px 3px; } }
"""

FIELD_CHECKS = (
    "wall and mounting position accessible; facing confirmed with a compass",
    "nothing blocks the view to the base station and to the served area",
    "structural fixing assessed; work at height planned by licensed installers",
    "owner consent and permits checked against local codes",
    "RF exposure near the panel and the focus area checked against local rules (the figure above is a "
    "screening value, not a compliance assessment)",
)


def _fmt(v, nd=2) -> str:
    if v is None or (isinstance(v, float) and not np.isfinite(v)):
        return "-"
    if isinstance(v, (float, np.floating)):
        return f"{v:.{nd}f}"
    return html.escape(str(v))


def _check_rows(r, site) -> list[tuple[str, str]]:
    """The field-check lines of one site (plain text; the caller escapes); nothing when not computed."""
    below, n_guess, expo, share = (r["feed_below_peak_db"], r["guessed_height_links"], r["exposure_w_m2"],
                                   r["exposure_share"])
    out = []
    if pd.notna(below):
        lobe = site["back_lobe_feed"]
        out.append(("feed below station boresight", f"{below:.1f} dB"
                    + (" (back lobe: re-aiming the station may serve these users without a panel)"
                       if lobe is not pd.NA and bool(lobe) else "")))
    if pd.notna(n_guess):
        out.append(("links on guessed building heights", f"{int(n_guess)}" + (" (measure those heights)"
                                                                              if int(n_guess) > 0 else "")))
    if pd.notna(expo):
        where = str(site["exposure_where"] or "")
        ref = site["exposure_reference_w_m2"]
        out.append(("RF exposure (screening)", f"{expo:.3g} W/m\u00b2" + (f" {where}" if where else "")))
        if pd.notna(share):
            out.append(("share of the reference level",
                        f"{100 * share:.1f} % of {ref:.3g} W/m\u00b2 (ICNIRP 2020, general public, whole body); "
                        "check against local rules" if pd.notna(ref) else f"{100 * share:.1f} %"))
    return out


def _backup_extra(r, extra) -> str:
    """The optimiser's further backup columns in words (a share as %, a true flag by its name)."""
    out = []
    for c in extra:
        v = r[c]
        if v is None or v is pd.NA or (isinstance(v, (float, np.floating)) and not np.isfinite(v)):
            continue
        label = c.removeprefix("backup_").replace("_", " ")
        if isinstance(v, (bool, np.bool_)):
            if v:
                out.append(label)
        elif isinstance(v, (int, float, np.integer, np.floating)):
            out.append(f"{label} {100 * float(v):.0f} %" if "share" in c else f"{label} {float(v):.2f}")
        elif str(v):
            out.append(f"{label}: {v}")
    return ", ".join(out)


def _recovers(b) -> str:
    """What swapping the primary for this backup keeps, in words, with the weak warning."""
    share = b["recovered_share"]
    text = f"{_fmt(b['recovered_weight'])}"
    if pd.notna(share):
        text += f" ({100 * float(share):.0f} % of the primary's own weight)"
    if pd.notna(b["kept_weight"]):
        text += f"; plan keeps {_fmt(b['kept_weight'])}"
    if bool(b["weak"]):
        text += f"; WEAK: recovers less than {100 * WEAK_SHARE:.0f} % of the primary's own weight"
    return text


def backup_table(backups: pd.DataFrame, rank: int) -> str:
    """The backup spots of one site as an HTML table (escaped), in the optimiser's order."""
    esc = html.escape
    bk = backups[backups["rank"] == rank]
    if not len(bk):
        return "<p class=\"backups\">Backup spots: none.</p>"
    extra = [c for c in bk.columns if c not in BACKUP_FIXED]
    head = ["#", "Site", "Building", "Address", "Where", "Wall facing", "Height", "Panel", "From primary",
            "lon, lat", "Recovers (newly covered weight)"]
    rows = []
    for _, b in bk.iterrows():
        building = str(b["backup_building_id"]) + (f" ({b['backup_name']})" if b["backup_name"] else "")
        panel = str(b["backup_size_id"] or "-")
        if np.isfinite(b["backup_width_m"]) and np.isfinite(b["backup_height_m"]):
            panel += f": {b['backup_width_m']:.2f} m x {b['backup_height_m']:.2f} m"
        where = PLACEMENT_TEXT.get(str(b["placement"]),
                                   "same building" if bool(b["same_building"]) else "another building")
        more = _backup_extra(b, extra)
        rows.append([str(int(b["backup_rank"])), str(int(b["backup_site_id"])), building,
                     str(b["backup_address"] or "-"), where,
                     f"{b['backup_facing_deg']:.1f}\u00b0 ({b['backup_facing']})",
                     f"{b['backup_mount_height_m']:.1f} m", panel, f"{b['backup_distance_m']:.1f} m",
                     f"{b['backup_lon']:.7f}, {b['backup_lat']:.7f}", _recovers(b) + (f"; {more}" if more else "")])
    h = "".join(f"<th>{esc(c)}</th>" for c in head)
    weak = ' class="weak"'
    body = "".join(f"<tr{weak if bool(w) else ''}>" + "".join(f"<td>{esc(v)}</td>" for v in row) + "</tr>"
                   for w, row in zip(bk["weak"], rows))
    return (f"<table class=\"backups\"><caption>Backup spots if this one fails the survey</caption>"
            f"<thead><tr>{h}</tr></thead><tbody>{body}</tbody></table>")


def survey_html(bundle, fig: PlanFigures, frame: pd.DataFrame, title: str) -> str:
    """Printable HTML: one block per site with a small map (PNG embedded as base64) and the survey fields."""
    esc = html.escape
    parts = [f"<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\"><title>{esc(title)} - survey list"
             f"</title><style>{_CSS}</style></head><body>",
             f"<h1>{esc(title)}: survey list</h1>",
             f"<p>{len(frame)} site(s) in rank order. Coordinates are WGS84 longitude / latitude; facing is the "
             "outward wall normal, clockwise from north. Backup spots can replace a site that fails the survey.</p>",
             "<p class=\"legend\">Maps: " + "; ".join(f"<span style=\"color:{c}\">{esc(sym)}</span> {esc(text)}"
                                                    for c, sym, text in figures.SITE_MAP_LEGEND) + ".</p>"]
    if not len(frame):
        parts.append(f"<p><strong>{esc(fig.summary.get('empty_plan_reason') or 'No site was chosen.')}</strong></p>")
    tags = tag_columns(bundle.buildings)
    by_rank = fig.sites.set_index("rank")
    maps = figures.SiteMaps(bundle, fig) if len(frame) else None
    for _, r in frame.iterrows():
        assert maps is not None  # (frame has rows)
        rank = int(r["rank"])
        site = by_rank.loc[rank]
        png = base64.b64encode(maps.png(rank)).decode("ascii")
        cur = currency_label(getattr(bundle, "currency", ""))
        rows = [
            ("site id", int(r["site_id"])), ("lon, lat", f"{r['lon']:.7f}, {r['lat']:.7f}"),
            ("building", r["building_id"]), ("name", r["name"]), ("address", r["address"]),
            *[(t, r[t]) for t in tags],
            ("wall facing", f"{r['facing_deg']:.1f}\u00b0 ({r['facing']})"),
            ("mount height", f"{r['mount_height_m']:.2f} m"),
            ("panel", f"{r['size_id']}: {r['width_m']:.2f} m x {r['height_m']:.2f} m"
                      + (f", {int(r['elements'])} elements" if pd.notna(r["elements"]) else "")),
            ("cost", f"{_fmt(r['cost'])} {cur}"), ("weight gained (newly covered)", _fmt(r["weight_gained"])),
            ("covered weight after this site (direct included)",
             f"{_fmt(r['cumulative_covered_weight'])} ({100 * r['cumulative_covered_share']:.1f} % of all demand)"),
            ("serving base station", r["serving_bs_id"] or "-"),
            *_check_rows(r, site),
        ]
        table = "".join(f"<tr><th>{esc(str(k))}</th><td>{esc(str(v))}</td></tr>" for k, v in rows)
        checks = "".join(f"<div><span></span>{esc(c)}</div>" for c in FIELD_CHECKS)
        note = esc(str(r["notes"])) if r["notes"] else ""
        parts.append(
            f"<section class=\"site\" id=\"site-{rank}\"><div class=\"top\"><div><img alt=\"map around site {int(r['site_id'])}, "
            f"facing {esc(str(r['facing']))}, {2 * maps.r:g} m across\" "
            f"src=\"data:image/png;base64,{png}\"></div><div><h2>Rank {rank}: site {int(r['site_id'])}</h2>"
            f"<table>{table}</table></div></div>{backup_table(fig.backups, rank)}<div class=\"check\">{checks}</div>"
            f"<div class=\"notes\">notes: {note}</div></section>")
    parts.append("</body></html>\n")
    return "\n".join(parts)
