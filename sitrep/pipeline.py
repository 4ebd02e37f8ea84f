"""The weekly job, end to end: the only module that imports every stage.

``check`` reads and validates; ``build`` runs ingest -> analysis -> render ->
deliver and writes the outputs. Nothing is written unless validation passed
and every output was produced in memory first, so a failed run leaves every
earlier report untouched.
"""

from __future__ import annotations

import collections
import contextlib
import dataclasses
import datetime as dt
import hashlib
import importlib.util
import json
import time
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import TYPE_CHECKING, Any

from sitrep.config import Config
from sitrep.errors import ConfigError, InputError, ValidationFailed
from sitrep.ingest.geometry import read_districts
from sitrep.ingest.read import read_count_table
from sitrep.ingest.validate import validate_against_prior, validate_table
from sitrep.model import CountTable, Districts, Finding, InputFile, Severity, ValidationReport
from sitrep.progress import Progress
from sitrep.weeks import EpiWeek, WeekSystem

if TYPE_CHECKING:
    from sitrep.analysis.week import WeekAnalysis
    from sitrep.analysis.weights import DistrictGraph
    from sitrep.deliver.archive import Bundle
    from sitrep.deliver.signing import Signer
    from sitrep.render.context import ReportContext

# The analysis, render and deliver stages are imported inside build(): check()
# and the CLI's check verb need only ingest, and importing matplotlib,
# libpysal, statsmodels and the rest costs about 1.5 s (python -X importtime).

__all__ = [
    "PREFLIGHT_RULES",
    "STAGES",
    "WEIGHTS_CACHE_FOLDER",
    "Inputs",
    "RunResult",
    "build",
    "check",
    "permutation_engine",
    "preflight",
    "read_inputs",
]

Log = Callable[[str], None]

STAGES = (
    "read",
    "validate",
    "imports",
    "weights",
    "analysis",
    "thresholds",
    "maps",
    "html",
    "pdf",
    "drafts",
    "results",
    "archive",
)
"""Stage names of the ``timings`` that :func:`build` fills in, in run order.

``imports`` is the loading of the analysis, render and deliver modules,
which :func:`build` imports only once validation has passed (see the note
after the imports of this module); ``pdf`` is the time the build spends
handing the document over and then waiting for the PDF, which renders in
another process while the drafts and results are made."""


@contextlib.contextmanager
def _timed(
    timings: dict[str, float] | None,
    stage: str,
    progress: Progress | None = None,
    detail: str = "",
) -> Iterator[None]:
    """Add the wall-clock seconds of the block to ``timings[stage]`` (nothing when None) and
    report the stage to ``progress`` (its start, and its end when it succeeded)."""
    if timings is None and progress is None:
        yield
        return
    start = time.perf_counter()
    if progress is not None:
        progress.start(stage, detail)
    succeeded = False
    try:
        yield
        succeeded = True
    finally:
        elapsed = time.perf_counter() - start
        if timings is not None:
            timings[stage] = timings.get(stage, 0.0) + elapsed
        if progress is not None and succeeded:
            progress.finish(stage, elapsed)


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


def read_inputs(
    config: Config,
    *,
    today: dt.date | None = None,
    timings: dict[str, float] | None = None,
    progress: Progress | None = None,
    out_dir: Path | None = None,
    archive: bool = True,
) -> Inputs:
    """Read and validate this week's table, last week's, the history and the boundaries.

    Returns the inputs and every finding; raises only for unreadable files or
    configuration errors. ``Inputs.validation.blocked`` says whether to stop.
    When ``timings`` is given, the seconds spent reading (parse-stage rules
    included) and validating are added to its ``"read"`` and ``"validate"`` keys;
    ``progress`` hears of both stages. The findings include those of
    :func:`preflight` (``out_dir`` and ``archive`` as for :func:`build`), so
    whatever would stop a build after validation is found here too.
    """
    system = WeekSystem(config.weeks.system)
    settings = config.input
    with _timed(timings, "read", progress):
        districts, report = read_districts(_require(settings.boundaries, "boundaries"), settings)
        table, found = read_count_table(
            _require(settings.table, "table"), settings, system, role="table"
        )
        report = report.merged(found)
        prior = history = None
        if settings.prior_table is not None:
            prior, found = read_count_table(
                settings.prior_table, settings, system, role="prior_table"
            )
            report = report.merged(found)
        if settings.history is not None:
            history, found = read_count_table(settings.history, settings, system, role="history")
            report = report.merged(found)
    start = config.weeks.season_start_week
    with _timed(timings, "validate", progress):
        if table is not None:
            weekly, inferred = _weekly_file(config, prior)
            report = report.merged(
                validate_table(
                    table,
                    districts,
                    config.validation,
                    today=today,
                    season_start_week=start,
                    weekly_file=weekly,
                    weekly_inferred=inferred,
                    prior=prior,
                )
            )
        if history is not None:
            report = report.merged(
                validate_table(
                    history,
                    districts,
                    config.validation,
                    today=today,
                    season_start_week=start,
                    latest_week_rules=False,
                )
            )
        if table is not None and prior is not None:
            report = report.merged(validate_against_prior(table, prior, config.validation))
        report = report.merged(
            ValidationReport(preflight(config, table, districts, out_dir=out_dir, archive=archive))
        )
    return Inputs(table, prior, history, districts, ValidationReport(_dedupe(report.findings)))


def _weekly_file(config: Config, prior: CountTable | None) -> tuple[bool, bool]:
    """Whether the table is one week (``input.weekly_file``, else: last week's file held one
    week), and whether that was inferred rather than declared."""
    if config.input.weekly_file is not None:
        return config.input.weekly_file, False
    if prior is not None and len(prior.weeks) == 1:
        return True, True
    return False, False


def _dedupe(findings: tuple[Any, ...]) -> tuple[Any, ...]:
    seen: set[Any] = set()
    out = []
    for f in findings:
        if f not in seen:
            seen.add(f)
            out.append(f)
    return tuple(out)


def check(config: Config, *, today: dt.date | None = None) -> ValidationReport:
    """Validate the configured inputs without writing anything.

    Every condition that would stop ``build`` is an error here too
    (:func:`preflight`), and a signing key that ``build`` could not use
    raises the same error as there; a report week that is already archived is
    a note, since ``build --no-archive`` and ``build --reissue`` still work.
    """
    inputs = read_inputs(config, today=today)
    if not inputs.validation.blocked and config.output.archive is not None:
        _signer(config)  # a missing or unsafe signing key stops check as it stops build
    note = _archived_note(config, inputs.table)
    if note is None:
        return inputs.validation
    return ValidationReport((*inputs.validation.findings, note))


def _archived_note(config: Config, table: CountTable | None) -> Finding | None:
    """An info finding when the week a build would report already has a bundle."""
    if config.output.archive is None or table is None or not config.output.archive.is_dir():
        return None
    from sitrep.deliver.archive import bundle_dir, next_version

    system = WeekSystem(config.weeks.system)
    week = (
        EpiWeek.parse(config.weeks.report_week, system)
        if config.weeks.report_week
        else table.latest_week
    )
    latest = next_version(config.output.archive, config.report.jurisdiction, str(week)) - 1
    if latest < 1:
        return None
    bundle = bundle_dir(config.output.archive, config.report.jurisdiction, str(week), latest)
    return Finding(
        Severity.INFO,
        "week-archived",
        f"{week} is already archived as {bundle}, so sitrep build will refuse it: use "
        '--no-archive to look at the report again, or --reissue "<reason>" to publish a correction',
        value=str(week),
    )


PREFLIGHT_RULES: tuple[tuple[str, str], ...] = (
    ("report-week-missing", "weeks.report_week names a week the table does not hold"),
    ("neighbours-impossible", "analysis.knn_k cannot be met by the number of districts"),
    ("template-folder-missing", "report.template_dir is not a folder"),
    (
        "template-invalid",
        "a template in report.template_dir cannot be parsed or uses a value the report does not have",
    ),
    (
        "output-folder-unusable",
        "output.folder or output.archive is a file, or a link leads out of it",
    ),
    (
        "week-archived",
        "the report week is already archived: build needs --reissue or --no-archive (info)",
    ),
)
"""Rules of :func:`preflight`: conditions outside the input files that would stop a build
after validation. Both ``check`` and ``build`` apply them, so a check that passes means a build
that is not refused for them."""

_OUTPUT_NAMES = (
    "report.html",
    "report.pdf",
    "draft.md",
    "draft.docx",
    "email.txt",
    "results.csv",
    "results.json",
    "results-dictionary.csv",
    "validation.json",
    "manifest.json",
    "figures/map.svg",
)


def preflight(
    config: Config,
    table: CountTable | None,
    districts: Districts | None,
    *,
    out_dir: Path | None = None,
    archive: bool = True,
) -> tuple[Finding, ...]:
    """Error findings for what would stop a build after validation (:data:`PREFLIGHT_RULES`).

    ``out_dir`` is the output folder the build writes (default
    ``output.folder``); the archive folder is checked when ``archive``. The
    ``week-archived`` note is :func:`check`'s own.
    """
    found: list[Finding] = []
    if table is not None and config.weeks.report_week:
        week = EpiWeek.parse(config.weeks.report_week, WeekSystem(config.weeks.system))
        if week not in table.weeks:
            found.append(
                Finding(
                    Severity.ERROR,
                    "report-week-missing",
                    f"weeks.report_week = {config.weeks.report_week!r}, but "
                    f"{table.source.path.name} holds {table.weeks[0]} to {table.weeks[-1]}; set "
                    "weeks.report_week to one of them, or remove it to report the latest week",
                    file=table.source.path.name,
                    value=config.weeks.report_week,
                )
            )
    a = config.analysis
    if districts is not None and a.weights == "knn" and not 1 <= a.knn_k <= len(districts.ids) - 1:
        found.append(
            Finding(
                Severity.ERROR,
                "neighbours-impossible",
                f"analysis.knn_k = {a.knn_k} nearest neighbours, but the boundaries hold "
                f"{len(districts.ids)} districts (at most {len(districts.ids) - 1} neighbours "
                "each); lower analysis.knn_k",
                file=districts.source.path.name,
                value=str(a.knn_k),
            )
        )
    if config.report.template_dir is not None:
        found += _template_findings(config.report.template_dir)
    found += _folder_findings(config, out_dir or config.output.folder, archive)
    return tuple(found)


def _template_findings(folder: Path) -> list[Finding]:
    """A missing override folder, or an override template that cannot be parsed or names an
    unknown value (parsed, not rendered: a loop variable's fields are not checked)."""
    if not folder.is_dir():
        return [
            Finding(
                Severity.ERROR,
                "template-folder-missing",
                f"report.template_dir = {str(folder)!r} is not a folder; create it with sitrep "
                "templates --copy DIR, or remove the key to use the packaged templates",
                value=str(folder),
            )
        ]
    from sitrep.render.templates import template_problems

    return [
        Finding(Severity.ERROR, "template-invalid", message, file=name, line=line)
        for name, line, message in template_problems(folder)
    ]


def _folder_findings(config: Config, out_dir: Path, archive: bool) -> list[Finding]:
    from sitrep.deliver.archive import check_outputs
    from sitrep.errors import DeliveryError

    found = []
    places = [("output.folder", out_dir)]
    if archive and config.output.archive is not None:
        places.append(("output.archive", config.output.archive))
    for key, folder in places:
        problem = ""
        if folder.exists() and not folder.is_dir():
            problem = f"{key} = {str(folder)!r} is a file, not a folder"
        elif key == "output.folder":
            try:
                check_outputs(folder, list(_OUTPUT_NAMES))
            except DeliveryError as exc:
                problem = str(exc)
        if problem:
            found.append(
                Finding(
                    Severity.ERROR,
                    "output-folder-unusable",
                    f"{problem}; give {key} a folder sitrep may write into",
                    value=str(folder),
                )
            )
    return found


_GRAPH_CACHE: collections.OrderedDict[tuple[Any, ...], DistrictGraph] = collections.OrderedDict()
_GRAPH_CACHE_SIZE = 4
"""Graphs kept in this process (the most recently used), so a batch worker does not grow."""

WEIGHTS_CACHE_FOLDER = Path(".cache") / "weights"
"""Where, under the archive root, the on-disk weights cache lives (see :mod:`sitrep.cache`)."""


def _graph(districts: Districts, config: Config, log: Log = _quiet) -> DistrictGraph:
    """Spatial weights, once per boundary file and settings: in this process and on disk.

    The in-process cache is keyed like the disk cache (:func:`sitrep.cache.graph_key`).
    The disk cache is used when ``output.archive`` is set and lives in
    :data:`WEIGHTS_CACHE_FOLDER` under it.
    """
    from sitrep.analysis.weights import build_graph
    from sitrep.cache import cached_graph, graph_key

    a = config.analysis
    key = tuple(sorted(graph_key(districts, config.input, a).items())) + (districts.ids,)
    if key in _GRAPH_CACHE:
        _GRAPH_CACHE.move_to_end(key)
        return _GRAPH_CACHE[key]
    folder = (
        config.output.archive / WEIGHTS_CACHE_FOLDER if config.output.archive is not None else None
    )
    graph, outcome = cached_graph(
        folder,
        districts,
        config.input,
        a,
        lambda: build_graph(
            districts.frame,
            kind=a.weights,
            k=a.knn_k,
            link_islands_k=a.link_islands_k,
            metric=districts.map_frame,
        ),
    )
    if outcome.status != "off":
        log(_CACHE_WORDS[outcome.status] + (f" ({outcome.reason})" if outcome.reason else ""))
    _GRAPH_CACHE[key] = graph
    while len(_GRAPH_CACHE) > _GRAPH_CACHE_SIZE:
        _GRAPH_CACHE.popitem(last=False)
    return graph


_CACHE_WORDS = {
    "hit": "neighbours: reused from an earlier run (same boundary file and settings)",
    "miss": "neighbours: worked out from the boundaries and kept for later runs",
    "rebuilt": "neighbours: worked out again from the boundaries (the kept copy could not be used)",
}
"""What the weights cache did, in words (see :class:`sitrep.cache.CacheOutcome`)."""


def permutation_engine() -> str:
    """How esda runs the conditional permutations here (for the manifest).

    esda uses numba when it can import it and its plain numpy/Python path
    otherwise; the choice changes speed, not results (same seed, same
    permutation draws). sitrep ships without numba: the numpy path needs no
    compilation in each new process.
    """
    if importlib.util.find_spec("numba") is None:
        return "esda numpy path (numba not installed)"
    return "esda numba path"


def build(
    config: Config,
    *,
    out_dir: Path | None = None,
    archive: bool = True,
    reissue_reason: str | None = None,
    today: dt.date | None = None,
    log: Log = _quiet,
    timings: dict[str, float] | None = None,
    progress: Progress | None = None,
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
    today : datetime.date, optional
        The date the run treats as today (for the future-week rule); default
        the machine's date.
    log : callable, optional
        Receives one line of progress text at a time; silent by default.
    timings : dict of str to float, optional
        When given, the wall-clock seconds of each stage of :data:`STAGES`
        are added to it (``time.perf_counter`` around each stage; a stage that
        did not run is absent). Nothing is printed. For benchmarks.
    progress : Progress, optional
        Hears each stage as it starts and ends, and the pieces done inside the
        permutation and map stages (:mod:`sitrep.progress`); it writes
        nowhere near the outputs, which are the same with or without it.

    Returns
    -------
    RunResult

    Raises
    ------
    ValidationFailed
        When validation found an error; nothing is written.
    """
    worker = None
    if config.output.pdf:
        from sitrep.deliver.pdf import PdfWorker

        worker = PdfWorker()  # starts WeasyPrint now, in parallel with reading and analysis
    try:
        return _build(
            config,
            out_dir=out_dir,
            archive=archive,
            reissue_reason=reissue_reason,
            today=today,
            log=log,
            timings=timings,
            progress=progress,
            worker=worker,
        )
    finally:
        if progress is not None:
            progress.close()
        if worker is not None:
            worker.close()


def _build(
    config: Config,
    *,
    out_dir: Path | None,
    archive: bool,
    reissue_reason: str | None,
    today: dt.date | None,
    log: Log,
    timings: dict[str, float] | None,
    progress: Progress | None,
    worker: Any,
) -> RunResult:
    """:func:`build` with the PDF worker already started."""
    inputs = read_inputs(
        config,
        today=today or dt.date.today(),
        timings=timings,
        progress=progress,
        out_dir=out_dir,
        archive=archive,
    )
    if inputs.validation.blocked:
        raise ValidationFailed(
            f"validation found {len(inputs.validation.errors)} error(s); nothing was written",
            inputs.validation,
        )
    signer = _signer(config) if archive and config.output.archive is not None else None
    with _timed(timings, "imports", progress):
        from sitrep.analysis.seasonal_context import seasonal_context
        from sitrep.analysis.week import analyse_week
        from sitrep.deliver.archive import (
            already_archived,
            bundle_dir,
            check_outputs,
            next_version,
            read_source_date_epoch,
            reproducible_env,
            source_date_epoch,
            write_bundle,
            write_outputs,
        )
        from sitrep.deliver.review import page_one_districts
        from sitrep.render.context import build_context, context_digits
        from sitrep.render.dictionary import dictionary_csv
        from sitrep.render.draft import render_docx, render_email_body, render_markdown
        from sitrep.render.html import asset_dir, render_html
        from sitrep.render.report_figures import draw_report_figures
        from sitrep.render.results import (
            INTERNAL_QUALITY_CSV,
            INTERNAL_RESULTS,
            internal_quality_csv,
            internal_results_csv,
            redact_findings,
            results_csv,
            results_json,
            validation_json,
        )
        from sitrep.render.wording.formats import fmt_week_dates
        from sitrep.versions import library_versions

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
    if archive and config.output.archive is not None and reissue_reason is None:
        # Refuse an archived week before the analysis and rendering, not after them.
        latest = next_version(config.output.archive, config.report.jurisdiction, str(week)) - 1
        if latest >= 1:
            raise already_archived(
                config.report.jurisdiction,
                str(week),
                bundle_dir(config.output.archive, config.report.jurisdiction, str(week), latest),
            )
    with _timed(timings, "weights", progress):
        graph = _graph(inputs.districts, config, log)
    runs = f"{config.analysis.permutations:,} permutations"
    with _timed(timings, "analysis", progress, runs):
        earlier = _earlier_publications(config, week) if archive else {}
        analysis = analyse_week(
            inputs.table,
            inputs.prior,
            inputs.districts,
            graph,
            config.analysis,
            week=week,
            earlier=earlier,
            on_step=_stepper(progress, "analysis"),
        )
    with _timed(timings, "thresholds", progress):
        seasonal = seasonal_context(
            inputs.history,
            inputs.table,
            week,
            config.seasonal,
            season_start_week=config.weeks.season_start_week,
        )
    published_validation = redact_findings(
        inputs.validation, analysis.disclosure.this_week.ids | analysis.disclosure.prior_week.ids
    )
    versions = library_versions()
    name = config.report.jurisdiction
    reissue = None
    version: int | None = None
    if archive and config.output.archive is not None:
        version = next_version(config.output.archive, config.report.jurisdiction, str(week))
        if reissue_reason is not None:
            reissue = (version, reissue_reason)
    with reproducible_env(source_date_epoch(week.end)):
        epoch = read_source_date_epoch()
        build_time = (
            dt.datetime.fromtimestamp(epoch, dt.UTC).isoformat().replace("+00:00", "Z")
            if epoch is not None
            else ""
        )
        digits = context_digits(analysis, seasonal)
        with _timed(timings, "maps", progress):
            figures = draw_report_figures(
                analysis,
                seasonal,
                inputs.districts,
                digits=digits,
                on_step=_stepper(progress, "maps"),
                jurisdiction=config.report.jurisdiction,
                week_dates=fmt_week_dates(week.start, week.end),
            )
        with _timed(timings, "html", progress):
            context = build_context(
                analysis=analysis,
                seasonal=seasonal,
                validation=published_validation,
                figures=figures,
                config=config,
                versions=versions,
                inputs=inputs.files,
                reissue=reissue,
                version=version,
                build_time=build_time,
                digits=digits,
                projection=inputs.districts.projection,
            )
            html = render_html(context, config.report.template_dir)
            pdf_html = render_html(context, config.report.template_dir, for_pdf=True)
        files: dict[str, bytes] = {"report.html": html.encode("utf-8")}
        if worker is not None:
            # The PDF renders in the worker process while drafts and results are made here.
            with _timed(timings, "pdf"):
                variant = config.output.pdf_variant if config.output.pdf_variant != "none" else None
                worker.start(
                    pdf_html,
                    asset_dir=asset_dir(),
                    pdf_variant=variant,
                    # PDF/A-3 allows any attached file; the other variants get none
                    attachments=(
                        ("results.csv", results_csv(analysis, config.analysis, jurisdiction=name)),
                    )
                    if variant and variant.startswith("pdf/a-3")
                    else (),
                )
        with _timed(timings, "drafts", progress):
            files["draft.md"] = render_markdown(context, config.report.template_dir).encode("utf-8")
            files["draft.docx"] = render_docx(context)
            files["email.txt"] = render_email_body(context, config.report.template_dir).encode(
                "utf-8"
            )
    with _timed(timings, "results", progress):
        files["results.csv"] = results_csv(analysis, config.analysis, jurisdiction=name)
        files["results.json"] = results_json(analysis, config.analysis, jurisdiction=name)
        files["results-dictionary.csv"] = dictionary_csv()
        files["validation.json"] = validation_json(published_validation)
        if config.output.keep_suppressed_values:
            files[INTERNAL_RESULTS] = internal_results_csv(
                analysis, config.analysis, jurisdiction=name
            )
        district_names = {
            str(k): str(v)
            for k, v in zip(
                analysis.table["district_id"], analysis.table["district_name"], strict=True
            )
        }
        # the annex keeps rule, file, line and column; withheld districts' values stay redacted
        files[INTERNAL_QUALITY_CSV] = internal_quality_csv(
            published_validation, district_names, context.named_district_ids
        )
    if worker is not None:
        with _timed(timings, "pdf", progress):
            pdf = worker.result()
        html_bytes = files.pop("report.html")
        files = {"report.html": html_bytes, "report.pdf": pdf, **files}  # the order of before
    with _timed(timings, "archive", progress):
        for name, data in figures.files().items():
            files[f"figures/{name}"] = data
        manifest = _manifest(config, week, inputs, versions, reissue_reason)
        manifest["report_version"] = context.report_version
        manifest["page_one_districts"] = page_one_districts(
            context.named_district_ids, district_names
        )
        manifest["outputs"] = {
            name: {"sha256": hashlib.sha256(data).hexdigest(), "size_bytes": len(data)}
            for name, data in sorted(files.items())
        }
        files["manifest.json"] = (json.dumps(manifest, indent=2, sort_keys=True) + "\n").encode()

        # refuse a bad output folder before the immutable bundle exists
        check_outputs(out_dir or config.output.folder, list(files))
        bundle = None
        if archive and config.output.archive is not None:
            archived = dict(files)
            archived.pop("manifest.json")
            if config.output.copy_inputs:
                for f in inputs.files:
                    archived[f"inputs/{f.role}{f.path.suffix.lower()}"] = f.path.read_bytes()
                    if f.path.suffix.lower() == ".shp":
                        for sidecar in sorted(f.path.parent.glob(f.path.stem + ".*")):
                            archived[f"inputs/{f.role}{sidecar.suffix.lower()}"] = (
                                sidecar.read_bytes()
                            )
            bundle = write_bundle(
                config.output.archive,
                config.report.jurisdiction,
                str(week),
                archived,
                manifest,
                reissue_reason=reissue_reason,
                signer=signer,
            )
            log(f"archived bundle {bundle.path}")
        written = write_outputs(out_dir or config.output.folder, files)
        if bundle is not None and config.output.archive is not None:
            from sitrep.deliver.index import refresh_index

            refresh_index(config.output.archive, log)
    return RunResult(week, inputs.validation, written, bundle, analysis, context)


def _earlier_publications(config: Config, week: EpiWeek) -> dict[str, Any]:
    """What the archived reports of this week and last week published and withheld.

    Read from every version's results.json under ``output.archive`` (docs/methods.md §6.2):
    a district withheld there stays withheld, and counts shown there count as known.
    """
    from sitrep.analysis.disclosure import Earlier
    from sitrep.deliver.archive import archived_results
    from sitrep.render.results import earlier_publication

    root = config.output.archive
    if root is None:
        return {}
    out: dict[str, Earlier] = {}
    for label in (week.label, (week - 1).label):
        merged = Earlier()
        for report_week in dict.fromkeys((label, week.label)):
            for path, data in archived_results(root, config.report.jurisdiction, report_week):
                try:
                    found = earlier_publication(json.loads(data), label)
                except (ValueError, UnicodeDecodeError) as exc:
                    raise InputError(
                        f"{path}: cannot read the archived results ({exc}); small counts could not "
                        "be kept withheld across report versions, so nothing was built"
                    ) from exc
                merged = merged.merged(found)
        out[label] = merged
    return out


def _signer(config: Config) -> Signer | None:
    """The bundle signer from ``output.signing_key`` / ``$SITREP_SIGNING_KEY``, or None.

    Loaded before any work so that a missing or unsafe key stops the run at
    once; refused when the jurisdiction's latest bundle is signed and no key is
    configured (an unsigned bundle may not follow a signed one).
    """
    from sitrep.deliver.archive import chain_head, jurisdiction_slug
    from sitrep.deliver.signing import load_signer, signing_key_path

    assert config.output.archive is not None
    path = signing_key_path(config.output.signing_key)
    if path is not None:
        return load_signer(path)
    head = chain_head(config.output.archive / jurisdiction_slug(config.report.jurisdiction))
    if head is not None and head.signed:
        raise ConfigError(
            f"the latest archived bundle of {config.report.jurisdiction} ({head.bundle_id}) is "
            "signed, but no signing key is configured; set output.signing_key (or "
            "$SITREP_SIGNING_KEY) to the jurisdiction's key. An unsigned bundle may not follow "
            "a signed one"
        )
    return None


def _stepper(progress: Progress | None, stage: str) -> Callable[[int, int], None] | None:
    """``on_step(done, total)`` for a stage function, passing the pieces to ``progress``."""
    if progress is None:
        return None
    reporter = progress

    def on_step(done: int, total: int) -> None:
        reporter.step(stage, done, total)

    return on_step


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
        "source_date_epoch": _source_date_epoch(week.end),
        "permutation_engine": permutation_engine(),
        "map_projection": _map_projection(inputs.districts),
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


def _map_projection(districts: Districts | None) -> dict[str, Any]:
    """The CRS of the maps and distances, for the manifest."""
    if districts is None:
        return {}
    crs = districts.map_frame.crs
    return {
        "boundaries_crs": districts.frame.crs.to_string() if districts.frame.crs else None,
        "map_crs": crs.to_string() if crs else None,
        "map_crs_wkt": crs.to_wkt() if crs else None,
        "reprojected": districts.projected is not None,
        "note": districts.projection,
    }


def _source_date_epoch(day: dt.date) -> int:
    from sitrep.deliver.archive import source_date_epoch

    return source_date_epoch(day)


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
