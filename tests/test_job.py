"""Job-file validation: every problem collected, named by key, with the fix."""

import pytest

from siting.errors import JobError
from siting.job import SCHEMA, load_job, parse_override, reference_markdown

GOOD = """
[inputs]
buildings = "b.geojson"
base_stations = "bs.geojson"
[[surfaces.panels]]
size_id = "S"
width_m = 0.5
height_m = 0.5
cost = 900.0
[budget]
max_cost = 5000.0
"""


def write(tmp_path, text):
    p = tmp_path / "job.toml"
    p.write_text(text)
    return p


def test_good_job_fills_defaults_and_resolves_paths(tmp_path):
    job = load_job(write(tmp_path, GOOD))
    assert job["inputs"]["buildings"] == str((tmp_path / "b.geojson").resolve())
    assert job["radio"]["frequency_ghz"] == 28.0
    assert job["surfaces"]["panels"][0]["install_cost"] == 0.0
    assert job["output"]["folder"] == str((tmp_path / "out").resolve())


def test_unknown_key_names_nearest_valid_key(tmp_path):
    with pytest.raises(JobError) as err:
        load_job(write(tmp_path, GOOD + "\n[radio]\nfrequncy_ghz = 28\n"))
    assert "radio.frequncy_ghz" in str(err.value) and "frequency_ghz" in str(err.value)


def test_unknown_section_is_named(tmp_path):
    with pytest.raises(JobError, match="did you mean 'radio'"):
        load_job(write(tmp_path, GOOD + "\n[radoi]\nx = 1\n"))


def test_all_problems_reported_together(tmp_path):
    bad = GOOD + '\n[radio]\nfrequency_ghz = 300.0\nbandwidth_mhz = "wide"\n[solver]\nname = "glpk"\n'
    with pytest.raises(JobError) as err:
        load_job(write(tmp_path, bad))
    msg = str(err.value)
    assert len(err.value.problems) == 3
    assert "radio.frequency_ghz" in msg and "0.5 .. 100 GHz" in msg
    assert "radio.bandwidth_mhz" in msg and "[MHz]" in msg
    assert '"highs"' in msg


def test_missing_required_and_bad_panel(tmp_path):
    text = "[[surfaces.panels]]\nsize_id = 'S'\nwidth_m = -1.0\nheight_m = 0.5\ncost = 1.0\ncolour = 'red'\n"
    with pytest.raises(JobError) as err:
        load_job(write(tmp_path, text))
    msg = str(err.value)
    assert "inputs.buildings: required" in msg and "inputs.base_stations: required" in msg
    assert "surfaces.panels[0].width_m" in msg and "surfaces.panels[0]: unknown key 'colour'" in msg


def test_duplicate_panel_ids(tmp_path):
    text = GOOD + "[[surfaces.panels]]\nsize_id = 'S'\nwidth_m = 1.0\nheight_m = 1.0\ncost = 2.0\n"
    with pytest.raises(JobError, match="duplicate id 'S'"):
        load_job(write(tmp_path, text))


def test_set_overrides_and_types(tmp_path):
    job = load_job(write(tmp_path, GOOD), ["budget.max_cost=12000", "candidates.mount_heights_m=[5, 9]",
                                           "solver.name=cbc"])
    assert job["budget"]["max_cost"] == 12000
    assert job["candidates"]["mount_heights_m"] == [5, 9]
    assert job["solver"]["name"] == "cbc"
    with pytest.raises(JobError, match="section.key=value"):
        parse_override("max_cost=3")


def test_bbox_must_be_lonlat(tmp_path):
    with pytest.raises(JobError, match="not longitude/latitude"):
        load_job(write(tmp_path, GOOD + "\n[area]\nbbox = [500000.0, 5800000.0, 501000.0, 5801000.0]\n"))


def test_invalid_toml_and_missing_file(tmp_path):
    with pytest.raises(JobError, match="not valid TOML"):
        load_job(write(tmp_path, "[inputs\n"))
    with pytest.raises(JobError, match="not found"):
        load_job(tmp_path / "nope.toml")


def test_reference_lists_every_key():
    ref = reference_markdown()
    for keys in SCHEMA.values():
        for name in keys:
            assert f"`{name}`" in ref


def test_typed_job_reads_none_for_no_limit(tmp_path):
    """Every key whose file value means "none" (0, '' or []) reads None in the frozen Job; others keep their value."""
    import dataclasses

    from siting.job import _NEVER, Job

    path = write(tmp_path, GOOD.replace("max_cost = 5000.0", "max_cost = 0"))
    job = Job.from_toml(path)
    none_keys = [(s, n) for s, keys in SCHEMA.items() for n, k in keys.items()
                 if k.none is not _NEVER and k.default == k.none]  # (run.tile_m: default 500 m, 0 = one tile)
    assert len(none_keys) >= 10
    for section, name in none_keys:
        assert getattr(getattr(job, section), name) is None, f"{section}.{name}"
    assert job.budget.max_cost is None and job.radio.frequency_ghz == 28.0
    assert job.run.tile_m == 500.0 and Job.from_toml(path, ["run.tile_m=0"]).run.tile_m is None
    assert load_job(path)["budget"]["max_cost"] == 0  # the plain-dict form keeps the file's encoding
    with pytest.raises(dataclasses.FrozenInstanceError):
        job.budget.max_cost = -5
