"""`snnconvert report RUN_DIR`: one self-contained report.html."""

from __future__ import annotations

HELP = "write a self-contained report.html for a run folder"


def add_arguments(p) -> None:
    p.add_argument("run_dir", metavar="RUN_DIR", help="run folder written by `snnconvert run`")


def run(args) -> int:
    from snnconvert import console
    from snnconvert.report import write_report
    path = write_report(args.run_dir)
    console.echo(f"report written to {path}")
    return 0
