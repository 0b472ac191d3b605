from pathlib import Path

import pytest
from pydantic import ValidationError

from ledgerband.tasks.core.settings import Settings, TrainSettings

EXAMPLE = Path(__file__).parents[2] / "ledgerband.toml"  # the commented example in the repository


def test_misspelt_environment_variable_fails_loudly(monkeypatch):
    monkeypatch.setenv("LEDGERBAND_QUALTY__MAX_QUARANTINE_SHARE", "0.5")
    with pytest.raises(
        ValueError, match="LEDGERBAND_QUALTY__MAX_QUARANTINE_SHARE is not a ledgerband setting"
    ):
        Settings()


def test_environment_overrides_a_nested_threshold(monkeypatch):
    monkeypatch.setenv("LEDGERBAND_ACCURACY__MIN_BAND_SKILL", "0.7")
    assert Settings().accuracy.min_band_skill == 0.7


def test_misspelt_key_in_the_toml_file_fails(tmp_path, monkeypatch):
    cfg = tmp_path / "ledgerband.toml"
    cfg.write_text("[quality]\nmax_quarantine_shar = 0.1\n")
    monkeypatch.setenv("LEDGERBAND_CONFIG", str(cfg))
    with pytest.raises(ValidationError, match="max_quarantine_shar"):
        Settings()


@pytest.mark.parametrize(
    "feature", ["sex", "age_years"]
)  # the two protected attributes features.customer carries
def test_protected_attribute_as_a_feature_is_refused_by_default(feature):
    with pytest.raises(ValidationError, match="protected attributes"):
        TrainSettings(categorical_features=("home_region", feature))


def test_protected_attribute_allowed_only_when_explicitly_enabled():
    t = TrainSettings(categorical_features=("home_region", "sex"), allow_protected_features=True)
    assert "sex" in t.categorical_features


@pytest.mark.parametrize("edges", [(40_000, 25_000), (0, 10), ()])  # decreasing, zero edge, no bands at all
def test_band_edges_must_be_positive_and_increasing(edges):
    with pytest.raises(ValidationError):
        Settings(bands={"edges": edges})


def test_the_shipped_settings_file_is_valid(monkeypatch):
    monkeypatch.setenv("LEDGERBAND_CONFIG", str(EXAMPLE))
    s = Settings()
    assert s.quality.max_quarantine_share == 0.01
    assert s.bands.edges == (25_000, 40_000, 60_000, 85_000, 120_000)


def test_the_example_settings_file_says_exactly_the_defaults(monkeypatch, tmp_path):
    """ledgerband.toml is documentation of the defaults in code: it must list every key, with its default."""
    import tomllib

    monkeypatch.setenv("LEDGERBAND_CONFIG", str(EXAMPLE))
    from_file = Settings(home=tmp_path).model_dump()
    defaults = Settings.model_construct().model_dump()  # no sources at all: the code's defaults
    defaults["home"] = tmp_path
    assert from_file == defaults
    written = tomllib.loads(EXAMPLE.read_text())
    for section, fields in Settings.model_fields.items():
        if section in (
            "home",
            "landing_dir",
        ):  # set per machine (LEDGERBAND_HOME, --landing), not in the example
            continue
        assert section in written, f"ledgerband.toml does not show [{section}] / {section}"
        sub = getattr(fields.annotation, "model_fields", None)
        if sub:
            missing = sorted(set(sub) - set(written[section]))
            assert not missing, f"ledgerband.toml [{section}] does not show {missing}"


def test_a_settings_file_named_but_missing_is_an_error_not_the_defaults(monkeypatch, tmp_path):
    monkeypatch.setenv("LEDGERBAND_CONFIG", str(tmp_path / "ledgerbnad.toml"))  # a typo in the path
    with pytest.raises(ValueError, match="LEDGERBAND_CONFIG names .*ledgerbnad.toml, which is not a file"):
        Settings()
