"""Planning-grade link model against the ideal (upper-bound) model, measured in the same run.

    python benchmarks/bench_link_model.py [--city-buildings 20000] [--skip-city] [--skip-real]

For the demo, the real district (pyrosm's bundled test.osm.pbf) and a synthetic city, the job runs twice in child
processes with a fresh cache: once with the planning defaults and once with every planning choice set to its
ideal limit (coherent combining, per-user focusing, narrowband, projected-aperture cells, free-space surface hops,
the best station beam toward every user, bare-ray line of sight, no shadow fading; :data:`UPPER_BOUND`).
Printed: the gains stage's time and the child's peak memory with their ratios (target: the planning model's gains
stage at most 2x the ideal one's time and 1.5x its peak memory on the 20,000-building city), and what each plan
covers.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "benchmarks"))
sys.path.insert(0, str(ROOT))

from bench_runner import pbf_job, run_case  # noqa: E402

#: Job overrides that turn every planning choice into its ideal limit (the model before the planning defaults).
UPPER_BOUND = ["radio.combining=coherent", "surfaces.control=focus", "surfaces.squint=false", "surfaces.element_q=1",
               "radio.surface_hop_model=free_space", "radio.station_beam=envelope", "radio.fresnel_clearance=0",
               "radio.shadow_fading=false"]


def compare(name: str, job: Path, overrides: list[str], time_target: float | None, memory_target: float | None):
    ideal = run_case(job, overrides + UPPER_BOUND, write=False)
    planning = run_case(job, overrides, write=False)
    t_i, t_p = ideal["timings_s"]["gains"], planning["timings_s"]["gains"]
    m_i, m_p = ideal["peak_rss_gb"], planning["peak_rss_gb"]

    def verdict(ratio, target):
        return "" if target is None else f" (target <= {target:g}x: {'met' if ratio <= target else 'MISSED'})"

    print(f"{name}: {ideal['buildings']} buildings, {ideal['sites']} spots, {ideal['users']} demand points")
    print(f"   gains stage: planning {t_p:.1f} s, ideal {t_i:.1f} s, ratio {t_p / t_i:.2f}x{verdict(t_p / t_i, time_target)}")
    print(f"   peak memory: planning {m_p:.2f} GB, ideal {m_i:.2f} GB, ratio {m_p / m_i:.2f}x"
          f"{verdict(m_p / m_i, memory_target)}")
    for label, r in (("planning", planning), ("ideal", ideal)):
        print(f"   {label:>8} plan: {r['chosen']} surfaces, newly covered weight {r['objective']:.1f} ({r['status']}, "
              f"gap {r['gap']:.4f}), {r['coverage_rows']} coverage rows")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--city-buildings", type=int, default=20000)
    ap.add_argument("--skip-city", action="store_true")
    ap.add_argument("--skip-real", action="store_true")
    args = ap.parse_args()
    compare("demo", ROOT / "demo_district" / "job.toml", [], None, None)
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        if not args.skip_real:
            (tmp / "real").mkdir()
            compare("real district (pyrosm test.osm.pbf)", pbf_job(tmp / "real"), [], None, None)
        if not args.skip_city:
            from synthetic_city import write_city

            job = write_city(tmp / "city", args.city_buildings)
            compare(f"synthetic city, {args.city_buildings} buildings", job, [], 2.0, 1.5)


if __name__ == "__main__":
    main()
