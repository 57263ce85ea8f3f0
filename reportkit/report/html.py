"""Render a ``StudyResults`` to one self-contained HTML page.

The Jinja environment autoescapes everything and uses ``StrictUndefined``, so text from
the spec or the data is always inert and a missing value raises instead of printing as
a blank. Python picks what goes where (which estimate is the headline, rows of the
estimates table, sentences); the templates only lay it out through the filters of
``reportkit.report.formatting``. Templates are found in the installed package
(``reportkit/_templates``) or, in a source checkout, in the repository's ``templates/``.
"""

from __future__ import annotations

import importlib.resources
import re
from collections.abc import Mapping
from dataclasses import dataclass
from datetime import date
from functools import lru_cache
from pathlib import Path
from typing import Any, Protocol

import jinja2

from reportkit.report import formatting, wording
from reportkit.report.balance_sections import SUBSECTION_TITLES, balance_glance, balance_view
from reportkit.report.complier_figures import COMPLIER_MASSES_KEY, has_complier_figure
from reportkit.report.disclosure_sections import disclosures_view
from reportkit.report.figures import (
    BALANCE_KEY,
    ESTIMATOR_ORDER,
    P_VALUE_CURVE_KEY,
    estimates_key,
    first_stage_key,
    has_balance_figure,
)
from reportkit.report.glance import robustness_glance
from reportkit.report.robustness_figures import robustness_figure_keys
from reportkit.report.robustness_sections import robustness_view
from reportkit.report.specification_sections import (
    SPECIFICATIONS_SECTION_ID,
    SPECIFICATIONS_SECTION_TITLE,
    specifications_view,
)
from reportkit.report.strength_sections import (
    glance_interval,
    strength_blocks,
    system_strength_rows,
    two_sls_coefficient,
    weak_iv_readings,
)
from reportkit.results import (
    Coefficient,
    EstimatorResult,
    FirstStage,
    StudyResults,
    TestOrNA,
    WeakIVRobust,
)

ENTRY_TEMPLATE = "appendix.html.j2"


class FigureLike(Protocol):
    """What the templates need from a figure (``figures.FigureImage`` satisfies it)."""

    @property
    def data_uri(self) -> str: ...

    @property
    def alt(self) -> str: ...

    @property
    def caption(self) -> str: ...


@dataclass(frozen=True)
class RunInfo:
    """Facts about the run shown in the appendix; given by the caller for determinism.

    ``generated_on`` is an ISO date (YYYY-MM-DD); it also dates the PDF metadata.
    """

    reportkit_version: str
    command: str
    generated_on: str

    def __post_init__(self) -> None:
        message = (
            f"RunInfo.generated_on must be a date written YYYY-MM-DD, got {self.generated_on!r}"
        )
        if not re.fullmatch(r"\d{4}-\d{2}-\d{2}", self.generated_on):
            raise ValueError(message)
        try:
            date.fromisoformat(self.generated_on)
        except ValueError:
            raise ValueError(message) from None


@dataclass(frozen=True)
class Section:
    """One numbered section: its anchor id, heading and partial template."""

    id: str
    title: str
    template: str


SECTIONS: tuple[Section, ...] = (
    Section("at-a-glance", "At a glance", "sections/at_a_glance.html.j2"),
    Section("what-was-estimated", "What was estimated", "sections/what_was_estimated.html.j2"),
    Section("sample", "How the sample was built", "sections/sample.html.j2"),
    Section("main-estimates", "Main estimates", "sections/main_estimates.html.j2"),
    Section("first-stage", "First stage and reduced form", "sections/first_stage.html.j2"),
    Section(
        "instrument-strength",
        "How strong are the instruments",
        "sections/instrument_strength.html.j2",
    ),
    Section(
        "weak-iv-robust",
        "Inference that stays valid with weak instruments",
        "sections/weak_iv_robust.html.j2",
    ),
    Section(
        "as-good-as-random",
        "Is the instrument as good as random?",
        "sections/as_good_as_random.html.j2",
    ),
    Section("specification-tests", "Specification tests", "sections/specification_tests.html.j2"),
    Section("robustness", "How much does the answer move?", "sections/robustness.html.j2"),
    Section("cannot-tell", "What the data cannot tell you", "sections/cannot_tell.html.j2"),
    Section("provenance", "Provenance", "sections/provenance.html.j2"),
)

# Shown after "Main estimates" only when the spec defines further specifications.
SPECIFICATIONS_SECTION = Section(
    SPECIFICATIONS_SECTION_ID, SPECIFICATIONS_SECTION_TITLE, "sections/specifications.html.j2"
)


def sections_for(results: StudyResults) -> tuple[Section, ...]:
    """The sections of this appendix, in order: SECTIONS, with "Across specifications"
    after "Main estimates" when the results hold further specifications."""
    if not results.specifications:
        return SECTIONS
    at = [s.id for s in SECTIONS].index("main-estimates") + 1
    return (*SECTIONS[:at], SPECIFICATIONS_SECTION, *SECTIONS[at:])


@dataclass(frozen=True)
class CoefficientRow:
    """One endogenous regressor across the estimators, in table column order."""

    name: str
    label: str
    coefficients: list[Coefficient]
    ols_2sls_ratio: float | None


@dataclass(frozen=True)
class CountRow:
    label: str
    count: int


@dataclass(frozen=True)
class CheckEntry:
    """A specification test with its plain reading and what it cannot show."""

    title: str
    result: TestOrNA
    reading: str
    caution: str


@dataclass(frozen=True)
class FirstStageBlock:
    first_stage: FirstStage
    figure: FigureLike | None


def template_dir() -> Path:
    """The templates: packaged ``reportkit/_templates``, else the checkout's ``templates``."""
    packaged = importlib.resources.files("reportkit") / "_templates"
    if isinstance(packaged, Path) and packaged.is_dir():
        return packaged
    source = Path(__file__).resolve().parents[2] / "templates"
    if source.is_dir():
        return source
    raise FileNotFoundError(
        "reportkit cannot find its templates: neither reportkit/_templates (installed package) "
        f"nor {source} (source checkout) exists; reinstall reportkit"
    )


@lru_cache(maxsize=4)
def _environment(folder: Path) -> jinja2.Environment:
    env = jinja2.Environment(
        loader=jinja2.FileSystemLoader(folder),
        autoescape=True,
        undefined=jinja2.StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
        keep_trailing_newline=True,
    )
    env.filters.update(formatting.FILTERS)
    env.tests.update(formatting.TESTS)
    return env


def environment() -> jinja2.Environment:
    """The Jinja environment of the appendix (autoescape on, StrictUndefined)."""
    return _environment(template_dir())


def ordered_estimates(results: StudyResults) -> list[EstimatorResult]:
    """Estimators in the canonical column order OLS, 2SLS, LIML, GMM."""
    return sorted(results.estimates, key=lambda e: ESTIMATOR_ORDER.index(e.estimator))


def headline_estimate(results: StudyResults) -> EstimatorResult:
    """The estimate to headline: 2SLS, else the first instrumented estimator, else OLS."""
    estimates = ordered_estimates(results)
    if not estimates:
        raise ValueError("the results hold no estimates; nothing to report")
    for wanted in ("2sls", "liml", "gmm"):
        for result in estimates:
            if result.estimator == wanted:
                return result
    return estimates[0]


def _coefficient(result: EstimatorResult, name: str) -> Coefficient:
    for coef in result.coefficients:
        if coef.name == name:
            return coef
    raise ValueError(f"the {result.label} results have no coefficient for '{name}'")


def coefficient_rows(results: StudyResults) -> list[CoefficientRow]:
    """Rows of the main estimates table, one per endogenous regressor."""
    estimates = ordered_estimates(results)
    if len(results.ols_2sls_ratio) != len(results.model.endogenous):
        raise ValueError("ols_2sls_ratio must have one entry per endogenous regressor")
    rows = []
    for name, ratio in zip(results.model.endogenous, results.ols_2sls_ratio, strict=True):
        coefs = [_coefficient(e, name) for e in estimates]
        rows.append(CoefficientRow(name, coefs[0].label, coefs, ratio))
    return rows


def _paired(names: list[str], counts: list[int], labels: Mapping[str, str]) -> list[CountRow]:
    if counts and len(counts) != len(names):
        raise ValueError(f"{len(counts)} counts for {len(names)} variables ({', '.join(names)})")
    return [CountRow(formatting.label(n, labels), c) for n, c in zip(names, counts, strict=False)]


def specification_test_entries(results: StudyResults, alpha: float) -> list[CheckEntry]:
    """The specification tests in display order, each with its reading."""
    diagnostics = results.diagnostics
    return [
        CheckEntry(
            "Sargan",
            diagnostics.sargan,
            wording.overid_reading(diagnostics.sargan, alpha),
            wording.OVERID_CAUTION,
        ),
        CheckEntry(
            "Basmann",
            diagnostics.basmann,
            wording.overid_reading(diagnostics.basmann, alpha),
            wording.OVERID_CAUTION,
        ),
        CheckEntry(
            "Hansen J",
            diagnostics.hansen_j,
            wording.overid_reading(diagnostics.hansen_j, alpha),
            wording.OVERID_CAUTION,
        ),
        CheckEntry(
            "Endogeneity",
            diagnostics.endogeneity,
            wording.endogeneity_reading(diagnostics.endogeneity, alpha),
            wording.ENDOGENEITY_CAUTION,
        ),
    ]


def expected_figures(results: StudyResults) -> list[str]:
    """Keys of the figures the appendix places (see ``figures.make_figures``)."""
    keys = [estimates_key(i) for i in range(len(results.model.endogenous))]
    keys += [first_stage_key(i) for i, fs in enumerate(results.first_stages) if fs.binned]
    if isinstance(results.weak_iv, WeakIVRobust) and results.weak_iv.curve is not None:
        keys.append(P_VALUE_CURVE_KEY)
    if has_balance_figure(results.balance):
        keys.append(BALANCE_KEY)
    if has_complier_figure(results.balance):
        keys.append(COMPLIER_MASSES_KEY)
    keys += robustness_figure_keys(results)
    return keys


def build_context(
    results: StudyResults, run: RunInfo, figures: Mapping[str, FigureLike]
) -> dict[str, Any]:
    """Everything the templates read: the results plus selections made in Python."""
    missing = [key for key in expected_figures(results) if key not in figures]
    if missing:
        raise ValueError(
            f"figures missing for the appendix: {', '.join(missing)}; "
            "pass the output of reportkit.report.figures.make_figures(results)"
        )
    alpha = wording.significance_level(results.conventions)
    model = results.model
    overid = wording.main_overid_test(results.diagnostics, results.conventions.covariance)
    confidence_level = results.conventions.confidence_level
    weak_iv = results.weak_iv
    conventional = (
        two_sls_coefficient(results, weak_iv.endogenous)
        if isinstance(weak_iv, WeakIVRobust)
        else None
    )
    return {
        "results": results,
        "robustness_view": robustness_view(results, alpha, figures),
        "run": run,
        "sections": sections_for(results),
        "specifications_view": specifications_view(results),
        "level": formatting.fmt_pct(results.conventions.confidence_level),
        "alpha": alpha,
        "headline": headline_estimate(results),
        "estimators": ordered_estimates(results),
        "coefficient_rows": coefficient_rows(results),
        "estimate_covariances": list(dict.fromkeys(e.covariance for e in results.estimates)),
        "specification_sentences": wording.specification_sentences(model),
        "cluster_counts": _paired(model.cluster_by, results.sample.clusters_used, model.labels),
        "fixed_effect_levels": _paired(
            model.fixed_effects, results.sample.fixed_effect_levels, model.labels
        ),
        "overid": overid,
        "overid_line": wording.describe_test(overid),
        "overid_reading": wording.overid_reading(overid, alpha),
        "endogeneity_line": wording.describe_test(results.diagnostics.endogeneity),
        "endogeneity_reading": wording.endogeneity_reading(results.diagnostics.endogeneity, alpha),
        "tests": specification_test_entries(results, alpha),
        "strength_caution": wording.STRENGTH_CAUTION,
        "first_stage_blocks": [
            FirstStageBlock(fs, figures.get(first_stage_key(i)) if fs.binned else None)
            for i, fs in enumerate(results.first_stages)
        ],
        "estimate_figures": [
            figures[estimates_key(i)] for i in range(len(results.model.endogenous))
        ],
        "strength": results.strength,
        "strength_blocks": strength_blocks(results, alpha),
        "system_rows": system_strength_rows(
            results.strength, len(results.strength.per_endogenous), alpha
        ),
        "verdict_label": wording.VERDICT_LABELS[results.strength.verdict.level],
        "verdict_advice": wording.VERDICT_ADVICE[results.strength.verdict.level],
        "relevance_not_exclusion": wording.RELEVANCE_NOT_EXCLUSION,
        "underidentification_note": wording.UNDERIDENTIFICATION_NOTE,
        "weak_iv": weak_iv,
        "weak_iv_readings": (
            weak_iv_readings(weak_iv, confidence_level)
            if isinstance(weak_iv, WeakIVRobust)
            else None
        ),
        "weak_iv_conventional": conventional,
        # TFResult carries no covariance label; it is computed from the main 2SLS fit.
        "tf_covariance": (
            conventional.covariance
            if conventional is not None
            else results.conventions.covariance_description
        ),
        "weak_iv_figure": (
            figures[P_VALUE_CURVE_KEY] if P_VALUE_CURVE_KEY in expected_figures(results) else None
        ),
        "overidentified": results.model.overidentification_degree > 0,
        "ar_overid_note": wording.AR_OVERID_NOTE,
        "tf_no_interval": wording.TF_NO_INTERVAL,
        "normal_critical": wording.normal_critical_value(confidence_level),
        "glance_interval": glance_interval(results),
        "instrument_validity": results.diagnostics.instrument_validity,
        "c_test_caution": wording.C_TEST_CAUTION,
        "balance_view": balance_view(results, alpha),
        "balance_glance": balance_glance(results, alpha),
        "robustness_glance": robustness_glance(results),
        "balance_caution": wording.BALANCE_CAUTION,
        "placebo_caution": wording.PLACEBO_CAUTION,
        "std_difference_band": wording.STD_DIFFERENCE_BAND_TEXT,
        "disclosures_view": disclosures_view(
            results.disclosures, {**{s.id: s.title for s in SECTIONS}, **SUBSECTION_TITLES}
        ),
        "balance_figure": (
            figures[BALANCE_KEY] if BALANCE_KEY in expected_figures(results) else None
        ),
        "complier_figure": (
            figures[COMPLIER_MASSES_KEY] if has_complier_figure(results.balance) else None
        ),
    }


def render_html(results: StudyResults, run: RunInfo, figures: Mapping[str, FigureLike]) -> str:
    """The appendix as one self-contained HTML document (CSS inlined, figures as data: URIs)."""
    context = build_context(results, run, figures)
    return environment().get_template(ENTRY_TEMPLATE).render(context)
