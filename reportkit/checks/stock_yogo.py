"""Stock-Yogo critical values for the Cragg-Donald statistic, looked up in package data.

Stock & Yogo (2005) give, for n endogenous regressors and K2 excluded instruments, the value
the Cragg-Donald (1993) minimum-eigenvalue F statistic must exceed for a 5% test to reject
"the instruments are weak", where weak means one of: the 2SLS bias exceeds a fraction b of
the OLS bias (their Table 5.1; n = 1..3, K2 >= n + 2), or the actual size of a nominal 5%
Wald test exceeds r, for 2SLS (Table 5.2) or LIML (Table 5.4; both n = 1, 2). The values
come from weak-instrument asymptotics with independent, homoskedastic errors.

The tables are data, not code: data/stock_yogo_2005.json holds them with their citation,
which values were recalled from memory, how they were checked by computation
(benchmarks/verify_stock_yogo.py) and which were withheld for failing that check. This
module only reads the file and reports every criterion available for (n, K2).
"""

from __future__ import annotations

import json
import math
from collections.abc import Mapping
from dataclasses import dataclass
from functools import cache
from importlib import resources
from typing import Any, Literal

from reportkit.results import CriticalValue, CriticalValueTable, NotApplicable

DATA_FILE = "stock_yogo_2005.json"
MAX_INSTRUMENTS = 30  # the tables stop at K2 = 30


@dataclass(frozen=True)
class _Table:
    """One published table: the criterion it encodes and its values by (n, K2)."""

    key: str
    table: str
    estimator: Literal["2sls", "liml"]
    kind: Literal["relative_bias", "size"]
    thresholds: tuple[float, ...]
    values: Mapping[int, Mapping[int, tuple[float | None, ...]]]

    @property
    def max_endog(self) -> int:
        return max(self.values)

    def min_instruments(self, n_endog: int) -> int | None:
        row = self.values.get(n_endog)
        return min(row) if row else None


def load_document() -> dict[str, Any]:
    """The raw JSON document (citation, provenance, tables), as shipped in the package."""
    path = resources.files("reportkit.checks").joinpath("data", DATA_FILE)
    return json.loads(path.read_text(encoding="utf-8"))


@cache
def _tables() -> tuple[_Table, ...]:
    doc = load_document()
    out = []
    for key, t in doc["tables"].items():
        values = {
            int(n): {
                int(k2): tuple(None if v is None else float(v) for v in row)
                for k2, row in by_k2.items()
            }
            for n, by_k2 in t["values"].items()
        }
        out.append(
            _Table(
                key=key,
                table=t["table"],
                estimator=t["estimator"],
                kind=t["kind"],
                thresholds=tuple(float(x) for x in t["thresholds"]),
                values=values,
            )
        )
    return tuple(out)


def _pct(x: float) -> str:
    return f"{100 * x:g}%"


def _criterion(table: _Table, threshold: float) -> str:
    if table.kind == "relative_bias":
        return f"2SLS bias at most {_pct(threshold)} of the OLS bias"
    name = "2SLS" if table.estimator == "2sls" else "LIML"
    return f"{name} Wald test of nominal size 5% rejects at most {_pct(threshold)} of the time"


def _label(table: _Table) -> str:
    if table.kind == "relative_bias":
        return "2SLS relative bias"
    return ("2SLS" if table.estimator == "2sls" else "LIML") + " Wald size"


def _why_missing(table: _Table, n: int, k2: int) -> str:
    label = _label(table)
    if n > table.max_endog:
        most = table.max_endog
        count = {1: "1 endogenous regressor", 2: "1 or 2 endogenous regressors"}.get(
            most, f"1 to {most} endogenous regressors"
        )
        return f"{label} values are tabulated only for {count}"
    lowest = table.min_instruments(n)
    if lowest is not None and k2 < lowest:
        if table.kind == "relative_bias":
            return f"{label} values need at least n + 2 = {lowest} excluded instruments"
        return f"{label} values need at least {lowest} excluded instruments"
    return f"{label} values are not tabulated for n = {n}, K2 = {k2}"


def stock_yogo_table(
    n_endog: int, n_instruments: int, statistic: float, statistic_name: str
) -> CriticalValueTable | NotApplicable:
    """Every Stock & Yogo (2005) 5% critical value for (n_endog, n_instruments), read
    against ``statistic`` (``exceeded`` = statistic > value), or NotApplicable with the
    reason when the tables have none for this combination."""
    n, k2 = int(n_endog), int(n_instruments)
    if n < 1 or k2 < n:
        return NotApplicable(
            reason=f"Stock-Yogo critical values need at least one endogenous regressor and "
            f"at least as many excluded instruments as endogenous regressors (here n = {n}, "
            f"K2 = {k2})"
        )
    if not math.isfinite(statistic):
        return NotApplicable(
            reason=f"the {statistic_name} statistic is not a finite number, so it cannot be "
            "read against the Stock-Yogo critical values"
        )
    tables = _tables()
    if k2 > MAX_INSTRUMENTS:
        return NotApplicable(
            reason=f"Stock & Yogo (2005) tabulate critical values for up to {MAX_INSTRUMENTS} "
            f"excluded instruments; this model has {k2}"
        )
    most = max(t.max_endog for t in tables)
    if n > most:
        return NotApplicable(
            reason=f"Stock & Yogo (2005) tabulate critical values for at most {most} "
            f"endogenous regressors; this model has {n}"
        )

    rows: list[CriticalValue] = []
    used: list[_Table] = []
    missing: list[str] = []
    withheld: list[str] = []
    for table in tables:
        values = table.values.get(n, {}).get(k2)
        if values is None:
            missing.append(_why_missing(table, n, k2))
            continue
        used.append(table)
        for threshold, value in zip(table.thresholds, values, strict=True):
            if value is None:
                withheld.append(f"{_label(table)} {_pct(threshold)}")
                continue
            rows.append(
                CriticalValue(
                    criterion=_criterion(table, threshold),
                    estimator=table.estimator,
                    kind=table.kind,
                    threshold=threshold,
                    value=value,
                    exceeded=statistic > value,
                )
            )
    if not rows:
        return NotApplicable(
            reason=f"Stock & Yogo (2005) give no critical value for n = {n} endogenous "
            f"regressor(s) and K2 = {k2} excluded instrument(s): " + "; ".join(missing)
        )

    source = "Stock & Yogo (2005), " + ", ".join(f"{t.table} ({_label(t)})" for t in used)
    note = (
        "Each value is the 5% critical value of a test of the null hypothesis that the "
        "instruments are weak by that criterion; a statistic above it rejects weakness. The "
        "values were derived for the Cragg-Donald statistic under independent, homoskedastic "
        "errors and do not carry over to robust or clustered errors."
    )
    if missing:
        note += " Not available here: " + "; ".join(missing) + "."
    if withheld:
        note += (
            " Not shown: "
            + ", ".join(withheld)
            + " (the stored value did not pass an independent recomputation)."
        )
    return CriticalValueTable(
        statistic_name=statistic_name,
        statistic=float(statistic),
        rows=rows,
        source=source,
        note=note,
    )
