"""Growth with the city: synthetic cities of several sizes end to end, one after another, in one run.

    python benchmarks/bench_scale.py [--sizes 10000,30000,100000] [--dask-check]

Each size is written by benchmarks/synthetic_city.py (seeded) and planned in a child process with a fresh stage
cache (peak memory: the child's ru_maxrss).  Printed per size: the end-to-end wall time and stages, the
optimiser call (reductions, warm start, MIP solve, tie-break) and the MIP solve alone, peak memory and the
plan's status and gap; then the growth exponents between the smallest and the largest size (a log-log slope:
time ~ N^k).  Targets (issue 19): 100,000 buildings end to end under 15 minutes and 8 GB, the plan proven
within 0.5 %, the solve's exponent below 1.5.  ``--dask-check`` plans the largest city again on a local Dask
cluster of 2 workers and compares the chosen options, the objective and the coverage relation with the
one-process run.  On a shared machine compare figures of the same run: the speed can drift by 30 % in an hour.
"""

from __future__ import annotations

import argparse
import json
import math
import subprocess
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "benchmarks"))

CHILD = r"""
import json, resource, sys, time, warnings
warnings.simplefilter("ignore")
from siting.runner import run_file
job, workers = sys.argv[1], int(sys.argv[2])
t0 = time.perf_counter()
r = run_file(job, [f'output.folder="out_w{workers}"'], fresh=True, workers=workers, write=workers == 0)
print("RESULT " + json.dumps({
    "wall_s": time.perf_counter() - t0, "timings_s": r.timings_s, "plan_timings_s": r.plan.timings_s,
    "chosen": sorted(int(x) for x in r.plan.chosen), "objective": r.plan.objective, "status": r.plan.status,
    "gap": r.plan.gap, "tie_break": r.plan.tie_break, "options": len(r.gains.options),
    "pairs": len(r.gains.site_user), "coverage_rows": len(r.gains.coverage),
    "peak_rss_gb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1e6,
    "worker_peak_rss_gb": resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1e6}))
"""


def plan_city(job: Path, workers: int = 0) -> dict:
    proc = subprocess.run([sys.executable, "-c", CHILD, str(job), str(workers)], capture_output=True, text=True,
                          cwd=job.parent)
    line = [ln for ln in proc.stdout.splitlines() if ln.startswith("RESULT ")]
    if proc.returncode or not line:
        raise RuntimeError(f"{job} failed:\n{proc.stderr[-3000:]}")
    return json.loads(line[0][7:])


def slope(n0: int, t0: float, n1: int, t1: float) -> float:
    return math.log(t1 / t0) / math.log(n1 / n0)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="10000,30000,100000", help="building counts, comma-separated")
    ap.add_argument("--dask-check", action="store_true", help="the largest city again on 2 local Dask workers")
    args = ap.parse_args()
    from synthetic_city import write_city

    sizes = sorted(int(x) for x in args.sizes.split(","))
    runs = {}
    with tempfile.TemporaryDirectory() as tmp:
        for n in sizes:
            job = write_city(Path(tmp) / f"city{n}", n)
            r = runs[n] = plan_city(job)
            p, t = r["plan_timings_s"], r["timings_s"]
            p.setdefault("solve", p.get("split", 0.0))  # a city that splits into parts is solved by the split
            p.setdefault("tie_break", 0.0)
            print(f"{n:>7,} buildings: {r['wall_s']:7.1f} s end to end (optimise stage {t['optimise']:.2f} s, "
                  f"optimiser call {p['total']:.2f} s, MIP solve {p['solve']:.2f} s, tie-break {p['tie_break']:.2f} "
                  f"s); {r['options']:,} options, {r['pairs']:,} LOS pairs; peak {r['peak_rss_gb']:.2f} GB; plan "
                  f"{len(r['chosen'])} surfaces, {r['status']}, gap {100 * r['gap']:.3g} %, ties {r['tie_break']}",
                  flush=True)
        if len(sizes) > 1:
            a, b = sizes[0], sizes[-1]
            ra, rb = runs[a], runs[b]
            print(f"growth {a:,} -> {b:,} buildings: end to end N^{slope(a, ra['wall_s'], b, rb['wall_s']):.2f}, "
                  f"optimise stage N^{slope(a, ra['timings_s']['optimise'], b, rb['timings_s']['optimise']):.2f}, "
                  f"optimiser call N^{slope(a, ra['plan_timings_s']['total'], b, rb['plan_timings_s']['total']):.2f}, "
                  f"MIP solve N^{slope(a, ra['plan_timings_s']['solve'], b, rb['plan_timings_s']['solve']):.2f} "
                  f"(target < 1.5)")
        big = sizes[-1]
        print(f"{big:,} buildings: {runs[big]['wall_s'] / 60:.1f} min end to end (target < 15), peak "
              f"{runs[big]['peak_rss_gb']:.2f} GB (target < 8), gap {100 * runs[big]['gap']:.3g} % (target <= 0.5)")
        if args.dask_check:
            job = Path(tmp) / f"city{big}" / "job.toml"
            d = plan_city(job, workers=2)
            one = runs[big]
            same = all(d[k] == one[k] for k in ("chosen", "objective", "pairs", "coverage_rows"))
            print(f"{big:,} buildings on 2 local Dask workers: same plan and coverage relation as one process: "
                  f"{same}; heavy stages {d['timings_s']['gains']:.1f} s against {one['timings_s']['gains']:.1f} s; "
                  f"peak {d['peak_rss_gb']:.2f} GB submitting, {d['worker_peak_rss_gb']:.2f} GB per worker")


if __name__ == "__main__":
    main()
