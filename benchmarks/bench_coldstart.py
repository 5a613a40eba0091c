"""First-run (cold) against later-run (warm) wall time of the demo, for each compile strategy, in one run.

    python benchmarks/bench_coldstart.py [--baseline-rev 3c350db] [--repeat 1]
        [--variants baseline,lazy,warmup,prepare]

Each measurement is the command a new user types, ``siting plan demo_district/job.toml`` (with ``--fresh`` so
the stage cache never answers, and a temporary output folder), in a child process.  Cold: numba's cache is
empty (``NUMBA_CACHE_DIR`` pointed at a new empty folder, the same as deleting the ``*.nbi``/``*.nbc`` files
of a fresh install); warm: the same command again with that cache filled.  Variants:

- ``baseline``: the source tree of ``--baseline-rev`` (exported with ``git archive``): ``parallel=True``
  kernels, IR-inlined walks, one compile per prange body and index type;
- ``lazy``: this tree with ``SITING_NO_WARMUP=1``: serial ``nogil`` kernels run on threads, one signature
  each, compiled on first use in the job's process (clearance kernels only when the job uses the rule);
- ``warmup``: this tree as shipped: the same kernels, the missing ones compiled in background processes
  (one per kernel group) while the job loads its inputs;
- ``prepare``: this tree with the README's setup step: ``siting prepare`` on the empty cache (timed and
  printed), then the first demo run ("cold": the first run after installing) and a later one.

Target (issue 19): cold <= 2 x warm.  The machine's load average is printed with the figures: on a shared
2-core machine compare the ratios, which are measured in the same run.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def _run(tree: Path, cache: Path, out: Path, env_extra: dict[str, str], prepare: bool = False) -> float:
    env = dict(os.environ, PYTHONPATH=str(tree), NUMBA_CACHE_DIR=str(cache), **env_extra)
    cmd = [sys.executable, "-m", "siting.cli", "plan", "--fresh", "--quiet", "--set", f"output.folder={out}",
           str(ROOT / "demo_district" / "job.toml")]
    if prepare:
        cmd = [sys.executable, "-m", "siting.cli", "prepare"]
    t0 = time.perf_counter()
    subprocess.run(cmd, env=env, check=True, cwd=tree)
    return time.perf_counter() - t0


def _baseline_tree(rev: str, tmp: Path) -> Path:
    tree = tmp / "baseline"
    tree.mkdir()
    archive = subprocess.run(["git", "-C", str(ROOT), "archive", rev, "siting"], check=True, capture_output=True)
    subprocess.run(["tar", "-x", "-C", str(tree)], input=archive.stdout, check=True)
    return tree


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--baseline-rev", default="3c350db", help="git revision of the baseline source tree")
    ap.add_argument("--repeat", type=int, default=1, help="cold/warm pairs per variant")
    ap.add_argument("--variants", default="baseline,lazy,warmup,prepare")
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp_name:
        tmp = Path(tmp_name)
        trees = {"lazy": (ROOT, {"SITING_NO_WARMUP": "1"}), "warmup": (ROOT, {}), "prepare": (ROOT, {})}
        if "baseline" in args.variants:
            trees["baseline"] = (_baseline_tree(args.baseline_rev, tmp), {})
        print(f"load average at start: {os.getloadavg()}")
        rows = []
        for rep in range(args.repeat):
            for name in args.variants.split(","):
                tree, extra = trees[name]
                cache = tmp / f"numba-{name}-{rep}"
                if name == "prepare":
                    print(f"prepare   siting prepare {_run(tree, cache, tmp / 'out', extra, prepare=True):6.1f} s "
                          "(the setup step, before the first run)", flush=True)  # fmt: skip
                cold = _run(tree, cache, tmp / "out", extra)
                warm = _run(tree, cache, tmp / "out", extra)
                rows.append((name, cold, warm))
                print(f"{name:9s} cold {cold:6.1f} s  warm {warm:6.1f} s  cold/warm {cold / warm:4.2f}  "
                      f"(load {os.getloadavg()[0]:.1f})", flush=True)
        print(f"load average at end: {os.getloadavg()}")


if __name__ == "__main__":
    main()
