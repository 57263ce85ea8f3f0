"""Loading a spec from YAML: defaults, line numbers, the resolved spec, plain-words errors.

Line numbers in the checks below are counted by hand in the YAML text each test writes
(line 1 is the first line of the dedented text). Schema checks use the independent
``jsonschema`` validator.
"""

from __future__ import annotations

import textwrap
from pathlib import Path

import jsonschema
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from reportkit.errors import SpecError
from reportkit.spec import (
    LoadedSpec,
    Spec,
    dump_resolved_spec,
    load_spec,
    load_spec_dict,
    spec_json_schema,
)

# The invented tutoring-voucher scenario of the demo.
EXAMPLE = """\
study:
  title: Tutoring vouchers and maths scores
  authors: [A. Author]
  summary: One paragraph.
data:
  path: tutoring.csv
  missing_codes: [-99]
  filters:
    - {column: grade, keep_if: equal_to, value: 7}
model:
  outcome: maths_score
  endogenous: [tutoring_hours]
  instruments: [won_lottery, distance_km]
  controls: [prior_score, female, age]
  categorical_controls: [income_band]
  fixed_effects: [district]
  cluster_by: [school]
estimators: [ols, 2sls, liml, gmm]
inference: {confidence_level: 0.95}
run: {output: tutoring-appendix, seed: 20261201}
"""

MINIMAL = """\
study:
  title: Tutoring vouchers and maths scores
data:
  path: tutoring.csv
model:
  outcome: maths_score
  endogenous: [tutoring_hours]
  instruments: [won_lottery]
"""


def write(tmp_path: Path, text: str, name: str = "spec.yaml") -> Path:
    path = tmp_path / name
    path.write_text(textwrap.dedent(text), encoding="utf-8")
    return path


def spec_error(tmp_path: Path, text: str) -> SpecError:
    with pytest.raises(SpecError) as info:
        load_spec(write(tmp_path, text))
    return info.value


# --- valid specs ------------------------------------------------------------------------


def test_minimal_spec_fills_defaults(tmp_path: Path) -> None:
    path = write(tmp_path, MINIMAL)
    loaded = load_spec(path)
    assert isinstance(loaded, LoadedSpec)
    assert loaded.source == path
    assert loaded.base_dir == tmp_path
    spec = loaded.spec
    assert spec.estimators == ["ols", "2sls", "liml", "gmm"]
    assert spec.inference.covariance is None
    assert spec.covariance == "robust"  # no cluster_by: robust
    assert spec.model.controls == []
    assert spec.data.filters == []
    assert spec.run.crosscheck == "auto"
    assert loaded.resolve_path(spec.data.path) == tmp_path / "tutoring.csv"


def test_covariance_default_is_cluster_when_clusters_are_named(tmp_path: Path) -> None:
    loaded = load_spec(write(tmp_path, MINIMAL + "  cluster_by: [school]\n"))
    assert loaded.spec.covariance == "cluster"
    assert loaded.spec.resolved().inference.covariance == "cluster"


def test_example_spec_loads(tmp_path: Path) -> None:
    spec = load_spec(write(tmp_path, EXAMPLE)).spec
    assert spec.model.instruments == ["won_lottery", "distance_km"]
    assert spec.data.filters[0].value == 7
    assert spec.data.missing_codes == [-99]
    assert spec.run.seed == 20261201


def test_estimators_listed_in_any_order_come_back_in_table_order(tmp_path: Path) -> None:
    spec = load_spec(write(tmp_path, MINIMAL + "estimators: [gmm, ols]\n")).spec
    assert spec.estimators == ["ols", "gmm"]


def test_line_numbers_of_nested_keys_and_list_items(tmp_path: Path) -> None:
    text = """\
        study:
          title: T
        data:
          path: d.csv
          filters:
            - column: grade
              keep_if: one_of
              value: [6, 7]
            - {column: age, keep_if: at_least, value: 10}
        model:
          outcome: y
          endogenous: [x]
          instruments:
            - z1
            - z2
          labels: {x: Hours of tutoring}
        """
    loaded = load_spec(write(tmp_path, text))
    lines = loaded.lines
    assert lines[("study",)] == 1
    assert lines[("data", "path")] == 4
    assert lines[("data", "filters")] == 5
    assert lines[("data", "filters", 0)] == 6
    assert lines[("data", "filters", 0, "keep_if")] == 7
    assert lines[("data", "filters", 0, "value", 1)] == 8
    assert lines[("data", "filters", 1)] == 9
    assert lines[("data", "filters", 1, "value")] == 9
    assert lines[("model", "instruments")] == 13
    assert lines[("model", "instruments", 0)] == 14
    assert lines[("model", "instruments", 1)] == 15
    assert lines[("model", "labels", "x")] == 16
    assert loaded.where(("model", "instruments", 1)) == "spec.yaml, line 15, model.instruments[1]"
    # a field that is not in the file falls back to its section's line
    assert loaded.where(("model", "controls")) == "spec.yaml, line 10, model.controls"


def test_comments_blank_lines_and_byte_order_mark_are_harmless(tmp_path: Path) -> None:
    path = tmp_path / "spec.yaml"
    text = "# a comment\n\n" + MINIMAL
    path.write_bytes(b"\xef\xbb\xbf" + text.encode("utf-8"))
    loaded = load_spec(path)
    assert loaded.lines[("study",)] == 3
    assert loaded.spec.study.title == "Tutoring vouchers and maths scores"


def test_quoted_text_and_unquoted_dates_are_text(tmp_path: Path) -> None:
    text = MINIMAL.replace(
        "model:\n",
        "  filters:\n    - {column: day, keep_if: at_most, value: 5}\n"
        "    - {column: code, keep_if: equal_to, value: '007'}\n"
        "    - {column: when, keep_if: equal_to, value: 2024-05-01}\n"
        "model:\n",
    )
    filters = load_spec(write(tmp_path, text)).spec.data.filters
    assert [f.value for f in filters] == [5, "007", "2024-05-01"]


def test_load_spec_dict(tmp_path: Path) -> None:
    data = {
        "study": {"title": "T"},
        "data": {"path": "d.csv"},
        "model": {"outcome": "y", "endogenous": ("x",), "instruments": ["z"]},
    }
    loaded = load_spec_dict(data, base_dir=tmp_path)
    assert loaded.source is None
    assert loaded.base_dir == tmp_path
    assert loaded.spec.model.endogenous == ["x"]
    with pytest.raises(SpecError) as info:
        load_spec_dict({**data, "modle": {}})
    assert info.value.where == "spec, modle"
    assert "did you mean 'model'?" in info.value.message


# --- the resolved spec ------------------------------------------------------------------


def test_resolved_spec_round_trip(tmp_path: Path) -> None:
    loaded = load_spec(write(tmp_path, EXAMPLE))
    text = dump_resolved_spec(loaded.spec)
    assert text.splitlines()[0].startswith("# ")
    assert "reportkit" in text.splitlines()[0]
    assert "covariance: cluster" in text  # the default rule made explicit
    again = load_spec(write(tmp_path, text, "resolved.yaml")).spec
    assert again == loaded.spec.resolved()
    assert dump_resolved_spec(again) == text  # a fixed point: byte-identical


def test_resolved_spec_keys_follow_the_model_field_order(tmp_path: Path) -> None:
    # key order in the file deliberately differs from the model's field order
    text = """\
        run: {seed: 5}
        model: {instruments: [z], endogenous: [x], outcome: y}
        data: {path: d.csv}
        study: {title: T}
        """
    dumped = dump_resolved_spec(load_spec(write(tmp_path, text)).spec)
    top = [line.split(":")[0] for line in dumped.splitlines()[1:] if line[:1].isalpha()]
    assert top == list(Spec.model_fields)
    model_keys = [
        line.strip().split(":")[0]
        for line in dumped.split("model:\n")[1].split("estimators:")[0].splitlines()
    ]
    assert model_keys == list(Spec.model_fields["model"].annotation.model_fields)


def test_resolved_spec_of_the_minimal_spec_states_every_default(tmp_path: Path) -> None:
    text = dump_resolved_spec(load_spec(write(tmp_path, MINIMAL)).spec)
    for line in (
        "estimators: [ols, 2sls, liml, gmm]",
        "covariance: robust",
        "weights: null",
        "crosscheck: auto",
        "confidence_level: 0.95",
    ):
        assert line in text


_text = st.text(min_size=1, max_size=40).filter(lambda s: s.strip() != "")
_scalar = st.one_of(
    _text,
    st.integers(min_value=-(10**12), max_value=10**12),
    st.floats(allow_nan=False, allow_infinity=False),
    st.booleans(),
)


@settings(
    max_examples=80,
    deadline=None,
    derandomize=True,
    database=None,
    suppress_health_check=[HealthCheck.function_scoped_fixture],
)
@given(
    title=_text,
    summary=st.text(max_size=200),
    authors=st.lists(_text, max_size=3),
    codes=st.lists(_scalar, max_size=4),
    label=_text,
    label_key=_text,
    value=_scalar,
)
def test_resolved_spec_round_trip_for_awkward_text(
    tmp_path: Path,
    title: str,
    summary: str,
    authors: list[str],
    codes: list,
    label: str,
    label_key: str,
    value: object,
) -> None:
    # property: whatever text and values a spec holds, writing it and reading it back
    # gives the same spec (quotes, colons, line breaks, unicode, 'yes', '1e3', ...)
    spec = load_spec_dict(
        {
            "study": {"title": title, "authors": authors, "summary": summary},
            "data": {
                "path": "d.csv",
                "missing_codes": codes,
                "filters": [{"column": "g", "keep_if": "not_equal_to", "value": value}],
            },
            "model": {
                "outcome": "y",
                "endogenous": ["x"],
                "instruments": ["z"],
                "labels": {label_key: label},
            },
        }
    ).spec
    text = dump_resolved_spec(spec)
    path = tmp_path / "resolved.yaml"
    path.write_text(text, encoding="utf-8")
    assert load_spec(path).spec == spec.resolved()


# --- JSON Schema --------------------------------------------------------------------------


def test_json_schema_accepts_the_example_and_rejects_unknown_keys(tmp_path: Path) -> None:
    schema = spec_json_schema()
    jsonschema.Draft202012Validator.check_schema(schema)
    data = load_spec(write(tmp_path, EXAMPLE)).spec.model_dump(mode="json")
    jsonschema.validate(data, schema, cls=jsonschema.Draft202012Validator)
    data["model"]["instrumnets"] = ["won_lottery"]
    with pytest.raises(jsonschema.ValidationError):
        jsonschema.validate(data, schema, cls=jsonschema.Draft202012Validator)


# --- errors -------------------------------------------------------------------------------


def test_unknown_top_level_key_suggests_the_nearest(tmp_path: Path) -> None:
    err = spec_error(tmp_path, MINIMAL + "estimatrs: [ols]\n")
    assert err.where == "spec.yaml, line 9, estimatrs"
    assert "unknown key 'estimatrs'; did you mean 'estimators'?" in err.message
    assert (
        "Allowed top-level keys: study, data, model, estimators, inference, specifications, "
        "balance, robustness, sensitivity, assumptions, run." in err.message
    )


def test_unknown_nested_key_suggests_the_nearest(tmp_path: Path) -> None:
    text = """\
        study:
          title: T
        data:
          path: d.csv
        model:
          outcome: y
          endogenous: [x]
          instruments: [z]
          instrumnets: [w]
        """
    err = spec_error(tmp_path, text)
    assert err.where == "spec.yaml, line 9, model.instrumnets"
    assert err.message.startswith("unknown key 'instrumnets'; did you mean 'instruments'?")
    assert "Allowed keys in model: outcome, endogenous, instruments, controls," in err.message


def test_key_in_the_wrong_section_says_where_it_belongs(tmp_path: Path) -> None:
    err = spec_error(tmp_path, MINIMAL + "seed: 7\n")
    assert err.where == "spec.yaml, line 9, seed"
    assert "'seed' belongs in run." in err.message


def test_bad_estimator_lists_the_allowed_values(tmp_path: Path) -> None:
    err = spec_error(tmp_path, MINIMAL + "estimators: [ols, 2sl]\n")
    assert err.where == "spec.yaml, line 9, estimators[1]"
    assert "'2sl' is not an allowed value; did you mean '2sls'?" in err.message
    assert "Allowed values: ols, 2sls, liml, gmm." in err.message


def test_variable_in_two_roles(tmp_path: Path) -> None:
    text = MINIMAL + "  controls:\n    - age\n    - won_lottery\n"
    err = spec_error(tmp_path, text)
    # the rule runs on the whole model section; the error points at the named list item
    assert err.where == "spec.yaml, line 8, model.instruments[0]"
    assert "'won_lottery' appears in two roles" in err.message
    assert "model.controls" in err.message


def test_fewer_instruments_than_endogenous(tmp_path: Path) -> None:
    text = MINIMAL.replace("endogenous: [tutoring_hours]", "endogenous: [tutoring_hours, books]")
    err = spec_error(tmp_path, text)
    assert err.where == "spec.yaml, line 5, model"
    assert "under-identified" in err.message
    assert "1 instrument(s) for 2 endogenous regressor(s)" in err.message


def test_cluster_covariance_without_cluster_by(tmp_path: Path) -> None:
    err = spec_error(tmp_path, MINIMAL + "inference:\n  covariance: cluster\n")
    assert err.where == "spec.yaml, line 10, inference.covariance"
    assert "model.cluster_by is empty" in err.message


def test_filter_with_a_list_for_equal_to(tmp_path: Path) -> None:
    text = MINIMAL.replace(
        "model:\n", "  filters:\n    - {column: grade, keep_if: equal_to, value: [6, 7]}\nmodel:\n"
    )
    err = spec_error(tmp_path, text)
    assert err.where == "spec.yaml, line 6, data.filters[0]"
    assert "'equal_to' takes a single value, not a list" in err.message


def test_filter_value_of_the_wrong_kind_is_one_problem(tmp_path: Path) -> None:
    text = MINIMAL.replace(
        "model:\n",
        "  filters:\n    - column: grade\n      keep_if: one_of\n      value: {a: 1}\nmodel:\n",
    )
    err = spec_error(tmp_path, text)
    assert str(err).count("\n") == 0
    assert err.where == "spec.yaml, line 8, data.filters[0].value"
    assert "got a mapping" in err.message


def test_missing_required_key_says_where_it_belongs(tmp_path: Path) -> None:
    err = spec_error(tmp_path, MINIMAL.replace("  outcome: maths_score\n", ""))
    assert err.where == "spec.yaml, line 5, model.outcome"
    assert "required key 'outcome' is missing; add it under 'model:'" in err.message


def test_missing_section(tmp_path: Path) -> None:
    err = spec_error(
        tmp_path, MINIMAL.replace("study:\n  title: Tutoring vouchers and maths scores\n", "")
    )
    assert err.where == "spec.yaml, study"
    assert "required section 'study' is missing" in err.message


def test_column_name_written_as_a_number(tmp_path: Path) -> None:
    err = spec_error(tmp_path, MINIMAL.replace("outcome: maths_score", "outcome: 2010"))
    assert err.where == "spec.yaml, line 6, model.outcome"
    assert "put it in quotes: '2010'" in err.message


def test_all_problems_are_reported_in_file_order(tmp_path: Path) -> None:
    text = """\
        study:
          title: T
          autors: [A. Author]
        data:
          path: d.csv
        model:
          outcome: y
          endogenous: [x]
          instruments: [z]
        estimators: [ols, 2sl]
        run:
          seed: abc
        """
    err = spec_error(tmp_path, text)
    assert err.where == "spec.yaml, line 3, study.autors"
    lines = str(err).splitlines()
    assert len(lines) == 3
    assert lines[0].startswith("spec.yaml, line 3, study.autors: unknown key 'autors'")
    assert lines[1].startswith("spec.yaml, line 10, estimators[1]: '2sl' is not an allowed")
    assert lines[2].startswith("spec.yaml, line 12, run.seed: must be a whole number")


def test_yaml_syntax_error_names_line_and_column(tmp_path: Path) -> None:
    text = """\
        study:
          title: T
        data:
          path: d.csv
        model:
          outcome: y
           endogenous: [x]
        """
    err = spec_error(tmp_path, text)
    # the parser flags the colon after 'endogenous' on line 7 (column 14)
    assert err.where == "spec.yaml, line 7"
    assert "not valid YAML" in err.message
    assert "line 7, column 14" in err.message


def test_unclosed_bracket(tmp_path: Path) -> None:
    err = spec_error(tmp_path, "study:\n  title: T\n  authors: [A\ndata:\n  path: d.csv\n")
    assert err.where == "spec.yaml, line 4"
    assert "flow sequence, which starts on line 3" in err.message


def test_tab_indentation(tmp_path: Path) -> None:
    err = spec_error(tmp_path, "study:\n\ttitle: T\n")
    assert err.where == "spec.yaml, line 2"
    assert "never with tabs" in err.message


def test_duplicate_key(tmp_path: Path) -> None:
    err = spec_error(tmp_path, MINIMAL + "model: {}\n")
    assert err.where == "spec.yaml, line 9"
    assert "duplicate key" in err.message


@pytest.mark.parametrize("text", ["", "\n", "# nothing yet\n", "---\n"])
def test_empty_file(tmp_path: Path, text: str) -> None:
    err = spec_error(tmp_path, text)
    assert err.where == "spec.yaml"
    assert "empty" in err.message


@pytest.mark.parametrize("text", ["- study\n- data\n", "just some text\n", "42\n"])
def test_top_level_must_be_a_mapping(tmp_path: Path, text: str) -> None:
    err = spec_error(tmp_path, text)
    assert err.where == "spec.yaml"
    assert "top level of a spec must be a set of sections" in err.message


def test_missing_file(tmp_path: Path) -> None:
    with pytest.raises(SpecError) as info:
        load_spec(tmp_path / "nowhere.yaml")
    assert info.value.where is not None and info.value.where.endswith("nowhere.yaml")
    assert "does not exist" in info.value.message


def test_folder_instead_of_file(tmp_path: Path) -> None:
    with pytest.raises(SpecError) as info:
        load_spec(tmp_path)
    assert "folder, not a spec file" in info.value.message


def test_file_that_is_not_utf8(tmp_path: Path) -> None:
    path = tmp_path / "spec.yaml"
    path.write_bytes("study:\n  title: Caf\u00e9\n".encode("latin-1"))
    with pytest.raises(SpecError) as info:
        load_spec(path)
    assert info.value.where == "spec.yaml, line 2"
    assert "not UTF-8" in info.value.message


def test_yaml_tags_construct_nothing(tmp_path: Path) -> None:
    text = MINIMAL + "run:\n  output: !!python/object/apply:os.system ['echo hello']\n"
    err = spec_error(tmp_path, text)
    assert err.where == "spec.yaml, line 10, run.output"
    assert "'!!python/object/apply:os.system' is not allowed" in err.message


def test_explicit_text_tag_is_accepted(tmp_path: Path) -> None:
    spec = load_spec(write(tmp_path, MINIMAL.replace("maths_score", "!!str 2010"))).spec
    assert spec.model.outcome == "2010"
