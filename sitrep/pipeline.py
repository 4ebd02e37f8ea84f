"""The weekly job, end to end: the only module that imports every stage.

``check`` reads and validates; ``build`` runs ingest -> analysis -> render ->
deliver and writes the outputs. Nothing is written unless validation passed
and every output was produced in memory first, so a failed run leaves every
earlier report untouched.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import hashlib
import json
from collections.abc import Callable
from pathlib import Path
from typing import Any

from sitrep.analysis.seasonal_context import seasonal_context
from sitrep.analysis.week import WeekAnalysis, analyse_week
from sitrep.analysis.weights import DistrictGraph, build_graph
from sitrep.config import Config
from sitrep.deliver.archive import (
    Bundle,
    next_version,
    reproducible_env,
    source_date_epoch,
    write_bundle,
    write_outputs,
)
from sitrep.deliver.pdf import html_to_pdf
from sitrep.errors import ConfigError, InputError, ValidationFailed
from sitrep.ingest.geometry import read_districts
from sitrep.ingest.read import read_count_table
from sitrep.ingest.validate import validate_against_prior, validate_table
from sitrep.model import CountTable, Districts, InputFile, ValidationReport
from sitrep.render.context import ReportContext, build_context
from sitrep.render.draft import render_docx, render_email_body, render_markdown
from sitrep.render.html import asset_dir, render_html
from sitrep.render.report_figures import draw_report_figures
from sitrep.render.results import results_csv, results_json, validation_json
from sitrep.versions import library_versions
from sitrep.weeks import EpiWeek, WeekSystem

__all__ = ["Inputs", "RunResult", "build", "check", "read_inputs"]

Log = Callable[[str], None]


def _quiet(_: str) -> None:
    """Default logger: say nothing."""


@dataclasses.dataclass(frozen=True, eq=False)
class Inputs:
    """Everything read from disk for one run, with the findings of validation."""

    table: CountTable | None
    prior: CountTable | None
    history: CountTable | None
    districts: Districts | None
    validation: ValidationReport

    @property
    def files(self) -> tuple[InputFile, ...]:
        """The input files, for the manifest."""
        items: list[InputFile] = []
        for part in (self.table, self.prior, self.history, self.districts):
            if part is not None:
                items.append(part.source)
        return tuple(items)


@dataclasses.dataclass(frozen=True, eq=False)
class RunResult:
    """What a build produced."""

    week: EpiWeek
    validation: ValidationReport
    outputs: tuple[Path, ...]
    bundle: Bundle | None
    analysis: WeekAnalysis
    context: ReportContext


def _require(path: Path | None, key: str) -> Path:
    if path is None:
        raise ConfigError(f"input.{key} is not set; give the path of the file in the config")
    return path


def read_inputs(config: Config, *, today: dt.date | None = None) -> Inputs:
    """Read and validate this week's table, last week's, the history and the boundaries.

    Returns the inputs and every finding; raises only for unreadable files or
    configuration errors. ``Inputs.validation.blocked`` says whether to stop.
    """
    system = WeekSystem(config.weeks.system)
    settings = config.input
    districts, report = read_districts(_require(settings.boundaries, "boundaries"), settings)
    table, found = read_count_table(_require(settings.table, "table"), settings, system, role="table")
    report = report.merged(found)
    prior = history = None
    if settings.prior_table is not None:
        prior, found = read_count_table(settings.prior_table, settings, system, role="prior_table")
        report = report.merged(found)
    if settings.history is not None:
        history, found = read_count_table(settings.history, settings, system, role="history")
        report = report.merged(found)
    start = config.weeks.season_start_week
    if table is not None:
        report = report.merged(
            validate_table(table, districts, config.validation, today=today, season_start_week=start)
        )
    if history is not None:
        report = report.merged(
            validate_table(
                history, districts, config.validation, today=today, season_start_week=start,
                latest_week_rules=False,
            )
        )
    if table is not None and prior is not None:
        report = report.merged(validate_against_prior(table, prior, config.validation))
    return Inputs(table, prior, history, districts, ValidationReport(_dedupe(report.findings)))


def _dedupe(findings: tuple[Any, ...]) -> tuple[Any, ...]:
    seen: set[Any] = set()
    out = []
    for f in findings:
        if f not in seen:
            seen.add(f)
            out.append(f)
    return tuple(out)


def check(config: Config, *, today: dt.date | None = None) -> ValidationReport:
    """Validate the configured inputs without writing anything."""
    return read_inputs(config, today=today).validation


_GRAPH_CACHE: dict[tuple[str, str, int, int], DistrictGraph] = {}


def _graph(districts: Districts, config: Config) -> DistrictGraph:
    """Spatial weights, built once per boundary file checksum and settings in this process."""
    a = config.analysis
    key = (districts.source.sha256, a.weights, a.knn_k, a.link_islands_k)
    if key not in _GRAPH_CACHE:
        _GRAPH_CACHE[key] = build_graph(
            districts.frame, kind=a.weights, k=a.knn_k, link_islands_k=a.link_islands_k
        )
    return _GRAPH_CACHE[key]


def build(
    config: Config,
    *,
    out_dir: Path | None = None,
    archive: bool = True,
    reissue_reason: str | None = None,
    today: dt.date | None = None,
    log: Log = _quiet,
) -> RunResult:
    """Run the whole weekly job.

    Parameters
    ----------
    config : Config
        The jurisdiction's configuration.
    out_dir : Path, optional
        Plain output folder (default ``config.output.folder``); files there are
        replaced atomically one by one.
    archive : bool
        Also write the immutable bundle under ``config.output.archive`` when set.
    reissue_reason : str, optional
        Write a new version of an already archived week, giving the reason.

    Raises
    ------
    ValidationFailed
        When validation found an error; nothing is written.
    """
    inputs = read_inputs(config, today=today or dt.date.today())
    if inputs.validation.blocked:
        raise ValidationFailed(
            f"validation found {len(inputs.validation.errors)} error(s); nothing was written",
            inputs.validation,
        )
    assert inputs.table is not None and inputs.districts is not None
    system = WeekSystem(config.weeks.system)
    week = (
        EpiWeek.parse(config.weeks.report_week, system)
        if config.weeks.report_week
        else inputs.table.latest_week
    )
    if week not in inputs.table.weeks:
        raise InputError(
            f"report week {week} is not in {inputs.table.source.path.name}; "
            f"it holds {inputs.table.weeks[0]} to {inputs.table.weeks[-1]}"
        )
    log(f"report week {week} ({week.start:%d %b %Y} to {week.end:%d %b %Y})")
    graph = _graph(inputs.districts, config)
    analysis = analyse_week(
        inputs.table, inputs.prior, inputs.districts, graph, config.analysis, week=week
    )
    seasonal = seasonal_context(
        inputs.history, inputs.table, week, config.seasonal, season_start_week=config.weeks.season_start_week
    )
    versions = library_versions()
    with reproducible_env(source_date_epoch(week.end)):
        figures = draw_report_figures(analysis, seasonal, inputs.districts)
        context = build_context(
            analysis=analysis,
            seasonal=seasonal,
            validation=inputs.validation,
            figures=figures,
            config=config,
            versions=versions,
            inputs=inputs.files,
            reissue=_reissue(config, week, reissue_reason),
        )
        html = render_html(context, config.report.template_dir)
        pdf_html = render_html(context, config.report.template_dir, for_pdf=True)
        files: dict[str, bytes] = {"report.html": html.encode("utf-8")}
        if config.output.pdf:
            files["report.pdf"] = html_to_pdf(
                pdf_html,
                asset_dir=asset_dir(),
                pdf_variant=config.output.pdf_variant,
                attachments=(("results.csv", results_csv(analysis, config.analysis)),)
                if config.output.pdf_variant
                else (),
            )
        files["draft.md"] = render_markdown(context, config.report.template_dir).encode("utf-8")
        files["draft.docx"] = render_docx(context)
        files["email.txt"] = render_email_body(context, config.report.template_dir).encode("utf-8")
    files["results.csv"] = results_csv(analysis, config.analysis)
    files["results.json"] = results_json(analysis, config.analysis)
    files["validation.json"] = validation_json(inputs.validation)
    for name, data in figures.files().items():
        files[f"figures/{name}"] = data
    manifest = _manifest(config, week, inputs, versions, reissue_reason)
    manifest["outputs"] = {
        name: {"sha256": hashlib.sha256(data).hexdigest(), "size_bytes": len(data)}
        for name, data in sorted(files.items())
    }
    files["manifest.json"] = (json.dumps(manifest, indent=2, sort_keys=True) + "\n").encode()

    bundle = None
    if archive and config.output.archive is not None:
        archived = dict(files)
        archived.pop("manifest.json")
        if config.output.copy_inputs:
            for f in inputs.files:
                archived[f"inputs/{f.role}{f.path.suffix.lower()}"] = f.path.read_bytes()
                if f.path.suffix.lower() == ".shp":
                    for sidecar in sorted(f.path.parent.glob(f.path.stem + ".*")):
                        archived[f"inputs/{f.role}{sidecar.suffix.lower()}"] = sidecar.read_bytes()
        bundle = write_bundle(
            config.output.archive,
            config.report.jurisdiction,
            str(week),
            archived,
            manifest,
            reissue_reason=reissue_reason,
        )
        log(f"archived bundle {bundle.path}")
    written = write_outputs(out_dir or config.output.folder, files)
    return RunResult(week, inputs.validation, written, bundle, analysis, context)


def _reissue(config: Config, week: EpiWeek, reason: str | None) -> tuple[int, str] | None:
    """(version being written, reason) for a reissue; None for a first issue."""
    if reason is None or config.output.archive is None:
        return None
    return next_version(config.output.archive, config.report.jurisdiction, str(week)), reason


def _manifest(
    config: Config,
    week: EpiWeek,
    inputs: Inputs,
    versions: dict[str, str],
    reissue_reason: str | None,
) -> dict[str, Any]:
    return {
        "report_week": str(week),
        "week_start": week.start.isoformat(),
        "week_end": week.end.isoformat(),
        "week_system": week.system.value,
        "jurisdiction": config.report.jurisdiction,
        "report_version": config.report.version,
        "seed": config.analysis.seed,
        "permutations": config.analysis.permutations,
        "source_date_epoch": source_date_epoch(week.end),
        "parameters": _parameters(config),
        "versions": versions,
        "inputs": [
            {
                "role": f.role,
                "name": f.path.name,
                "sha256": f.sha256,
                "size_bytes": f.size_bytes,
            }
            for f in inputs.files
        ],
        "validation": {
            "errors": len(inputs.validation.errors),
            "warnings": len(inputs.validation.warnings),
        },
        "reissue_reason": reissue_reason,
    }


def _parameters(config: Config) -> dict[str, Any]:
    """Every setting, paths relative to the config file; where outputs go is left out
    (it is where the bundle is), so the same week gives the same manifest anywhere."""
    params = _relative_paths(config.as_dict(), config.source)
    params["output"].pop("folder", None)
    params["output"].pop("archive", None)
    return params


def _relative_paths(value: Any, source: Path | None) -> Any:
    """Paths in the manifest relative to the config file, so bundles do not depend on the machine."""
    base = source.parent if source is not None else None
    if isinstance(value, dict):
        return {k: _relative_paths(v, source) for k, v in value.items() if k != "source"}
    if isinstance(value, list):
        return [_relative_paths(v, source) for v in value]
    if isinstance(value, str) and base is not None and value.startswith(str(base)):
        return str(Path(value).relative_to(base))
    return value
