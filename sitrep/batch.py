"""Many jurisdictions in one run: one bundle each, on a local process pool or a Dask cluster.

:func:`run_batch` builds every configuration with :func:`sitrep.pipeline.build`
and returns one :class:`JobResult` per configuration, in the order given,
whatever happened to the others: a configuration that cannot be loaded, a
week blocked by validation, a failed delivery or even a worker process that
dies is recorded as that jurisdiction's result and the rest go on.

Where the builds run:

* ``workers == 1``: one after another in this process.
* ``workers > 1``: a :class:`concurrent.futures.ProcessPoolExecutor` of that
  many processes (``spawn`` start method: nothing is inherited from this
  process but the arguments). A process keeps its imports from one
  jurisdiction to the next. If a worker process dies (for example killed
  for lack of memory) the pool breaks; the jobs it had not finished are then
  run again one by one, each in a process of its own, so only the job that
  kills its process is reported as failed.
* ``scheduler`` given: a Dask distributed cluster (``dask.distributed.Client``
  on that address, or on a cluster object such as ``LocalCluster``). Workers
  must see the same files at the same paths (a shared file system) and have
  sitrep installed; each worker process runs one build at a time (a lock
  guards the build, whose reproducibility clock is process-wide).

Each configuration is loaded here first (so a broken file is reported without
using a worker, and two jurisdictions writing to the same output folder are
refused) and the loaded :class:`~sitrep.config.Config` is what the worker
receives. The results are the same wherever a job runs: the bundle of a week
depends only on its inputs and settings (see ``reproducible_env`` in
:mod:`sitrep.deliver.archive`), which ``tests/test_batch.py`` checks by
comparing the bundles' file hashes.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import threading
import time
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any, Literal

from sitrep.config import Config, load_config
from sitrep.errors import (
    AnalysisError,
    ArchiveExists,
    ConfigError,
    DeliveryError,
    InputError,
    RenderError,
    SitrepError,
    ValidationFailed,
)

__all__ = [
    "JobResult",
    "Status",
    "batch_exit_code",
    "configs_in",
    "run_batch",
    "run_job",
    "summary_table",
]

Status = Literal["ok", "already-archived", "blocked", "failed"]

_BUILD_LOCK = threading.Lock()

EXIT_CODES = {"ok": 0, "blocked": 1, "usage": 2, "delivery": 3, "archived": 5}
"""The CLI's exit codes (``sitrep.cli.EXIT_*``; nothing may import the CLI, so they are repeated)."""

_MILDEST = (EXIT_CODES["ok"], EXIT_CODES["archived"])
"""Exit codes that report no fault, mildest first: a batch exits with another code when any job has one."""


@dataclasses.dataclass(frozen=True)
class JobResult:
    """The outcome of one jurisdiction's build.

    Attributes
    ----------
    config : str
        The configuration file as given.
    jurisdiction : str
        ``report.jurisdiction`` (the file name when the file could not be loaded).
    week : str
        The report week, e.g. ``2026-W47`` ('' when the build stopped before it was known).
    status : {"ok", "already-archived", "blocked", "failed"}
        ``ok``: outputs written (and archived when asked).
        ``already-archived``: the week has a bundle and no reissue was asked
        for; nothing was written. ``blocked``: validation found an error;
        nothing was written. ``failed``: anything else (configuration, input,
        analysis, render or delivery error, or a worker that died).
    exit_code : int
        What ``sitrep build`` would have exited with for this configuration
        alone: 0 ok, 1 blocked or unreadable input, 2 configuration error,
        3 delivery failed, 5 already archived.
    seconds : float
        Wall-clock time of the build where it ran.
    bundle : str or None
        Path of the archived bundle, when one was written.
    message : str
        One line: the number of data-quality warnings (and, for a bundle held
        for review under ``[delivery] require_review``, what holds it and the
        ``sitrep approve`` command), or what went wrong. A batch only builds:
        a held bundle is sent by ``sitrep send`` / ``sitrep run`` once approved.
    """

    config: str
    jurisdiction: str
    week: str
    status: Status
    exit_code: int
    seconds: float
    bundle: str | None
    message: str
    held: bool = False
    """The bundle is a draft held for review (``[delivery] require_review``)."""


@dataclasses.dataclass(frozen=True)
class _Options:
    """Settings shared by every job of a batch (sent to the workers with each job)."""

    out_root: Path | None
    archive: bool
    reissue_reason: str | None
    today: dt.date | None


def configs_in(folder: Path) -> list[Path]:
    """The ``*.toml`` files directly inside ``folder``, sorted by name.

    Raises
    ------
    ConfigError
        If the folder does not exist or holds no ``*.toml`` file.
    """
    folder = Path(folder)
    if not folder.is_dir():
        raise ConfigError(
            f"--configs-dir {folder} is not a folder; give the folder holding the *.toml files"
        )
    found = sorted(p for p in folder.glob("*.toml") if p.is_file())
    if not found:
        raise ConfigError(f"--configs-dir {folder} holds no *.toml file")
    return found


def _out_dir(config: Config, options: _Options) -> Path:
    if options.out_root is None:
        return config.output.folder
    from sitrep.deliver.archive import jurisdiction_slug

    return options.out_root / jurisdiction_slug(config.report.jurisdiction)


def _classify(exc: BaseException) -> tuple[Status, int, str]:
    """Status, exit code and one-line message of a build that raised ``exc``."""
    if isinstance(exc, ValidationFailed):
        message = str(exc)
        report = getattr(exc, "report", None)
        if report is not None and report.errors:
            first = report.errors[0]
            where = first.location()
            message += (
                f"; first: {first.rule}" + (f" ({where})" if where else "") + f": {first.message}"
            )
        return "blocked", EXIT_CODES["blocked"], message
    if isinstance(exc, ArchiveExists):
        return "already-archived", EXIT_CODES["archived"], str(exc)
    if isinstance(exc, ConfigError):
        return "failed", EXIT_CODES["usage"], f"configuration error: {exc}"
    if isinstance(exc, DeliveryError):
        return "failed", EXIT_CODES["delivery"], f"delivery failed: {exc}"
    if isinstance(exc, (InputError, AnalysisError, RenderError, SitrepError)):
        return "failed", EXIT_CODES["blocked"], f"error: {exc}"
    return "failed", EXIT_CODES["blocked"], f"internal error ({type(exc).__name__}: {exc})"


def run_job(config: Config, label: str, options: _Options) -> JobResult:
    """Build one jurisdiction; never raises for a failed build (see :class:`JobResult`).

    This is the function a pool or cluster worker runs. Builds in one process
    run one at a time (a lock), because the build sets the process-wide
    ``SOURCE_DATE_EPOCH`` while it renders.
    """
    from sitrep import pipeline

    start = time.perf_counter()
    with _BUILD_LOCK:
        try:
            result = pipeline.build(
                config,
                out_dir=_out_dir(config, options),
                archive=options.archive,
                reissue_reason=options.reissue_reason,
                today=options.today or dt.date.today(),
            )
        except Exception as exc:  # noqa: BLE001 - every failure becomes this job's result
            status, code, message = _classify(exc)
            return JobResult(
                label,
                config.report.jurisdiction,
                getattr(exc, "week", None) or "",
                status,
                code,
                time.perf_counter() - start,
                None,
                message,
            )
    warnings = len(result.validation.warnings)
    message = f"{warnings} data-quality warning(s)"
    held = False
    if result.bundle is not None:
        from sitrep.deliver.review import review_state

        review = review_state(result.bundle.path, config.delivery.require_review)
        held = not review.may_send
        if held:
            what = "; ".join(r.describe() for r in review.reasons) or "every week is reviewed"
            message += (
                f"; draft held for review ({what}): sitrep approve {result.bundle.path} "
                '--by "Name" before it is sent'
            )
    return JobResult(
        config=label,
        jurisdiction=config.report.jurisdiction,
        week=str(result.week),
        status="ok",
        exit_code=EXIT_CODES["ok"],
        seconds=time.perf_counter() - start,
        bundle=str(result.bundle.path) if result.bundle is not None else None,
        message=message,
        held=held,
    )


Job = tuple[Config, str, _Options]
JobFunction = Callable[[Config, str, _Options], JobResult]


def _died(job: Job, detail: str) -> JobResult:
    config, label, _ = job
    return JobResult(
        label, config.report.jurisdiction, "", "failed", EXIT_CODES["blocked"], 0.0, None, detail
    )


def _run_serial(jobs: Sequence[Job], function: JobFunction) -> list[JobResult]:
    return [function(*job) for job in jobs]


def _run_pool(jobs: Sequence[Job], workers: int, function: JobFunction) -> list[JobResult]:
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor, as_completed
    from concurrent.futures.process import BrokenProcessPool

    context = multiprocessing.get_context("spawn")
    results: dict[int, JobResult] = {}
    with ProcessPoolExecutor(max_workers=workers, mp_context=context) as pool:
        futures = {pool.submit(function, *job): k for k, job in enumerate(jobs)}
        for future in as_completed(futures):
            k = futures[future]
            try:
                results[k] = future.result()
            except BrokenProcessPool:
                pass  # run again alone below
            except Exception as exc:  # noqa: BLE001 - e.g. a job that could not be sent
                results[k] = _died(
                    jobs[k], f"the worker could not run the job: {type(exc).__name__}: {exc}"
                )
    for k, job in enumerate(jobs):
        if k in results:
            continue
        with ProcessPoolExecutor(max_workers=1, mp_context=context) as alone:
            try:
                results[k] = alone.submit(function, *job).result()
            except BrokenProcessPool:
                results[k] = _died(
                    job,
                    "the worker process died during the build (for example killed for lack of "
                    "memory); run this configuration alone with sitrep build to see why",
                )
    return [results[k] for k in range(len(jobs))]


def _run_dask(jobs: Sequence[Job], scheduler: Any, function: JobFunction) -> list[JobResult]:
    try:
        from distributed import Client
    except ImportError as exc:
        raise ConfigError(
            "--scheduler needs dask.distributed, which is not installed; install it with "
            "pip install 'dask[distributed]' or leave --scheduler out to use a local process pool"
        ) from exc
    try:
        client = Client(scheduler, set_as_default=False, timeout="20s")
    except (OSError, TimeoutError, ValueError) as exc:
        raise ConfigError(f"cannot reach the Dask scheduler at {scheduler!r}: {exc}") from exc
    with client:
        futures = [
            client.submit(function, *job, pure=False, key=f"sitrep-build-{k}")
            for k, job in enumerate(jobs)
        ]
        results = []
        for job, future in zip(jobs, futures, strict=True):
            try:
                results.append(future.result())
            except Exception as exc:  # noqa: BLE001 - a lost worker fails this job only
                results.append(
                    _died(job, f"the cluster could not run the job: {type(exc).__name__}: {exc}")
                )
    return results


def run_batch(
    configs: Sequence[Path],
    *,
    workers: int | None = None,
    scheduler: Any = None,
    out_root: Path | None = None,
    archive: bool = True,
    reissue_reason: str | None = None,
    today: dt.date | None = None,
    _function: JobFunction = run_job,
) -> list[JobResult]:
    """Build every configuration; one :class:`JobResult` each, in the order given.

    Parameters
    ----------
    configs : sequence of Path
        TOML configuration files, one per jurisdiction.
    workers : int, optional
        Local processes (default ``min(2, len(configs))``); 1 builds in this process.
    scheduler : str or dask cluster, optional
        Run on this Dask distributed scheduler (e.g. ``"tcp://10.0.0.5:8786"``)
        instead of locally; ``workers`` is then not used.
    out_root : Path, optional
        Write each jurisdiction's output folder to ``out_root/<jurisdiction
        slug>/`` instead of its ``output.folder``.
    archive, reissue_reason, today :
        As for :func:`sitrep.pipeline.build`, for every jurisdiction.

    Returns
    -------
    list of JobResult

    Raises
    ------
    ConfigError
        If no configuration is given, ``workers`` is below 1, two loaded
        configurations share an output folder (without ``out_root``) or the
        same jurisdiction name, or the Dask scheduler cannot be used.
    """
    if not configs:
        raise ConfigError(
            "no configuration given; pass --config FILE (repeatable) or --configs-dir FOLDER"
        )
    if workers is not None and workers < 1:
        raise ConfigError(f"--workers must be at least 1, got {workers}")
    options = _Options(
        Path(out_root) if out_root is not None else None, archive, reissue_reason, today
    )
    results: dict[int, JobResult] = {}
    jobs: list[tuple[int, Job]] = []
    for k, path in enumerate(configs):
        label = str(path)
        try:
            config = load_config(path)
        except ConfigError as exc:
            results[k] = JobResult(
                label,
                Path(path).name,
                "",
                "failed",
                EXIT_CODES["usage"],
                0.0,
                None,
                f"configuration error: {exc}",
            )
            continue
        jobs.append((k, (config, label, options)))
    _check_distinct([job for _, job in jobs], options)
    plain = [job for _, job in jobs]
    if scheduler is not None:
        done = _run_dask(plain, scheduler, _function)
    else:
        n = workers if workers is not None else min(2, max(len(plain), 1))
        n = min(n, max(len(plain), 1))
        done = _run_serial(plain, _function) if n == 1 else _run_pool(plain, n, _function)
    for (k, _), result in zip(jobs, done, strict=True):
        results[k] = result
    return [results[k] for k in range(len(configs))]


def _check_distinct(jobs: Sequence[Job], options: _Options) -> None:
    """Refuse two jurisdictions that would write the same folder or the same archive path."""
    folders: dict[Path, str] = {}
    names: dict[tuple[Path | None, str], str] = {}
    from sitrep.deliver.archive import jurisdiction_slug

    for config, label, _ in jobs:
        folder = _out_dir(config, options).resolve()
        if folder in folders:
            raise ConfigError(
                f"{label} and {folders[folder]} both write to {folder}; give each jurisdiction its "
                "own output.folder, or pass --out FOLDER to write FOLDER/<jurisdiction>/"
            )
        folders[folder] = label
        archive = config.output.archive.resolve() if config.output.archive is not None else None
        slug = (archive, jurisdiction_slug(config.report.jurisdiction))
        if slug in names:
            raise ConfigError(
                f"{label} and {names[slug]} name the same jurisdiction "
                f"({config.report.jurisdiction!r}) for the same archive; each needs its own name"
            )
        names[slug] = label


def batch_exit_code(results: Sequence[JobResult]) -> int:
    """0 when every job is ok, else the most serious of their exit codes.

    A fault (1 blocked, 2 configuration, 3 delivery, and any other code) is
    more serious than "already archived" (5), which is more serious than ok;
    among faults the largest code wins.
    """

    def rank(code: int) -> tuple[int, int]:
        return (_MILDEST.index(code), 0) if code in _MILDEST else (len(_MILDEST), code)

    return max((r.exit_code for r in results), key=rank, default=0)


def summary_table(results: Sequence[JobResult]) -> str:
    """The end-of-batch table: jurisdiction, week, status, seconds, bundle; then the messages.

    Returns
    -------
    str
        Plain text, one row per job in order, a line per job that was not ok
        with its message, and a count line, e.g. ``3 jurisdiction(s): 2 ok,
        1 blocked, 0 failed``.
    """
    header = ("jurisdiction", "week", "status", "seconds", "bundle")
    rows = [
        (r.jurisdiction, r.week or "-", r.status, f"{r.seconds:.1f}", r.bundle or "-")
        for r in results
    ]
    widths = [
        max(len(h), *(len(row[c]) for row in rows)) if rows else len(h)
        for c, h in enumerate(header)
    ]

    def line(cells: Sequence[str]) -> str:
        parts = [
            cell.rjust(widths[c]) if c == 3 else cell.ljust(widths[c])
            for c, cell in enumerate(cells)
        ]
        return "  ".join(parts).rstrip()

    out = [line(header), line(["-" * w for w in widths])]
    out += [line(row) for row in rows]
    problems = [r for r in results if r.status != "ok"]
    if problems:
        out.append("")
        out += [f"{r.status} {r.jurisdiction} ({r.config}): {r.message}" for r in problems]
    held = [r for r in results if r.held]
    if held:
        out.append("")
        out += [f"held {r.jurisdiction} ({r.config}): {r.message}" for r in held]
    counts = {
        s: sum(r.status == s for r in results)
        for s in ("ok", "already-archived", "blocked", "failed")
    }
    archived = (
        f"{counts['already-archived']} already archived, " if counts["already-archived"] else ""
    )
    out.append(
        f"{len(results)} jurisdiction(s): {counts['ok']} ok, {archived}{counts['blocked']} blocked, "
        f"{counts['failed']} failed"
    )
    return "\n".join(out)
