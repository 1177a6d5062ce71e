"""Command-line entry: `snnconvert <command> ...` and `python -m snnconvert`.

Each command lives in its own module `snnconvert/cli/<command>.py` exposing
`HELP` (one line), `add_arguments(parser)` and `run(args) -> int`.

The NUMPY_ONLY commands run on the base install (numpy alone); the others need the "full" extra,
and say so in one line (exit 1) when one of its packages is missing.

Exit codes: 0 success, 1 unexpected failure (or a failed check such as verify), 2 usage error
(bad argument, bad file, bad recipe value), 130 interrupted.
"""

from __future__ import annotations

import argparse
import importlib
import os
import sys
import traceback
import warnings

from snnconvert import console
from snnconvert.errors import UsageError

# Packages of the "full" extra (pyproject.toml); the base install runs `verify` without them.
FULL_ONLY = ("torch", "scipy", "sklearn", "matplotlib", "joblib", "threadpoolctl")

# Order is the order of the job; `run` chains them all.
COMMANDS = ["events", "train", "import", "convert", "simulate", "classify", "sweep", "export", "verify", "cmodel", "verilog",
            "compare", "report", "run"]
# Commands that read only an export folder and run on the base install (numpy alone).
NUMPY_ONLY = ("verify", "compare", "cmodel", "verilog")


class _Parser(argparse.ArgumentParser):
    """argparse that reports usage errors as one `error: ...` line and exit code 2."""

    def error(self, message):  # noqa: D401 - argparse API
        raise UsageError(f"{self.prog}: {message}")

    def _print_message(self, message, file=None):  # help and version text go through the console
        if message:
            (console.echo if file in (None, sys.stdout) else console.say)(message.rstrip("\n"))


def build_parser() -> argparse.ArgumentParser:
    from snnconvert import __version__
    parser = _Parser(prog="snnconvert", description="DVS events -> frame CNN -> single-spike integer network -> hardware tables.")
    parser.add_argument("--version", action="version", version=f"snnconvert {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for name in COMMANDS:
        try:
            mod = importlib.import_module(f"snnconvert.cli.{name}")
        except ModuleNotFoundError as exc:
            if exc.name == f"snnconvert.cli.{name}":
                continue  # command not built yet
            raise
        p = sub.add_parser(name, help=mod.HELP, description=mod.HELP)
        mod.add_arguments(p)
        p.add_argument("--quiet", action="store_true", help="no progress bars (messages and results still print)")
        p.set_defaults(_run=mod.run)
    return parser


def main(argv: list[str] | None = None) -> int:
    argv = sys.argv[1:] if argv is None else list(argv)
    try:
        parser = build_parser()
        args = parser.parse_args(argv)
        if not getattr(args, "_run", None):
            parser.print_help()
            return 2
        console.set_quiet(args.quiet)
        return int(args._run(args) or 0)
    except UsageError as exc:
        console.error(_one_line(str(exc)))
        return 2
    except ModuleNotFoundError as exc:
        if (exc.name or "").split(".")[0] not in FULL_ONLY:
            return _unexpected(exc)
        console.error(f"this command needs {exc.name.split('.')[0]}, which this install lacks (only "
                      f"{', '.join(NUMPY_ONLY)} run without it); install the full set: pip install 'snnconvert[full]'")
        return 1
    except KeyboardInterrupt:
        console.error("interrupted; finished stages and files are intact")
        return 130
    except SystemExit as exc:  # --help / --version
        return int(exc.code or 0) if isinstance(exc.code, int) else 0
    except Exception as exc:  # a bug, not a user error
        return _unexpected(exc)
    finally:
        console.set_quiet(False)


def _unexpected(exc: BaseException) -> int:
    console.error(f"unexpected failure: {type(exc).__name__}: {_one_line(str(exc))}")
    if os.environ.get("SNNCONVERT_DEBUG"):
        console.say(traceback.format_exc().rstrip("\n"))
    else:
        console.say("(set SNNCONVERT_DEBUG=1 for the traceback)")
    return 1


def _one_line(msg: str) -> str:
    return " ".join(msg.split())


def entry() -> None:
    """The `snnconvert` program: main(), then a final flush that tolerates a reader gone early.
    Python warnings (from the libraries) are message lines too: they go through the console."""
    warnings.showwarning = console.show_warning
    code = main()
    console.finish()
    sys.exit(code)
