import pytest
from pydantic import ValidationError

from tasks.settings import Settings, TrainSettings


def test_misspelt_environment_variable_fails_loudly(monkeypatch):
    monkeypatch.setenv("LEDGERBAND_QUALTY__MAX_QUARANTINE_SHARE", "0.5")
    with pytest.raises(
        ValueError, match="LEDGERBAND_QUALTY__MAX_QUARANTINE_SHARE is not a ledgerband setting"
    ):
        Settings()


def test_environment_overrides_a_nested_threshold(monkeypatch):
    monkeypatch.setenv("LEDGERBAND_ACCURACY__MIN_BAND_ACCURACY", "0.7")
    assert Settings().accuracy.min_band_accuracy == 0.7


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
    from tasks.settings import PROJECT_ROOT

    monkeypatch.setenv("LEDGERBAND_CONFIG", str(PROJECT_ROOT / "ledgerband.toml"))
    s = Settings()
    assert s.quality.max_quarantine_share == 0.01
    assert s.bands.edges == (25_000, 40_000, 60_000, 85_000, 120_000)
