"""``landlift``: the parser of every command and the one place that maps errors to exit codes."""

from __future__ import annotations

import argparse
import sys
import traceback
from collections.abc import Sequence

from pydantic import ValidationError

from app.cli import demo, score, service
from app.errors import LandliftError


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="landlift", description="Skill gain from land initialisation in sub-seasonal hindcasts."
    )
    parser.add_argument(
        "--traceback", action="store_true", help="on an unexpected error, print the traceback too"
    )
    sub = parser.add_subparsers(dest="command", required=True)
    demo.add_command(sub)
    score.add_command(sub)
    service.add_commands(sub)
    return parser


def _settings_message(exc: ValidationError) -> str:
    first = exc.errors(include_url=False)[0]
    where = ".".join(str(p) for p in first.get("loc", ()))
    variable = f"LANDLIFT_{where.upper()}" if where else "a LANDLIFT_* setting"
    return f"setting {variable}: {first.get('msg')}"


def dispatch(args: argparse.Namespace) -> int:
    """Run a parsed command; every error becomes one line on stderr and exit status 2."""
    try:
        return int(args.func(args) or 0)
    except KeyboardInterrupt:
        print("landlift: interrupted", file=sys.stderr)
        return 130
    except LandliftError as exc:
        message = exc.message
    except ValidationError as exc:  # a bad LANDLIFT_* setting
        message = _settings_message(exc)
    except OSError as exc:  # disk full, permission denied, a folder that vanished
        message = f"{exc.strerror or exc} ({exc.filename})" if exc.filename else str(exc)
    except Exception as exc:  # the database unreachable, or a bug: still one line
        if getattr(args, "traceback", False):
            traceback.print_exc()
        name = type(exc).__name__
        text = str(exc).strip().splitlines()[0] if str(exc).strip() else ""
        message = f"unexpected {name}: {text}" + (
            "" if getattr(args, "traceback", False) else " (run with --traceback for details)"
        )
    print(f"landlift: error: {' '.join(message.split())}", file=sys.stderr)
    return 2


def main(argv: Sequence[str] | None = None) -> int:
    return dispatch(build_parser().parse_args(argv))


if __name__ == "__main__":
    raise SystemExit(main())
