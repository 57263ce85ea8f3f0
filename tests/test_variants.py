"""Robustness variants of the main 2SLS estimate, each against an independent linearmodels fit.

Reference: linearmodels 7.1 (IV2SLS, IVLIML incl. fuller=, IVGMM) with the constant,
controls and fixed-effect dummies as columns and ``debiased=True``, which is the
convention the engine follows (checked to 1e-10 in tests/test_engine_vs_linearmodels.py).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from linearmodels.iv import IV2SLS, IVGMM, IVLIML

from reportkit.data.named_columns import check_named_columns
from reportkit.data.prepare import prepare, read_source
from reportkit.errors import DataError
from reportkit.estimation import estimate
from reportkit.results import NotApplicable, Variant
from reportkit.spec.loaded import LoadedSpec
from reportkit.spec.models import Spec
from reportkit.variants.influence import cluster_influence
from reportkit.variants.linear import estimator_variants, instrument_variants
from reportkit.variants.respecified import (
    clustering_variants,
    control_variants,
    sample_variants,
    trimming_variants,
)

RTOL = 1e-8


def _frame(n: int = 720, seed: int = 11) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    g = rng.integers(0, 12, size=n)
    f = rng.integers(0, 4, size=n)
    u = rng.normal(size=n)
    z1 = (rng.random(n) < 0.5).astype(float)
    z2 = rng.normal(size=n)
    x1, x2, x3 = rng.normal(size=(3, n))
    d = 0.8 * z1 + 0.4 * z2 + 0.3 * x1 + 0.5 * u + rng.normal(size=n) + 0.2 * f
    y = 1.0 + 0.5 * d + 0.4 * x1 - 0.2 * x2 + 0.1 * x3 + u + 0.3 * g / 12 + 0.1 * f
    return pd.DataFrame(
        {
            "y": y,
            "d": d,
            "z1": z1,
            "z2": z2,
            "x1": x1,
            "x2": x2,
            "x3": x3,
            "f": [f"F{v}" for v in f],
            "g": [f"G{v:02d}" for v in g],
            "g2": [f"H{v}" for v in rng.integers(0, 9, size=n)],
            "wave": rng.integers(1, 3, size=n),
        }
    )


def _loaded(tmp_path: Path, frame: pd.DataFrame, **sections: object) -> LoadedSpec:
    frame.to_csv(tmp_path / "data.csv", index=False)
    spec = {
        "study": {"title": "t"},
        "data": {"path": "data.csv"},
        "model": {
            "outcome": "y",
            "endogenous": ["d"],
            "instruments": ["z1", "z2"],
            "controls": ["x1", "x2"],
            "fixed_effects": ["f"],
            "cluster_by": ["g"],
        },
        **sections,
    }
    return LoadedSpec(spec=Spec.model_validate(spec), base_dir=tmp_path)


def _exog(frame: pd.DataFrame, controls: list[str]) -> pd.DataFrame:
    dummies = pd.get_dummies(frame["f"], prefix="f", drop_first=True, dtype=float)
    return pd.concat(
        [pd.Series(1.0, index=frame.index, name="const"), frame[controls], dummies], axis=1
    )


def _reference(
    frame: pd.DataFrame,
    *,
    model: type = IV2SLS,
    instruments: tuple[str, ...] = ("z1", "z2"),
    controls: tuple[str, ...] = ("x1", "x2"),
    cluster: str | None = "g",
    **model_kw: object,
):  # type: ignore[no-untyped-def]
    mod = model(
        frame["y"], _exog(frame, list(controls)), frame[["d"]], frame[list(instruments)], **model_kw
    )
    if cluster is None:
        return mod.fit(cov_type="robust", debiased=True)
    codes = pd.factorize(frame[cluster], sort=True)[0]
    return mod.fit(cov_type="clustered", clusters=codes, debiased=True)


def _value(variants: list[Variant], key: str) -> tuple[float, float]:
    (variant,) = [v for v in variants if v.key == key]
    assert not isinstance(variant.values, NotApplicable), variant.values
    return variant.values[0].estimate, variant.values[0].std_error or float("nan")


def _close(ours: tuple[float, float], ref) -> None:  # type: ignore[no-untyped-def]
    assert ours[0] == pytest.approx(float(ref.params["d"]), rel=RTOL)
    assert ours[1] == pytest.approx(float(ref.std_errors["d"]), rel=RTOL)


@pytest.fixture(scope="module")
def setup(tmp_path_factory: pytest.TempPathFactory):  # type: ignore[no-untyped-def]
    tmp = tmp_path_factory.mktemp("variants")
    frame = _frame()
    loaded = _loaded(
        tmp,
        frame,
        robustness={
            "alternative_clusters": [["g2"], ["g", "g2"]],
            "samples": [
                {
                    "name": "wave one",
                    "filters": [{"column": "wave", "keep_if": "equal_to", "value": 1}],
                }
            ],
            "control_sets": [{"name": "swap", "add": ["x3"], "remove": ["x2"]}],
            "trim_outcome": [0.05],
        },
    )
    source = read_source(loaded)
    prepared = prepare(loaded, source)
    est = estimate(
        prepared.design,
        covariance="cluster",
        estimators=["2sls"],
        confidence_level=0.95,
        labels={},
        crosscheck="never",
    )
    return frame, loaded, source, prepared, est


def test_estimator_variants_match_linearmodels(setup) -> None:  # type: ignore[no-untyped-def]
    frame, _, _, prepared, est = setup
    variants = estimator_variants(
        est.moments,
        est.cov,
        prepared.design,
        estimators=["liml", "fuller_1", "fuller_4", "gmm", "jive"],
        labels={},
        level=0.95,
    )
    _close(_value(variants, "estimator:liml"), _reference(frame, model=IVLIML))
    _close(_value(variants, "estimator:fuller_1"), _reference(frame, model=IVLIML, fuller=1))
    _close(_value(variants, "estimator:fuller_4"), _reference(frame, model=IVLIML, fuller=4))
    codes = pd.factorize(frame["g"], sort=True)[0]
    gmm = _reference(frame, model=IVGMM, weight_type="clustered", clusters=codes)
    _close(_value(variants, "estimator:gmm"), gmm)
    jive = next(v for v in variants if v.key == "estimator:jive")
    assert not isinstance(jive.values, NotApplicable)  # checked in test_more_estimators.py


def test_instrument_sets_match_linearmodels(setup) -> None:  # type: ignore[no-untyped-def]
    frame, _, _, prepared, est = setup
    variants = instrument_variants(prepared.design, est.cov, labels={}, level=0.95)
    # with two instruments, 'without z1' is 'only z2': each set is shown once
    assert [v.key for v in variants] == ["instruments:only:z1", "instruments:only:z2"]
    _close(_value(variants, "instruments:only:z1"), _reference(frame, instruments=("z1",)))
    _close(_value(variants, "instruments:only:z2"), _reference(frame, instruments=("z2",)))


def test_one_instrument_for_two_regressors_is_not_applicable(tmp_path: Path) -> None:
    frame = _frame()
    frame["d2"] = frame["d"] * 0.5 + frame["x3"]
    frame["z3"] = frame["x3"] + np.random.default_rng(3).normal(size=len(frame))
    frame.to_csv(tmp_path / "data.csv", index=False)
    spec = Spec.model_validate(
        {
            "study": {"title": "t"},
            "data": {"path": "data.csv"},
            "model": {
                "outcome": "y",
                "endogenous": ["d", "d2"],
                "instruments": ["z1", "z2", "z3"],
                "cluster_by": ["g"],
            },
        }
    )
    prepared = prepare(LoadedSpec(spec=spec, base_dir=tmp_path))
    est = estimate(
        prepared.design,
        covariance="cluster",
        estimators=["2sls"],
        confidence_level=0.95,
        labels={},
        crosscheck="never",
    )
    variants = instrument_variants(prepared.design, est.cov, labels={}, level=0.95)
    alone = [v for v in variants if v.key.startswith("instruments:only:")]
    assert len(alone) == 3
    for v in alone:
        assert isinstance(v.values, NotApplicable)
        assert "1 instrument(s) cannot identify 2 endogenous regressors" in v.values.reason
    left_out = [v for v in variants if v.key.startswith("instruments:without:")]
    assert len(left_out) == 3 and all(not isinstance(v.values, NotApplicable) for v in left_out)


def test_clustering_variants_match_linearmodels(setup) -> None:  # type: ignore[no-untyped-def]
    frame, loaded, source, _, _ = setup
    variants = clustering_variants(loaded, source, labels={}, level=0.95)
    assert [v.key for v in variants] == [
        "inference:robust",
        "inference:cluster:g2",
        "inference:cluster:g+g2",
    ]
    _close(_value(variants, "inference:robust"), _reference(frame, cluster=None))
    _close(_value(variants, "inference:cluster:g2"), _reference(frame, cluster="g2"))
    # two-way: linearmodels with a two-column cluster frame (Cameron, Gelbach & Miller 2011)
    codes = pd.DataFrame(
        {c: pd.factorize(frame[c], sort=True)[0] for c in ("g", "g2")}, index=frame.index
    )
    ref = IV2SLS(frame["y"], _exog(frame, ["x1", "x2"]), frame[["d"]], frame[["z1", "z2"]]).fit(
        cov_type="clustered", clusters=codes, debiased=True
    )
    _close(_value(variants, "inference:cluster:g+g2"), ref)


def test_sample_control_and_trimming_variants(setup) -> None:  # type: ignore[no-untyped-def]
    frame, loaded, source, prepared, _ = setup
    samples = sample_variants(loaded, source, labels={}, level=0.95)
    _close(_value(samples, "sample:wave one"), _reference(frame[frame["wave"] == 1]))
    assert samples[0].n_obs == int((frame["wave"] == 1).sum())
    controls = control_variants(loaded, source, labels={}, level=0.95)
    _close(_value(controls, "controls:swap"), _reference(frame, controls=("x1", "x3")))
    trimmed = trimming_variants(loaded, source, prepared.design.y, labels={}, level=0.95)
    low, high = np.quantile(frame["y"], [0.05, 0.95])
    kept = frame[(frame["y"] >= low) & (frame["y"] <= high)]
    _close(_value(trimmed, "sample:trim:0.05"), _reference(kept))
    assert trimmed[0].n_obs == len(kept)


def test_empty_sample_variant_is_not_applicable(tmp_path: Path) -> None:
    loaded = _loaded(
        tmp_path,
        _frame(),
        robustness={
            "samples": [
                {"name": "none", "filters": [{"column": "wave", "keep_if": "equal_to", "value": 9}]}
            ]
        },
    )
    (variant,) = sample_variants(loaded, read_source(loaded), labels={}, level=0.95)
    assert isinstance(variant.values, NotApplicable)
    assert "cannot support the model" in variant.values.reason
    assert variant.n_obs is None


def test_leave_one_cluster_out_matches_refits(setup) -> None:  # type: ignore[no-untyped-def]
    frame, _, _, prepared, est = setup
    influence = cluster_influence(
        prepared.design,
        "cluster",
        est.fits["2sls"],
        cluster_labels=prepared.cluster_levels,
        labels={},
        level=0.95,
    )
    assert not isinstance(influence, NotApplicable)
    (result,) = influence
    assert result.n_clusters == 12 and len(result.drops) == 12
    shifts = [abs(d.shift) for d in result.drops]
    assert shifts == sorted(shifts, reverse=True)
    main = float(est.fits["2sls"].params[0])
    for drop in result.drops[:3]:
        ref = _reference(frame[frame["g"] != drop.cluster])
        assert drop.estimate == pytest.approx(float(ref.params["d"]), rel=RTOL)
        assert drop.std_error == pytest.approx(float(ref.std_errors["d"]), rel=RTOL)
        assert drop.shift == pytest.approx(drop.estimate - main, rel=1e-12)
        assert drop.n_rows == int((frame["g"] == drop.cluster).sum())
    assert result.lowest == min(d.estimate for d in result.drops)


def test_leave_one_cluster_out_needs_clusters(setup) -> None:  # type: ignore[no-untyped-def]
    _, _, _, prepared, est = setup
    out = cluster_influence(
        prepared.design, "robust", est.fits["2sls"], cluster_labels=[], labels={}, level=0.95
    )
    assert isinstance(out, NotApplicable) and "no clusters" in out.reason


def test_misspelt_variant_column_names_the_field(tmp_path: Path) -> None:
    loaded = _loaded(
        tmp_path,
        _frame(),
        robustness={"control_sets": [{"name": "more", "add": ["x33"]}]},
    )
    prepared = prepare(loaded)
    with pytest.raises(DataError) as err:
        check_named_columns(loaded, prepared.frame_columns, "data.csv")
    assert "robustness.control_sets[0].add[0]" in str(err.value)
    assert "'x3'" in str(err.value)


@pytest.mark.parametrize(
    "robustness, message",
    [
        ({"control_sets": [{"name": "a", "remove": ["x9"]}]}, "removes 'x9'"),
        ({"control_sets": [{"name": "a", "add": ["x1"]}]}, "adds 'x1'"),
        ({"control_sets": [{"name": "a"}]}, "neither adds nor removes"),
        ({"trim_outcome": [0.3]}, "between 0 and 0.25"),
        ({"alternative_clusters": [["g", "g"]]}, "one or two different variables"),
        (
            {
                "samples": [
                    {"name": "s", "filters": [{"column": "w", "keep_if": "is_present"}]},
                    {"name": "s", "filters": [{"column": "w", "keep_if": "is_present"}]},
                ]
            },
            "uses the name 's' twice",
        ),
    ],
)
def test_bad_robustness_sections_are_spec_errors(robustness: dict, message: str) -> None:
    spec = {
        "study": {"title": "t"},
        "data": {"path": "data.csv"},
        "model": {"outcome": "y", "endogenous": ["d"], "instruments": ["z1"], "controls": ["x1"]},
        "robustness": robustness,
    }
    with pytest.raises(ValueError, match=message):
        Spec.model_validate(spec)


def test_direct_effects_must_name_an_instrument() -> None:
    with pytest.raises(ValueError, match=r"sensitivity\.direct_effects names 'x1'"):
        Spec.model_validate(
            {
                "study": {"title": "t"},
                "data": {"path": "data.csv"},
                "model": {"outcome": "y", "endogenous": ["d"], "instruments": ["z1"]},
                "sensitivity": {"direct_effects": {"x1": {"lower": -1, "upper": 1}}},
            }
        )


def test_binary_model_details_are_kept_and_read() -> None:
    from reportkit.variants.binary import detail_sentences

    extra = {
        "coef_residual": 0.0123,
        "coef_residual_se": 0.004,
        "coef_residual_p_value": 0.0021,
        "rho": -0.31,
        "rho_se": 0.12,
        "asf_treated": 0.61,
        "asf_untreated": 0.52,
    }
    text = " ".join(detail_sentences(extra))
    assert "0.0123" in text and "p = 0.0021" in text and "exogenous" in text
    assert "-0.31" in text and "0.61 with everyone treated" in text
    variant = Variant(
        key="binary:x",
        group="binary",
        name="x",
        description="",
        estimand="e",
        n_obs=10,
        covariance="bootstrap",
        values=NotApplicable(reason="r"),
        details={"rho": -0.31, "bad": float("nan")},
    )
    assert variant.details == {"rho": -0.31}  # non-finite numbers never reach results.json


def test_binary_models_with_two_endogenous_regressors(tmp_path: Path) -> None:
    from reportkit.spec.models import BinaryOutcomeSection
    from reportkit.variants.binary import binary_variants

    frame = _frame()
    frame["d2"] = frame["d"] * 0.5 + frame["x3"]
    frame["z3"] = frame["x3"] + np.random.default_rng(3).normal(size=len(frame))
    frame.to_csv(tmp_path / "data.csv", index=False)
    spec = Spec.model_validate(
        {
            "study": {"title": "t"},
            "data": {"path": "data.csv"},
            "model": {"outcome": "y", "endogenous": ["d", "d2"], "instruments": ["z1", "z2", "z3"]},
        }
    )
    design = prepare(LoadedSpec(spec=spec, base_dir=tmp_path)).design
    y_bin = (design.y > np.median(design.y)).astype(float)
    variants = binary_variants(
        design,
        y_bin,
        None,
        "",
        BinaryOutcomeSection(outcome="y_bin"),
        kind="robust",
        labels={},
        level=0.95,
        master_seed=1,
    )
    linear = next(v for v in variants if v.key == "binary:linear_2sls")
    # the linear probability 2SLS is defined for two regressors: linearmodels IV2SLS, robust
    assert not isinstance(linear.values, NotApplicable)
    ref = IV2SLS(
        pd.Series(y_bin), pd.DataFrame({"const": np.ones(design.n)}),
        pd.DataFrame(design.endog, columns=["d", "d2"]),
        pd.DataFrame(design.instruments, columns=["z1", "z2", "z3"]),
    ).fit(cov_type="robust", debiased=True)  # fmt: skip
    for value, name in zip(linear.values, ["d", "d2"], strict=True):
        assert value.estimate == pytest.approx(float(ref.params[name]), rel=RTOL)
        assert value.std_error == pytest.approx(float(ref.std_errors[name]), rel=RTOL)
    nonlinear = [v for v in variants if v.key != "binary:linear_2sls"]
    assert len(nonlinear) == 4
    for v in nonlinear:
        assert isinstance(v.values, NotApplicable)
        assert "one endogenous regressor; the model has 2" in v.values.reason
