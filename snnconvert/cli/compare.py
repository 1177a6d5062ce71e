"""`snnconvert compare EXPORT_DIR TRACE_DIR`: find where a hardware trace first leaves the golden vectors."""

from __future__ import annotations

HELP = ("compare a hardware or RTL trace (golden-vector layout) with an export's golden vectors: "
        "exit 0 all match, 1 mismatch, 2 malformed trace")


def add_arguments(p) -> None:
    p.add_argument("export_dir", metavar="EXPORT_DIR", help="export folder holding manifest.json and vectors.npz")
    p.add_argument("trace_dir", metavar="TRACE_DIR",
                   help="trace folder: sample_NNNN/<layer id>.csv events, <layer id>.potentials.csv, potentials.csv, "
                        "summary.csv, frontend/stream_NNNN/<table>.csv (missing files are not compared)")
    p.add_argument("--unordered", action="store_true",
                   help="compare each window's events as sets (hardware may emit them in another order)")


def run(args) -> int:
    from snnconvert import console
    from snnconvert.export.compare import compare

    res = compare(args.export_dir, args.trace_dir, unordered=args.unordered)
    console.echo(res.table())
    console.echo(res.summary())
    return 0 if res.passed else 1
