"""Check that the estimation sample can identify the model, column by column.

On the final sample (see ``collinearity`` for the tests):

- a control that is constant, absorbed by the fixed effects or a combination of earlier
  controls is dropped, with a note (its coefficient is not reported anyway, and the
  other estimates do not change: Frisch-Waugh-Lovell);
- an instrument that is constant, absorbed, or a combination of the controls and the
  earlier instruments stops the run: silently dropping it would change the model the
  user asked for (its degree of over-identification, its tests);
- so does an endogenous regressor that is constant, absorbed, or a combination of the
  controls and the earlier endogenous regressors (its effect is not identified), and an
  outcome that the controls and fixed effects explain completely;
- so does a sample too small to leave a residual degree of freedom in the first stage.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from reportkit.data.collinearity import Absorber, SpanScreen, Verdict, absorbed_by
from reportkit.data.values import format_value
from reportkit.errors import DataError
from reportkit.results import CodingNote
from reportkit.spec.loaded import FieldPath

Where = Callable[[FieldPath], str]


@dataclass(frozen=True)
class Columns:
    """Named numeric columns of one role, with the spec field each came from."""

    names: list[str]
    values: np.ndarray  # (n, k)
    fields: list[FieldPath]


@dataclass(frozen=True)
class ScreenResult:
    kept_controls: list[int]  # positions of the controls kept, in order
    dropped: list[CodingNote]
    first_stage_parameters: int  # constant or fixed effects, kept controls, instruments


def _quote(names: list[str] | tuple[str, ...]) -> str:
    quoted = [f"'{n}'" for n in names]
    return quoted[0] if len(quoted) == 1 else ", ".join(quoted[:-1]) + " and " + quoted[-1]


class _Context:
    def __init__(
        self,
        fixed_effects: np.ndarray,
        fixed_effect_names: list[str],
        weights: np.ndarray | None,
    ) -> None:
        self.fixed_effects = fixed_effects
        self.names = fixed_effect_names
        self.weights = weights

    @property
    def base(self) -> str:
        return "the fixed effects" if self.names else "the constant"

    def absorbers(self, column: np.ndarray) -> list[str]:
        return absorbed_by(column, self.fixed_effects, self.names, self.weights)

    def absorbed_words(self, column: np.ndarray) -> tuple[str, str]:
        """("constant within district", "district") or a description of several effects."""
        single = self.absorbers(column)
        if single:
            return f"constant within each {single[0]} group", single[0]
        return f"a sum of {_quote(self.names)} effects", "one of them"


def _first_value(column: np.ndarray) -> str:
    return format_value(column[0].item()) if column.size else "no value"


def _drop_note(name: str, column: np.ndarray, verdict: Verdict, ctx: _Context) -> CodingNote:
    if verdict.status == "constant":
        why = f"constant in the estimation sample (every row is {_first_value(column)})"
    elif verdict.status == "absorbed":
        why = f"{ctx.absorbed_words(column)[0]}, so the fixed effects absorb it"
    else:
        combined = _quote(verdict.partners) if verdict.partners else "the other controls"
        why = f"a linear combination of {combined} (given {ctx.base})"
    return CodingNote(column=name, coding=f"dropped: {why}")


def _instrument_error(
    name: str,
    column: np.ndarray,
    verdict: Verdict,
    ctx: _Context,
    controls: list[str],
    where: str,
) -> DataError:
    if verdict.status == "constant":
        return DataError(
            f"instrument '{name}' is constant in the estimation sample (every row is "
            f"{_first_value(column)}), so it cannot move the endogenous regressor; remove it "
            "from model.instruments, or check the filters and data.missing_codes",
            where,
        )
    if verdict.status == "absorbed":
        words, effect = ctx.absorbed_words(column)
        what = (
            f"{effect} from model.fixed_effects"
            if effect != "one of them"
            else ("one of the fixed effects from model.fixed_effects")
        )
        return DataError(
            f"instrument '{name}' is {words}, so the fixed effects absorb it; drop it from "
            f"model.instruments or {what}",
            where,
        )
    others = [p for p in verdict.partners if p not in controls]
    used = [p for p in verdict.partners if p in controls]
    given = f" (given {ctx.base}" + (f" and the controls {_quote(used)})" if used else ")")
    if others:
        return DataError(
            f"instruments '{name}' and {_quote(others)} are perfectly collinear{given}, so "
            "they carry the same information; keep only one of them in model.instruments",
            where,
        )
    return DataError(
        f"instrument '{name}' is a linear combination of the controls "
        f"{_quote(used) if used else ''} (given {ctx.base}), so it adds nothing once they "
        "are included; drop it from model.instruments, or drop those controls",
        where,
    )


def _regressor_error(
    name: str,
    column: np.ndarray,
    verdict: Verdict,
    ctx: _Context,
    controls: list[str],
    where: str,
) -> DataError:
    if verdict.status == "constant":
        return DataError(
            f"endogenous regressor '{name}' is constant in the estimation sample (every row "
            f"is {_first_value(column)}), so its effect cannot be estimated; check the "
            "filters and data.missing_codes",
            where,
        )
    if verdict.status == "absorbed":
        words, effect = ctx.absorbed_words(column)
        return DataError(
            f"endogenous regressor '{name}' is {words}, so the fixed effects absorb it and "
            f"its effect cannot be estimated; drop {effect} from model.fixed_effects",
            where,
        )
    others = [p for p in verdict.partners if p not in controls]
    used = [p for p in verdict.partners if p in controls]
    if others:
        given = f" (given {ctx.base}" + (f" and the controls {_quote(used)})" if used else ")")
        return DataError(
            f"endogenous regressors '{name}' and {_quote(others)} are perfectly "
            f"collinear{given}, so their effects cannot be told apart; keep only one of "
            "them in model.endogenous",
            where,
        )
    return DataError(
        f"endogenous regressor '{name}' is a linear combination of the controls "
        f"{_quote(used) if used else ''} (given {ctx.base}), so its effect cannot be told "
        "apart from theirs; drop those controls from model.controls",
        where,
    )


def _outcome_error(
    name: str, column: np.ndarray, verdict: Verdict, ctx: _Context, where: str
) -> DataError:
    if verdict.status == "constant":
        why = f"is constant in the estimation sample (every row is {_first_value(column)})"
    elif verdict.status == "absorbed":
        why = f"is {ctx.absorbed_words(column)[0]}, so the fixed effects explain it completely"
    else:
        why = (
            f"is a linear combination of the controls {_quote(verdict.partners)} "
            f"(given {ctx.base}), so they explain it completely"
        )
    return DataError(
        f"the outcome '{name}' {why}; there is nothing left for the model to explain; "
        "check the filters, data.missing_codes and model.controls",
        where,
    )


def screen_columns(
    outcome: Columns,
    endogenous: Columns,
    instruments: Columns,
    controls: Columns,
    fixed_effects: np.ndarray,
    fixed_effect_names: list[str],
    weights: np.ndarray | None,
    where: Where,
) -> ScreenResult:
    """Drop dependent controls; raise ``DataError`` for a model the sample cannot identify."""
    n = outcome.values.shape[0]
    ctx = _Context(fixed_effects, fixed_effect_names, weights)
    absorber = Absorber(fixed_effects, weights)
    raw = np.column_stack([controls.values, instruments.values, endogenous.values, outcome.values])
    residual = absorber.residualize(raw) if raw.shape[1] else raw
    c, q, p = (controls.values.shape[1], instruments.values.shape[1], endogenous.values.shape[1])

    screen = SpanScreen(n, weights, absorber.has_fixed_effects, capacity=c + p)
    kept: list[int] = []
    dropped: list[CodingNote] = []
    for j, name in enumerate(controls.names):
        verdict = screen.check(raw[:, j], residual[:, j], add_as=name)
        if verdict.status == "independent":
            kept.append(j)
        else:
            dropped.append(_drop_note(name, raw[:, j], verdict, ctx))
    kept_names = [controls.names[j] for j in kept]

    with_instruments = screen.copy(extra=q)
    for i, name in enumerate(instruments.names):
        j = c + i
        verdict = with_instruments.check(raw[:, j], residual[:, j], add_as=name)
        if verdict.status != "independent":
            raise _instrument_error(
                name, raw[:, j], verdict, ctx, kept_names, where(instruments.fields[i])
            )

    j = c + q + p
    verdict = screen.check(raw[:, j], residual[:, j])
    if verdict.status != "independent":
        raise _outcome_error(outcome.names[0], raw[:, j], verdict, ctx, where(outcome.fields[0]))

    for i, name in enumerate(endogenous.names):
        j = c + q + i
        verdict = screen.check(raw[:, j], residual[:, j], add_as=name)
        if verdict.status != "independent":
            raise _regressor_error(
                name, raw[:, j], verdict, ctx, kept_names, where(endogenous.fields[i])
            )

    parameters = absorber.rank + len(kept) + q
    if n <= parameters:
        raise DataError(
            f"the estimation sample has {n} rows, but the first stage estimates {parameters} "
            f"parameters ({ctx.base}: {absorber.rank}, controls: {len(kept)}, instruments: "
            f"{q}), leaving no degrees of freedom for its residuals; use more rows or a "
            "smaller model",
            where(("model",)),
        )
    return ScreenResult(kept_controls=kept, dropped=dropped, first_stage_parameters=parameters)
