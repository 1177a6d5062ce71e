"""The Dask back-end of the sweep: a LocalCluster of 2 worker processes started here (nothing needs
to run beforehand), and the same scheduler reached by its tcp:// address like an external one.

Covers: equality with the local back-end bit for bit on real conversions, a worker killed mid-way
(its point re-run, no finished point lost), a caller stopped mid-way and resumed, a failed point that
does not stop the others, the command line, and the message when dask is not installed.
"""

import json
import os
import sys
from pathlib import Path

import pytest

pytest.importorskip("distributed")

import cloudpickle  # noqa: E402

sys.path.insert(0, str(Path(__file__).parent))
import test_sweep as fake  # noqa: E402
from test_sweep_real import trained  # noqa: E402,F401  (the tiny trained checkpoint, a module fixture)

from snnconvert import sweep  # noqa: E402
from snnconvert.cli import main  # noqa: E402
from snnconvert.sweep.cluster import DaskExecutor  # noqa: E402

this = sys.modules[__name__]
cloudpickle.register_pickle_by_value(this)     # the point functions below travel to the workers by value
cloudpickle.register_pickle_by_value(fake)


@pytest.fixture(scope="module")
def cluster():
    """`local:2`: a LocalCluster of two worker processes, closed after the module."""
    ex = DaskExecutor("local:2")
    ex.start()
    yield ex
    ex.close()


def _external(cluster):
    """A second client of the same scheduler, by its address: what `--scheduler tcp://HOST:PORT` does."""
    address = cluster.client.scheduler.address
    assert address.startswith("tcp://")
    return DaskExecutor(address)


def _lines(path):
    return path.read_text().splitlines() if path.is_file() else []


def _fake_inputs(tmp_path, settings, **recipe_extra):
    model, ckpt, ds = fake._context()
    recipe = {**ckpt["recipe"], "sweep": settings.as_dict(), **recipe_extra}
    return sweep.Inputs(tmp_path / "train", model, ckpt, ds, recipe)


def _metrics(result):
    return [(r["key"], r["params"], r["metrics"]) for r in result.records]


def test_dask_gives_the_local_results_bit_for_bit(cluster, trained, tmp_path):
    train_dir, ds = trained
    settings = sweep.SweepSettings.from_section(dict(weight_bits="2,4", payload_bits="1,3", jobs=1))
    inputs = sweep.load_inputs(train_dir, dataset=ds)
    local = sweep.run_sweep(inputs, settings, tmp_path / "local", progress=False)
    dask = sweep.run_sweep(inputs, settings, tmp_path / "dask", executor=cluster, progress=False)
    assert dask.computed == local.computed == 4
    assert _metrics(dask) == _metrics(local)            # network fingerprints, accuracies, intervals, p-values
    for name in ("sweep.csv", "recommendation.json"):
        assert (tmp_path / "dask" / name).read_bytes() == (tmp_path / "local" / name).read_bytes()


def dying_point(model, dataset, recipe, act_max, point):
    """The worker running w3 dies the first time (its process exits), as if killed."""
    marker = Path(recipe["marker"])
    if point["weight_bits"] == 3 and not marker.exists():
        marker.write_text(str(os.getpid()))
        os._exit(1)
    return fake.fake_point(model, dataset, recipe, act_max, point)


def test_killed_worker_point_is_rerun_and_nothing_is_lost(cluster, tmp_path):
    settings = fake._settings()
    marker = tmp_path / "died"
    inputs = _fake_inputs(tmp_path, settings, marker=str(marker))
    res = sweep.run_sweep(inputs, settings, tmp_path / "sw", executor=cluster, point_fn=dying_point, progress=False)
    assert marker.exists()                              # a worker did die on w3
    assert res.computed == 6
    keys = [json.loads(x)["key"] for x in _lines(tmp_path / "sw" / "results.jsonl")]
    assert sorted(keys) == sorted(p["key"] for p in sweep.make_points(settings))   # each point once
    serial = sweep.run_sweep(_fake_inputs(tmp_path, settings), settings, tmp_path / "serial",
                             point_fn=fake.fake_point, progress=False)
    assert _metrics(res) == _metrics(serial)


class StopsAfter:
    """The Dask executor, with the caller stopped (Ctrl-C) after `n` points came back."""

    def __init__(self, inner, n):
        self.inner, self.n = inner, n

    def start(self):
        self.inner.start()

    def map_points(self, task, points):
        for i, r in enumerate(self.inner.map_points(task, points)):
            if i == self.n:
                raise KeyboardInterrupt
            yield r


def test_stopped_caller_resumes_against_an_external_scheduler(cluster, tmp_path):
    settings = fake._settings()
    ext = _external(cluster)
    try:
        with pytest.raises(KeyboardInterrupt):
            sweep.run_sweep(_fake_inputs(tmp_path, settings), settings, tmp_path / "sw", executor=StopsAfter(ext, 2),
                            point_fn=fake.fake_point, progress=False)
        before = _lines(tmp_path / "sw" / "results.jsonl")
        assert len(before) == 2                          # what came back was logged at once
        res = sweep.run_sweep(_fake_inputs(tmp_path, settings), settings, tmp_path / "sw", executor=ext,
                              point_fn=fake.fake_point, progress=False)
    finally:
        ext.close()
    assert (res.computed, res.reused) == (4, 2)
    assert _lines(tmp_path / "sw" / "results.jsonl")[:2] == before
    assert cluster.client.status == "running"           # closing a client of an external scheduler ends no cluster


def failing_point(model, dataset, recipe, act_max, point):
    if point["weight_bits"] == 3:
        raise RuntimeError("point w3 failed")
    return fake.fake_point(model, dataset, recipe, act_max, point)


def test_a_failed_point_does_not_stop_the_others(cluster, tmp_path):
    settings = fake._settings()
    with pytest.raises(RuntimeError, match="point w3 failed"):
        sweep.run_sweep(_fake_inputs(tmp_path, settings), settings, tmp_path / "sw", executor=cluster,
                        point_fn=failing_point, progress=False)
    keys = [json.loads(x)["key"] for x in _lines(tmp_path / "sw" / "results.jsonl")]
    assert sorted(keys) == sorted(p["key"] for p in sweep.make_points(settings) if p["weight_bits"] != 3)
    assert cluster.status == {"running": 0, "failed": 2}


def test_cli_against_the_scheduler_address(cluster, trained, tmp_path, capsys):
    train_dir, _ = trained
    code = main(["sweep", str(train_dir), "--weight-bits", "2,4", "--payload-bits", "2", "--quiet",
                 "--scheduler", cluster.client.scheduler.address, "--out", str(tmp_path / "sw")])
    out = capsys.readouterr()
    assert code == 0, out.err
    assert "2 points (2 computed, 0 from results.jsonl)" in out.out and "95 % CI" in out.out
    assert cluster.client.status == "running"


def test_without_dask_the_scheduler_says_what_to_install(tmp_path, capsys, monkeypatch):
    import importlib.util
    real = importlib.util.find_spec
    monkeypatch.setattr(importlib.util, "find_spec", lambda name, *a: None if name == "distributed" else real(name, *a))
    assert main(["sweep", str(tmp_path / "nowhere"), "--scheduler", "local:2"]) == 2
    assert capsys.readouterr().err == ('error: the Dask back-end needs dask.distributed: pip install '
                                       '"snnconvert[cluster]" (or "dask[distributed]")\n')


@pytest.mark.parametrize("value", ["local:0", "local:x", "tcp://host", "http://h:1", "local", 3])
def test_scheduler_syntax(value):
    with pytest.raises(Exception, match="The 'scheduler' parameter of sweep must be"):
        sweep.SweepSettings.from_section({"scheduler": value})
    assert sweep.SweepSettings.from_section({"scheduler": "tcp://10.0.0.5:8786"}).scheduler == "tcp://10.0.0.5:8786"
