"""Commands that build or check a week: demo, build, check, init and templates."""

from __future__ import annotations

import argparse
import datetime as dt
import json
import sys
from pathlib import Path
from typing import TYPE_CHECKING

from sitrep.cli.common import (
    EXIT_BLOCKED,
    EXIT_OK,
    demo_inputs,
    load,
    print_findings,
)
from sitrep.errors import ArchiveExists, ConfigError, DeliveryError, ValidationFailed

if TYPE_CHECKING:
    from sitrep.config import Config

__all__ = ["cmd_build", "cmd_check", "cmd_demo", "cmd_init", "cmd_templates"]


def cmd_demo(args: argparse.Namespace) -> int:
    import dataclasses

    inputs = args.inputs or demo_inputs()
    config = load(inputs / "sitrep.toml")
    out = args.out.resolve()
    config = dataclasses.replace(
        config, output=dataclasses.replace(config.output, folder=out, archive=out / "archive")
    )
    return _build(config, out, reissue=None, archive=True, demo=True, quiet=args.quiet)


def _build(
    config: Config,
    out: Path | None,
    *,
    reissue: str | None,
    archive: bool,
    demo: bool = False,
    today: dt.date | None = None,
    quiet: bool = False,
) -> int:
    from sitrep import pipeline
    from sitrep.progress import Progress, TextProgress

    def progress() -> Progress:
        """Stage lines on stderr (a bar on a terminal); nothing with --quiet."""
        return Progress() if quiet else TextProgress(sys.stderr)

    def log(message: str) -> None:
        if not quiet:
            print(message)

    try:
        result = pipeline.build(
            config,
            out_dir=out,
            archive=archive,
            reissue_reason=reissue,
            today=today,
            log=log,
            progress=progress(),
        )
    except ValidationFailed as exc:
        if exc.report is not None:
            print_findings(exc.report, sys.stderr)
        raise
    except DeliveryError as exc:
        if demo and isinstance(exc, ArchiveExists):
            print(f"note: {exc}")
            result = pipeline.build(
                config, out_dir=out, archive=False, today=today, log=log, progress=progress()
            )
        else:
            raise
    for path in result.outputs:
        print(f"wrote {path}")
    warnings = len(result.validation.warnings)
    print(f"week {result.week}: done with {warnings} data-quality warning(s)")
    if result.bundle is not None:
        from sitrep.deliver.review import held_message, review_state

        review = review_state(result.bundle.path, config.delivery.require_review)
        if not review.may_send:
            print(
                f"draft {result.bundle.path}: "
                + held_message(
                    review,
                    result.bundle.path,
                    reviewer=config.delivery.reviewer,
                    config_path=config.source,
                )
            )
    return EXIT_OK


def cmd_build(args: argparse.Namespace) -> int:
    configs = list(args.config or [])
    if args.configs_dir is not None:
        from sitrep.batch import configs_in

        configs += configs_in(args.configs_dir)
    if not configs:
        raise ConfigError("build needs --config FILE (repeatable) or --configs-dir FOLDER")
    batch = len(configs) > 1 or args.configs_dir is not None or args.scheduler is not None
    if not batch and args.workers is None:
        return _build(
            load(configs[0]),
            args.out,
            reissue=args.reissue,
            archive=not args.no_archive,
            today=args.today,
            quiet=args.quiet,
        )
    from sitrep.batch import batch_exit_code, run_batch, summary_table

    results = run_batch(
        configs,
        workers=args.workers,
        scheduler=args.scheduler,
        out_root=args.out,
        archive=not args.no_archive,
        reissue_reason=args.reissue,
        today=args.today,
    )
    print(summary_table(results))
    return batch_exit_code(results)


def cmd_check(args: argparse.Namespace) -> int:
    import dataclasses

    from sitrep import pipeline

    config = load(args.config)
    overrides = {}
    if args.table is not None:
        overrides["table"] = args.table.resolve()
    if args.prior is not None:
        overrides["prior_table"] = args.prior.resolve()
    if overrides:
        config = dataclasses.replace(config, input=dataclasses.replace(config.input, **overrides))
    report = pipeline.check(config, today=args.today or dt.date.today())
    if args.json:
        doc = {
            "blocked": report.blocked,
            "errors": len(report.errors),
            "warnings": len(report.warnings),
            "findings": [f.as_dict() for f in report.findings],
        }
        print(json.dumps(doc, indent=2, ensure_ascii=False))
    else:
        print_findings(report)
    return EXIT_BLOCKED if report.blocked else EXIT_OK


def cmd_init(args: argparse.Namespace) -> int:
    from sitrep import pipeline
    from sitrep.starter import propose, write_config

    proposal = propose(args.table, args.boundaries)
    out = write_config(proposal, args.out, force=args.force)
    guesses = out.read_text(encoding="utf-8").count("# GUESS")
    print(f"wrote {out} ({guesses} value(s) marked GUESS: check them)")
    for note in proposal.notes:
        print(f"note: {note}")
    print(f"sitrep check --config {out}:")
    report = pipeline.check(load(out), today=args.today or dt.date.today())
    print_findings(report)
    return EXIT_BLOCKED if report.blocked else EXIT_OK


def cmd_templates(args: argparse.Namespace) -> int:
    from sitrep.render.html import packaged_template_dir
    from sitrep.render.templates import TEMPLATES, copy_templates

    if args.copy is None:
        print(f"packaged templates: {packaged_template_dir()}")
        for t in TEMPLATES:
            print(f"  {t.name:<16} {t.purpose}")
        print("copy them with: sitrep templates --copy DIR; variables: docs/templates.md")
        return EXIT_OK
    for path in copy_templates(args.copy, force=args.force):
        print(f"wrote {path}")
    print(f'set report.template_dir = "{args.copy}" and keep only the files you change')
    return EXIT_OK
