"""The Python API: load a spec, run it, get the typed results, write the bundle.

The command line is a thin layer over these functions; notebook users call them
directly::

    from reportkit import api
    loaded = api.load("study.yaml")          # or api.load_dict({...}, base_dir=".")
    results = api.analyse(loaded)            # StudyResults, nothing written
    outcome = api.run(loaded, output="appendix")  # the bundle folder
    report = api.verify("appendix")          # re-run the bundle and compare
"""

from __future__ import annotations

import datetime as dt
import os
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

from reportkit import __version__
from reportkit.bundle import check_destination, path_from_bundle, sha256_bytes, write_bundle
from reportkit.pipeline import Progress, Timings, package_versions, run_analysis
from reportkit.results import InputFile, StudyResults
from reportkit.spec.loaded import LoadedSpec
from reportkit.spec.models import Spec

if TYPE_CHECKING:
    from reportkit.verify import VerifyReport


@dataclass(frozen=True)
class RunOutcome:
    results: StudyResults
    bundle: Path | None
    timings: Timings


def load(path: str | Path) -> LoadedSpec:
    from reportkit.spec.loader import load_spec

    return load_spec(path)


def load_dict(data: Mapping[str, Any], base_dir: str | Path = ".") -> LoadedSpec:
    from reportkit.spec.loader import load_spec_dict

    return load_spec_dict(data, base_dir)


def generated_on() -> str:
    """The date stamped on a bundle: SOURCE_DATE_EPOCH when set (reproducible builds)."""
    epoch = os.environ.get("SOURCE_DATE_EPOCH")
    if epoch and epoch.isdigit():
        return dt.datetime.fromtimestamp(int(epoch), tz=dt.UTC).date().isoformat()
    return dt.datetime.now(tz=dt.UTC).date().isoformat()


def spec_input(loaded: LoadedSpec) -> list[InputFile]:
    if loaded.source is None:
        return []
    data = loaded.source.read_bytes()
    return [
        InputFile(
            role="spec", name=loaded.source.name, sha256=sha256_bytes(data), size_bytes=len(data)
        )
    ]


def analyse(
    loaded: LoadedSpec, *, timings: Timings | None = None, progress: Progress | None = None
) -> StudyResults:
    return run_analysis(loaded, timings=timings, progress=progress, extra_inputs=spec_input(loaded))


def output_folder(loaded: LoadedSpec, output: str | Path | None) -> Path:
    if output is not None:
        return Path(output)
    return loaded.resolve_path(loaded.spec.run.output)


def input_locations(loaded: LoadedSpec) -> dict[str, Path]:
    """The file behind each input role of a run: the data file and, when read from a file,
    the spec."""
    out = {"data": loaded.resolve_path(loaded.spec.data.path)}
    if loaded.source is not None:
        out["spec"] = loaded.source
    return out


def spec_for_bundle(loaded: LoadedSpec, bundle: Path) -> Spec:
    """The spec with ``data.path`` relative to the bundle folder, so that the resolved spec
    runs from the bundle (its folder is then the base of relative paths); the rest as is."""
    rel = path_from_bundle(loaded.resolve_path(loaded.spec.data.path), bundle)
    if rel is None:
        return loaded.spec
    data = loaded.spec.data.model_copy(update={"path": rel})
    return loaded.spec.model_copy(update={"data": data})


def manifest_inputs(
    loaded: LoadedSpec, results: StudyResults, bundle: Path
) -> list[dict[str, Any]]:
    """The manifest's ``inputs``: each input file's checksum and, where the file can be
    reached by a relative path, ``path_from_bundle`` (read by ``reportkit verify``)."""
    locations = input_locations(loaded)
    out = []
    for item in results.provenance.inputs:
        entry: dict[str, Any] = item.model_dump()
        location = locations.get(item.role)
        rel = path_from_bundle(location, bundle) if location is not None else None
        if rel is not None:
            entry["path_from_bundle"] = rel
        out.append(entry)
    return out


def render_files(
    loaded: LoadedSpec,
    results: StudyResults,
    *,
    command: str,
    date: str,
    timings: Timings | None = None,
    progress: Progress | None = None,
    pdf: bool = True,
    bundle: Path | None = None,
) -> dict[str, bytes]:
    """Every bundle file except the manifest, as bytes.

    With ``bundle`` (the folder the files will be written to), the resolved spec's
    ``data.path`` is written relative to it; otherwise as in the spec.
    """
    from reportkit.exports import table_files
    from reportkit.report.figures import build_figures
    from reportkit.report.html import RunInfo, render_html
    from reportkit.spec.loader import dump_resolved_spec

    timings = timings if timings is not None else Timings()
    files: dict[str, bytes] = {"results.json": results.to_json().encode()}
    spec = spec_for_bundle(loaded, bundle) if bundle is not None else loaded.spec
    files["spec.resolved.yaml"] = dump_resolved_spec(spec).encode()
    for name, text in table_files(results).items():
        files[f"tables/{name}"] = text.encode()
    with timings.stage("figures", progress):
        figures = build_figures(results)
    for fig in figures.values():
        files[f"figures/{fig.filename}"] = fig.svg.encode()
    with timings.stage("HTML", progress):
        run = RunInfo(reportkit_version=__version__, command=command, generated_on=date)
        html = render_html(results, run, figures)
    files["appendix.html"] = html.encode()
    if pdf:
        from reportkit.report.pdf import render_pdf

        with timings.stage("PDF", progress):
            files["appendix.pdf"] = render_pdf(html)
    from reportkit.replication import REPLICATION_FILE, measure_run_facts, replication_markdown

    facts = measure_run_facts(
        reportkit_version=__version__,
        generated_on=date,
        bundle_name=bundle.name if bundle is not None else "BUNDLE",
        data_path=spec.data.path,
        seconds=sum(timings.stages.values()),
    )
    files[REPLICATION_FILE] = replication_markdown(results, facts, files).encode()
    return files


def run(
    loaded: LoadedSpec,
    *,
    output: str | Path | None = None,
    overwrite: bool = False,
    command: str = "python API",
    progress: Progress | None = None,
    pdf: bool = True,
) -> RunOutcome:
    """The main job: analyse, render and write the bundle atomically.

    The bundle describes itself: the manifest gives each input's path from the bundle
    folder and the resolved spec's ``data.path`` is relative to the bundle, so that
    ``reportkit verify BUNDLE`` can re-run it from the bundle alone.
    """
    dest = output_folder(loaded, output)
    check_destination(dest, overwrite)
    timings = Timings()
    results = analyse(loaded, timings=timings, progress=progress)
    date = generated_on()
    files = render_files(
        loaded,
        results,
        command=command,
        date=date,
        timings=timings,
        progress=progress,
        pdf=pdf,
        bundle=dest,
    )
    manifest = {
        "bundle_format": 1,
        "reportkit_version": __version__,
        "results_schema_version": results.schema_version,
        "generated_on": date,
        "command": command,
        "inputs": manifest_inputs(loaded, results, dest),
        "software": {"python": results.provenance.python, **package_versions()},
    }
    with timings.stage("writing bundle", progress):
        write_bundle(dest, files, manifest, overwrite=overwrite)
    return RunOutcome(results=results, bundle=dest, timings=timings)


def verify(bundle: str | Path, *, data: str | Path | None = None) -> VerifyReport:
    """Check a bundle's checksums, re-run it and compare every number (``reportkit.verify``)."""
    from reportkit.verify import verify_bundle

    return verify_bundle(Path(bundle), data=Path(data) if data is not None else None)
