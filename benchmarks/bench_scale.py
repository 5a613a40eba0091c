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
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "benchmarks"))


def slope(n0: int, t0: float, n1: int, t1: float) -> float:
    return math.log(t1 / t0) / math.log(n1 / n0)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="10000,30000,100000", help="building counts, comma-separated")
    ap.add_argument("--dask-check", action="store_true", help="the largest city again on 2 local Dask workers")
    args = ap.parse_args()
    from bench_runner import run_case
    from synthetic_city import write_city

    sizes = sorted(int(x) for x in args.sizes.split(","))
    runs = {}
    with tempfile.TemporaryDirectory() as tmp:
        for n in sizes:
            job = write_city(Path(tmp) / f"city{n}", n)
            r = runs[n] = run_case(job, [f"output.folder={json.dumps(str(job.parent / 'out'))}"])
            p, t = r["plan_timings_s"], r["timings_s"]
            p.setdefault("solve", p.get("split", 0.0))  # a city that splits into parts is solved by the split
            p.setdefault("tie_break", 0.0)
            print(f"{n:>7,} buildings: {r['wall_s']:7.1f} s end to end (optimise stage {t['optimise']:.2f} s, "
                  f"optimiser call {p['total']:.2f} s, MIP solve {p['solve']:.2f} s, tie-break {p['tie_break']:.2f} "
                  f"s); {r['options']:,} options, {r['site_user_pairs']:,} LOS pairs; peak {r['peak_rss_gb']:.2f} GB; "
                  f"plan {r['chosen']} surfaces, {r['status']}, gap {100 * r['gap']:.3g} %, ties {r['tie_break']}",
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
            d = run_case(job, [], workers=2, write=False)
            one = runs[big]
            same = all(d[k] == one[k] for k in ("chosen_ids", "objective", "site_user_pairs", "coverage_rows"))
            print(f"{big:,} buildings on 2 local Dask workers: same plan and coverage relation as one process: "
                  f"{same}; heavy stages {d['timings_s']['gains']:.1f} s against {one['timings_s']['gains']:.1f} s; "
                  f"peak {d['peak_rss_gb']:.2f} GB submitting, {d['worker_peak_rss_gb']:.2f} GB per worker")


if __name__ == "__main__":
    main()
