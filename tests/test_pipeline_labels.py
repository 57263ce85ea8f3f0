"""Readable labels for categorical-control indicators."""

from __future__ import annotations

from reportkit.pipeline import with_indicator_labels


def test_indicator_labels_follow_the_column_label() -> None:
    labels = {"income_band": "Household income band", "age": "Age"}
    out = with_indicator_labels(labels, ("age", "income_band=low", "region=north"))
    assert out["income_band=low"] == "Household income band: low"
    assert "region=north" not in out  # no label for the column: the name is shown as is
    assert out["age"] == "Age" and labels == {"income_band": "Household income band", "age": "Age"}


def test_explicit_label_wins() -> None:
    labels = {"income_band": "Income", "income_band=low": "Low income"}
    assert with_indicator_labels(labels, ("income_band=low",))["income_band=low"] == "Low income"
