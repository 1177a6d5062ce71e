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

Long recording (--long K; used by `snnconvert classify`): one event file holding K stimuli of the
recipe's test split one after another, with --gap-us of background noise before each and after the
last, and the label file <stem>.labels.csv (`start_us,end_us,label`) beside it:

    .venv/bin/python recipes/make_recordings.py /tmp/long.npz --long 20 [--recipe recipes/default.toml]
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("folder", help="where to write the recordings and index.csv (--long: the event file)")
    p.add_argument("--per-class", type=int, default=40, help="demo folder: recordings per digit class (default 40)")
    p.add_argument("--seed", type=int, default=0, help="seed of every random draw (default 0)")
    p.add_argument("--count", type=int, default=0, help="write a large set of this many .bin recordings instead")
    p.add_argument("--stimulus", choices=("saccade", "flash"), default="saccade", help="large set: the stimulus")
    p.add_argument("--workers", type=int, default=2, help="large set: worker processes (default 2)")
    p.add_argument("--long", type=int, default=0, metavar="K", help="write one long recording of K stimuli instead")
    p.add_argument("--recipe", default=str(Path(__file__).with_name("default.toml")),
                   help="--long: the recipe whose test split gives the stimuli and whose sensor settings they were "
                   "recorded with (default: default.toml beside this script)")
    p.add_argument("--gap-us", type=int, default=200_000, help="--long: background before each stimulus (200000)")
    p.add_argument("--noise-hz", type=float, default=None,
                   help="--long: background noise per pixel in the gaps (default: the recipe's data.noise_hz)")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    args = p.parse_args(argv)
    if args.long:
        from snnconvert import recipe
        from snnconvert.data.generate import write_long_recording
        if args.long < 1 or args.gap_us < 1:
            p.error("--long and --gap-us must be >= 1")
        out = write_long_recording(args.folder, recipe.load(args.recipe), args.long, args.seed, args.gap_us,
                                   args.noise_hz, not args.quiet)
        print(f"wrote {out['recording']} ({out['events']} events, {out['duration_us'] / 1e6:.2f} s, "
              f"{args.long} stimuli) and {out['labels']}")
        return 0
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
    from snnconvert.errors import FormatError, UsageError
    try:
        sys.exit(main())
    except (UsageError, FormatError) as exc:     # bad input: one line naming it, exit 2 (as the CLI does)
        print(f"error: {exc}", file=sys.stderr)
        sys.exit(2)
