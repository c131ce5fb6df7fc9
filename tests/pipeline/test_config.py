import pytest

from pkasite.pipeline.config import ConfigError, load_config, load_registry


def test_default_config_and_registry_load():
    cfg = load_config()
    reg = load_registry()
    assert cfg.data.sources == ["dwpka"]
    assert reg.sources["dwpka"].enabled and not reg.sources["iupac"].enabled
    assert len(reg.sources["dwpka"].files) == 4
    assert all(len(f.sha256) == 64 for f in reg.sources["dwpka"].files)
    assert reg.sources["iupac"].commercial_use is False


def test_unknown_key_is_named(tmp_path):
    bad = tmp_path / "bad.yaml"
    bad.write_text("name: x\ncuration:\n  pka_maximum: 14\n")
    with pytest.raises(ConfigError, match=r"bad.yaml: curation.pka_maximum: unknown key"):
        load_config(bad)


def test_bad_value_and_inverted_window_are_named(tmp_path):
    bad = tmp_path / "bad.yaml"
    bad.write_text("curation:\n  conflict_action: shrug\n")
    with pytest.raises(ConfigError, match="curation.conflict_action"):
        load_config(bad)
    bad.write_text("curation:\n  pka_min: 5\n  pka_max: 1\n")
    with pytest.raises(ConfigError, match="pka_min must be below pka_max"):
        load_config(bad)


def test_overrides_are_validated():
    cfg = load_config().with_overrides({"curation.pka_max": 14, "data.extra": ["a.csv"]})
    assert cfg.curation.pka_max == 14 and cfg.data.extra == ["a.csv"]
    with pytest.raises(ConfigError, match="curation.pkaa: unknown key"):
        load_config().with_overrides({"curation.pkaa": 1})


def test_unknown_source_lists_known_ones():
    with pytest.raises(ConfigError, match="unknown source 'nope'.*dwpka, iupac"):
        load_registry().get("nope")
