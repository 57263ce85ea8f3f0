"""Falsification subsamples: first stage and reduced form on rows the spec names.

Reference: linearmodels 7.1 IV2SLS used as OLS (no endogenous regressors) with the
constant, controls and fixed-effect dummies as columns, clustered, ``debiased=True``
(the engine's convention, see tests/test_engine_vs_linearmodels.py).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from linearmodels.iv import IV2SLS

from reportkit.balance.falsification import falsification_result
from reportkit.data.prepare import read_source
from reportkit.pipeline import with_evidence
from reportkit.results import NotApplicable
from reportkit.spec.loaded import LoadedSpec
from reportkit.spec.models import Spec


def _frame(seed: int = 5) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    n = 900
    group = np.where(rng.random(n) < 0.3, "never", "main")
    g = rng.integers(0, 15, size=n)
    f = rng.integers(0, 3, size=n)
    z = (rng.random(n) < 0.5).astype(float)
    x = rng.normal(size=n)
    u = rng.normal(size=n)
    # no first stage in the 'never' group; a direct effect of z on y there (exclusion fails)
    d = np.where(group == "main", 1.0 * z, 0.0) + 0.5 * u + rng.normal(size=n)
    y = 0.5 * d + 0.3 * x + u + np.where(group == "never", 0.6 * z, 0.0)
    return pd.DataFrame(
        {
            "y": y,
            "d": d,
            "z": z,
            "x": x,
            "f": [f"F{v}" for v in f],
            "g": [f"G{v:02d}" for v in g],
            "group": group,
        }
    )


def _loaded(tmp_path: Path, frame: pd.DataFrame, falsification: list[dict]) -> LoadedSpec:
    frame.to_csv(tmp_path / "data.csv", index=False)
    spec = Spec.model_validate(
        {
            "study": {"title": "t"},
            "data": {
                "path": "data.csv",
                "filters": [{"column": "group", "keep_if": "equal_to", "value": "main"}],
            },
            "model": {
                "outcome": "y",
                "endogenous": ["d"],
                "instruments": ["z"],
                "controls": ["x"],
                "fixed_effects": ["f"],
                "cluster_by": ["g"],
            },
            "balance": {"falsification": falsification},
        }
    )
    return LoadedSpec(spec=spec, base_dir=tmp_path)


NEVER = {
    "name": "never-takers by design",
    "description": "cannot take the treatment",
    "filters": [{"column": "group", "keep_if": "equal_to", "value": "never"}],
}


def _ols(frame: pd.DataFrame, dep: str):  # type: ignore[no-untyped-def]
    exog = pd.concat(
        [
            pd.Series(1.0, index=frame.index, name="const"),
            frame[["x", "z"]],
            pd.get_dummies(frame["f"], drop_first=True, dtype=float),
        ],
        axis=1,
    )
    codes = pd.factorize(frame["g"], sort=True)[0]
    return IV2SLS(frame[dep], exog, None, None).fit(
        cov_type="clustered", clusters=codes, debiased=True
    )


def test_first_stage_and_reduced_form_match_linearmodels(tmp_path: Path) -> None:
    frame = _frame()
    loaded = _loaded(tmp_path, frame, [NEVER])
    result = falsification_result(
        loaded, read_source(loaded), loaded.spec.balance.falsification[0], kind="cluster",
        labels={"z": "Z"},
    )  # fmt: skip
    sub = frame[frame["group"] == "never"]
    assert result.n_used == len(sub)
    assert result.rows == ["keep group equal to 'never'"]
    assert not isinstance(result.first_stages, NotApplicable)
    (stage,) = result.first_stages
    first = _ols(sub, "d")
    (coef,) = stage.coefficients
    assert coef.label == "Z"
    assert coef.estimate == pytest.approx(float(first.params["z"]), rel=1e-9)
    assert coef.std_error == pytest.approx(float(first.std_errors["z"]), rel=1e-9)
    assert not isinstance(result.reduced_form, NotApplicable)
    reduced = _ols(sub, "y")
    assert result.reduced_form[0].estimate == pytest.approx(float(reduced.params["z"]), rel=1e-9)
    assert result.reduced_form[0].std_error == pytest.approx(
        float(reduced.std_errors["z"]), rel=1e-9
    )
    # the simulated direct effect (0.6) with no first stage: the reduced form picks it up
    assert abs(coef.estimate) < 3 * coef.std_error
    assert not isinstance(result.reduced_form_test, NotApplicable)
    assert result.reduced_form_test.p_value < 0.01
    assert "15 clusters" in result.covariance


def test_subsample_that_cannot_support_the_model_is_not_applicable(tmp_path: Path) -> None:
    frame = _frame()
    frame.loc[frame["group"] == "never", "g"] = "G00"  # a single cluster
    loaded = _loaded(tmp_path, frame, [NEVER])
    result = falsification_result(
        loaded, read_source(loaded), loaded.spec.balance.falsification[0], kind="cluster",
        labels={},
    )  # fmt: skip
    assert result.n_used == 0
    assert isinstance(result.reduced_form_test, NotApplicable)
    assert "cannot support the model" in result.reduced_form_test.reason
    assert "cluster" in result.reduced_form_test.reason


def test_evidence_is_attached_even_without_balance_covariates() -> None:
    empty = NotApplicable(reason="there are no balance covariates")
    out = with_evidence(empty, [], None)
    assert out is empty
    compliers = NotApplicable(reason="no instrument takes only the values 0 and 1")
    attached = with_evidence(empty, [], compliers)
    assert not isinstance(attached, NotApplicable)
    assert attached.compliers == compliers and attached.rows == []


def test_falsification_names_must_differ() -> None:
    with pytest.raises(ValueError, match="uses the name"):
        Spec.model_validate(
            {
                "study": {"title": "t"},
                "data": {"path": "data.csv"},
                "model": {"outcome": "y", "endogenous": ["d"], "instruments": ["z"]},
                "balance": {"falsification": [NEVER, NEVER]},
            }
        )
