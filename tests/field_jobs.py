"""Small jobs on a corner of the demo town (a few seconds each) for the field, scenario and batch tests."""

from __future__ import annotations

from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "demo_district"


def small_job(folder: Path, name: str = "job", *, max_cost: float = 20000.0, extra: str = "",
              output: str = "out") -> Path:
    """The demo job clipped to about 230 m x 220 m (one mounting height, 10 m spacing); returns the job path."""
    text = (DEMO / "job.toml").read_text()
    text = text.replace('buildings = "buildings.geojson"', f'buildings = "{DEMO / "buildings.geojson"}"')
    text = text.replace('base_stations = "base_stations.geojson"',
                        f'base_stations = "{DEMO / "base_stations.geojson"}"')
    text = text.replace("[inputs]", "[area]\nbbox = [1.9070, 46.8125, 1.9100, 46.8145]\n\n[inputs]", 1)
    text = text.replace("spacing_m = 5.0", "spacing_m = 10.0").replace("mount_heights_m = [4.0, 8.0]",
                                                                      "mount_heights_m = [6.0]")
    text = text.replace("max_cost = 30000.0", f"max_cost = {max_cost}")
    text = text.replace("sweep_budgets = [5000.0, 10000.0, 20000.0, 40000.0, 60000.0, 80000.0]", "sweep_budgets = []")
    text = text.replace('folder = "out"', f'folder = "{output}"')
    path = folder / f"{name}.toml"
    path.write_text(text + "\n" + extra)
    return path
