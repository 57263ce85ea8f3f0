"""Further specifications: each one against an independent fit, the run, the exports, the spec.

References: linearmodels 7.1 IV2SLS with the constant, the controls and fixed-effect
dummies as columns and ``debiased=True`` (the convention the engine follows, checked to
1e-10 in tests/test_engine_vs_linearmodels.py), and statsmodels 0.15 OLS for the
first-stage F (Wald statistic / number of instruments, the same covariance, as in
tests/test_firststage_and_tests_reference.py). The data are invented (a fixed seed): a
simulation for reference comparisons only. Tolerance: 1e-8 relative, far above the
rounding of either side and far below any difference in convention (a missing
small-sample factor moves standard errors by about 1e-3 here).
"""

from __future__ import annotations

import csv
import io
import textwrap
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from linearmodels.iv import IV2SLS

from reportkit import api
from reportkit.data.prepare import read_source
from reportkit.errors import DataError, SpecError
from reportkit.exports import SPECIFICATION_COLUMNS, specifications_csv, table_files
from reportkit.report.specification_sections import cross_table, table_columns
from reportkit.results import NotApplicable, SpecificationResult, StudyResults
from reportkit.spec.loader import dump_resolved_spec, load_spec, load_spec_dict
from reportkit.specifications import run_specifications

RTOL = 1e-8
NA = NotApplicable
MAIN_MODEL = {
    "outcome": "y",
    "endogenous": ["d"],
    "instruments": ["z1", "z2"],
    "controls": ["x1", "x2"],
    "fixed_effects": ["f"],
    "cluster_by": ["g"],
}
WAVE_ONE = [{"column": "wave", "keep_if": "equal_to", "value": 1}]
SPECIFICATIONS = [
    {"name": "z1 only", "description": "One instrument.", "model": {"instruments": ["z1"]}},
    {"name": "other controls", "model": {"controls": ["x1", "x3"]}},
    {
        "name": "no effects, robust",
        "model": {"fixed_effects": [], "cluster_by": []},
        "covariance": "robust",
    },
    {"name": "wave one, weighted", "model": {"weights": "w"}, "filters": WAVE_ONE},
    {"name": "classical", "model": {"cluster_by": []}, "covariance": "classical"},
    # one school only: a cluster-robust covariance cannot be computed on these rows
    {
        "name": "one school",
        "filters": [{"column": "g", "keep_if": "equal_to", "value": "G00"}],
    },
]


def _frame(n: int = 720, seed: int = 23) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    g = rng.integers(0, 12, size=n)
    f = rng.integers(0, 4, size=n)
    u = rng.normal(size=n) + 0.5 * rng.normal(size=12)[g]
    z1 = (rng.random(n) < 0.5).astype(float)
    z2 = rng.normal(size=n)
    x1, x2, x3 = rng.normal(size=(3, n))
    d = 0.8 * z1 + 0.4 * z2 + 0.3 * x1 + 0.5 * u + rng.normal(size=n) + 0.2 * f
    y = 1.0 + 0.5 * d + 0.4 * x1 - 0.2 * x2 + 0.1 * x3 + u * (1 + 0.3 * np.abs(z2)) + 0.1 * f
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
            "w": rng.uniform(0.5, 2.0, size=n),
            "wave": rng.integers(1, 3, size=n),
        }
    )


def _spec(**sections: object) -> dict[str, object]:
    return {
        "study": {"title": "t"},
        "data": {"path": "data.csv"},
        "model": dict(MAIN_MODEL),
        "specifications": SPECIFICATIONS,
        # the robustness stage is not what these tests are about: keep it small
        "robustness": {
            "estimators": [],
            "instrument_sets": False,
            "cluster_influence": False,
            "wild_bootstrap": None,
        },
        **sections,
    }


@pytest.fixture(scope="module")
def frame() -> pd.DataFrame:
    return _frame()


@pytest.fixture(scope="module")
def results(tmp_path_factory: pytest.TempPathFactory, frame: pd.DataFrame) -> StudyResults:
    folder = tmp_path_factory.mktemp("specifications")
    frame.to_csv(folder / "data.csv", index=False)
    return api.analyse(load_spec_dict(_spec(), folder))


def _by_name(results: StudyResults, name: str) -> SpecificationResult:
    return next(r for r in results.specifications if r.name == name)


def _exog(frame: pd.DataFrame, controls: list[str], fixed_effects: bool) -> pd.DataFrame:
    parts = [pd.Series(1.0, index=frame.index, name="const"), frame[controls]]
    if fixed_effects:
        parts.append(pd.get_dummies(frame["f"], prefix="f", drop_first=True, dtype=float))
    return pd.concat(parts, axis=1)


# Each specification as the reference sees it: rows, instruments, controls, fixed effects,
# covariance (linearmodels' name; None for clustered by g) and weights.
REFERENCE_SETUPS = {
    "z1 only": {"instruments": ["z1"]},
    "other controls": {"controls": ["x1", "x3"]},
    "no effects, robust": {"fixed_effects": False, "cov_type": "robust"},
    "wave one, weighted": {"rows": "wave one", "weights": "w"},
    "classical": {"cov_type": "unadjusted"},
}


def _reference_fit(frame: pd.DataFrame, name: str):  # type: ignore[no-untyped-def]
    setup = REFERENCE_SETUPS[name]
    data = frame[frame["wave"] == 1] if setup.get("rows") == "wave one" else frame
    exog = _exog(data, list(setup.get("controls", ["x1", "x2"])), setup.get("fixed_effects", True))
    instruments = data[list(setup.get("instruments", ["z1", "z2"]))]
    weights = data[setup["weights"]] if "weights" in setup else None
    model = IV2SLS(data["y"], exog, data[["d"]], instruments, weights=weights)
    cov_type = setup.get("cov_type")
    if cov_type is None:
        codes = pd.factorize(data["g"], sort=True)[0]
        return model.fit(cov_type="clustered", clusters=codes, debiased=True)
    return model.fit(cov_type=cov_type, debiased=True)


def _coefficient(result: SpecificationResult, estimator: str):  # type: ignore[no-untyped-def]
    assert not isinstance(result.estimates, NotApplicable), result.estimates
    (est,) = [e for e in result.estimates if e.estimator == estimator]
    return est.coefficients[0]


@pytest.mark.parametrize("name", list(REFERENCE_SETUPS))
def test_each_specification_matches_an_independent_2sls_fit(
    results: StudyResults, frame: pd.DataFrame, name: str
) -> None:
    # linearmodels IV2SLS of the same specification (module docstring)
    ref = _reference_fit(frame, name)
    result = _by_name(results, name)
    two_sls = _coefficient(result, "2sls")
    assert two_sls.estimate == pytest.approx(float(ref.params["d"]), rel=RTOL)
    assert two_sls.std_error == pytest.approx(float(ref.std_errors["d"]), rel=RTOL)
    assert result.n_obs == int(ref.nobs)


def test_first_stage_f_of_a_specification_matches_statsmodels(
    results: StudyResults, frame: pd.DataFrame
) -> None:
    # statsmodels OLS first stage with the specification's covariance (clustered by g, its
    # default small-sample correction); F = Wald / q (module docstring)
    for name, instruments in (("z1 only", ["z1"]), ("other controls", ["z1", "z2"])):
        controls = ["x1", "x2"] if name == "z1 only" else ["x1", "x3"]
        regressors = pd.concat([_exog(frame, controls, True), frame[instruments]], axis=1)
        codes = pd.factorize(frame["g"], sort=True)[0]
        fit = sm.OLS(frame["d"], regressors).fit(cov_type="cluster", cov_kwds={"groups": codes})
        picks = np.eye(regressors.shape[1])[[list(regressors).index(z) for z in instruments]]
        wald = fit.wald_test(picks, use_f=False, scalar=True)
        result = _by_name(results, name)
        assert not isinstance(result.strength, NotApplicable)
        f = result.strength[0].first_stage_f
        assert f.statistic == pytest.approx(float(wald.statistic) / len(instruments), rel=RTOL)


def test_changes_are_said_in_words(results: StudyResults) -> None:
    # the sentence form is our own (brief): "part: value (main: value)"
    assert _by_name(results, "z1 only").changes == ["instruments: z1 (main: z1, z2)"]
    assert _by_name(results, "no effects, robust").changes == [
        "fixed effects: none (main: f)",
        "clusters: none (main: g)",
        "standard errors: heteroskedasticity-robust (main: cluster-robust)",
    ]
    assert _by_name(results, "wave one, weighted").changes == [
        "weights: w (main: none)",
        "sample: keep wave equal to 1 (main: all rows)",
    ]
    assert _by_name(results, "wave one, weighted").covariance_type == "cluster"


def test_just_identified_specification_has_no_overidentification_test(
    results: StudyResults,
) -> None:
    # one instrument for one regressor: no over-identifying restriction (common practice,
    # no source needed: the J statistic has zero degrees of freedom)
    result = _by_name(results, "z1 only")
    assert isinstance(result.hansen_j, NotApplicable)
    assert not isinstance(_by_name(results, "other controls").hansen_j, NotApplicable)


def test_a_specification_whose_sample_cannot_support_the_model_is_not_applicable(
    results: StudyResults,
) -> None:
    result = _by_name(results, "one school")
    assert isinstance(result.estimates, NotApplicable)
    reason = result.estimates.reason
    assert reason.startswith("this specification's sample cannot support the model: ")
    assert "at least 2 clusters" in reason and "'g'" in reason
    for part in (result.strength, result.verdict, result.anderson_rubin, result.endogeneity):
        assert isinstance(part, NotApplicable) and part.reason == reason
    assert result.n_obs is None
    # the run completed: the other specifications and the main results are there
    assert [r.name for r in results.specifications] == [s["name"] for s in SPECIFICATIONS]
    assert results.estimates and not isinstance(_by_name(results, "classical").estimates, NA)


def test_view_and_csv_match_the_results_exactly(results: StudyResults) -> None:
    table = cross_table(results)
    assert table.columns == ("Main", *(s["name"] for s in SPECIFICATIONS))
    coefficient_row = next(g for g in table.groups if g.key == "headline-d").rows[0]
    main_2sls = next(e for e in results.estimates if e.estimator == "2sls").coefficients[0]
    assert coefficient_row.cells[0].value == main_2sls.estimate
    assert coefficient_row.cells[0].std_error == main_2sls.std_error
    for cell, result in zip(coefficient_row.cells[1:], results.specifications, strict=True):
        if isinstance(result.estimates, NotApplicable):
            assert cell.kind == "na"
            note = next(n for n in table.notes if n.marker == cell.note)
            assert note.text == result.estimates.reason
            continue
        c = _coefficient(result, "2sls")
        assert (cell.kind, cell.value, cell.std_error) == ("estimate", c.estimate, c.std_error)
    rows_used = next(g for g in table.groups if g.key == "statistics").rows[-1]
    assert rows_used.title == "Rows used"
    assert [c.count for c in rows_used.cells] == [
        results.sample.rows_used,
        *(r.n_obs for r in results.specifications),
    ]

    parsed = list(csv.DictReader(io.StringIO(specifications_csv(results))))
    assert list(parsed[0]) == SPECIFICATION_COLUMNS
    for number, result in enumerate(results.specifications, start=2):
        mine = [row for row in parsed if row["column"] == str(number)]
        assert {row["specification"] for row in mine} == {result.name}
        if isinstance(result.estimates, NotApplicable):
            assert [row["note"] for row in mine] == [result.estimates.reason]
            continue
        for est in result.estimates:
            (row,) = [r for r in mine if r["quantity"] == est.label]
            c = est.coefficients[0]
            assert (float(row["estimate"]), float(row["std_error"])) == (c.estimate, c.std_error)
            assert (float(row["ci_lower"]), float(row["ci_upper"])) == (c.ci_lower, c.ci_upper)
            assert int(row["n_obs"]) == result.n_obs
        assert not isinstance(result.strength, NotApplicable)
        (f_row,) = [r for r in mine if r["quantity"] == "first-stage F"]
        assert float(f_row["statistic"]) == result.strength[0].first_stage_f.statistic
    main_rows = [row for row in parsed if row["column"] == "1"]
    assert {row["specification"] for row in main_rows} == {"Main"}


def test_tables_are_written_with_only_main_when_there_are_no_specifications(
    results: StudyResults,
) -> None:
    bare = results.model_copy(update={"specifications": []})
    files = table_files(bare)
    columns = {
        row["specification"] for row in csv.DictReader(io.StringIO(files["specifications.csv"]))
    }
    assert columns == {"Main"}
    assert "\\begin{tabular}{lc}" in files["specifications.tex"]
    assert "What each column changes" not in files["specifications.tex"]
    assert [c.name for c in table_columns(bare)] == ["Main"]


def test_a_specification_can_run_alone(tmp_path: Path, frame: pd.DataFrame) -> None:
    frame.to_csv(tmp_path / "data.csv", index=False)
    loaded = load_spec_dict(_spec(specifications=SPECIFICATIONS[:1]), tmp_path)
    (result,) = run_specifications(loaded, read_source(loaded), labels={"z1": "Lottery"})
    assert result.changes == ["instruments: Lottery (main: Lottery, z2)"]
    assert result.model.instruments == ["z1"] and result.model.overidentification_degree == 0


# --- the spec -------------------------------------------------------------------------------

HEAD = """\
study:
  title: T
data:
  path: data.csv
model:
  outcome: y
  endogenous: [d]
  instruments: [z1, z2]
  controls: [x1]
  cluster_by: [g]
specifications:
"""


def _error(tmp_path: Path, items: str, extra: str = "") -> SpecError:
    path = tmp_path / "spec.yaml"
    path.write_text(HEAD + textwrap.indent(textwrap.dedent(items), "  ") + extra)
    with pytest.raises(SpecError) as info:
        load_spec(path)
    return info.value


def test_duplicate_specification_names_are_an_error(tmp_path: Path) -> None:
    err = _error(
        tmp_path,
        """\
        - name: A
          model: {instruments: [z1]}
        - name: A
          model: {instruments: [z2]}
        """,
    )
    assert err.where == "spec.yaml, line 11, specifications"
    assert "specifications uses the name 'A' twice" in err.message


@pytest.mark.parametrize("name", ["Main", "main"])
def test_main_is_a_reserved_name(tmp_path: Path, name: str) -> None:
    err = _error(tmp_path, f"- name: {name}\n  model: {{instruments: [z1]}}\n")
    assert err.where == "spec.yaml, line 12, specifications[0].name"
    assert "'Main' is the name of the main specification's column" in err.message


def test_unknown_override_key_is_an_error(tmp_path: Path) -> None:
    err = _error(tmp_path, "- name: A\n  model:\n    outcome: other\n")
    assert err.where == "spec.yaml, line 14, specifications[0].model.outcome"
    assert "unknown key 'outcome'" in err.message
    assert (
        "Allowed keys in specifications[0].model: endogenous, instruments, controls, "
        "categorical_controls, fixed_effects, cluster_by, weights." in err.message
    )


def test_under_identified_merged_model_is_an_error(tmp_path: Path) -> None:
    err = _error(tmp_path, "- name: B\n  model: {endogenous: [d, x2], instruments: [z1]}\n")
    assert err.where == "spec.yaml, line 11, specifications"
    assert err.message.startswith("specifications[0] ('B'): its model is not valid: ")
    assert "the model is under-identified" in err.message


def test_a_variable_in_two_roles_after_merging_is_an_error(tmp_path: Path) -> None:
    err = _error(tmp_path, "- name: B\n  model: {controls: [x1, z2]}\n")
    assert "specifications[0] ('B'): its model is not valid: 'z2' appears in two roles" in (
        err.message
    )


def test_cluster_covariance_needs_clusters_in_the_merged_model(tmp_path: Path) -> None:
    err = _error(tmp_path, "- name: C\n  model: {cluster_by: []}\n  covariance: cluster\n")
    assert err.where == "spec.yaml, line 11, specifications"
    assert "specifications[0] ('C'): covariance is 'cluster' but its model has no cluster_by" in (
        err.message
    )
    # inherited from inference.covariance: said so
    err = _error(
        tmp_path, "- name: C\n  model: {cluster_by: []}\n", "inference:\n  covariance: cluster\n"
    )
    assert "covariance is 'cluster' (from inference.covariance)" in err.message


def test_robust_covariance_with_clusters_left_is_an_error(tmp_path: Path) -> None:
    err = _error(tmp_path, "- name: R\n  covariance: robust\n")
    assert "covariance is 'robust' but its model clusters by g" in err.message


def test_a_specification_that_changes_nothing_is_an_error(tmp_path: Path) -> None:
    err = _error(tmp_path, "- name: Same\n  description: nothing\n")
    assert err.where == "spec.yaml, line 12, specifications[0]"
    assert "changes nothing" in err.message


def test_default_covariance_follows_the_merged_model(tmp_path: Path) -> None:
    # no inference.covariance: the default rule (cluster when clustered, else robust)
    path = tmp_path / "spec.yaml"
    path.write_text(HEAD + "  - name: U\n    model: {cluster_by: [], weights: w}\n")
    spec = load_spec(path).spec
    assert spec.specification_spec(0).covariance == "robust"
    assert spec.specification_spec(0).model.weights == "w"
    assert spec.covariance == "cluster"


def test_resolved_spec_reads_back_to_the_same_spec(tmp_path: Path) -> None:
    spec = load_spec_dict(
        {
            **_spec(),
            "model": {**MAIN_MODEL, "weights": "w"},
            "specifications": [
                {"name": "unweighted", "model": {"weights": False}},
                {"name": "no clusters", "model": {"cluster_by": []}},
                {"name": "wave", "filters": WAVE_ONE},
            ],
        }
    ).spec
    text = dump_resolved_spec(spec)
    (tmp_path / "resolved.yaml").write_text(text)
    again = load_spec(tmp_path / "resolved.yaml").spec
    assert again == spec.resolved()
    # the default covariance of each specification is written out
    assert [s.covariance for s in again.specifications] == ["cluster", "robust", "cluster"]
    assert again.specification_spec(0).model.weights is None
    assert again.specification_spec(1).model.weights == "w"


def test_columns_named_by_a_specification_must_exist(tmp_path: Path, frame: pd.DataFrame) -> None:
    frame.to_csv(tmp_path / "data.csv", index=False)
    spec = _spec(specifications=[{"name": "typo", "model": {"instruments": ["z1", "zz2"]}}])
    with pytest.raises(DataError) as info:
        api.analyse(load_spec_dict(spec, tmp_path))
    assert info.value.where == "spec, specifications[0].model.instruments[1]"
    assert "'zz2'" in info.value.message
