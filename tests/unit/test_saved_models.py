"""Champions saved before tasks/ was regrouped still load (the drift gate reads last month's model)."""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest

from ledgerband.tasks.ingest.extract_contract import sha256_file
from ledgerband.tasks.modeling.candidates import SteadyForest
from ledgerband.tasks.modeling.train import load_model

# Saved on 2026-12-05 by the code of that day (commit a1f6da2), where the forest's class was
# `ledgerband.tasks.models.SteadyForest`: a scaler and a 3-tree depth-2 forest fitted on 40 rows of
# rng(7) normal X (3 columns) with y = X @ [1, 2, 3] + noise. Its estimates for the first five rows were
# printed by that code when it saved the file.
OLD_FILE = Path(__file__).parents[1] / "fixtures" / "models" / "steady_forest_2026-12-05.skops"
OLD_ESTIMATES = [-0.58551992, -3.83235554, -0.58551992, 0.18145412, -0.58551992]


def test_a_champion_saved_under_the_old_module_name_loads_and_predicts_as_it_did():
    rng = np.random.default_rng(7)
    X = rng.normal(size=(40, 3))
    model = load_model(OLD_FILE, sha256_file(OLD_FILE))
    assert isinstance(model[-1], SteadyForest)
    np.testing.assert_allclose(model.predict(X[:5]), OLD_ESTIMATES, rtol=1e-7)
    # the old name is mapped for the load alone: no module of that name is left importable
    assert "ledgerband.tasks.models" not in sys.modules


def test_an_old_file_whose_bytes_changed_is_still_refused(tmp_path):
    from ledgerband.tasks.core.errors import ModelFileRefused

    copy = tmp_path / "m.skops"
    copy.write_bytes(OLD_FILE.read_bytes())
    with pytest.raises(ModelFileRefused):
        load_model(copy, "0" * 64)
