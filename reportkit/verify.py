"""Re-running a bundle and comparing: what ``reportkit verify BUNDLE`` does for a data editor.

Three checks, in order:

1. every output listed in manifest.json exists with the listed SHA-256 (an edited
   results.json or appendix.html is named);
2. every input listed there is found (the data file through ``--data`` or the manifest's
   ``path_from_bundle``) and has the listed SHA-256 (a changed file is named, with both
   checksums); results.json must list the same inputs as the manifest;
3. the analysis is recomputed from the bundle's spec.resolved.yaml (its folder is the
   base of relative paths) and every value of the new results is compared with the
   bundle's results.json, walking both JSON trees.

Tolerance. Two numbers a and b agree when |a - b| <= max(1e-9 * max(|a|, |b|), 1e-12):
relative 1e-9, absolute 1e-12 near zero. Every statistic is deterministic linear algebra
on the same bytes, so the only expected differences are last-bit effects of another BLAS
or processor, many orders of magnitude below 1e-9 (the engine agrees with linearmodels to
1e-10 relative; common practice, no source). Whole numbers (counts, seeds), text,
true/false, list lengths and keys must match exactly.

Not failures, reported as warnings: ``provenance.python`` and ``provenance.packages``
(different software is worth knowing, not a wrong number) and the cross-check's
``max_rel_diff_*`` values, which measure the rounding difference between two
implementations, i.e. exactly the last-bit noise the tolerance allows for (whether the
cross-check agrees is compared exactly). ``provenance.inputs`` is checked in step 2
instead: its names depend on where the spec was run from.

Written by hand: comparing two JSON documents number by number with a tolerance and
reporting each difference by its path is a few dozen lines; the libraries that diff
JSON compare exactly or report in their own formats.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import math
import os
import re
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Literal

from reportkit.bundle import MANIFEST
from reportkit.errors import DataError, ReportkitError, SpecError
from reportkit.spec.loaded import LoadedSpec

RELATIVE_TOLERANCE = 1e-9
ABSOLUTE_TOLERANCE = 1e-12
RESULTS = "results.json"
RESOLVED_SPEC = "spec.resolved.yaml"

# differences under these paths are warnings (different software), not failures
WARNING_PATHS = ("provenance.python", "provenance.packages")
_NOISE = re.compile(r"^provenance\.crosschecks\[\d+\]\.max_rel_diff_\w+$")
# checked against the files themselves (step 2), not by value
SKIPPED_PATHS = ("provenance.inputs",)
_IDENTIFIER = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")


@dataclass(frozen=True)
class Tolerance:
    relative: float = RELATIVE_TOLERANCE
    absolute: float = ABSOLUTE_TOLERANCE

    def agree(self, a: float, b: float) -> bool:
        if math.isnan(a) or math.isnan(b):
            return math.isnan(a) and math.isnan(b)
        if math.isinf(a) or math.isinf(b):
            return a == b
        return abs(a - b) <= max(self.relative * max(abs(a), abs(b)), self.absolute)

    def describe(self) -> str:
        return f"relative {self.relative:g} (absolute {self.absolute:g} near zero)"


@dataclass(frozen=True)
class FileProblem:
    """An input or output whose bytes are not the ones the manifest lists."""

    name: str  # output path in the bundle, or the input's name
    role: str  # "output", or the input's role ("data", "spec")
    problem: Literal["changed", "missing"]
    expected_sha256: str
    found_sha256: str | None = None
    location: str = ""  # where the file was looked for (inputs)

    def describe(self) -> str:
        what = f"{self.role} file '{self.name}'"
        where = f" (looked for at {self.location})" if self.location else ""
        if self.problem == "missing":
            return f"{what} is missing{where}; the manifest lists sha256 {self.expected_sha256}"
        return (
            f"{what} changed{where}: the manifest lists sha256 {self.expected_sha256}, "
            f"the file has {self.found_sha256}"
        )


@dataclass(frozen=True)
class Difference:
    """One value of results.json that the recomputation does not reproduce."""

    path: str  # dotted, e.g. estimates[1].coefficients[0].std_error
    bundle: Any  # the JSON value in the bundle (or a short description of a structure)
    recomputed: Any
    relative_difference: float | None = None  # numbers only


@dataclass(frozen=True)
class Comparison:
    differences: tuple[Difference, ...]
    warnings: tuple[Difference, ...]
    numbers_compared: int


@dataclass(frozen=True)
class VerifyReport:
    """Everything ``verify_bundle`` found; ``ok`` when nothing differs."""

    bundle: Path
    written_by: str  # reportkit version in the manifest
    generated_on: str
    data_file: Path
    tolerance: Tolerance
    files_checked: int
    file_problems: tuple[FileProblem, ...]
    differences: tuple[Difference, ...]
    warnings: tuple[Difference, ...]
    notes: tuple[str, ...]
    numbers_compared: int
    recompute_error: str | None = None

    @property
    def ok(self) -> bool:
        return not self.file_problems and not self.differences and self.recompute_error is None


# --- comparing two JSON trees -----------------------------------------------------------


def _join(path: str, key: str | int) -> str:
    """Extend a dotted path: ``a.b``, ``a[1]``, or ``a["odd key"]`` for keys that are not
    plain names (column labels may hold spaces or dots)."""
    if isinstance(key, int):
        return f"{path}[{key}]"
    if not _IDENTIFIER.match(key):
        return f"{path}[{json.dumps(key)}]"
    return f"{path}.{key}" if path else key


def _under(path: str, prefixes: Sequence[str]) -> bool:
    return any(path == p or path.startswith((p + ".", p + "[")) for p in prefixes)


def _is_number(value: Any) -> bool:
    return isinstance(value, int | float) and not isinstance(value, bool)


class Described(str):
    """A description standing in for a value in a difference (shown without quotes)."""

    __slots__ = ()


ABSENT = Described("(absent)")


def _shape(value: Any) -> Any:
    """A value as shown in a difference: scalars as they are, structures by their size."""
    if isinstance(value, Mapping):
        return Described(f"(mapping of {len(value)} keys)")
    if isinstance(value, list):
        return Described(f"(list of {len(value)} items)")
    return value


def relative_difference(a: float, b: float) -> float:
    """|a - b| / max(|a|, |b|); 0 for equal values, infinite against a non-finite one."""
    scale = max(abs(a), abs(b))
    if scale == 0 or math.isnan(a) or math.isnan(b):
        return 0.0 if a == b or (math.isnan(a) and math.isnan(b)) else math.inf
    return abs(a - b) / scale if math.isfinite(scale) else (0.0 if a == b else math.inf)


def _walk(bundle: Any, recomputed: Any, path: str, tol: Tolerance) -> Iterator[Difference | None]:
    """Yield None for each number that agrees and a ``Difference`` for each difference."""
    if _under(path, SKIPPED_PATHS):
        return
    if _is_number(bundle) and _is_number(recomputed):
        exact = isinstance(bundle, int) and isinstance(recomputed, int)
        agree = bundle == recomputed if exact else tol.agree(float(bundle), float(recomputed))
        if agree:
            yield None
        else:
            rel = relative_difference(float(bundle), float(recomputed))
            yield Difference(path, bundle, recomputed, rel)
        return
    if isinstance(bundle, Mapping) and isinstance(recomputed, Mapping):
        for key in sorted(set(bundle) | set(recomputed), key=str):
            child = _join(path, key)
            if key not in recomputed:
                yield Difference(child, _shape(bundle[key]), ABSENT)
            elif key not in bundle:
                yield Difference(child, ABSENT, _shape(recomputed[key]))
            else:
                yield from _walk(bundle[key], recomputed[key], child, tol)
        return
    if isinstance(bundle, list) and isinstance(recomputed, list):
        if len(bundle) != len(recomputed):
            yield Difference(path, _shape(bundle), _shape(recomputed))
            return
        for i, (a, b) in enumerate(zip(bundle, recomputed, strict=True)):
            yield from _walk(a, b, _join(path, i), tol)
        return
    if type(bundle) is not type(recomputed) or bundle != recomputed:
        yield Difference(path, _shape(bundle), _shape(recomputed))


def compare_results(bundle: Any, recomputed: Any, tol: Tolerance | None = None) -> Comparison:
    """Compare two parsed results.json trees value by value (see the module docstring)."""
    tol = tol if tol is not None else Tolerance()
    differences: list[Difference] = []
    warnings: list[Difference] = []
    numbers = 0
    for diff in _walk(bundle, recomputed, "", tol):
        if diff is None or (_is_number(diff.bundle) and _is_number(diff.recomputed)):
            numbers += 1
        if diff is None:
            continue
        if _under(diff.path, WARNING_PATHS) or _NOISE.match(diff.path):
            warnings.append(diff)
        else:
            differences.append(diff)
    return Comparison(tuple(differences), tuple(warnings), numbers)


# --- reading the bundle -----------------------------------------------------------------


def file_sha256(path: Path) -> str:
    digest = hashlib.sha256()
    with path.open("rb") as handle:
        while chunk := handle.read(1 << 20):
            digest.update(chunk)
    return digest.hexdigest()


def read_manifest(bundle: Path) -> dict[str, Any]:
    """The bundle's manifest; a clear error (exit code 2) when this is not a bundle."""
    where = bundle.name or str(bundle)
    if not bundle.is_dir():
        raise ReportkitError(
            f"'{bundle}' is not a folder; pass the bundle folder that 'reportkit run' wrote "
            "(the one holding manifest.json and results.json)",
            where,
        )
    path = bundle / MANIFEST
    if not path.is_file():
        raise ReportkitError(
            f"no {MANIFEST} in '{bundle}', so it is not a reportkit bundle (or the run that "
            "wrote it did not finish); pass the folder that 'reportkit run' wrote",
            where,
        )
    try:
        manifest = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise ReportkitError(
            f"{MANIFEST} cannot be read ({exc}); the bundle is damaged, ask for a fresh copy",
            f"{where}/{MANIFEST}",
        ) from exc
    outputs = manifest.get("outputs") if isinstance(manifest, dict) else None
    inputs = manifest.get("inputs") if isinstance(manifest, dict) else None
    if not isinstance(outputs, list) or not isinstance(inputs, list):
        raise ReportkitError(
            f"{MANIFEST} has no list of 'inputs' and 'outputs'; it was not written by "
            "reportkit, or it was damaged: ask for a fresh copy of the bundle",
            f"{where}/{MANIFEST}",
        )
    for entry in [*outputs, *inputs]:
        if not isinstance(entry, dict) or not isinstance(entry.get("sha256"), str):
            raise ReportkitError(
                f"{MANIFEST} has an entry without a sha256 checksum ({entry!r}); the bundle "
                "is damaged, ask for a fresh copy",
                f"{where}/{MANIFEST}",
            )
    return manifest


def _inside(bundle: Path, rel: str) -> Path | None:
    """The listed output's path, or None when the listing points outside the bundle."""
    target = (bundle / rel).resolve()
    return target if target.is_relative_to(bundle.resolve()) else None


def check_outputs(bundle: Path, outputs: list[dict[str, Any]]) -> list[FileProblem]:
    problems = []
    for entry in outputs:
        rel = str(entry.get("path", ""))
        target = _inside(bundle, rel) if rel else None
        if target is None or not target.is_file():
            problems.append(FileProblem(rel, "output", "missing", entry["sha256"]))
            continue
        found = file_sha256(target)
        if found != entry["sha256"]:
            problems.append(FileProblem(rel, "output", "changed", entry["sha256"], found))
    return problems


def locate_data(bundle: Path, entry: dict[str, Any], override: Path | None) -> Path:
    """The data file: ``override`` (``--data``), else the manifest's ``path_from_bundle``."""
    name = str(entry.get("name", "the data file"))
    if override is not None:
        if not override.is_file():
            raise DataError(
                f"the data file given with --data, '{override}', does not exist or is not a "
                "file; pass the path of the data file the bundle was made from",
                str(override),
            )
        return override
    rel = entry.get("path_from_bundle")
    if not isinstance(rel, str):
        raise DataError(
            f"the manifest does not say where the data file '{name}' is (bundles from older "
            f"versions do not); pass it with --data, e.g. 'reportkit verify {bundle} "
            f"--data path/to/{Path(name).name}'",
            f"{bundle.name}/{MANIFEST}",
        )
    path = bundle / rel
    if not path.is_file():
        raise DataError(
            f"the data file '{name}' is not where the bundle expects it ('{rel}' from the "
            f"bundle folder; the bundle may have been moved); pass its location with --data, "
            f"e.g. 'reportkit verify {bundle} --data path/to/{Path(name).name}'",
            f"{bundle.name}/{MANIFEST}",
        )
    return path


def check_inputs(
    bundle: Path, inputs: list[dict[str, Any]], data: Path | None
) -> tuple[Path, list[FileProblem], list[str]]:
    """Find and checksum every input; returns the data file, problems and notes."""
    data_entries = [e for e in inputs if e.get("role") == "data"]
    if len(data_entries) != 1:
        raise ReportkitError(
            f"{MANIFEST} lists {len(data_entries)} data files, expected exactly one; the "
            "bundle is damaged or from another program",
            f"{bundle.name}/{MANIFEST}",
        )
    problems: list[FileProblem] = []
    notes: list[str] = []
    data_path = locate_data(bundle, data_entries[0], data)
    for entry in inputs:
        name, role = str(entry.get("name", "")), str(entry.get("role", ""))
        if entry is data_entries[0]:
            path: Path | None = data_path
        elif isinstance(entry.get("path_from_bundle"), str):
            path = bundle / entry["path_from_bundle"]
        else:
            path = None
        if path is None or not path.is_file():
            # only the data are needed to recompute; the bundle carries the resolved spec
            at = f" at '{entry['path_from_bundle']}'" if path is not None else ""
            used = f"; the bundle's {RESOLVED_SPEC} was used" if role == "spec" else ""
            notes.append(f"{role} file '{name}' not found{at}, not checked{used}")
            continue
        found = file_sha256(path)
        if found != entry["sha256"]:
            problems.append(
                FileProblem(name, role, "changed", entry["sha256"], found, os.path.normpath(path))
            )
    return data_path, problems, notes


def check_listed_inputs(results: Any, inputs: list[dict[str, Any]]) -> list[Difference]:
    """results.json's ``provenance.inputs`` must be the manifest's inputs."""
    keys = ("role", "name", "sha256", "size_bytes")
    listed = sorted((tuple(e.get(k) for k in keys) for e in inputs), key=str)
    try:
        entries = results["provenance"]["inputs"]
        recorded = sorted((tuple(e.get(k) for k in keys) for e in entries), key=str)
    except (KeyError, TypeError, AttributeError):
        recorded = []
    if listed == recorded:
        return []
    return [
        Difference(
            "provenance.inputs",
            Described("; ".join(f"{r[1]} {r[2]}" for r in recorded) or ABSENT),
            Described("manifest: " + "; ".join(f"{r[1]} {r[2]}" for r in listed)),
        )
    ]


# --- recomputing ------------------------------------------------------------------------


def load_bundle_spec(bundle: Path, data_path: Path) -> LoadedSpec:
    """The bundle's resolved spec (the bundle folder as base), reading ``data_path``.

    The spec's own ``data.sha256`` pin is set aside: the data file was already compared
    with the manifest, and recomputing anyway shows what a changed file changes.
    """
    from reportkit.spec.loader import load_spec

    spec_file = bundle / RESOLVED_SPEC
    if not spec_file.is_file():
        raise SpecError(
            f"the bundle has no {RESOLVED_SPEC}, so it cannot be re-run; ask for a complete "
            "copy of the bundle",
            bundle.name,
        )
    loaded = load_spec(spec_file)
    data = loaded.spec.data.model_copy(update={"path": str(data_path.resolve()), "sha256": None})
    return dataclasses.replace(loaded, spec=loaded.spec.model_copy(update={"data": data}))


def recompute(loaded: LoadedSpec) -> Any:
    """Re-run the analysis (nothing rendered or written); results.json parsed."""
    from reportkit import api

    return json.loads(api.analyse(loaded).to_json())


def verify_bundle(bundle: Path, *, data: Path | None = None) -> VerifyReport:
    """Check a bundle's checksums, re-run it and compare every value (module docstring).

    Raises ``ReportkitError`` (exit code 2) when the bundle cannot be used: not a folder,
    no manifest, the data file not found, an unreadable resolved spec.
    """
    bundle = Path(bundle)
    manifest = read_manifest(bundle)
    tol = Tolerance()
    file_problems = check_outputs(bundle, manifest["outputs"])
    data_path, input_problems, notes = check_inputs(bundle, manifest["inputs"], data)
    file_problems += input_problems
    differences: list[Difference] = []
    warnings: list[Difference] = []
    numbers = 0
    recompute_error: str | None = None
    stored: Any = None
    try:
        stored = json.loads((bundle / RESULTS).read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        recompute_error = f"{RESULTS} cannot be read ({exc}), so nothing was compared"
    loaded = load_bundle_spec(bundle, data_path)  # unreadable: unusable input, exit code 2
    if stored is not None:
        differences += check_listed_inputs(stored, manifest["inputs"])
        try:
            fresh = recompute(loaded)
        except ReportkitError as err:  # e.g. changed data that no longer give an analysis
            recompute_error = f"the analysis stopped: {err}"
        else:
            comparison = compare_results(stored, fresh, tol)
            differences += comparison.differences
            warnings += comparison.warnings
            numbers = comparison.numbers_compared
    listed = {str(e.get("path")) for e in manifest["outputs"]} | {MANIFEST}
    unlisted = sorted(
        p.relative_to(bundle).as_posix()
        for p in bundle.rglob("*")
        if p.is_file() and p.relative_to(bundle).as_posix() not in listed
    )
    if unlisted:
        notes.append("files in the bundle not listed in the manifest: " + ", ".join(unlisted))
    return VerifyReport(
        bundle=bundle,
        written_by=str(manifest.get("reportkit_version", "unknown")),
        generated_on=str(manifest.get("generated_on", "unknown")),
        data_file=data_path,
        tolerance=tol,
        files_checked=len(manifest["outputs"]) + len(manifest["inputs"]),
        file_problems=tuple(file_problems),
        differences=tuple(differences),
        warnings=tuple(warnings),
        notes=tuple(notes),
        numbers_compared=numbers,
        recompute_error=recompute_error,
    )


# --- the printed report -----------------------------------------------------------------


def show_value(value: Any, width: int = 28) -> str:
    """A value for the table: numbers in full precision, long text shortened."""
    if isinstance(value, bool) or value is None:
        return json.dumps(value)
    if _is_number(value):
        return repr(value)
    text = str(value) if isinstance(value, Described) else json.dumps(value)
    return text if len(text) <= width else text[: width - 3] + "..."


def _table(rows: list[tuple[str, ...]], header: tuple[str, ...]) -> list[str]:
    widths = [max(len(r[i]) for r in [header, *rows]) for i in range(len(header))]
    fmt = "  " + "  ".join(f"{{:<{w}}}" for w in widths)
    lines = [fmt.format(*header), fmt.format(*("-" * w for w in widths))]
    lines += [fmt.format(*row) for row in rows]
    return [line.rstrip() for line in lines]


def _difference_rows(diffs: Sequence[Difference]) -> list[tuple[str, ...]]:
    return [
        (
            d.path,
            show_value(d.bundle),
            show_value(d.recomputed),
            "" if d.relative_difference is None else f"{d.relative_difference:.2e}",
        )
        for d in diffs
    ]


def report_lines(report: VerifyReport, limit: int | None = 40) -> list[str]:
    """The report as text lines: header, checksum problems, differences, verdict.

    At most ``limit`` differences are listed (None: all); a changed data file typically
    moves hundreds of values, and the first ones say enough.
    """
    header = ("value", "bundle", "recomputed", "rel. difference")
    shown = report.differences if limit is None else report.differences[:limit]
    lines = [
        f"bundle: {report.bundle} (written by reportkit {report.written_by} "
        f"on {report.generated_on})",
        f"data file: {os.path.normpath(report.data_file)}",
        f"tolerance: numbers agree within {report.tolerance.describe()}; whole numbers, "
        "text and structure must match exactly",
        f"checksums: {report.files_checked} files listed in {MANIFEST}",
    ]
    for problem in report.file_problems:
        lines.append(f"  MISMATCH: {problem.describe()}")
    for note in report.notes:
        lines.append(f"  note: {note}")
    if report.recompute_error:
        lines.append(f"recomputation: FAILED: {report.recompute_error}")
    if report.differences:
        lines.append(f"differences from {RESULTS} ({len(report.differences)}):")
        lines += _table(_difference_rows(shown), header)
        if len(shown) < len(report.differences):
            lines.append(
                f"  ... and {len(report.differences) - len(shown)} more "
                "(pass --all to list every one)"
            )
    if report.warnings:
        lines.append(
            f"warnings ({len(report.warnings)}; different software or rounding noise, "
            "not failures):"
        )
        lines += _table(_difference_rows(report.warnings), header)
    if report.ok:
        lines.append(
            f"verified: every checksum matches and all {report.numbers_compared} numbers agree "
            f"within {report.tolerance.describe()}"
        )
    else:
        parts = []
        if report.file_problems:
            names = ", ".join(f"'{p.name}'" for p in report.file_problems)
            parts.append(f"{len(report.file_problems)} file(s) differ from the manifest ({names})")
        if report.differences:
            parts.append(f"{len(report.differences)} value(s) differ from {RESULTS}")
        if report.recompute_error:
            parts.append("the analysis could not be recomputed")
        lines.append("NOT VERIFIED: " + "; ".join(parts))
    return lines
