"""Write a recordings folder made by the project's simulated sensor from scikit-learn's bundled digits.

Demo folder (used by recipes/recordings.toml): flashed digits in all three supported formats
(.npz, .csv, .bin), with an index.csv of `file,label`:

    .venv/bin/python recipes/make_recordings.py recipes/recordings [--per-class 40] [--seed 0]

Large set (--count N; used by recipes/saccade_recordings.toml and bench/data_scale.py): N recordings
in the 40-bit layout on a 34x34 sensor, digits augmented to 28x28 (shifts, small rotations, stroke
widths), three saccades of 100 ms along a triangle (or a flash), index.csv, and the 28x28 images and
labels as IDX files (images-idx3-ubyte, labels-idx1-ubyte). Parallel and seeded: the same seed gives
the same files with any number of workers.

    .venv/bin/python recipes/make_recordings.py ~/nmnist-like --count 60000 [--stimulus saccade] [--workers 2]
"""

from __future__ import annotations

import argparse
import sys


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("folder", help="where to write the recordings and index.csv")
    p.add_argument("--per-class", type=int, default=40, help="demo folder: recordings per digit class (default 40)")
    p.add_argument("--seed", type=int, default=0, help="seed of every random draw (default 0)")
    p.add_argument("--count", type=int, default=0, help="write a large set of this many .bin recordings instead")
    p.add_argument("--stimulus", choices=("saccade", "flash"), default="saccade", help="large set: the stimulus")
    p.add_argument("--workers", type=int, default=2, help="large set: worker processes (default 2)")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    args = p.parse_args(argv)
    if args.count:
        from snnconvert.data.generate import write_recordings
        if args.count < 1 or args.workers < 1:
            p.error("--count and --workers must be >= 1")
        out = write_recordings(args.folder, args.count, args.seed, args.stimulus, args.workers, not args.quiet)
        print(f"wrote {args.count} recordings ({out['events'].mean():.0f} events each on average), {out['index']}, "
              f"{out['images']} and {out['labels']}")
        return 0
    from snnconvert.data import write_demo_recordings
    if args.per_class < 1:
        p.error(f"--per-class must be >= 1, got {args.per_class}")
    index = write_demo_recordings(args.folder, per_class=args.per_class, seed=args.seed)
    print(f"wrote {10 * args.per_class} recordings and {index}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
