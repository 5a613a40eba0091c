"""Twelve budget scenarios against one plan, on the demo district and the real district (pyrosm's test extract).

    python benchmarks/bench_scenarios.py [--skip-demo] [--skip-real] [--n 12] [--parallel 2]

For each district: one plan end to end from an empty cache (what ``siting plan job.toml`` does, field checks
included), then the same job with ``n`` ``[[scenarios]]`` of budgets from 0.25x to 3x the job's budget, also from
an empty cache, run by :func:`siting.scenarios.run_scenarios` (shared stage cache: the first scenario computes
candidates, visibility and gains, the others solve and write; scenario field checks and budget curves off, their
default; with ``--parallel`` that many scenarios run at once after the first).  Prints
both wall times and their ratio (target <= 2x), each scenario's time and whether its plan is proven optimal.
"""

from __future__ import annotations

import argparse
import shutil
import sys
import tempfile
import time
import warnings
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))


def scenario_tables(max_cost: float, n: int) -> str:
    """``n`` budget scenarios from 0.25x to 3x of ``max_cost``."""
    factors = [0.25 + i * (3.0 - 0.25) / max(n - 1, 1) for i in range(n)]
    return "".join(f'\n[[scenarios]]\nname = "budget-{f:.2f}x"\nbudget.max_cost = {round(max_cost * f, 2)}\n'
                   for f in factors)


def bench(name: str, job: Path, n: int, parallel: int = 1) -> float:
    from siting.job import Job
    from siting.runner import run
    from siting.scenarios import run_scenarios

    folder = job.parent
    base = Job.from_toml(job)
    shutil.rmtree(Path(base.output.folder), ignore_errors=True)
    t0 = time.perf_counter()
    one = run(base, fresh=True)
    t_one = time.perf_counter() - t0
    budget = base.budget.max_cost or 30000.0
    scen = folder / f"{job.stem}_scenarios.toml"
    text = job.read_text().replace('folder = "out"', 'folder = "out_scenarios"')
    scen.write_text(text + scenario_tables(budget, n))
    shutil.rmtree(folder / "out_scenarios", ignore_errors=True)
    t0 = time.perf_counter()
    res = run_scenarios(scen, fresh=True, parallel=parallel)
    t_all = time.perf_counter() - t0
    ratio = t_all / t_one
    print(f"{name}: one plan {t_one:.1f} s ({len(one.plan.chosen)} surfaces, {one.plan.status}; stages "
          + ", ".join(f"{k} {v:.1f}s" for k, v in one.timings_s.items() if isinstance(v, float)) + ")")
    how = "one after another" if parallel <= 1 else f"{parallel} at once"
    print(f"{name}: {n} budget scenarios ({how}) {t_all:.1f} s -> ratio {ratio:.2f}x (target <= 2x: "
          f"{'met' if ratio <= 2 else 'MISSED'})")
    for r in res.runs:
        print(f"  {r.name:>14}: {r.row.get('time_s', float('nan')):6.1f} s, "
              + (f"{r.row['surfaces']} surfaces, cost {r.row['cost']:,.0f}, {r.row['proven']}; recomputed "
                 f"{', '.join(r.recomputed) or 'nothing'}" if r.ok else f"failed: {r.error}"))
    return ratio


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--skip-demo", action="store_true")
    ap.add_argument("--skip-real", action="store_true")
    ap.add_argument("--n", type=int, default=12)
    ap.add_argument("--parallel", type=int, default=1, help="scenarios at once (separate processes)")
    args = ap.parse_args()
    warnings.simplefilter("ignore")
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        if not args.skip_demo:
            demo = tmp / "demo"
            shutil.copytree(ROOT / "demo_district", demo)
            bench("demo district", demo / "job.toml", args.n, args.parallel)
        if not args.skip_real:
            try:
                import pyrosm  # noqa: F401
            except ImportError:
                print("real district: skipped (pyrosm not installed)")
                return
            from tests.scenarios import real_district_job

            real = tmp / "real"
            real.mkdir()
            job = real_district_job(real, limits="[budget]\nmax_cost = 20000.0\n")
            bench("real district (pyrosm test.osm.pbf)", job, args.n, args.parallel)


if __name__ == "__main__":
    main()
