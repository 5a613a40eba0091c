"""Survey verdicts: the re-plan against exact brute-force references, a field round trip, bad rows."""

from __future__ import annotations

import itertools
import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import scipy.sparse as sp

from siting import optimize as opt
from siting.errors import InputDataError
from siting.job import Job
from siting.runner import optimisation_inputs, run
from siting.verdicts import read_verdicts, solve_with_verdicts

ROOT = Path(__file__).resolve().parents[1]
DEMO_JOB = ROOT / "demo_district" / "job.toml"
#: The demo job as it stands (budget 30,000), without its budget curve.
SMALL = ["budget.sweep_budgets=[]"]
BUDGET = 30000.0


# ------------------------------------------------------------------------------- brute force on the arrays
def _instance(seed: int):
    rng = np.random.default_rng(seed)
    n_sites, n_sizes, n_users = 6, 2, 10
    option_site = np.repeat(np.arange(n_sites), n_sizes)
    n_opt = len(option_site)
    cover = rng.random((n_opt, n_users)) < 0.3
    cover[1::2] |= cover[0::2]  # the larger size covers what the smaller one does
    cost = np.where(np.arange(n_opt) % 2, 3.0, 2.0) + rng.integers(0, 2, n_opt)
    weight = rng.integers(1, 5, n_users).astype(float)
    conflicts = np.array([[0, 1], [3, 4]])
    keep = rng.random(n_opt) > 0.25
    fixed = []
    for s in rng.permutation(n_sites)[:2]:  # up to two accepted sites, not in conflict with each other
        at = np.flatnonzero((option_site == s) & keep)
        if len(at) and not any({s, option_site[f]} in ({0, 1}, {3, 4}) for f in fixed):
            fixed.append(int(rng.choice(at)))
    return cover, weight, cost, option_site, conflicts, keep, np.asarray(fixed, np.int64)


def _brute(cover, weight, cost, option_site, conflicts, keep, fixed, budget, count, target=None):
    """Exact optimum by enumeration over every plan that respects the verdicts (one size per site, spacing)."""
    allowed = np.flatnonzero(keep)
    best = None
    for r in range(len(allowed) + 1):
        for plan in itertools.combinations(allowed, r):
            plan = np.asarray(plan, np.int64)
            sites = option_site[plan]
            if len(set(sites)) < len(sites) or not set(fixed) <= set(plan.tolist()):
                continue
            if any(a in sites and b in sites for a, b in conflicts):
                continue
            c = cost[plan].sum()
            if c > budget + 1e-9 or len(plan) > count:
                continue
            w = weight[cover[plan].any(axis=0)].sum() if len(plan) else 0.0
            key = (-w, c) if target is None else ((c, -w) if w >= target - 1e-9 else None)
            if key is not None and (best is None or key < best):
                best = key
    return best


@pytest.mark.parametrize("seed", range(12))
def test_replan_equals_brute_force_optimum_among_plans_respecting_the_verdicts(seed):
    """Exact reference: enumeration of every subset of allowed options that holds the accepted ones."""
    cover, weight, cost, option_site, conflicts, keep, fixed = _instance(seed)
    budget, count = 9.0, 3
    plan, info = solve_with_verdicts(sp.csr_array(cover), weight, cost, option_site, keep, fixed, budget=budget,
                                     max_count=count, conflicts=conflicts)
    best = _brute(cover, weight, cost, option_site, conflicts, keep, fixed, budget, count)
    chosen = np.asarray(plan.chosen)
    assert set(fixed) <= set(chosen.tolist()) and keep[chosen].all()
    assert len(set(option_site[chosen])) == len(chosen) and cost[chosen].sum() <= budget + 1e-9
    assert plan.objective == pytest.approx(-best[0]) and plan.cost == pytest.approx(best[1])
    assert plan.objective == pytest.approx(weight[cover[chosen].any(axis=0)].sum())
    assert plan.status == "optimal" and info["exact"]


@pytest.mark.parametrize("seed", range(6))
def test_min_cost_replan_equals_brute_force(seed):
    cover, weight, cost, option_site, conflicts, keep, fixed = _instance(100 + seed)
    target = 0.6 * weight[cover[keep].any(axis=0)].sum()
    best = _brute(cover, weight, cost, option_site, conflicts, keep, fixed, np.inf, 99, target=target)
    if best is None:
        pytest.skip("target unreachable on this draw")
    plan, _ = solve_with_verdicts(sp.csr_array(cover), weight, cost, option_site, keep, fixed, conflicts=conflicts,
                                  target_weight=target)
    assert set(fixed) <= set(np.asarray(plan.chosen).tolist())
    assert plan.cost == pytest.approx(best[0]) and plan.objective >= target - 1e-9


# ------------------------------------------------------------------------------------------- round trip
@pytest.fixture(scope="module")
def round_trip(tmp_path_factory):
    """Plan the demo, fill in its survey list (2 accepted, 1 moved, 3 rejected, one of them a whole wall), re-plan."""
    tmp = tmp_path_factory.mktemp("field")
    out = tmp / "out"
    first = run(Job.from_toml(DEMO_JOB, [*SMALL, f"output.folder={json.dumps(str(out))}"]))
    sv = pd.read_csv(out / "survey.csv")
    assert len(sv) >= 6
    sv["status"] = ["accepted", "accepted", "moved", "rejected", "rejected", "rejected"] + [""] * (len(sv) - 6)
    sv["reason"] = ["", "", "bracket on the next pier", "owner", "heritage", "no access"] + [""] * (len(sv) - 6)
    sv["rejects_wall"] = ["false"] * 4 + ["true"] + ["false"] * (len(sv) - 5)
    sv["measured_lon"] = sv["measured_lon"].astype(object)
    sv["measured_lat"] = sv["measured_lat"].astype(object)
    sv.loc[2, "measured_lon"], sv.loc[2, "measured_lat"] = sv.loc[2, "backup_1_lon"], sv.loc[2, "backup_1_lat"]
    results = tmp / "results.csv"
    sv.to_csv(results, index=False)
    second = run(Job.from_toml(DEMO_JOB, [*SMALL, f"output.folder={json.dumps(str(out))}",
                                          f"inputs.survey_results={json.dumps(str(results))}"]))
    return first, second, sv, out


def _chosen_sites(result) -> dict[int, str]:
    o = result.gains.options.loc[result.plan.chosen]
    return dict(zip(o["site_id"].astype(int), o["size_id"].astype(str)))


def test_round_trip_keeps_accepted_drops_rejected_and_moves(round_trip):
    first, second, sv, out = round_trip
    new = _chosen_sites(second)
    for _, r in sv.iloc[:2].iterrows():  # accepted: kept with their planned size
        assert new[int(r["site_id"])] == r["size_id"]
    rejected = sv.iloc[3:6]["site_id"].astype(int).tolist()
    assert not set(rejected) & set(new)
    wall = second.sites.set_index("site_id")["wall_id"]
    refused_wall = wall[int(sv.iloc[4]["site_id"])]
    assert not any(wall[s] == refused_wall for s in new)  # the whole wall refused
    moved_from = int(sv.iloc[2]["site_id"])
    spot = second.field.moved_to()[moved_from]
    assert moved_from not in new and new[spot] == sv.iloc[2]["size_id"]
    # the spot sits at the measured position, snapped onto a wall (within the snap tolerance)
    from siting.district import to_lonlat
    lon, lat = to_lonlat(second.sites.loc[spot, ["x"]].to_numpy(), second.sites.loc[spot, ["y"]].to_numpy(),
                         second.district.crs)
    assert abs(lon[0] - sv.iloc[2]["measured_lon"]) < 3e-5 and abs(lat[0] - sv.iloc[2]["measured_lat"]) < 3e-5
    assert second.plan.cost <= BUDGET + 1e-6


def test_round_trip_is_the_optimum_with_the_fixed_sites_forced(round_trip):
    """Independent formulation: force each fixed option by a private user of huge weight, on the allowed options."""
    _, second, _, _ = round_trip
    cover, weight, cost, site = optimisation_inputs(second.gains, second.users, second.params.radio)
    r = second.field.restriction
    keep = np.flatnonzero(r.keep)
    big = float(weight.sum()) + 1.0  # more than all the weight: every optimum holds every fixed option
    extra = sp.csr_array((np.ones(len(r.fixed), bool), (np.searchsorted(keep, r.fixed), np.arange(len(r.fixed)))),
                         shape=(len(keep), len(r.fixed)))
    forced = opt.solve_coverage(sp.hstack([sp.csr_array(cover)[keep], extra]).tocsr(),
                                np.concatenate([weight, np.full(len(r.fixed), big)]), cost[keep], site[keep],
                                budget=BUDGET, conflicts=second.field.conflicts, mip_rel_gap=1e-9)
    assert forced.objective - big * len(r.fixed) == pytest.approx(second.plan.objective)


def test_next_survey_list_and_plan_diff(round_trip):
    first, second, sv, out = round_trip
    nxt = pd.read_csv(out / "survey.csv")
    settled = set(sv.iloc[:2]["site_id"].astype(int)) | {second.field.moved_to()[int(sv.iloc[2]["site_id"])]}
    assert not settled & set(nxt["site_id"].astype(int))
    assert set(nxt["site_id"].astype(int)) == set(_chosen_sites(second)) - settled
    assert (nxt["job_fingerprint"] == sv["job_fingerprint"].iloc[0]).all() and "status" in nxt and "rejects_wall" in nxt
    diff = json.loads((out / "run.json").read_text())["run_info"]["plan_diff"]
    by_site = {r["site_id"]: r for r in diff["sites"]}
    assert by_site[int(sv.iloc[3]["site_id"])]["reason"] == "rejected"
    assert by_site[int(sv.iloc[2]["site_id"])]["reason"].startswith("moved to spot")
    assert by_site[int(sv.iloc[0]["site_id"])]["change"] == "kept"
    prev = set(first.gains.options.loc[first.plan.chosen, "site_id"].astype(int))
    assert {s for s, r in by_site.items() if r["change"] == "dropped"} == prev - set(_chosen_sites(second))
    assert {s for s, r in by_site.items() if r["change"] == "added"} == set(_chosen_sites(second)) - prev
    assert "Changes against the previous plan" in (out / "report.md").read_text()
    assert "Changes against the previous plan" in (out / "report.html").read_text()


# --------------------------------------------------------------------------------------------- bad rows
def test_bad_rows_are_named_with_the_fix(round_trip, tmp_path):
    _, second, sv, _ = round_trip
    bad = sv.iloc[:1].copy()
    bad = pd.concat([bad.assign(status="accepted"), bad.assign(status="accepted"),  # duplicate
                     sv.iloc[1:2].assign(status="accepted"), sv.iloc[1:2].assign(status="rejected"),  # contradictory
                     sv.iloc[3:4].assign(site_id=99999, status="rejected"),  # unknown site
                     sv.iloc[4:5].assign(status="maybe"),  # bad status
                     sv.iloc[5:6].assign(status="rejected", job_fingerprint="0123456789ab")],  # another job
                    ignore_index=True)
    path = tmp_path / "bad.csv"
    bad.to_csv(path, index=False)
    with pytest.raises(InputDataError) as err:
        read_verdicts(path, second.sites, second.sizes, fingerprint=second.field.fingerprint)
    text = str(err.value)
    assert err.value.exit_code == 2
    for words in ("lines 2, 3", "duplicate", "lines 4, 5", "contradictory", "line 6: site 99999",
                  "line 7: status 'maybe'", "line 8", "another job"):
        assert words in text, words


def test_cli_bad_survey_results_exit_2(round_trip, tmp_path):
    _, _, sv, out = round_trip
    path = tmp_path / "bad.csv"
    sv.iloc[:1].assign(status="moved", measured_lon="", measured_lat="").to_csv(path, index=False)
    proc = subprocess.run([sys.executable, "-c", "import sys; from siting.cli import main; sys.exit(main())", "plan",
                           str(DEMO_JOB), *[f"--set={o}" for o in SMALL],
                           f"--set=output.folder={json.dumps(str(tmp_path / 'o'))}",
                           f"--set=inputs.survey_results={json.dumps(str(path))}"],
                          capture_output=True, text=True, timeout=300, cwd=ROOT)
    assert proc.returncode == 2, proc.stderr
    assert "line 2" in proc.stderr and "measured_lon" in proc.stderr and "Traceback" not in proc.stderr


def test_load_cap_replan_is_flagged_approximate():
    cover, weight, cost, option_site, conflicts, keep, fixed = _instance(3)
    assert len(fixed)
    plan, info = solve_with_verdicts(sp.csr_array(cover), weight, cost, option_site, keep, fixed, budget=9.0,
                                     conflicts=conflicts, load_cap=3.0)
    assert not info["exact"] and any("approximate" in n for n in info["notes"])
    assert set(fixed) <= set(np.asarray(plan.chosen).tolist())


def test_plan_diff_names_every_reason():
    """Each previous site's fate from the option reasons; a previous plan of another candidate set is refused."""
    from types import SimpleNamespace

    from siting.plandiff import plan_diff
    from siting.verdicts import Restriction

    options = pd.DataFrame({"site_id": [1, 1, 2, 3, 4, 5, 6, 7, 8]})
    why = np.array(["", "", "rejected", "wall rejected", "moved", "", "", "", "panel too large"])
    ctx = SimpleNamespace(restriction=Restriction(why == "", why, np.array([0])), accepted_sites=lambda: [1, 7],
                          moved_to=lambda: {4: 7})
    previous = {"_path": "prev/run.json", "run_info": {"job_fingerprint": "abc"},
                "sites": [{"site_id": s, "size_id": "M", "rank": i + 1} for i, s in enumerate([1, 2, 3, 4, 5, 8])]}
    new = pd.DataFrame({"site_id": [1, 6, 7], "size_id": ["L", "S", "M"], "rank": [1, 2, 3]})
    diff = plan_diff(previous, new, "abc", options, ctx)
    got = {r["site_id"]: (r["change"], r["reason"]) for r in diff["sites"]}
    assert got == {1: ("kept", "settled in the field; size M -> L"), 2: ("dropped", "rejected"),
                   3: ("dropped", "wall rejected"), 4: ("dropped", "moved to spot 7"), 5: ("dropped", "re-optimised"),
                   6: ("added", "re-optimised"), 7: ("added", "moved here from site 4"),
                   8: ("dropped", "panel too large")}
    assert diff["counts"] == {"kept": 1, "dropped": 5, "added": 2}
    other = plan_diff(previous, new, "xyz", options, ctx)
    assert not other["comparable"] and "another candidate set" in other["reason"] and other["sites"] == []
