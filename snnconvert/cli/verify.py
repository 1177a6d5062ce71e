"""`snnconvert verify OUT_DIR`: re-simulate an export's golden vectors from the folder alone."""

from __future__ import annotations

HELP = "check an export folder bit-exactly: tables agree and golden vectors re-simulate (exit 1 on mismatch)"


def add_arguments(p) -> None:
    p.add_argument("out_dir", metavar="OUT_DIR", help="export folder holding manifest.json")
    p.add_argument("--json", metavar="FILE", help="also write the result as JSON to FILE (outside the export folder)")


def run(args) -> int:
    from pathlib import Path

    from snnconvert import console
    from snnconvert.errors import UsageError
    from snnconvert.export import verify
    from snnconvert.files import atomic_write_json, check_output_path

    if args.json:
        check_output_path(args.json, "--json")
        folder, target = Path(args.out_dir).resolve(), Path(args.json).resolve()
        if folder in target.parents:
            raise UsageError(f"--json {args.json}: verify writes nothing inside the export folder {args.out_dir}")
    res = verify(args.out_dir, progress=not args.quiet)
    if args.json:
        atomic_write_json(args.json, res.to_dict())
    console.echo(res.summary())
    return 0 if res.passed else 1
