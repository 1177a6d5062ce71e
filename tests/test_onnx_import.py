"""ONNX in and out: graphs built with onnx.helper (one per operator and attribute variant) and graphs
exported by torch.onnx.export are imported, checked against onnxruntime (the reference runtime,
max |score difference| <= 1e-4 and identical decisions), converted, exported and verified; each
refusal gives its one-line message."""

import io
import json
import warnings
from pathlib import Path

import numpy as np
import pytest
import torch

onnx = pytest.importorskip("onnx")
ort = pytest.importorskip("onnxruntime")
from onnx import TensorProto, helper, numpy_helper  # noqa: E402

from _convert_helpers import make_model  # noqa: E402
from snnconvert import cli, data, pipeline, recipe as recipe_mod  # noqa: E402
from snnconvert.errors import UsageError  # noqa: E402
from snnconvert.interop import importer  # noqa: E402
from snnconvert.interop.onnx_read import read_graph  # noqa: E402
from snnconvert.interop.onnx_write import model_to_onnx, write_onnx  # noqa: E402
from test_train import digits_frames  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
DEFAULT = str(ROOT / "recipes" / "default.toml")
F32, F64 = TensorProto.FLOAT, TensorProto.DOUBLE


# ---------------------------------------------------------------- graph builder

class G:
    """A chain graph under construction: `g.node(op, *consts, **attrs)` appends a node reading the
    current tensor; consts are numpy arrays stored as initializers (raw data, or typed fields with
    typed=True) in the graph's element type."""

    def __init__(self, shape=("N", 1, 16, 16), elem=F32, typed=False, seed=0):
        self.shape, self.elem, self.typed = shape, elem, typed
        self.nodes, self.inits, self.cur = [], [], "x"
        self.rng = np.random.default_rng(seed)

    def w(self, *shape, scale=0.3):
        return self.rng.normal(0.0, scale, shape)

    def const(self, a, integer=False):
        name = f"c{len(self.inits)}"
        a = np.asarray(a, np.int64 if integer else (np.float64 if self.elem == F64 else np.float32))
        if self.typed and not integer:
            self.inits.append(helper.make_tensor(name, self.elem, a.shape, a.reshape(-1).tolist()))
        else:
            self.inits.append(numpy_helper.from_array(a, name))
        return name

    def node(self, op, *inputs, name=None, **attrs):
        out = f"t{len(self.nodes)}"
        ins = [self.cur] + [i if isinstance(i, str) else self.const(i) for i in inputs]
        self.nodes.append(helper.make_node(op, ins, [out], name=name or f"{op.lower()}{len(self.nodes)}", **attrs))
        self.cur = out
        return self

    def model(self, opset=17, extra_inputs=()):
        graph = helper.make_graph(self.nodes, "g", [helper.make_tensor_value_info("x", self.elem, list(self.shape)),
                                                    *extra_inputs],
                                  [helper.make_tensor_value_info(self.cur, self.elem, ["N", "K"])], self.inits)
        m = helper.make_model(graph, opset_imports=[helper.make_opsetid("", opset)])
        m.ir_version = 8
        return m


def conv(g, c_in, c_out, k=3, bias=True, **attrs):
    args = [g.w(c_out, c_in, k, k)] + ([g.w(c_out, scale=0.1)] if bias else [])
    return g.node("Conv", *args, **attrs)


def gemm(g, f, o, **attrs):
    w = g.w(o, f, scale=0.1) if attrs.get("transB") else g.w(f, o, scale=0.1)
    return g.node("Gemm", w, g.w(o, scale=0.1), **attrs)


# Each case: graph -> expected layer list (bn false, as read).
def _c(out, k=3, s=1, p=1):
    return {"type": "conv", "out": out, "kernel": k, "stride": s, "padding": p, "bn": False}


def _d(units):
    return {"type": "dense", "units": units, "bn": False}


def case_pads_maxpool_gemm_softmax():
    g = G()
    conv(g, 1, 4, pads=[1, 1, 1, 1]).node("Relu").node("MaxPool", kernel_shape=[2, 2], strides=[2, 2])
    g.node("Flatten", axis=1)
    gemm(g, 4 * 8 * 8, 10, transB=1).node("Softmax", axis=1)
    return g.model(), [_c(4), {"type": "maxpool", "size": 2, "stride": 2}, _d(10)]


def case_same_upper_stride2_clip_avgpool_matmul_add_logsoftmax():
    g = G(typed=True)
    conv(g, 1, 4, auto_pad="SAME_UPPER", strides=[2, 2], kernel_shape=[3, 3])   # 16 -> 8: pad total 1 -> odd?
    return g


def case_same_lower_valid_clip_avgpool_reshape_matmul_add():
    g = G(typed=True)
    conv(g, 1, 4, auto_pad="SAME_LOWER")                       # stride 1, k 3: one pixel on every side
    g.node("Clip", g.const(0.0), "")                           # min 0, max left out: a ReLU
    conv(g, 4, 6, k=3, auto_pad="VALID")                       # 16 -> 14
    g.node("Relu").node("AveragePool", kernel_shape=[2, 2], strides=[2, 2], count_include_pad=1)   # 14 -> 7
    g.node("Reshape", g.const([-1, 6 * 7 * 7], integer=True))
    g.node("MatMul", g.w(6 * 7 * 7, 16, scale=0.1)).node("Add", g.w(16, scale=0.1)).node("Relu")
    g.node("MatMul", g.w(16, 10, scale=0.3)).node("Add", g.w(1, 10, scale=0.1)).node("LogSoftmax", axis=-1)
    return g.model(), [_c(4), _c(6, p=0), {"type": "avgpool", "size": 2, "stride": 2}, _d(16), _d(10)]


def case_bn_bias_add_maxpool_before_relu_global_pool_gemm_alpha_beta():
    g = G()
    conv(g, 1, 6, bias=False, pads=[1, 1, 1, 1], strides=[2, 2])      # 16 -> 8
    g.node("BatchNormalization", g.rng.uniform(0.5, 1.5, 6), g.w(6, scale=0.1), g.w(6, scale=0.1),
           g.rng.uniform(0.5, 2.0, 6), epsilon=1e-3).node("Relu")
    conv(g, 6, 8, bias=False, pads=[1, 1, 1, 1]).node("Add", g.w(1, 8, 1, 1, scale=0.1))
    g.node("MaxPool", kernel_shape=[2, 2], strides=[2, 2], ceil_mode=1)  # 8 -> 4 either way; before the ReLU
    g.node("Relu").node("Dropout").node("GlobalAveragePool").node("Flatten")
    g.node("Gemm", g.w(8, 12, scale=0.3), g.w(1, 12, scale=0.1), alpha=0.5, beta=2.0).node("Identity").node("Relu")
    gemm(g, 12, 10, transB=1)
    return g.model(), [_c(6, s=2), _c(8), {"type": "maxpool", "size": 2, "stride": 2},
                       {"type": "avgpool", "size": 4, "stride": 4}, _d(12), _d(10)]


def case_float64_typed_mlp():
    g = G(elem=F64, typed=True)
    g.node("Flatten").node("Gemm", g.w(256, 20, scale=0.1), g.w(20, scale=0.1)).node("Relu")
    gemm(g, 20, 10)
    return g.model(), [_d(20), _d(10)]


def case_channels_last():
    g = G(shape=("N", 16, 16, 1))
    g.node("Transpose", perm=[0, 3, 1, 2])
    conv(g, 1, 3, pads=[1, 1, 1, 1], strides=[2, 2]).node("Relu")         # 16 -> 8, 3 channels
    g.node("Transpose", perm=[0, 2, 3, 1]).node("Reshape", g.const([0, 8 * 8 * 3], integer=True))
    gemm(g, 8 * 8 * 3, 10)
    return g.model(), [_c(3, s=2), _d(10)]


CASES = [case_pads_maxpool_gemm_softmax, case_same_lower_valid_clip_avgpool_reshape_matmul_add,
         case_bn_bias_add_maxpool_before_relu_global_pool_gemm_alpha_beta, case_float64_typed_mlp,
         case_channels_last]


@pytest.fixture(scope="module")
def ds():
    d = digits_frames(200, 40, 60)
    for split in ("train", "val", "test"):     # numpy splits, as data.load_dataset gives them
        setattr(d, split, tuple(np.asarray(a) for a in getattr(d, split)))
    return d


@pytest.fixture(scope="module")
def recipe():
    return recipe_mod.load(DEFAULT, ["export.vectors=4", "export.verilog=false"])


def _import(proto, ds, recipe, folder):
    graph = read_graph(proto)
    return graph, importer.write_train_folder(folder, {**recipe, "model": {"layers": graph.layers}}, ds, proto,
                                              proto.SerializeToString(), graph, Path("m.onnx"))


@pytest.mark.parametrize("case", CASES, ids=lambda f: f.__name__[5:])
def test_each_supported_pattern_imports_agrees_converts_and_verifies(case, ds, recipe, tmp_path):
    from snnconvert.convert import convert_checkpoint, write_outputs
    from snnconvert.export import export_from_run, verify
    proto, layers = case()
    graph, m = _import(proto, ds, recipe, tmp_path / "train")
    assert graph.layers == layers
    im = m["imported"]
    # the reference runtime and the imported torch model agree on every test frame
    assert im["onnxruntime_frames"] == 60 and im["onnxruntime_decisions_equal"] == 60
    assert im["onnxruntime_max_abs_diff"] <= 1e-4
    # the train folder goes on through convert -> export -> verify
    net, metrics = convert_checkpoint(tmp_path / "train", recipe["convert"], quiet=True, dataset=ds)
    write_outputs(net, metrics, recipe, tmp_path / "net")
    export_from_run(tmp_path / "net", tmp_path / "export", recipe, dataset=ds, progress=False)
    res = verify(tmp_path / "export")
    assert res.passed, res.first_mismatch


def test_same_upper_with_odd_total_padding_is_refused():
    # 16 -> 8 with k 3, s 2: total pad = (8 - 1) * 2 + 3 - 16 = 1 (ONNX Conv spec), all of it at the end
    g = case_same_upper_stride2_clip_avgpool_matmul_add_logsoftmax()
    with pytest.raises(UsageError) as e:
        read_graph(g.model())
    assert str(e.value) == ("node 'conv0' (Conv): auto_pad SAME_UPPER gives padding [0, 0, 1, 1] (top, left, bottom, "
                            "right); the layer list pads every side equally")


# ---------------------------------------------------------------- refusals

def _ref_residual():
    g = G()
    conv(g, 1, 2, pads=[1, 1, 1, 1]).node("Relu")
    first = g.cur
    conv(g, 2, 2, pads=[1, 1, 1, 1]).node("Relu")
    g.nodes.append(helper.make_node("Add", [g.cur, first], ["sum"], name="skip"))
    g.cur = "sum"
    return g.model()


def _ref_second_input():
    g = G()
    g.node("Add", "y", name="mix")
    return g.model(extra_inputs=[helper.make_tensor_value_info("y", F32, ["N", 1, 16, 16])])


def _ref(build):
    def make():
        g = G()
        build(g)
        return g.model()
    return make


REFUSALS = [
    (_ref_residual, "node 'skip' (Add): it adds two computed tensors (a residual or branch connection); an imported "
                    "model is a single chain of layers"),
    (_ref_second_input, "node 'mix' (Add): it reads a second graph input 'y'; an imported model takes one input, "
                        "the frames"),
    (_ref(lambda g: conv(conv(g, 1, 2, pads=[1, 1, 1, 1]), 2, 2, name="c2")),
     "node 'c2' (Conv): the layer before it, node 'conv0' (Conv), has no ReLU after it; every hidden conv/dense "
     "layer must be followed by a ReLU"),
    (_ref(lambda g: conv(g, 1, 2, k=2).node("Relu").node("MaxPool", kernel_shape=[2, 2], strides=[2, 2],
                                                          ceil_mode=1)),
     "node 'maxpool2' (MaxPool): ceil_mode=1 gives a 8x8 output where the layer list's pool gives 7x7; export "
     "with ceil_mode=0"),
    (_ref(lambda g: conv(g, 1, 2).node("Relu").node("AveragePool", kernel_shape=[2, 2], strides=[2, 2],
                                                     pads=[1, 1, 1, 1], count_include_pad=0)),
     "node 'averagepool2' (AveragePool): padded pooling is not in the layer list (pools take no padding)"),
    (_ref(lambda g: g.node("Conv", g.w(4, 1, 3, 3), group=1, dilations=[2, 2])),
     "node 'conv0' (Conv): dilations [2, 2]; only dilation 1 is read"),
    (_ref(lambda g: g.node("Conv", g.w(2, 1, 3, 3)).node("Relu").node("Conv", g.w(2, 1, 3, 3), group=2)),
     "node 'conv2' (Conv): group=2; only ungrouped convolutions (group 1) are read"),
    (_ref(lambda g: g.node("Conv", g.w(2, 1, 3, 1))),
     "node 'conv0' (Conv): kernel 3x1 is not square; the layer list has square kernels"),
    (_ref(lambda g: g.node("Conv", g.w(2, 1, 3, 3), pads=[1, 1, 0, 0])),
     "node 'conv0' (Conv): pads gives padding [1, 1, 0, 0] (top, left, bottom, right); the layer list pads every "
     "side equally"),
    (_ref(lambda g: conv(g, 1, 2).node("Sigmoid")),
     "node 'sigmoid1' (Sigmoid): the op type Sigmoid has no place in the layer list (supported: Conv, Relu, Clip, "
     "MaxPool, AveragePool, GlobalAveragePool, Gemm, MatMul, Add, Flatten, Reshape, BatchNormalization, Dropout, "
     "Identity, Softmax, LogSoftmax, Transpose)"),
    (_ref(lambda g: conv(g, 1, 2).node("Clip", g.const(0.0), g.const(6.0))),
     "node 'clip1' (Clip): Clip with min 0.0 and max 6.0 is not a ReLU (a ReLU is a Clip with min 0 and no max)"),
    (_ref(lambda g: g.node("Transpose", perm=[0, 1, 3, 2])),
     "node 'transpose0' (Transpose): perm [0, 1, 3, 2] on a NCHW tensor is not a channel-order change (accepted: "
     "[0, 3, 1, 2] on channels-last input, [0, 2, 3, 1] before a flatten)"),
    (_ref(lambda g: gemm(g.node("Flatten"), 256, 10).node("Relu")),
     "node 'relu2' (Relu): it applies a ReLU to the class scores; the last Gemm/MatMul must give them directly"),
    (_ref(lambda g: gemm(g.node("Flatten"), 256, 10, transA=1)),
     "node 'gemm1' (Gemm): transA=1 would transpose the batch of frames; only transA=0 is read"),
    (_ref(lambda g: conv(g, 1, 2).node("Relu").node("BatchNormalization", *[np.ones(2)] * 4)),
     "node 'batchnormalization2' (BatchNormalization): it does not directly follow a Conv, Gemm or MatMul, so it "
     "cannot be folded into one"),
    (_ref(lambda g: gemm(g.node("Flatten"), 256, 10).node("Softmax").node("Identity")),
     "node 'identity3' (Identity): it follows the final Softmax/LogSoftmax; a Softmax is only accepted as the last "
     "node"),
    (_ref(lambda g: conv(g, 1, 2).node("AveragePool", kernel_shape=[2, 2], strides=[2, 2])),
     "node 'averagepool1' (AveragePool): it averages the output of node 'conv0' (Conv) before its ReLU; the layer "
     "list applies the ReLU first"),
    (_ref(lambda g: conv(g, 1, 2).node("Relu")),
     "the graph does not end with a Gemm or MatMul giving the class scores"),
]


@pytest.mark.parametrize("build,message", REFUSALS, ids=[m.split(":")[0] for _, m in REFUSALS])
def test_refusals_name_the_node_its_op_and_why(build, message):
    with pytest.raises(UsageError) as e:
        read_graph(build())
    assert str(e.value) == message


def test_input_shape_must_match_the_frames(ds):
    proto = G(shape=("N", 2, 16, 16)).node("Flatten").node("Gemm", np.zeros((512, 10), np.float32)).model()
    with pytest.raises(UsageError) as e:
        importer.check_fits(read_graph(proto), ds, "m.onnx")
    assert str(e.value) == ("m.onnx: the model takes frames of shape (2, 16, 16) (C, H, W) but the recipe's frames "
                            "have shape (1, 16, 16)")


# ---------------------------------------------------------------- torch.onnx.export

def _torch_export(model, dynamo):
    buf = io.BytesIO()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        kw = {"dynamo": True} if dynamo else {"dynamo": False, "dynamic_axes": {"frames": {0: "n"}}}
        torch.onnx.export(model, (torch.zeros(2, 1, 16, 16),), buf, input_names=["frames"], output_names=["scores"],
                          **kw)
    return onnx.load_from_string(buf.getvalue())


@pytest.mark.parametrize("kind", ["conv_max", "conv_avg"])
def test_torch_exported_models_import_and_agree(kind, ds, recipe, tmp_path):
    # conv_max: BatchNorm, stride-2 conv, dropout; conv_avg: average pools, BatchNorm1d after a dense layer
    model = make_model(kind).eval()
    graph, m = _import(_torch_export(model, dynamo=False), ds, recipe, tmp_path)
    assert m["imported"]["onnxruntime_max_abs_diff"] <= 1e-4
    assert m["imported"]["onnxruntime_decisions_equal"] == 60
    x = torch.as_tensor(ds.test[0])
    with torch.no_grad():
        assert float((importer.build_torch_model(graph)(x) - model(x)).abs().max()) <= 1e-4


@pytest.mark.slow
def test_torch_dynamo_export_imports(ds, recipe, tmp_path):
    pytest.importorskip("onnxscript")
    model = make_model("conv_max").eval()
    graph, m = _import(_torch_export(model, dynamo=True), ds, recipe, tmp_path)
    assert graph.batch == 2 and m["imported"]["onnxruntime_max_abs_diff"] <= 1e-4


# ---------------------------------------------------------------- ONNX out

def test_written_onnx_gives_torchs_scores_in_onnxruntime(tmp_path):
    model = make_model("conv_avg").eval()      # BatchNorm2d/1d (folded on write), dropout (left out)
    with torch.no_grad():
        model[4].running_mean.uniform_(-0.2, 0.2)
    path = write_onnx(model, (1, 16, 16), tmp_path / "model.onnx")
    sess = ort.InferenceSession(str(path), providers=["CPUExecutionProvider"])
    x = torch.from_numpy(np.random.default_rng(3).integers(0, 2, (40, 1, 16, 16)).astype(np.float32))
    got = sess.run(["scores"], {"frames": x.numpy()})[0]
    with torch.no_grad():
        ref = model(x).numpy()
    assert np.abs(got - ref).max() <= 1e-4
    assert [L["type"] for L in read_graph(model_to_onnx(model, (1, 16, 16))).layers] == \
        ["conv", "avgpool", "conv", "avgpool", "dense", "dense"]


# ---------------------------------------------------------------- the command

@pytest.fixture
def cli_data(monkeypatch, ds):
    monkeypatch.setattr(data, "load_dataset", lambda recipe, progress=True: ds)
    monkeypatch.setattr(pipeline, "_data_stage", lambda run_: None)


def test_import_command_writes_a_run_folder_and_reports_the_agreement(cli_data, tmp_path, capsys):
    proto, _ = case_pads_maxpool_gemm_softmax()
    src = tmp_path / "m.onnx"
    src.write_bytes(proto.SerializeToString())
    out = tmp_path / "run"
    code = cli.main(["import", str(src), "--recipe", DEFAULT, "--out", str(out), "--quiet"])
    cap = capsys.readouterr()
    assert code == 0, cap.err
    lines = cap.out.splitlines()
    m = json.loads((out / "train" / "metrics.json").read_text())
    # MACs: conv 4 * 16 * 16 * (1 * 3 * 3) + dense 256 * 10 = 11,776 (the rule of models.describe)
    assert lines[0] == "imported m.onnx: 2,610 parameters, 11,776 MACs per sample"
    assert lines[1] == (f"onnxruntime {ort.__version__} vs torch on 60 test frames: max |score difference| "
                        f"{m['imported']['onnxruntime_max_abs_diff']:.2e} (limit 0.0001), decisions equal 60/60")
    assert lines[2] == f"frame accuracy {100 * m['frame_accuracy']:.2f}% ({m['test_correct']}/60 test frames)"
    for name in ("model.pt", "metrics.json", "recipe.toml", "confusion.png", "model.onnx", "source.onnx"):
        assert (out / "train" / name).is_file(), name
    log = json.loads((out / "stages.json").read_text())
    assert log["stages"]["train"]["status"] == "done"
    assert "out = 4" in (out / "recipe.toml").read_text()        # [model] layers is the imported list


@pytest.mark.parametrize("args,message", [
    (["missing.onnx"], "error: ONNX model file not found: missing.onnx"),
    (["BAD"], "error: BAD: not an ONNX model file"),
    (["RESID"], "error: RESID: node 'skip' (Add): it adds two computed tensors (a residual or branch connection); "
                "an imported model is a single chain of layers"),
])
def test_import_command_errors_are_one_line_exit_2(cli_data, tmp_path, capsys, args, message):
    bad = tmp_path / "bad.onnx"
    bad.write_bytes(b"not a protobuf \xff\xff")
    resid = tmp_path / "resid.onnx"
    resid.write_bytes(_ref_residual().SerializeToString())
    args = [{"BAD": str(bad), "RESID": str(resid)}.get(a, a) for a in args]
    message = message.replace("BAD", str(bad)).replace("RESID", str(resid))
    code = cli.main(["import", *args, "--recipe", DEFAULT, "--out", str(tmp_path / "run"), "--quiet"])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1 and err[0].startswith(message), err


def test_import_without_onnx_says_what_to_install(monkeypatch, capsys):
    from snnconvert import interop
    monkeypatch.setattr(interop, "missing_packages", lambda: ["onnxruntime"])
    code = cli.main(["import", "m.onnx", "--recipe", DEFAULT])
    assert code == 2
    assert capsys.readouterr().err.strip() == ("error: snnconvert import needs onnxruntime, which this install lacks; "
                                               "install with: pip install 'snnconvert[onnx]'")
