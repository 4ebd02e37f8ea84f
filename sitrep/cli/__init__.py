"""The ``sitrep`` command: a thin argparse front end over :mod:`sitrep.pipeline`.

Exit codes (also in ``sitrep --help``):

====  ==========================================================
0     done
1     blocked by validation (or an input could not be read)
2     usage or configuration error
3     delivery failed (archive, PDF engine or e-mail)
4     built and archived, held for review (``sitrep approve``)
5     already archived: the week has a bundle and nothing was built
====  ==========================================================

Heavy libraries are imported only inside the verbs that need them, so
``--help`` stays instant.
"""

from __future__ import annotations

import sys
from collections.abc import Sequence

from sitrep.cli.arguments import parser as _parser
from sitrep.cli.commands_archive import cmd_check_draft, cmd_index, cmd_keys, cmd_verify
from sitrep.cli.commands_build import cmd_build, cmd_check, cmd_demo, cmd_init, cmd_templates
from sitrep.cli.commands_delivery import cmd_approve, cmd_run, cmd_send
from sitrep.cli.common import (
    EXIT_ARCHIVED,
    EXIT_BLOCKED,
    EXIT_DELIVERY,
    EXIT_HELD,
    EXIT_OK,
    EXIT_USAGE,
)
from sitrep.errors import (
    AnalysisError,
    ArchiveExists,
    ConfigError,
    DeliveryError,
    InputError,
    RenderError,
    ReviewRequired,
    SitrepError,
    ValidationFailed,
)

__all__ = [
    "EXIT_ARCHIVED",
    "EXIT_BLOCKED",
    "EXIT_DELIVERY",
    "EXIT_HELD",
    "EXIT_OK",
    "EXIT_USAGE",
    "main",
]

COMMANDS = {
    "demo": cmd_demo,
    "build": cmd_build,
    "check": cmd_check,
    "init": cmd_init,
    "templates": cmd_templates,
    "verify": cmd_verify,
    "check-draft": cmd_check_draft,
    "index": cmd_index,
    "keys": cmd_keys,
    "send": cmd_send,
    "run": cmd_run,
    "approve": cmd_approve,
}


def _drop_unusable_source_date_epoch() -> None:
    """Ignore an inherited SOURCE_DATE_EPOCH that is not whole seconds (e.g. empty).

    Libraries read it while they are imported (numpy's f2py does ``int('')``),
    so it is checked before any heavy import; sitrep sets its own value from
    the report week when it writes outputs.
    """
    import os

    epoch = os.environ.get("SOURCE_DATE_EPOCH")
    if epoch is not None and not (epoch.strip().isascii() and epoch.strip().isdigit()):
        del os.environ["SOURCE_DATE_EPOCH"]
        print(
            f"note: SOURCE_DATE_EPOCH={epoch!r} is not whole seconds since 1970; ignored",
            file=sys.stderr,
        )


def main(argv: Sequence[str] | None = None) -> int:
    """Run the CLI; returns the exit code (see the module docstring)."""
    _drop_unusable_source_date_epoch()
    parser = _parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # argparse exits 2 on usage errors, 0 on --help
        return int(exc.code or 0)
    if args.version:
        from sitrep import __version__

        print(f"sitrep {__version__}")
        return EXIT_OK
    if args.verb is None:
        parser.print_help()
        return EXIT_USAGE
    try:
        return COMMANDS[args.verb](args)
    except ConfigError as exc:
        print(f"configuration error: {exc}", file=sys.stderr)
        return EXIT_USAGE
    except ValidationFailed as exc:
        print(f"blocked: {exc}", file=sys.stderr)
        return EXIT_BLOCKED
    except (InputError, AnalysisError, RenderError) as exc:
        print(f"error: {exc}", file=sys.stderr)
        return EXIT_BLOCKED
    except ArchiveExists as exc:  # nothing was to be delivered: not a delivery failure
        print(str(exc), file=sys.stderr)
        return EXIT_ARCHIVED
    except DeliveryError as exc:
        print(f"delivery failed: {exc}", file=sys.stderr)
        return EXIT_DELIVERY
    except ReviewRequired as exc:
        print(f"held: {exc}", file=sys.stderr)
        return EXIT_HELD
    except SitrepError as exc:  # pragma: no cover - every branch is listed above
        print(f"error: {exc}", file=sys.stderr)
        return EXIT_BLOCKED
    except KeyboardInterrupt:
        print("interrupted; nothing was archived", file=sys.stderr)
        return 130
    except Exception as exc:  # a bug, not bad input: say so in one line, keep the detail on request
        import os
        import traceback

        if os.environ.get("SITREP_DEBUG"):
            traceback.print_exc()
        print(
            f"internal error ({type(exc).__name__}: {exc}); nothing was archived or sent. "
            "Set SITREP_DEBUG=1 to see the details and report them.",
            file=sys.stderr,
        )
        return EXIT_BLOCKED
