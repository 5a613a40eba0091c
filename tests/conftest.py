"""Fixtures shared by the test modules."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest

_DEMO = Path(__file__).resolve().parents[1] / "demo_district"


@pytest.fixture
def demo(tmp_path) -> Path:
    """A copy of the demo job and its layers; the output folder is ``<tmp>/out`` (not created)."""
    job = tmp_path / "job"
    job.mkdir()
    for name in ("job.toml", "buildings.geojson", "base_stations.geojson"):
        shutil.copy(_DEMO / name, job / name)
    text = (job / "job.toml").read_text().replace('folder = "out"', f'folder = {json.dumps(str(tmp_path / "out"))}')
    (job / "job.toml").write_text(text)
    return job
