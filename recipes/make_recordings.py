"""Write the demo recordings folder used by recipes/recordings.toml.

The recordings are made by the project's simulated sensor from scikit-learn's bundled digits
(flashed on a dark screen), in all three supported formats (.npz, .csv, .bin), with an
index.csv of `file,label`. Usage:

    .venv/bin/python recipes/make_recordings.py recipes/recordings [--per-class 40] [--seed 0]
"""

from __future__ import annotations

import argparse
import sys

from snnconvert.data import write_demo_recordings


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("folder", help="where to write the recordings and index.csv")
    p.add_argument("--per-class", type=int, default=40, help="recordings per digit class (default 40)")
    p.add_argument("--seed", type=int, default=0, help="seed of the sensor's random draws (default 0)")
    args = p.parse_args(argv)
    if args.per_class < 1:
        p.error(f"--per-class must be >= 1, got {args.per_class}")
    index = write_demo_recordings(args.folder, per_class=args.per_class, seed=args.seed)
    print(f"wrote {10 * args.per_class} recordings and {index}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
