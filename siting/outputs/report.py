"""The plan report (self-contained HTML and Markdown) and the machine-readable ``run.json`` record.

Every number the report prints comes from :class:`~siting.outputs.derive.PlanFigures` and is formatted by
:func:`fmt`, so a reader can compare the report, ``run.json``, the survey list and the layers line by line.
In the HTML each key figure carries ``data-key="<run.json summary key>"``.
"""

from __future__ import annotations

import base64
import html
import math
from statistics import NormalDist

import numpy as np
import pandas as pd

from ..plandiff import report_section
from .derive import PlanFigures

# (summary key, label, kind); kinds: weight, share, cost, int, db, num, text
KEY_FIGURES = (
    ("total_weight", "Total demand weight", "weight"),
    ("n_users", "Demand points", "int"),
    ("covered_weight_before", "Covered weight without surfaces", "weight"),
    ("covered_share_before", "Covered share without surfaces", "share"),
    ("covered_weight_after", "Covered weight with the plan", "weight"),
    ("covered_share_after", "Covered share with the plan", "share"),
    ("newly_covered_weight", "Newly covered weight", "weight"),
    ("n_users_newly_covered", "Newly covered demand points", "int"),
    ("n_sites_chosen", "Surfaces chosen", "int"),
    ("plan_cost", "Cost of the plan", "cost"),
    ("budget", "Budget", "cost"),
    ("budget_used_share", "Share of the budget used", "share"),
    ("max_panels", "Panel count limit", "int"),
    ("snr_target_db", "SNR target [dB]", "db"),
    ("status", "Solver status", "text"),
    ("solver", "Solver", "text"),
    ("objective", "Objective (weight the solver maximised)", "num"),
    ("bound", "Proven upper bound on the objective", "num"),
    ("gap", "Optimality gap (as reported by the solver)", "num"),
    ("greedy_objective", "Greedy baseline objective", "num"),
)

DECIMALS = {"weight": 2, "share": 1, "cost": 2, "db": 2, "num": 4}

_DIRECT_MODELS = {"umi": "3GPP TR 38.901 UMi-Street Canyon", "uma": "3GPP TR 38.901 UMa",
                  "free_space": "free space"}
# 3GPP TR 38.901 Table 7.4.1-1 shadow-fading standard deviations, LOS / NLOS [dB] (values from memory);
# free space has none of its own and takes the UMi-Street Canyon values, as the link model does
_SIGMA_TEXT = {"umi": "UMi-Street Canyon: 4 dB LOS, 7.82 dB NLOS", "uma": "UMa: 4 dB LOS, 6 dB NLOS",
               "free_space": "the UMi-Street Canyon values, 4 dB LOS, 7.82 dB NLOS"}


def job_value(params: dict | None, key: str, default):
    """``params['a']['b']`` for ``key='a.b'``, or ``default`` when a level is missing or the value is None."""
    node = params or {}
    for part in key.split("."):
        if not isinstance(node, dict) or part not in node or node[part] is None:
            return default
        node = node[part]
    return node


def assumptions(params: dict | None) -> list[str]:
    """The model assumptions in words, with the job's values (job defaults where a key is missing)."""
    v = lambda key, default: job_value(params, key, default)  # noqa: E731
    model = str(v("radio.direct_model", "umi"))
    fresnel = float(v("radio.fresnel_clearance", 0.6))
    fading = bool(v("radio.shadow_fading", True))
    prob = float(v("radio.coverage_probability", 0.9))
    q = float(v("surfaces.element_q", -1.0))
    u_m = float(v("inputs.height_uncertainty_m", 3.0))
    out = [
        "Coordinates are metres in the job's projected CRS; heights are metres above flat ground.",
        "Line of sight is 2.5-D: a straight 3-D segment is blocked where it crosses a building footprint below "
        "the roof height. Vegetation, vehicles and street furniture are not modelled unless the job adds losses.",
        (f"A surface hop counts as clear only when roofs and walls leave {fresnel:g} of the first Fresnel zone "
         "radius F1 = \u221a(\u03bb d1 d2 / (d1 + d2)) free along it (zone as defined in ITU-R P.526 and P.530; "
         "0.6 F1 is the usual planning rule, common practice)." if fresnel > 0 else
         "A surface hop needs only the bare geometric ray clear (no Fresnel-zone clearance, an optimistic choice)."),
        f"The direct path uses the {_DIRECT_MODELS.get(model, model)} path loss, LOS or NLOS decided by the "
        "line-of-sight rule rather than drawn at random; any planning margin is taken from the parameters.",
    ]
    if fading:
        k = NormalDist().inv_cdf(prob)
        out.append(f"A demand point counts as covered when its SNR reaches the target with a probability of "
                   f"{100 * prob:g} % under log-normal shadow fading, with the standard deviations of 3GPP TR "
                   f"38.901 Table 7.4.1-1 ({_SIGMA_TEXT.get(model, _SIGMA_TEXT['umi'])}; values from memory): "
                   f"the median SNR must clear the target by {k:.2f} standard deviations"
                   + (" (the median, no fade margin)." if abs(prob - 0.5) < 1e-12 else "."))
    else:
        out.append("No shadow fading: coverage uses the median path loss (an upper bound).")
    out.append("Each surface hop in line of sight takes the LOS path-loss law of the direct model."
               if v("radio.surface_hop_model", "direct") == "direct" else
               "Each surface hop takes free-space path loss (an upper bound).")
    if v("surfaces.control", "beams") == "beams":
        out.append(f"Panels are driven by a finite set of far-field beams ({int(v('surfaces.beam_oversampling', 2))} "
                   "beam(s) per beamwidth along each panel axis); each link uses its best beam, and the gain is "
                   "evaluated at the true near-field geometry of the panel, so a user inside the Fraunhofer "
                   "distance 2D\u00b2/\u03bb (D the panel diagonal) loses what focusing on it would have gained.")
    else:
        out.append("Panels focus ideally on each user (per-user focusing, an upper bound); the gain is evaluated "
                   "at the true near-field geometry of the panel.")
    out.append("Elements are phase-only, so a beam squints across the channel: the gain is averaged over the "
               "bandwidth." if v("surfaces.squint", True) else
               "The gain is taken at the carrier frequency alone (no beam squint, an upper bound).")
    cell = ("cos^q(\u03b8) on each hop (q of a published measured unit cell)" if q < 0 else
            f"cos^{q:g}(\u03b8) on each hop")
    eff = ("follows the measured curve against incidence angle given in the parameters"
           if v("surfaces.efficiency_angles_deg", []) else
           f"is constant at {float(v('surfaces.reflection_efficiency', 0.8)):g}")
    out.append(f"Each element's power pattern is {cell}; the reflection efficiency {eff}, and the phase "
               "quantisation loss of the configured phase resolution applies. A panel's far-field gain grows "
               "with the square of its area.")
    if v("radio.combining", "power") == "power":
        out.append("Direct and surface paths add in power (their average over the channel); co-phased "
                   "(coherent) combining is used only as an upper bound and never with an NLOS direct path.")
    else:
        out.append("Direct and surface paths are co-phased so their amplitudes add (an upper bound), except with "
                   "an NLOS direct path, where they add in power.")
    out.append("One station beam per slot: while a surface serves a user, the station's beam is aimed at the "
               "surface, and the user's own direct path sees that beam." if v("radio.station_beam", "one_beam")
               == "one_beam" else
               "Each user's direct path sees the station's best beam toward it (an upper bound).")
    out.append(f"Building heights from building:levels or the default height are guesses, uncertain by "
               f"\u00b1{u_m:g} m; a site's links that lose line of sight when those buildings stand at the top of "
               "the band are counted and flagged (measure those heights). "
               + ("The plan was made with the guessed heights at the top of the band."
                  if v("radio.robust_heights", False) else "The plan uses the heights as read."))
    out += [
        "Noise is -174 dBm/Hz + 10 log10(bandwidth) + noise figure.",
        "A surface is steered to one demand point at a time (time sharing): coverage counts every point that "
        "reaches the target when served; the time each point gets is not modelled.",
        "Element counts are given for information at the configured element pitch; the model's gain depends on "
        "the panel area, not on the count.",
    ]
    return out


#: The assumptions with the job defaults (the report prints :func:`assumptions` of the job's own values).
ASSUMPTIONS = tuple(assumptions({}))

CAUTIONS = (
    "RF exposure: a surface focuses energy on the points it serves. The exposure figures of this report are "
    "screening values; check field strength near the focus points and near the panel against the exposure "
    "limits of the local regulation before switching on.",
    "Work at height: mounting on facades is work at height and must be planned and done by trained, "
    "licensed installers with the right access equipment.",
    "Structure: wind and dead loads on the wall and the fixings need a structural / mounting assessment "
    "for each site.",
    "Permits: owner consent, building, heritage and telecom permits follow local codes; the survey confirms "
    "what applies.",
    "This tool plans; it does not replace local codes or licensed professional practice, which decide.",
)


def fmt(v, kind: str, unit: str = "") -> str:
    """Format a figure for the report; None / NaN / inf print as 'n/a'; ``unit`` (e.g. the currency) follows a
    number."""
    if unit:
        text = fmt(v, kind)
        return text if text == "n/a" else f"{text} {unit}"
    if kind == "text":
        return str(v) if v not in (None, "") else "n/a"
    if v is None or (isinstance(v, (float, np.floating)) and not math.isfinite(float(v))):
        return "n/a"
    if kind == "int":
        return str(int(v))
    if kind == "share":
        return f"{100 * float(v):.{DECIMALS['share']}f} %"
    return f"{float(v):.{DECIMALS[kind]}f}"


def flatten(d, prefix: str = "") -> list[tuple[str, object]]:
    """Nested dict -> [('a.b.c', value)] sorted by key; lists are kept as values."""
    out = []
    for k in sorted(d or {}, key=str):
        v = d[k]
        key = f"{prefix}{k}"
        if isinstance(v, dict):
            out.extend(flatten(v, key + "."))
        else:
            out.append((key, v))
    return out


# ---------------------------------------------------------------------------------------------- tables

# The ranked sites in two narrow tables, so each fits a 1,400 px screen and an A4 page.
SITE_TABLE = (
    ("rank", "Rank", "int"), ("site_id", "Site", "int"), ("building_id", "Building", "text"),
    ("facing", "Facing", "text"), ("facing_deg", "Facing [deg]", "num1"), ("mount_height_m", "Height [m]", "num1"),
    ("size_id", "Panel", "text"), ("cost", "Cost [{currency}]", "cost"),
    ("weight_gained", "Weight gained", "weight"),
    ("cumulative_covered_weight", "Covered weight after this site (direct included)", "weight"),
    ("cumulative_covered_share", "Covered share after this site (direct included)", "share"),
)
SITE_DETAIL_TABLE = (
    ("rank", "Rank", "int"), ("site_id", "Site", "int"), ("elements", "Elements", "int"),
    ("exclusive_weight", "Exclusive weight", "weight"), ("shared_weight", "Shared weight", "weight"),
    ("n_users_served", "Points served", "int"), ("median_snr_gain_db", "Median SNR gain [dB]", "db"),
    ("serving_bs_id", "Base station", "text"), ("backup_site_ids", "Backup sites", "text"),
)


SITES_SENTENCE = (
    "Weight gained is the newly covered weight a site adds in rank order; the covered weight after a site counts "
    "every covered demand point, the points covered directly (without any surface) included, so the first row "
    "starts from the covered weight without surfaces. Exclusive weight is reached by no other chosen site, shared "
    "weight also by another. The survey list gives coordinates, addresses and backup spots.")


def backups_sentence(fig: PlanFigures) -> str:
    """How many backup spots the survey list offers, and how many of them are weak."""
    bk = fig.backups
    if not len(bk):
        return "The survey list offers no backup spot."
    weak = int(bk["weak"].sum())
    text = (f"The survey list offers {len(bk)} backup spot(s), at most one per wall, for "
            f"{bk['rank'].nunique()} site(s)")
    if weak:
        return (text + f"; {weak} of them recover less than half of their primary's own weight (marked WEAK): "
                "losing that primary costs coverage whichever backup is used.")
    return text + "; each recovers at least half of its primary's own weight."


def site_headers(table, currency: str = "") -> list[str]:
    """The column headers of a site table, costs labelled with the currency."""
    from .values import currency_label

    return [lbl.replace("{currency}", currency_label(currency)) for _, lbl, _ in table]


def _cell(v, kind):
    if kind == "num1":
        return "n/a" if v is None or not np.isfinite(v) else f"{float(v):.1f}"
    if kind == "int" and (v is None or v is pd.NA or int(v) < 0):
        return "n/a"
    return fmt(v, kind)


def _site_rows(fig: PlanFigures, table=SITE_TABLE) -> list[list[str]]:
    return [[_cell(r[c], k) for c, _, k in table] for _, r in fig.sites.iterrows()]


def _kind_rows(fig: PlanFigures) -> tuple[list[str], list[list[str]]]:
    head = ["Demand kind", "Points", "Weight", "Covered before", "Share before", "Covered after", "Share after",
            "Newly covered"]
    rows = [[str(r["kind"]), fmt(r["n_users"], "int"), fmt(r["weight"], "weight"),
             fmt(r["covered_weight_before"], "weight"), fmt(r["covered_share_before"], "share"),
             fmt(r["covered_weight_after"], "weight"), fmt(r["covered_share_after"], "share"),
             fmt(r["newly_covered_weight"], "weight")] for _, r in fig.by_kind.iterrows()]
    return head, rows


def _sweep_rows(bundle, s: dict):
    from .figures import sweep_table

    sw = sweep_table(bundle.sweep, s)
    head = [f"Budget [{_cur(s)}]", "Newly covered weight", "Covered share", "Upper bound on share", "Gap", "Sites", "Status"]
    rows = [[fmt(r.budget, "cost"), fmt(r.newly_covered_weight, "weight"), fmt(r.covered_share, "share"),
             fmt(r.bound_share, "share"), fmt(r.gap, "num"), fmt(r.n_sites, "int"), fmt(r.status, "text")]
            for r in sw.itertuples()]
    return head, rows


def _summary_sentences(s: dict) -> list[str]:
    if s["empty_plan"]:
        out = [s["empty_plan_reason"].capitalize() + "."]
    else:
        budget = f" within a budget of {fmt(s['budget'], 'cost', _cur(s))}" if s["budget"] is not None else ""
        out = [f"The plan places {s['n_sites_chosen']} surface(s) at a cost of {fmt(s['plan_cost'], 'cost', _cur(s))}{budget}."]
    out.append(f"Covered demand weight goes from {fmt(s['covered_weight_before'], 'weight')} "
               f"({fmt(s['covered_share_before'], 'share')}) without surfaces to "
               f"{fmt(s['covered_weight_after'], 'weight')} ({fmt(s['covered_share_after'], 'share')}) with the plan, "
               f"at an SNR target of {fmt(s['snr_target_db'], 'db')} dB.")
    if s.get("n_users_below_target_with_plan"):
        med = s.get("median_shortfall_db_with_plan")
        out.append(f"{s['n_users_below_target_with_plan']} demand point(s) (weight "
                   f"{fmt(s['weight_below_target_with_plan'], 'weight')}) get a better SNR from a chosen surface but "
                   f"stay below the target" + (f" (by {med:.1f} dB at the median)" if med is not None else "")
                   + "; they count as not covered (reason in the demand layer).")
    if s["gap"] is not None and not s["empty_plan"]:
        out.append(f"The solver ({s['solver'] or 'n/a'}) ended with status '{s['status'] or 'n/a'}' and a gap of "
                   f"{fmt(s['gap'], 'num')} to its proven bound.")
    return out


TIE_BREAK_TEXT = {
    "proven": "proven: no plan of the same covered weight is cheaper (minimum cost: none of the same cost covers "
              "more), within the relative gap",
    "not_proven": "not proven: the second solve ran out of time; the better plan of both solves is shown",
    "skipped": "skipped: no time was left, or the first plan is not proven",
}


def solver_rows(s: dict) -> list[tuple[str, str]]:
    """The 'Budget and solver' table: limits, cost, the solver's status, bound, gap and tie-break."""
    mode = {"max_coverage": "most covered weight within the limits",
            "min_cost": "cheapest plan reaching the target share"}.get(s.get("mode") or "", s.get("mode") or "")
    return [
        ("Budget", fmt(s["budget"], "cost", _cur(s))), ("Panel count limit", fmt(s["max_panels"], "int")),
        ("Cost of the plan", fmt(s["plan_cost"], "cost", _cur(s))),
        ("Cheapest option", fmt(s["cheapest_option_cost"], "cost", _cur(s))),
        ("Mode", fmt(mode, "text")), ("Solver", fmt(s["solver"], "text")), ("Status", fmt(s["status"], "text")),
        ("Objective", fmt(s["objective"], "num")), ("Bound", fmt(s["bound"], "num")), ("Gap", fmt(s["gap"], "num")),
        ("Tie-break", fmt(TIE_BREAK_TEXT.get(s.get("tie_break") or "", s.get("tie_break") or ""), "text")),
        ("Greedy baseline", fmt(s["greedy_objective"], "num")), ("Solver message", fmt(s["solver_message"], "text")),
    ]


def timing_rows(record: dict) -> list[tuple[str, str]]:
    """Wall time per stage [s] (the only part of a report that differs between runs of the same job)."""
    return [(k, f"{float(v):.2f}") for k, v in (record.get("timings_s") or {}).items() if isinstance(v, (int, float))]


def _key_figure(s: dict, key: str, kind: str) -> str:
    return fmt(s.get(key), kind, _cur(s) if kind == "cost" else "")


def _cur(s: dict) -> str:
    return s.get("currency") or "cost units"


def _input_rows(bundle, s: dict) -> list[tuple[str, str]]:
    import pyproj

    crs = pyproj.CRS(bundle.crs)
    return [("Projected CRS", f"{crs.name} ({crs.to_string()})"), ("Buildings", str(s["n_buildings"])),
            ("Base stations", str(s["n_base_stations"])), ("Demand points", str(s["n_users"])),
            ("Candidate spots", str(s["n_candidate_sites"])), ("Options (spot x size)", str(s["n_options"])),
            ("Panel sizes", ", ".join(f"{r.size_id} ({r.width_m:.2f} x {r.height_m:.2f} m)"
                                      for r in bundle.sizes.itertuples()) or "none")]


SENSITIVITY_SENTENCE = (
    "The planning model is the default the plan was made with; each further row relaxes one planning assumption "
    "alone, and the upper bound (all relaxations together) is what an ideal deployment of the same surfaces "
    "could at most deliver. A demand point counts as covered here when its direct path or any chosen surface "
    "brings it to the SNR target.")

EXPOSURE_CAUTION = (
    "Screening figure, not a compliance assessment: the highest RF power density the surface and its feeding "
    "station put where people may stand (the station beam at the panel, points up to 2 m in front of the panel "
    "and the served points, the panel assumed focused on each point), compared with the general-public "
    "whole-body reference level of the ICNIRP 2020 guidelines (ICNIRP, 'Guidelines for limiting exposure to "
    "electromagnetic fields (100 kHz to 300 GHz)', Health Physics 118(5), 2020, doi:10.1097/HP.0000000000001210; "
    "reference level from memory). National rules differ and other sources add to the field: local regulation "
    "and licensed practice decide.")


def _sensitivity_rows(fig: PlanFigures) -> tuple[list[str], list[list[str]]]:
    head = ["Model", "Covered weight", "Share of total weight", "Difference to the planning model",
            "Covered directly"]
    rows = []
    sv = fig.sensitivity if fig.sensitivity is not None else pd.DataFrame()
    for r in sv.itertuples():
        diff = "reference" if r.model == "planning model" else (
            "n/a" if not np.isfinite(r.difference_weight) else f"{r.difference_weight:+.{DECIMALS['weight']}f}")
        rows.append([str(r.model), fmt(r.covered_weight, "weight"), fmt(r.covered_share, "share"), diff,
                     fmt(r.covered_directly_weight, "weight")])
    return head, rows


def _density(v) -> str:
    return "n/a" if v is None or not np.isfinite(v) else f"{float(v):.3g}"


def _exposure_rows(fig: PlanFigures) -> tuple[list[str], list[list[str]]]:
    head = ["Rank", "Site", "Power density [W/m\u00b2]", "Where", "Reference level [W/m\u00b2]",
            "Share of the reference"]
    rows = [[fmt(r["rank"], "int"), fmt(r["site_id"], "int"), _density(r["exposure_w_m2"]),
             str(r["exposure_where"] or "n/a"), _density(r["exposure_reference_w_m2"]),
             "n/a" if not np.isfinite(r["exposure_share"]) else f"{100 * r['exposure_share']:.2f} %"]
            for _, r in fig.sites.iterrows()]
    return head, rows


def _check_lists(fig: PlanFigures) -> tuple[list[str], list[str]]:
    """Plain-text items: back-lobe feeds, and sites whose links depend on guessed building heights."""
    lobes, heights = [], []
    for _, r in fig.sites.iterrows():
        site = f"rank {int(r['rank'])} (site {int(r['site_id'])}, building {r['building_id']})"
        lobe = r["back_lobe_feed"]
        if lobe is not pd.NA and bool(lobe):
            below = r["feed_below_peak_db"]
            station = f" by {r['feed_bs_id']}" if r["feed_bs_id"] else ""
            lobes.append(f"{site}: fed{station} from the station's back lobe "
                         f"({_cell(below, 'num1')} dB below boresight); re-aiming the station may serve these "
                         "users without a panel")
        n = r["guessed_height_links"]
        if n is not pd.NA and int(n) > 0:
            heights.append(f"{site}: {int(n)} link(s) depend on guessed building heights; measure those heights")
    return lobes, heights


def _exposure_sentence(fig: PlanFigures) -> str:
    over = [f"rank {int(r['rank'])}" for _, r in fig.sites.iterrows()
            if np.isfinite(r["exposure_share"]) and r["exposure_share"] >= 1.0]
    top = fig.summary.get("max_exposure_share")
    if top is None:
        return ""
    if over:
        return (f"At {', '.join(over)} the screening value reaches or exceeds the reference level: an exposure "
                "assessment is needed before switching on.")
    return f"The highest screening value is {100 * top:.2f} % of the reference level."


# ---------------------------------------------------------------------------------------------- HTML

_CSS = """
body { font-family: system-ui, -apple-system, "Segoe UI", Roboto, Arial, sans-serif; color: #111;
       max-width: 70em; margin: 1.5em auto; padding: 0 1em; line-height: 1.4; }
h1 { font-size: 1.6em; } h2 { font-size: 1.25em; border-bottom: 1px solid #999; margin-top: 1.6em; }
table { border-collapse: collapse; font-size: .88em; margin: .5em 0; }
td, th { border: 1px solid #aaa; padding: 2px 7px; text-align: left; vertical-align: top; overflow-wrap: anywhere; }
table { max-width: 100%; }
td.n { text-align: right; font-variant-numeric: tabular-nums; }
img { max-width: 100%; height: auto; border: 1px solid #ddd; }
.lead { font-size: 1.05em; background: #f2f2f2; padding: .6em .9em; border-left: 4px solid #0072B2; }
.wide { overflow-x: auto; max-width: 100%; }
.caution { border-left: 4px solid #D55E00; padding-left: .8em; }
@page { size: A4; margin: 12mm; }
@media print {
  body { max-width: none; margin: 0; padding: 0; font-size: 9.5pt; }
  table { font-size: 7.5pt; page-break-inside: auto; } tr, td, th { page-break-inside: avoid; break-inside: avoid; }
  td, th { padding: 1px 3px; } .wide { overflow: visible; } thead { display: table-header-group; }
  h2 { page-break-after: avoid; } img { page-break-inside: avoid; }
}
"""


def _html_table(head, rows, numeric_from: int = 1) -> str:
    esc = html.escape
    h = "".join(f"<th>{esc(c)}</th>" for c in head)
    num = ' class="n"'
    body = "".join("<tr>" + "".join(f"<td{num if i >= numeric_from else ''}>{esc(str(v))}</td>"
                                    for i, v in enumerate(r)) + "</tr>" for r in rows)
    return f"<div class=\"wide\"><table><thead><tr>{h}</tr></thead><tbody>{body}</tbody></table></div>"


def report_html(bundle, fig: PlanFigures, pngs: dict, record: dict) -> str:
    """Self-contained HTML report: CSS inline, figures as base64 PNG, no scripts, no network."""
    esc = html.escape
    s = fig.summary
    title = esc(bundle.title)
    p = [f"<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
         f"<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\"><title>{title}</title>"
         f"<style>{_CSS}</style></head><body>", f"<h1>{title}</h1>"]
    sentences = [esc(x) for x in _summary_sentences(s)]
    if s["empty_plan"]:  # the reason comes first, in bold
        sentences[0] = f"<strong id=\"empty-plan\">{sentences[0]}</strong>"
    p.append("<p class=\"lead\" id=\"summary\">" + " ".join(sentences) + "</p>")
    p.append("<h2>Key figures</h2><table><tbody>")
    for key, label, kind in KEY_FIGURES:
        p.append(f"<tr><th>{esc(label)}</th><td class=\"n\" data-key=\"{key}\">{esc(_key_figure(s, key, kind))}</td></tr>")
    p.append("</tbody></table>")

    p.append("<h2>Coverage before and after</h2>")
    head, rows = _kind_rows(fig)
    p.append(_html_table(head, rows))

    p.append("<h2>Budget and solver</h2>")
    p.append(_html_table(["Item", "Value"], solver_rows(s), numeric_from=9))

    p.append("<h2>Map</h2>")
    p.append(_img_html(pngs["district_map"], "Map of the district with buildings, base stations, chosen surfaces "
                                             "and demand points by coverage state"))
    p.append("<h2>Coverage against budget</h2>")
    if pngs.get("coverage_curve"):
        p.append(_img_html(pngs["coverage_curve"], "Covered demand weight against budget"))
        p.append(_html_table(*_sweep_rows(bundle, s)).replace("<table>", "<table id=\"sweep\">", 1))
    else:
        p.append("<p>No budget sweep was run for this job.</p>")
    p.append("<h2>SNR distribution</h2>")
    p.append(_img_html(pngs["snr_cdf"], "Cumulative distribution of demand-point SNR without and with the plan"))

    p.append("<h2>Ranked sites</h2>")
    if len(fig.sites):
        p.append(_html_table(site_headers(SITE_TABLE, _cur(s)), _site_rows(fig)).replace("<table>", "<table id=\"sites\">", 1))
        p.append(_html_table(site_headers(SITE_DETAIL_TABLE), _site_rows(fig, SITE_DETAIL_TABLE))
                 .replace("<table>", "<table id=\"site-details\">", 1))
        p.append(f"<p>{esc(SITES_SENTENCE)}</p><p id=\"backups\">{esc(backups_sentence(fig))}</p>")
    else:
        p.append("<p>No site was chosen.</p>")

    p.append("<h2 id=\"site-checks\">Feeds and building heights to check</h2>")
    if not fig.summary.get("site_checks_computed"):
        p.append("<p>No site checks were computed for this run.</p>")
    elif len(fig.sites):
        lobes, heights = _check_lists(fig)
        p.append("<p>Surfaces fed from a station's back lobe (more than 20 dB below its boresight gain):</p>"
                 + ("<ul>" + "".join(f"<li>{esc(x)}</li>" for x in lobes) + "</ul>" if lobes else "<p>none.</p>"))
        p.append("<p>Surfaces whose links depend on guessed building heights:</p>"
                 + ("<ul>" + "".join(f"<li>{esc(x)}</li>" for x in heights) + "</ul>" if heights else "<p>none.</p>"))
    else:
        p.append("<p>No site was chosen.</p>")

    p.append("<h2 id=\"rf-exposure\">RF exposure screening</h2>")
    if fig.summary.get("site_checks_computed") and len(fig.sites):
        p.append(_html_table(*_exposure_rows(fig), numeric_from=2).replace("<table>", "<table id=\"exposure\">", 1))
        sentence = _exposure_sentence(fig)
        if sentence:
            p.append(f"<p>{esc(sentence)}</p>")
    else:
        p.append("<p>No exposure screening was computed for this run.</p>" if len(fig.sites) else
                 "<p>No site was chosen.</p>")
    p.append(f"<p class=\"caution\">{esc(EXPOSURE_CAUTION)}</p>")

    p.append("<h2 id=\"sensitivity\">What the model assumptions are worth</h2>")
    if fig.sensitivity is not None and len(fig.sensitivity):
        p.append(f"<p>{esc(SENSITIVITY_SENTENCE)}</p>")
        p.append(_html_table(*_sensitivity_rows(fig)).replace("<table>", "<table id=\"sensitivity-table\">", 1))
    else:
        p.append("<p>No model sensitivity was computed for this run.</p>")

    changes = report_section(record)  # changes against the previous plan (siting.plandiff)
    if changes is not None:
        sentence, head, rows = changes
        p.append(f"<h2>Changes against the previous plan</h2><p>{esc(sentence)}</p>"
                 + (_html_table(head, rows, numeric_from=len(head)) if rows else ""))
    p.append("<h2>Model assumptions</h2><ul>" + "".join(f"<li>{esc(a)}</li>" for a in assumptions(bundle.params))
             + "</ul>")
    p.append("<h2>Cautions</h2><ul class=\"caution\">" + "".join(f"<li>{esc(c)}</li>" for c in CAUTIONS) + "</ul>")
    p.append("<h2>Inputs and parameters</h2>")
    p.append(_html_table(["Input", "Value"], _input_rows(bundle, s), numeric_from=9))
    hashes = record.get("input_hashes") or {}
    if hashes:
        p.append("<h3>Input files</h3>" + _html_table(["File", "SHA-256"], sorted(hashes.items()), numeric_from=9))
    params = flatten(bundle.params)
    if params:
        p.append("<h3>Parameters</h3>" + _html_table(["Key", "Value"], [(k, str(v)) for k, v in params], numeric_from=9))

    p.append("<h2>Run details</h2>")
    p.append("<h3 id=\"timings\">Timings</h3>" + _html_table(["Stage", "Time [s]"], timing_rows(record)))
    p.append("<h3>Versions</h3>")
    p.append(_html_table(["Package", "Version"], [(k, str(v)) for k, v in record["versions"].items()], numeric_from=9))
    if fig.notes:
        p.append("<h3>Notes</h3><ul>" + "".join(f"<li>{esc(str(n))}</li>" for n in fig.notes) + "</ul>")
    p.append("</body></html>\n")
    return "\n".join(p)


def _img_html(png: bytes, alt: str) -> str:
    return f"<p><img alt=\"{html.escape(alt)}\" src=\"data:image/png;base64,{base64.b64encode(png).decode('ascii')}\"></p>"
