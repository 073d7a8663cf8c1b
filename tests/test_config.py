"""Config parsing: every error names the file and key; misspellings get the closest key."""

from __future__ import annotations

from pathlib import Path

import pytest

from timeslice.config import load_config, parse_config
from timeslice.demo_config import render_demo_config
from timeslice.errors import ConfigError, InputFileError

REPO = Path(__file__).resolve().parents[1]


def _write(tmp_path, text):
    p = tmp_path / "run.toml"
    p.write_text(text)
    return p


def test_demo_config_in_repo_matches_template():
    # configs/demo.toml is the packaged template with data paths under ../demo_data
    assert (REPO / "configs" / "demo.toml").read_text() == render_demo_config("../demo_data")


def test_demo_config_expands_models_times_slices():
    cfg = load_config(REPO / "configs" / "demo.toml")
    specs = cfg.slice_specs()
    assert len(specs) == 3 * 6
    lgm = [s for s in specs if s.label == "alder_21ka"][0]
    # a slice a years before present has year = 1950 - a (DESIGN.md)
    assert lgm.year == 1950 - 21000
    assert lgm.sea_level == -120.0
    assert lgm.file == (REPO / "demo_data" / "models" / "alder" / "21ka.nc").resolve()


def test_misspelled_key_suggests_closest(tmp_path):
    text = render_demo_config(".").replace("buffer_km", "bufer_km")
    with pytest.raises(ConfigError, match=r"unknown key 'niche.bufer_km'.*did you mean 'buffer_km'"):
        load_config(_write(tmp_path, text))


def test_misspelled_section_suggests_closest(tmp_path):
    text = render_demo_config(".").replace("[transfer]", "[transfr]")
    with pytest.raises(ConfigError, match=r"unknown key 'transfr'.*did you mean 'transfer'"):
        load_config(_write(tmp_path, text))


def test_not_toml(tmp_path):
    with pytest.raises(InputFileError, match="not a valid TOML"):
        load_config(_write(tmp_path, "this is = = not toml ["))


def test_missing_config_file(tmp_path):
    with pytest.raises(InputFileError, match="not found"):
        load_config(tmp_path / "nope.toml")


def test_bad_value_names_key(tmp_path):
    text = render_demo_config(".").replace("buffer_km = 200.0", "buffer_km = -5")
    with pytest.raises(ConfigError, match=r"niche.buffer_km"):
        load_config(_write(tmp_path, text))


def test_missing_required_key():
    with pytest.raises(ConfigError, match=r"required key 'climate'"):
        parse_config({"species": {"occurrences": "x.csv"}})


def test_slice_needs_one_time(tmp_path):
    text = render_demo_config(".").replace("age_bp = 6000", "age_bp = 6000\nyear = 1")
    with pytest.raises(ConfigError, match=r"slices\[1\].*exactly one of"):
        load_config(_write(tmp_path, text))


def test_missing_input_file_names_key(tmp_path):
    cfg = load_config(_write(tmp_path, render_demo_config(".")))
    with pytest.raises(InputFileError, match=r"climate.baseline.*not found"):
        cfg.check_files()


def test_unknown_model_in_slice(tmp_path):
    text = render_demo_config(".").replace('age_bp = 6000', 'age_bp = 6000\nmodels = ["aldr"]')
    # refused when the config is loaded, before any work
    with pytest.raises(ConfigError, match=r"'aldr'.*did you mean 'alder'"):
        load_config(_write(tmp_path, text))


def test_between_slice_takes_interpolated_sea_level(tmp_path):
    # a 14 ka slice between 21 ka (-120 m) and 6 ka (-2 m) with no sea level of its own gets
    # the sea level interpolated in time, as its climate is (numpy.interp as the reference)
    import numpy as np

    text = render_demo_config(".") + (
        '\n[[slices]]\nname = "14ka"\nbetween = ["21ka", "6ka"]\nscenario = "past"\n'
        "age_bp = 14000\n")
    cfg = load_config(_write(tmp_path, text))
    spec = [s for s in cfg.slice_specs() if s.label == "alder_14ka"][0]
    expected = np.interp(1950 - 14000, [1950 - 21000, 1950 - 6000], [-120.0, -2.0])
    assert spec.sea_level == pytest.approx(expected)
    # given explicitly, it is kept
    cfg2 = load_config(_write(tmp_path, text + "sea_level = -80.0\n"))
    assert [s for s in cfg2.slice_specs() if s.label == "alder_14ka"][0].sea_level == -80.0


@pytest.mark.parametrize("old,new,pattern", [
    ('reference = "baseline"', 'reference = "alder_21k"',
     r"series.reference = 'alder_21k' is not a slice label; did you mean 'alder_21ka'\?"),
    ('"21 ka BP", "6 ka BP"', '"21 ka", "6 ka BP"',
     r"series.refugium_window names '21 ka'.*did you mean '21 ka BP'\?"),
    ('dispersal_rate = "500 km/kyr"', 'dispersal_rate = "500"',
     r"series.dispersal_rate.*no unit"),
    ('algorithm = "envelope"', 'algorithm = "envelop"',
     r"niche.algorithm = 'envelop'.*did you mean 'envelope'\?"),
    ('threshold = "max_sss"', 'threshold = "fixed"', r"threshold_value in \(0, 1\)"),
    ('seed = 20261201', 'seed = -1', r"run.seed"),
    ('seed = 20261201', 'seed = 4294967296', r"run.seed"),
])
def test_references_and_choices_checked_at_load(tmp_path, old, new, pattern):
    text = render_demo_config(".")
    assert old in text
    with pytest.raises(ConfigError, match=pattern):
        load_config(_write(tmp_path, text.replace(old, new)))


def test_suggestion_never_repeats_the_value():
    from timeslice.config import _suggest

    assert "did you mean '2081-2100'" not in _suggest("2081-2100", ["2081-2100", "2041-2060"], "x")
