"""Balance and placebo columns in the data stage: read for the sample, never shrinking it."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from reportkit.data.prepare import prepare
from reportkit.errors import DataError
from reportkit.spec.loaded import LoadedSpec
from reportkit.spec.models import Spec


def _loaded(tmp_path: Path, frame: pd.DataFrame, balance: dict) -> LoadedSpec:
    frame.to_csv(tmp_path / "data.csv", index=False)
    spec = Spec.model_validate(
        {
            "study": {"title": "t"},
            "data": {"path": "data.csv", "missing_codes": [-99]},
            "model": {"outcome": "y", "endogenous": ["d"], "instruments": ["z"], "controls": ["x"]},
            "balance": balance,
        }
    )
    return LoadedSpec(spec=spec, base_dir=tmp_path)


def _frame(n: int = 60) -> pd.DataFrame:
    rng = np.random.default_rng(7)
    frame = pd.DataFrame(
        {
            "y": rng.normal(size=n),
            "d": rng.normal(size=n),
            "z": rng.normal(size=n),
            "x": rng.normal(size=n),
            "pre": rng.normal(size=n),
            "flag": rng.choice([True, False], size=n),
            "word": rng.choice(["a", "b"], size=n),
        }
    )
    frame.loc[[3, 8, 11], "pre"] = np.nan
    frame.loc[5, "pre"] = -99
    return frame


def test_balance_columns_keep_their_own_missing_values(tmp_path: Path) -> None:
    loaded = _loaded(tmp_path, _frame(), {"pre_treatment": ["pre", "flag"]})
    prepared = prepare(loaded)
    assert prepared.sample.rows_used == 60  # missing 'pre' removes no row from the sample
    pre = prepared.extras["pre"]
    assert np.isnan(pre[[3, 5, 8, 11]]).all() and np.isfinite(np.delete(pre, [3, 5, 8, 11])).all()
    assert set(np.unique(prepared.extras["flag"])) <= {0.0, 1.0}
    assert "x" in prepared.extras  # the default covariates are the model's controls


def test_misspelt_balance_column_names_the_field(tmp_path: Path) -> None:
    loaded = _loaded(tmp_path, _frame(), {"placebo_outcomes": ["pree"]})
    with pytest.raises(DataError) as err:
        prepare(loaded)
    assert "balance.placebo_outcomes[0]" in str(err.value)
    assert "'pre'" in str(err.value)


def test_text_balance_column_is_an_error(tmp_path: Path) -> None:
    loaded = _loaded(tmp_path, _frame(), {"pre_treatment": ["word"]})
    with pytest.raises(DataError) as err:
        prepare(loaded)
    assert "word" in str(err.value) and "balance" in str(err.value)


def test_balance_variable_cannot_be_an_instrument() -> None:
    with pytest.raises(ValueError, match=r"balance\.placebo_outcomes"):
        Spec.model_validate(
            {
                "study": {"title": "t"},
                "data": {"path": "data.csv"},
                "model": {"outcome": "y", "endogenous": ["d"], "instruments": ["z"]},
                "balance": {"placebo_outcomes": ["z"]},
            }
        )
