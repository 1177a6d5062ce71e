"""`snnconvert simulate NET_DIR`: re-run a converted network on data and print its metrics."""

from __future__ import annotations

from pathlib import Path

import numpy as np

HELP = "re-run the simulation of a converted network (optionally event by event) and print its metrics"


def add_arguments(p) -> None:
    p.add_argument("net_dir", metavar="NET_DIR", help="folder written by `snnconvert convert` (network.json)")
    p.add_argument("--data", metavar="SOURCE",
                   help="TRAIN_DIR (its test split and frame model) or a frames NPZ with arrays x (N, C, H, W) "
                        "input payloads and y (N,) labels; default: the test split of the recipe stored in the network")
    p.add_argument("--reference", action="store_true",
                   help="also run the event-by-event reference simulator and check it agrees exactly")
    p.add_argument("--limit", type=int, metavar="N", help="use only the first N samples")


def _load_data(net, source, progress: bool):
    """(float model or None, X, y) from a TRAIN_DIR, a frames NPZ, or the network's own recipe."""
    from snnconvert.data import load_dataset, load_frames_file
    from snnconvert.errors import UsageError
    if source is None:
        if "recipe" not in net.meta:
            raise UsageError("the network stores no recipe; give --data TRAIN_DIR or --data FRAMES.npz")
        ds = load_dataset(net.meta["recipe"], progress=progress)
        _check_net_fits(net, ds, "the recipe stored in the network")
        return None, *ds.test
    path = Path(source)
    if path.is_dir():
        from snnconvert.checkpoint import check_checkpoint_fits, load_checkpoint
        model, ckpt = load_checkpoint(path / "model.pt")
        ds = load_dataset(ckpt["recipe"], progress=progress)
        check_checkpoint_fits(model, ckpt, ds, path / "model.pt")
        _check_net_fits(net, ds, f"--data {source}")
        return model, *ds.test
    if path.suffix != ".npz":
        raise UsageError(f"--data {source}: expected a TRAIN_DIR folder or a .npz frames file")
    x, y = load_frames_file(path, net.input_shape, net.input_q, net.n_classes)
    return None, x.astype(np.float32), y


def _check_net_fits(net, ds, source: str) -> None:
    """The network and the data set must agree on the frame shape and the number of classes."""
    from snnconvert.errors import UsageError
    if tuple(ds.input_shape) != tuple(net.input_shape) or len(ds.classes) != net.n_classes:
        raise UsageError(f"the network takes frames of shape {tuple(net.input_shape)} and has {net.n_classes} "
                         f"classes, but the data of {source} gives frames of shape {tuple(ds.input_shape)} and "
                         f"{len(ds.classes)} classes")


def run(args) -> int:
    from snnconvert import console
    from snnconvert import arith
    from snnconvert.errors import UsageError, check_int
    from snnconvert.intnet import IntNetwork
    from snnconvert.sim import reference as R
    from snnconvert.sim import simulate
    from snnconvert.sim.metrics import format_table, measure

    if not (Path(args.net_dir) / "network.json").is_file():
        raise UsageError(f"{Path(args.net_dir) / 'network.json'}: file not found (NET_DIR must be a folder written "
                         f"by `snnconvert convert`)")
    n = check_int(args.limit, "limit", "simulate", 1) if args.limit is not None else None
    net = IntNetwork.load(args.net_dir)
    model, X, y = _load_data(net, args.data, not args.quiet)
    X, y = X[:n], y[:n]
    m = measure(model, net, X, y, quiet=True)
    console.echo(format_table(m))
    if args.reference:
        x_int = arith.quantize_input(X, net.input_q)
        vec = simulate(net, x_int, record=False)
        traces = R.run_batch(net, x_int, progress=not args.quiet)
        for i, tr in enumerate(traces):
            if not np.array_equal(tr.potentials, vec.potentials[i]) or tr.decision != vec.decisions[i]:
                console.echo(f"reference and vectorized simulators differ on sample {i}")
                return 1
        console.echo(f"reference simulator agrees with the vectorized one on {len(traces)} samples "
                     f"({sum(t.sops for t in traces) / len(traces):.0f} SOPs per sample)")
    return 0
