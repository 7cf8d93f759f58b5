"""SplitConfig: TOML round trip, stable hash, clear errors for bad files and values."""

from __future__ import annotations

import tomllib

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from segcut.config import SplitConfig, load_config
from segcut.errors import ConfigError


def test_default_round_trip_and_parses_as_toml():
    cfg = SplitConfig()
    text = cfg.to_toml()
    tomllib.loads(text)  # the text is valid TOML (checked by the standard library reader)
    assert SplitConfig.from_toml(text) == cfg
    assert cfg.to_toml() == text  # stable


@settings(max_examples=40, deadline=None)
@given(
    n=st.one_of(st.none(), st.integers(1, 10_000)),
    compactness=st.floats(0.1, 100.0),
    prior=st.sampled_from([(), ("border",), ("center",), ("border", "center")]),
    box=st.one_of(st.none(), st.tuples(st.integers(0, 50), st.integers(0, 50),
                                       st.integers(51, 99), st.integers(51, 99))),
    method=st.sampled_from(["auto", "local", "tabu", "sdp"]),
    time_limit=st.one_of(st.none(), st.floats(0.01, 100.0)),
    seed=st.integers(0, 2**31),
)
def test_round_trip_property(n, compactness, prior, box, method, time_limit, seed):
    cfg = SplitConfig(n_superpixels=n, compactness=compactness, prior=prior, box=box,
                      method=method, time_limit=time_limit, seed=seed)
    back = SplitConfig.from_toml(cfg.to_toml())
    assert back == cfg
    assert back.config_hash() == cfg.config_hash()


def test_hash_changes_with_settings_and_ignores_int_float_spelling():
    a = SplitConfig()
    assert a.config_hash() != a.replace(seed=1).config_hash()
    assert len(a.config_hash()) == 16
    assert SplitConfig(compactness=10).config_hash() == SplitConfig(compactness=10.0).config_hash()


def test_load_config_from_file(tmp_path):
    path = tmp_path / "split.toml"
    path.write_text('seed = 3\n[prior]\nprior = ["border", "center"]\n[solver]\nmethod = "local"\n')
    cfg = load_config(path)
    assert cfg.seed == 3 and cfg.prior == ("border", "center") and cfg.method == "local"


def test_prior_as_comma_text():
    assert SplitConfig().replace(prior="border,center").prior == ("border", "center")
    assert SplitConfig().replace(prior="none").prior == ()


def test_unknown_key_names_file_and_key(tmp_path):
    path = tmp_path / "bad.toml"
    path.write_text("[solver]\nmethd = \"local\"\n")
    with pytest.raises(ConfigError, match=r"bad\.toml: unknown key 'methd' in \[solver\]"):
        load_config(path)


def test_unknown_table():
    with pytest.raises(ConfigError, match=r"unknown table \[solve\]"):
        SplitConfig.from_toml("[solve]\nmethod = 'local'\n")


def test_unknown_top_level_key():
    with pytest.raises(ConfigError, match="unknown top-level key 'method'"):
        SplitConfig.from_toml("method = 'local'\n")


def test_bad_value_names_the_field(tmp_path):
    path = tmp_path / "v.toml"
    path.write_text("[affinity]\nthreshold_quantile = 1.5\n")
    with pytest.raises(ConfigError, match=r"v\.toml: threshold_quantile must be <= 1"):
        load_config(path)


def test_bad_prior_name():
    with pytest.raises(ConfigError, match="prior 'frame' is not known"):
        SplitConfig.from_toml("[prior]\nprior = ['frame']\n")


def test_not_toml():
    with pytest.raises(ConfigError, match="not valid TOML"):
        SplitConfig.from_toml("[prior\nprior = 1\n")


def test_missing_file(tmp_path):
    with pytest.raises(ConfigError, match="config file not found"):
        load_config(tmp_path / "absent.toml")


def test_bad_box():
    with pytest.raises(ValueError, match="box must have x0 < x1"):
        SplitConfig(box=(5, 5, 2, 9))


def test_bool_is_not_a_number():
    with pytest.raises(ValueError, match="n_neighbors must be an integer"):
        SplitConfig(n_neighbors=True)


def test_replace_unknown_field():
    with pytest.raises(TypeError, match="no field"):
        SplitConfig().replace(colour=3)


def test_a_registered_prior_is_accepted_by_name():
    # a prior registered by another package (here in-process) is a valid config name
    from segcut import priors

    with pytest.raises(ValueError, match="prior 'stripes' is not known"):
        SplitConfig(prior=("stripes",))
    try:
        priors.register_prior("stripes", lambda shape, config: np.zeros(shape))
        cfg = SplitConfig(prior=("border", "stripes"))
        assert SplitConfig.from_toml(cfg.to_toml()) == cfg
    finally:
        priors._PRIORS.pop("stripes", None)


def test_config_checks_types_of_names_and_affinity_options():
    with pytest.raises(ValueError, match="prior must be a list of names"):
        SplitConfig(prior=(3,))
    with pytest.raises(ValueError, match="unknown max-cut method 'nope'"):
        SplitConfig(method="nope")
    with pytest.raises(ValueError, match="has no option"):
        SplitConfig(affinity_options={"scale": 2.0})
    with pytest.raises(ConfigError, match="affinity_options must be a table"):
        SplitConfig.from_toml("[affinity]\naffinity_options = 3\n")
