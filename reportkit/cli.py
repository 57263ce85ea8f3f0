"""Command line: parse, call the API, map errors to exit codes.

Exit codes: 0 success; 2 bad spec, data, output folder or bundle (one clear paragraph, no
traceback); 1 unexpected internal error, or (``verify``) a bundle that does not reproduce.
Heavy libraries are imported inside the commands so that ``--help``, ``schema``, ``check``
and ``verify --help`` start quickly.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path
from typing import Annotated

import typer

from reportkit import __version__
from reportkit.errors import ReportkitError

app = typer.Typer(
    name="reportkit",
    help="Build a reproducible appendix (HTML, PDF, results.json) for an IV analysis "
    "from one spec file.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
)


def _stderr():  # type: ignore[no-untyped-def]
    from rich.console import Console

    return Console(stderr=True, highlight=False)


def _fail(err: ReportkitError) -> None:
    sys.stderr.write(f"error: {err}\n")
    raise typer.Exit(code=err.exit_code)


def _progress_printer(console):  # type: ignore[no-untyped-def]
    def show(stage: str) -> None:
        console.print(f"  - {stage} ...", highlight=False)

    return show


def _run(
    loaded_spec_path: Path | None,
    *,
    output: Path | None,
    overwrite: bool,
    timings: bool,
    pdf: bool,
    demo: bool = False,
) -> None:
    from reportkit import api

    console = _stderr()
    try:
        if demo:
            spec_path = demo_spec_path()
            loaded = api.load(spec_path)
            command = f"reportkit demo {output}" if output else "reportkit demo"
        else:
            assert loaded_spec_path is not None
            loaded = api.load(loaded_spec_path)
            command = (
                "reportkit run "
                + loaded_spec_path.name
                + (f" --output {output.name}" if output else "")
            )
        console.print(f"reportkit {__version__}: {loaded.spec.study.title}", markup=False)
        outcome = api.run(
            loaded,
            output=output,
            overwrite=overwrite,
            command=command,
            progress=_progress_printer(console),
            pdf=pdf,
        )
    except ReportkitError as err:
        _fail(err)
        return
    console.print(f"bundle written to {outcome.bundle}", markup=False)
    if timings:
        total = sum(outcome.timings.stages.values())
        console.print("time per stage:", markup=False)
        for name, secs in outcome.timings.stages.items():
            console.print(f"  {name:<32} {secs:8.2f} s", markup=False)
        console.print(f"  {'total':<32} {total:8.2f} s", markup=False)


def demo_spec_path() -> Path:
    """The demo spec shipped with the package (or in a source checkout)."""
    from importlib import resources

    packaged = resources.files("reportkit").joinpath("_demo", "tutoring.yaml")
    if packaged.is_file():
        return Path(str(packaged))
    source = Path(__file__).resolve().parents[1] / "fixtures" / "demo" / "tutoring.yaml"
    return source


@app.command()
def run(
    spec: Annotated[Path, typer.Argument(help="The spec file (YAML).")],
    output: Annotated[
        Path | None,
        typer.Option("--output", "-o", help="Bundle folder (default: run.output in the spec)."),
    ] = None,
    overwrite: Annotated[bool, typer.Option(help="Replace an existing bundle folder.")] = False,
    timings: Annotated[bool, typer.Option(help="Print the time spent in each stage.")] = False,
    pdf: Annotated[bool, typer.Option(help="Also render appendix.pdf.")] = True,
) -> None:
    """Run the analysis in SPEC and write the appendix bundle."""
    _run(spec, output=output, overwrite=overwrite, timings=timings, pdf=pdf)


@app.command()
def demo(
    folder: Annotated[Path, typer.Argument(help="Bundle folder for the demo.")] = Path(
        "reportkit-demo"
    ),
    overwrite: Annotated[bool, typer.Option(help="Replace an existing bundle folder.")] = False,
    timings: Annotated[bool, typer.Option(help="Print the time spent in each stage.")] = False,
) -> None:
    """Build the appendix for the built-in tutoring-voucher demo (no input needed)."""
    _run(None, output=folder, overwrite=overwrite, timings=timings, pdf=True, demo=True)


@app.command()
def check(spec: Annotated[Path, typer.Argument(help="The spec file (YAML).")]) -> None:
    """Validate SPEC and its data; print the sample and what would be estimated."""
    from reportkit import api
    from reportkit.data.binary import binary_outcome, binary_treatment
    from reportkit.data.named_columns import check_named_columns
    from reportkit.data.prepare import prepare

    try:
        loaded = api.load(spec)
        prepared = prepare(loaded)
        check_named_columns(loaded, prepared.frame_columns, Path(loaded.spec.data.path).name)
        binary_treatment(prepared, loaded)
        binary_outcome(prepared, loaded)
    except ReportkitError as err:
        _fail(err)
        return
    s = loaded.spec.resolved()
    out = typer.echo
    out(f"spec: {spec.name} is valid")
    out(f"study: {s.study.title}")
    out("sample:")
    for step in prepared.sample.steps:
        removed, remaining = step.rows_removed, step.rows_remaining
        out(f"  {step.step:<40} removed {removed:>8,}  remaining {remaining:>8,}")
    out(f"  rows used: {prepared.sample.rows_used:,}")
    if prepared.sample.clusters_used:
        out(f"  clusters: {', '.join(str(c) for c in prepared.sample.clusters_used)}")
    d = prepared.design
    out("would estimate:")
    out(f"  outcome: {d.outcome_name}")
    out(f"  endogenous: {', '.join(d.endog_names)}")
    out(f"  instruments: {', '.join(d.instrument_names)}")
    out(f"  controls: {', '.join(d.control_names) or '(none)'}")
    out(f"  fixed effects: {', '.join(d.fixed_effect_names) or '(none)'}")
    out(f"  estimators: {', '.join(s.estimators)}; covariance: {s.covariance}")


@app.command()
def new(
    datafile: Annotated[
        Path, typer.Argument(help="The data file (.csv, .tsv, .parquet, .dta, .sav).")
    ],
    output: Annotated[
        Path | None,
        typer.Option(
            "--output", "-o", help="Spec file to write (default: DATAFILE's name with .yaml)."
        ),
    ] = None,
    overwrite: Annotated[bool, typer.Option(help="Replace an existing spec file.")] = False,
) -> None:
    """Write a starter spec for DATAFILE: its columns listed, the model left for you to fill in."""
    from reportkit.starter import write_starter

    try:
        written = write_starter(datafile, output=output, overwrite=overwrite)
    except ReportkitError as err:
        _fail(err)
        return
    typer.echo(f"starter spec written to {written}")
    typer.echo(
        "next: edit the model section (it is commented out; the column list under it "
        f"guesses each column's role), then run: reportkit check {written}"
    )


@app.command()
def verify(
    bundle: Annotated[Path, typer.Argument(help="The bundle folder that 'reportkit run' wrote.")],
    data: Annotated[
        Path | None,
        typer.Option(
            "--data",
            help="The data file, when it is not where the bundle expects it "
            "(e.g. the bundle was moved).",
        ),
    ] = None,
    show_all: Annotated[
        bool, typer.Option("--all", help="List every differing value (default: the first 40).")
    ] = False,
) -> None:
    """Check BUNDLE's checksums, re-run it and compare every number with its results.json.

    Exit code 0: all agrees; 1: a file or a number differs; 2: BUNDLE cannot be used.
    """
    from reportkit.verify import report_lines, verify_bundle

    typer.echo(
        f"reportkit {__version__} verify: checking '{bundle}' "
        "(checksums, then re-running the analysis)"
    )
    try:
        report = verify_bundle(bundle, data=data)
    except ReportkitError as err:
        _fail(err)
        return
    for line in report_lines(report, limit=None if show_all else 40):
        typer.echo(line)
    if not report.ok:
        raise typer.Exit(code=1)


@app.command()
def schema(
    of: Annotated[str, typer.Option("--of", help="Which schema: 'spec' or 'results'.")] = "spec",
) -> None:
    """Print the JSON Schema of the spec (default) or of results.json."""
    if of == "spec":
        from reportkit.spec.loader import spec_json_schema

        doc = spec_json_schema()
    elif of == "results":
        from reportkit.results import json_schema

        doc = json_schema()
    else:
        sys.stderr.write(f"error: --of must be 'spec' or 'results', not '{of}'\n")
        raise typer.Exit(code=2)
    typer.echo(json.dumps(doc, indent=2, sort_keys=True))


@app.callback(invoke_without_command=True)
def _root(
    version: Annotated[bool, typer.Option("--version", help="Print the version and exit.")] = False,
) -> None:
    if version:
        typer.echo(f"reportkit {__version__}")
        raise typer.Exit()


def main() -> None:
    """Entry point: unexpected errors exit with code 1 and a short message."""
    try:
        code = app(standalone_mode=False)
    except typer.Exit as e:
        sys.exit(e.exit_code)
    except SystemExit:
        raise
    except ReportkitError as err:  # pragma: no cover - commands catch these
        sys.stderr.write(f"error: {err}\n")
        sys.exit(2)
    except Exception as exc:  # click usage errors come through here too
        import click

        if isinstance(exc, click.exceptions.UsageError):
            exc.show()
            sys.exit(2)
        if isinstance(exc, click.exceptions.Abort):
            sys.exit(1)
        sys.stderr.write(
            f"internal error: {type(exc).__name__}: {exc}\n"
            "This is a bug in reportkit; please report it with the spec and the command.\n"
        )
        sys.exit(1)
    sys.exit(code if isinstance(code, int) else 0)
