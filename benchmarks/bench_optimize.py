"""Benchmark of siting.optimize: raw formulation vs reduced formulation vs greedy (+ swap local search).

Run:  python benchmarks/bench_optimize.py [--full] [--skip-cbc] [--only-pipeline] [--cases demo,real]
      [--seeds 3] [--scale 1.0]

Instances (seeded):
0. pipeline instances (demo, real district, synthetic cities of 1,500 and 5,000 buildings).  Targets: the
   default path proves gap <= 0.1 % within 60 s, >= 2x faster than the raw model on HiGHS and >= 20x faster
   than the raw model on CBC (CBC under a hard timer).
1. geometric: 3,000 facade spots x 3 sizes, 20,000 users; each option covers the users in a half-disc in
   front of its wall (20-200 users), a larger size covers a larger disc, but for 15 % of the sites it loses
   a few users the smaller size had (not a superset).  Budgets 2.5 % and 10 % of the spots (reported).
2. dense geometric: 9,000 options, 20,000 users, median 54 options per user: gap <= 1 % within 5 min at a
   budget where greedy is within ~3 % of the LP bound (default run: 60 s; --full: 300 s); at a 4x larger
   budget the gap is reported.
3. adversarial: uniform random coverage of the size of (2): the plan is never worse than greedy + local
   search and the proven bound is reported.

Ratios are against baselines measured in the same run.  On the pipeline instances (demo, real district,
synthetic cities) HiGHS runs the reduced and the raw model with the same --seeds seeds (default 3) and the
ratio is taken between the medians: the seed alone moves these times by up to 2x.  CBC runs with the same
seeds where it proves the optimum within 10 s (its start-up time swings by 3x on the demo), else once.  Any
run there shorter than 2 s (the demo) is repeated to --repeat runs per seed, each solver alike, and the median
kept.
4. certificates (``--certificates``: only this section, about 3 minutes): the whole optimise step against
   time limits of 1, 5 and 15 s on a hard instance (uniform random coverage, 3,000 options x 8,000 users;
   target: within 5 % or 1 s of the limit), and CBC stopped at relative gaps 0.01-0.05 on geometric
   instances against the optimum HiGHS proves (target: CBC's reported bound never below it).
5. budget sweep (``--sweep``: only this section): the demo and a synthetic city (``--sweep-city N``
   buildings), the sweep as the pipeline runs it before (``--baseline-rev``: that tree's code, each point 10 s
   and a 1 % gap) and now (this tree: the plan's own solve time, at least ``siting.stages.SWEEP_MIN_S``,
   as one pool for the whole curve, each point at the plan's gap), in the same run.  Target:
   the whole sweep at most the plan's own solve time; a point is 'optimal' only when proven within the
   plan's gap (counted: points called optimal at a larger gap).
Default run: about 30 minutes; --full: about 45 minutes.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from functools import partial

import numpy as np
import scipy.sparse as sp
from scipy.spatial import cKDTree

sys.path.insert(0, os.path.join(os.path.dirname(__file__), ".."))
sys.path.insert(0, os.path.dirname(__file__))
from siting import optimize as opt  # noqa: E402
from siting.stages import SWEEP_MIN_S  # noqa: E402


def geometric(n_spots=3000, n_users=20000, side_m=2000.0, r_lo=45.0, r_hi=80.0, growth=(1.0, 1.3, 1.6),
              seed=1):
    rng = np.random.default_rng(seed)
    spots = rng.random((n_spots, 2)) * side_m
    normal = rng.random(n_spots) * 2 * np.pi
    users = rng.random((n_users, 2)) * side_m
    r0 = rng.uniform(r_lo, r_hi, n_spots)
    k = len(growth)
    radius = r0[:, None] * np.asarray(growth)[None, :]  # spots x sizes
    D = cKDTree(spots).sparse_distance_matrix(cKDTree(users), radius.max(), output_type="coo_matrix")
    s, u, d = D.row, D.col, D.data
    dx, dy = users[u, 0] - spots[s, 0], users[u, 1] - spots[s, 1]
    front = dx * np.sin(normal[s]) + dy * np.cos(normal[s]) > 0  # in front of the wall
    rows, cols = [], []
    lossy = rng.random(n_spots) < 0.15
    for j in range(k):
        m = front & (d <= radius[s, j])
        if j:
            # lossy sites: the larger panel misses ~5 % of the smaller one's users (e.g. steering limits)
            drop = lossy[s] & (rng.random(len(s)) < 0.05) & (d <= radius[s, j - 1])
            m &= ~drop
        rows.append(s[m] * k + j)
        cols.append(u[m])
    rows, cols = np.concatenate(rows), np.concatenate(cols)
    C = sp.csr_array((np.ones(len(rows), bool), (rows, cols)), shape=(n_spots * k, n_users))
    w = rng.integers(1, 6, n_users).astype(float)  # households per point
    base = rng.uniform(8.0, 12.0, n_spots)
    cost = (base[:, None] * np.asarray([1.0, 1.6, 2.4])[None, :k]).ravel().round(1)
    site = np.repeat(np.arange(n_spots), k)
    return C, w, cost, site


def adversarial(n_opt=9000, n_users=20000, seed=2):
    rng = np.random.default_rng(seed)
    per = rng.integers(20, 201, n_opt)
    rows = np.repeat(np.arange(n_opt), per)
    cols = rng.integers(0, n_users, per.sum())
    C = sp.csr_array((np.ones(len(rows), bool), (rows, cols)), shape=(n_opt, n_users))
    C.sum_duplicates()
    w = rng.integers(1, 6, n_users).astype(float)
    site = np.repeat(np.arange(n_opt // 3), 3)
    cost = (rng.uniform(8.0, 12.0, n_opt // 3)[:, None] * np.array([1.0, 1.6, 2.4])).ravel().round(1)
    return C, w, cost, site


def describe(name, C):
    per_opt = np.diff(C.indptr)
    per_user = np.bincount(C.indices, minlength=C.shape[1])
    print(f"\n== {name}: {C.shape[0]} options x {C.shape[1]} users, {C.nnz} pairs; users per option "
          f"min/median/max {per_opt.min()}/{int(np.median(per_opt))}/{per_opt.max()}; options per user "
          f"median {int(np.median(per_user))} (users covered by none: {(per_user == 0).sum()})")


def row(label, p, t, greedy_val=None):
    size = p.model_size.get("reduced", {}) if p is not None else {}
    if p is None:
        print(f"  {label:<31} {'-':>10}")
        return
    print(f"  {label:<31} obj {p.objective:>10.0f}  bound {p.bound:>10.1f}  gap {100 * p.gap:7.3f} %  "
          f"status {p.status:<11} time {t:8.3f} s  model rows {size.get('rows', 0):>6} cols {size.get('cols', 0):>6} "
          f"nnz {size.get('nonzeros', 0):>7}")


def run(label, fn, repeat=1, repeat_below_s=2.0):
    """Time ``fn``; a run shorter than ``repeat_below_s`` is repeated to ``repeat`` runs and the median kept
    (short runs swing by tens of percent between identical calls on a shared 2-core machine)."""
    t = time.perf_counter()
    p = fn()
    ts = [time.perf_counter() - t]
    while ts[0] < repeat_below_s and len(ts) < repeat:
        t = time.perf_counter()
        fn()
        ts.append(time.perf_counter() - t)
    t = float(np.median(ts))
    row(label + (f" x{len(ts)}" if len(ts) > 1 else ""), p, t)
    return p, t


def greedy_run(C, w, cost, site, budget):
    t = time.perf_counter()
    g = opt.greedy(C, w, cost, site, budget=budget)
    t = time.perf_counter() - t
    val = w[np.asarray(C[g].sum(axis=0)).ravel() > 0].sum() if len(g) else 0.0
    print(f"  {'greedy + local search':<31} obj {val:>10.0f}  cost {cost[g].sum():.1f}  time {t:7.2f} s")
    return val, t


def cbc_ratio(cbc_plan, t_cbc, t_highs, target=""):
    hit = " (CBC hit its time limit: the ratio is a lower bound)" if cbc_plan.status != "optimal" else ""
    print(f"  ratio CBC raw / HiGHS reduced time: {t_cbc / t_highs:.1f}x{target}{hit}")


def pipeline_instance(job_path, overrides=()):
    """The optimiser inputs of a real pipeline run (visibility + gains of a job), budget from the job."""
    import warnings

    from siting.gains import RadioParams
    from siting.job import load_job
    from siting.runner import optimisation_inputs, run

    warnings.simplefilter("ignore")
    job = load_job(job_path, list(overrides))
    r = run(job, write=False)
    C, w, cost, site = optimisation_inputs(r.gains, r.users, RadioParams.from_job(r.job))
    return sp.csr_array(C), w, cost, site, job["budget"]["max_cost"] or None, job["budget"]["max_panels"] or None


def pipeline_cases(a, cbc_limit):
    """Targets on instances from the pipeline: reduced HiGHS proves <= 0.1 % within 60 s, >= 2x faster than raw
    HiGHS and >= 20x faster than raw CBC."""
    import tempfile

    from bench_runner import pbf_job

    root = os.path.join(os.path.dirname(__file__), "..")
    with tempfile.TemporaryDirectory() as tmp:
        cases = [("demo district", os.path.join(root, "demo_district", "job.toml"),
                  [f'output.folder="{tmp}/demo"']),
                 ("real district (pyrosm test.osm.pbf)", str(pbf_job(__import__("pathlib").Path(tmp))),
                  [f'output.folder="{tmp}/pbf"'])]
        from synthetic_city import write_city

        panels = ('surfaces.panels=[{size_id="S", width_m=0.5, height_m=0.5, cost=1500.0}, '
                  '{size_id="M", width_m=1.0, height_m=1.0, cost=3300.0}, '
                  '{size_id="L", width_m=2.0, height_m=1.0, cost=5500.0}]')
        for n in (1500, 5000):
            city = write_city(__import__("pathlib").Path(tmp) / f"city{n}", n)
            cases.append((f"synthetic city, {n} buildings, 3 sizes", str(city),
                          [panels, "candidates.spacing_m=10.0", "demand.grid_m=8.0", "budget.max_panels=0",
                           f"budget.max_cost={n * 40.0}", f'output.folder="{tmp}/city{n}/out"']))
        for name, job, ov in cases:
            if a.cases and not any(c in name for c in a.cases.split(",")):
                continue
            C, w, cost, site, budget, count = pipeline_instance(job, ov)
            describe(f"{name}: budget {budget}, panel limit {count}", C)
            kw = dict(budget=budget, max_count=count)
            greedy_run(C, w, cost, site, budget)
            # HiGHS's random seed alone moves these times by up to 2x: both models run with the same seeds and
            # the ratio is taken between the medians
            t_reds, t_raws = [], []
            for seed in range(a.seeds):
                red, t_red = run(f"HiGHS reduced (default) s{seed}", partial(
                    opt.solve_coverage, C, w, cost, site, **kw, time_limit_s=60, solver_seed=seed), a.repeat)
                raw, t_raw = run(f"HiGHS raw s{seed}", partial(
                    opt.solve_coverage, C, w, cost, site, **kw, reduce=False, warm_start=False, time_limit_s=300,
                    solver_seed=seed), a.repeat)
                t_reds.append(t_red)
                t_raws.append(t_raw)
            t_red = float(np.median(t_reds))
            print(f"  ratio HiGHS raw/reduced time, medians over {a.seeds} seed(s): "
                  f"{np.median(t_raws) / t_red:.1f}x (target >= 2x); per seed "
                  f"{', '.join(f'{r / d:.1f}x' for r, d in zip(t_raws, t_reds))}; reduced gap "
                  f"{100 * red.gap:.3f} % (target <= 0.1 %)")
            if not a.skip_cbc:
                # CBC with the same seeds where it proves the optimum quickly (its start-up time swings between
                # runs); a run stopped by the time limit is not repeated
                t_cws = []
                for seed in range(a.seeds):
                    cw, t_cw = run(f"CBC raw s{seed}", partial(
                        opt.solve_coverage, C, w, cost, site, **kw, solver="cbc", reduce=False, warm_start=False,
                        time_limit_s=cbc_limit, solver_seed=seed), a.repeat)
                    t_cws.append(t_cw)
                    if cw.status != "optimal" or t_cw > 10.0:
                        break
                cbc_ratio(cw, float(np.median(t_cws)), t_red, f" (target >= 20x; CBC median over {len(t_cws)} run(s))")


def certificates(cases=(1.0, 5.0, 15.0)):
    """Section 4: wall-clock limits of the whole step, and CBC's reported bound against HiGHS's optimum."""
    C, w, cost, site = adversarial(3000, 8000, seed=4)
    describe("hard instance (uniform random coverage), budget 300: whole-step wall clock against the limit", C)
    for limit in cases:
        t = time.perf_counter()
        p = opt.solve_coverage(C, w, cost, site, budget=300, time_limit_s=limit)
        took = time.perf_counter() - t
        ok = took <= max(1.05 * limit, limit + 1.0)
        print(f"  limit {limit:5.1f} s: took {took:6.2f} s (overrun {took - limit:+.2f} s, {'within' if ok else 'OUTSIDE'} "
              f"5 % or 1 s); status {p.status}, objective {p.objective:.0f}, bound {p.bound:.1f}, gap "
              f"{100 * p.gap:.2f} %")
    print("\n== CBC stopped at a relative gap: reported bound against the optimum HiGHS proves (geometric, 60-120 "
          "spots)")
    below = 0
    for n_spots, seed in ((60, 3), (60, 4), (80, 4), (120, 3)):
        Cg, wg, cg, sg = geometric(n_spots, int(n_spots * 8.5), side_m=25.0 * np.sqrt(n_spots * 8.5) * 0.5,
                                   seed=seed)
        ref = opt.solve_coverage(Cg, wg, cg, sg, budget=float(n_spots), mip_rel_gap=1e-6, time_limit_s=120)
        for gap in (0.01, 0.03, 0.05):
            p = opt.solve_coverage(Cg, wg, cg, sg, budget=float(n_spots), solver="cbc", mip_rel_gap=gap,
                                   time_limit_s=120)
            below += p.bound < ref.objective - 1e-6
            print(f"  {n_spots:>4} spots seed {seed} gap {gap:.2f}: HiGHS optimum {ref.objective:.0f} ({ref.status}); "
                  f"CBC plan {p.objective:.0f}, bound {p.bound:.1f}, reported gap {100 * p.gap:.2f} %, status "
                  f"{p.status}")
    print(f"  CBC bounds below the HiGHS optimum: {below}")


SWEEP_CHILD = r"""
import json, sys, time, numpy as np, scipy.sparse as sp
from siting import optimize as opt
d = np.load(sys.argv[1])
C = sp.csr_array((d["data"], d["indices"], d["indptr"]), shape=tuple(d["shape"]))
conf = d["conf"] if d["conf"].size else None
count = int(d["count"]) if d["count"] > 0 else None
per_point, gap = float(sys.argv[2]), float(sys.argv[3])
pool = {} if sys.argv[4] == "none" else {"total_time_s": float(sys.argv[4])}
t = time.perf_counter()
df = opt.budget_sweep(C, d["w"], d["cost"], d["site"], d["budgets"], max_count=count, conflicts=conf,
                      time_limit_s=per_point, mip_rel_gap=gap, **pool)
print("RESULT " + json.dumps({"t": time.perf_counter() - t, "rows": df.to_dict("records")}))
"""


def _sweep_child(tree, path, per_point, gap, pool_s=None):
    import json
    import subprocess

    env = dict(os.environ, PYTHONPATH=str(tree))
    out = subprocess.run([sys.executable, "-c", SWEEP_CHILD, str(path), str(per_point), str(gap), str(pool_s or "none")], env=env,
                         capture_output=True, text=True, check=True).stdout
    return json.loads(out.split("RESULT ", 1)[1])


def sweep_section(a):
    """Section 5: the budget sweep before and after, on the demo and a synthetic city, in one run."""
    import subprocess
    import tempfile
    from pathlib import Path

    from synthetic_city import write_city

    root = Path(__file__).resolve().parents[1]
    tmp = Path(tempfile.mkdtemp())
    base = tmp / "baseline"
    base.mkdir()
    arch = subprocess.run(["git", "-C", str(root), "archive", a.baseline_rev, "siting"], check=True,
                          capture_output=True).stdout
    subprocess.run(["tar", "-x", "-C", str(base)], input=arch, check=True)
    cases = [("demo", root / "demo_district" / "job.toml", None)]
    if a.sweep_city:
        cases.append((f"synthetic city {a.sweep_city}", write_city(tmp / "city", a.sweep_city), a.sweep_city))
    for name, job, n in cases:
        C, w, cost, site, budget, count = pipeline_instance(job)
        if n is None:
            budgets = np.array([5000.0, 10000.0, 20000.0, 40000.0, 60000.0, 80000.0])
        else:
            budgets = np.array([0.25, 0.5, 2.0]) * count * float(np.median(cost))
        t0 = time.perf_counter()
        plan = opt.solve_coverage(C, w, cost, site, budget=budget, max_count=count, time_limit_s=60)
        own = time.perf_counter() - t0
        path = tmp / f"{len(name)}.npz"
        np.savez(path, data=C.data, indices=C.indices, indptr=C.indptr, shape=np.array(C.shape), w=w, cost=cost,
                 site=site, conf=np.zeros((0, 2), np.int64), count=np.int64(count or 0), budgets=budgets)
        print(f"\n== sweep, {name}: plan {plan.objective:g} ({plan.status}, gap {100 * plan.gap:.3g} %) "
              f"solved in {own:.2f} s; {len(budgets)} sweep points")
        policies = [("before (baseline code, 10 s/point, 1 % gap)", base, 10.0, max(1e-4, 0.01), None),
                    (f"now (this tree, own time >= {SWEEP_MIN_S:g} s as one pool, plan gap)", root, 60.0, 1e-4,
                     max(SWEEP_MIN_S, own))]
        for label, tree, per_point, gap, pool_s in policies:
            r = _sweep_child(tree, path, per_point, gap, pool_s)
            false_opt = sum(1 for x in r["rows"] if x["status"] == "optimal" and x["gap"] > 1e-4 * 1.0001)
            n_opt = sum(1 for x in r["rows"] if x["status"] == "optimal")
            print(f"  {label}: {r['t']:.2f} s = {r['t'] / own:.1f}x the plan's solve; {n_opt} points 'optimal', "
                  f"{false_opt} of them above the plan's gap")
            for x in r["rows"]:
                print(f"    budget {x['budget']:>9g}: {x['covered_weight']:g} <= {x['bound']:g} "
                      f"(gap {100 * x['gap']:.3g} %) {x['status']}")


def main():
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--full", action="store_true", help="5-minute limits for the dense and CBC runs")
    ap.add_argument("--skip-cbc", action="store_true")
    ap.add_argument("--scale", type=float, default=1.0, help="shrink the instances for a quick look")
    ap.add_argument("--only-pipeline", action="store_true", help="only the instances from the pipeline")
    ap.add_argument("--seeds", type=int, default=3, help="solver seeds per pipeline instance (default 3)")
    ap.add_argument("--repeat", type=int, default=5,
                    help="runs per seed and solver on the pipeline instances when a run takes under 2 s; the "
                         "median is kept (default 5)")
    ap.add_argument("--cases", default="", help="pipeline instances whose name contains one of these comma-separated "
                    "words (demo, real, 1500, 5000); default all")
    ap.add_argument("--certificates", action="store_true", help="only section 4 (time limits, CBC bounds)")
    ap.add_argument("--sweep", action="store_true", help="only section 5 (budget sweep before/after)")
    ap.add_argument("--sweep-city", type=int, default=2000, help="synthetic city size of section 5 (0: none)")
    ap.add_argument("--baseline-rev", default="3c350db", help="git revision of the 'before' code of section 5")
    a = ap.parse_args()
    if a.sweep:
        sweep_section(a)
        return
    if a.certificates:
        certificates()
        return
    sc = a.scale
    cbc_limit = 300.0 if a.full else 120.0
    dense_limit = 300.0 if a.full else 60.0
    pipeline_cases(a, cbc_limit)
    if a.only_pipeline:
        return

    # 1. geometric, realistic density (reported; the targets are on the pipeline instances).
    C, w, cost, site = geometric(int(3000 * sc), int(20000 * sc))
    for factor in (0.25, 1.0):
        budget = factor * 0.1 * (C.shape[0] // 3) * 10.0
        describe(f"geometric, budget {budget:g} (reported)", C)
        gval, gt = greedy_run(C, w, cost, site, budget)
        red, t_red = run("HiGHS reduced (default)", lambda b=budget: opt.solve_coverage(
            C, w, cost, site, budget=b, time_limit_s=60))
        print(f"  reductions: {({k: v for k, v in red.model_size.items() if k not in ('raw', 'reduced')})}")
        print(f"  greedy/ILP objective: {gval / max(red.objective, 1e-12):.4f}; bound/total weight "
              f"{red.bound / w.sum():.3f}; ILP time / greedy time {t_red / gt:.1f}x")
        if factor != 0.25:
            continue
        raw, t_raw = run("HiGHS raw", lambda b=budget: opt.solve_coverage(C, w, cost, site, budget=b, reduce=False,
                                                                         time_limit_s=300))
        print(f"  ratio HiGHS raw/reduced time: {t_raw / t_red:.1f}x; reduced gap {100 * red.gap:.3f} %")
        if not a.skip_cbc:
            cw, t_cw = run("CBC raw", lambda b=budget: opt.solve_coverage(C, w, cost, site, budget=b, solver="cbc",
                                                                        reduce=False, time_limit_s=cbc_limit))
            cbc_ratio(cw, t_cw, t_red)

    # 2. dense geometric, at two budgets: at 750 greedy comes within ~3 % of the LP bound (the regime of the
    # dense instance the issue describes: greedy within 2 % of the bound); 3000 is reported.
    Cd, wd, costd, sited = geometric(int(3000 * sc), int(20000 * sc), r_lo=70.0, r_hi=120.0, seed=3)
    per_user = np.asarray(Cd.sum(axis=0)).ravel()
    for factor, target in ((0.25, True), (1.0, False)):
        budget_d = factor * 0.1 * (Cd.shape[0] // 3) * 10.0
        describe(f"dense geometric, median {np.median(per_user):.0f} options per user, budget {budget_d:g}, "
                 f"limit {dense_limit:g} s, stop at 1 % gap", Cd)
        gval_d, _ = greedy_run(Cd, wd, costd, sited, budget_d)
        pd_, t_d = run("HiGHS reduced (default)", lambda b=budget_d: opt.solve_coverage(
            Cd, wd, costd, sited, budget=b, time_limit_s=dense_limit, mip_rel_gap=0.01))
        met = pd_.gap <= 0.01 and t_d <= 300
        verdict = ("(reported, not a target)" if not target else "(target <= 1 % in 5 min: met)" if met else
                   "(target <= 1 % in 5 min: MISSED)" if dense_limit >= 300 else
                   "(not reached in this run's 60 s; --full runs the 5-minute target)")
        print(f"  gap {100 * pd_.gap:.3f} % after {t_d:.0f} s {verdict}; plan/greedy "
              f"{pd_.objective / max(gval_d, 1):.4f}; bound/total weight {pd_.bound / wd.sum():.3f}")

    # 3. adversarial
    Ca, wa, costa, sitea = adversarial(int(9000 * sc), int(20000 * sc))
    budget_a = 0.1 * (Ca.shape[0] // 3) * 10.0
    describe(f"adversarial uniform, budget {budget_a:g}, limit 60 s", Ca)
    gval_a, _ = greedy_run(Ca, wa, costa, sitea, budget_a)
    pa, _ = run("HiGHS reduced (default)", lambda: opt.solve_coverage(Ca, wa, costa, sitea, budget=budget_a,
                                                                    time_limit_s=60))
    print(f"  plan >= greedy + local search: {pa.objective >= gval_a - 1e-9} "
          f"({pa.objective:.0f} vs {gval_a:.0f}); proven bound {pa.bound:.1f}, gap {100 * pa.gap:.2f} %")


if __name__ == "__main__":
    main()
