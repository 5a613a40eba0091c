"""Lint and type check as part of the test command: ``ruff check`` and ``mypy`` with the configuration in
pyproject.toml (``[tool.ruff]``, ``[tool.mypy]``), run as subprocesses from the repository root.

Both tools are in the ``test`` extra; a test is skipped (with the reason) only when its tool is not installed.
The checks cover the package, the tests and the benchmarks for ruff (line length 120, C901 at most 15; tests and
benchmarks are exempt from C901 only) and the package for mypy.
"""

from __future__ import annotations

import importlib.util
import os
import subprocess
import sys
import tempfile
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


def _run(tool: str, args: list[str], timeout_s: float) -> subprocess.CompletedProcess[str]:
    if importlib.util.find_spec(tool) is None:
        pytest.skip(f"{tool} is not installed (it is in the 'test' extra: pip install -e '.[test]')")
    env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(ROOT), os.environ.get("PYTHONPATH", "")]).rstrip(os.pathsep))
    return subprocess.run([sys.executable, "-m", tool, *args], cwd=ROOT, env=env, capture_output=True, text=True,
                          timeout=timeout_s, check=False)


def test_ruff_clean():
    r = _run("ruff", ["check", "--no-cache", "siting", "tests", "benchmarks"], timeout_s=300)
    if r.returncode != 0:
        pytest.fail(f"ruff check found problems:\n{r.stdout}{r.stderr}", pytrace=False)


def test_mypy_clean():
    # the cache lives outside the repository (a fixed folder in the temp dir, so that reruns are quick)
    cache = Path(tempfile.gettempdir()) / "siting-mypy-cache"
    r = _run("mypy", ["--cache-dir", str(cache), "siting"], timeout_s=900)
    if r.returncode != 0:
        pytest.fail(f"mypy found problems:\n{r.stdout}{r.stderr}", pytrace=False)
