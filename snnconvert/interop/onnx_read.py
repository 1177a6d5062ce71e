"""An ONNX graph -> the project's layer list plus float weights (`read_graph`).

The graph must be a single chain from one input (a batch of frames) to one output (the class
scores). Nodes map onto the layer list (`settings.model`) like this:
    Conv (2-D, group 1, dilation 1, square kernel and stride, equal padding on every side after
        `pads`/`auto_pad`)                                   -> conv layer
    Relu, Clip(min 0, no max)                                -> the ReLU of the conv/dense before it
    MaxPool, AveragePool (no padding), GlobalAveragePool     -> maxpool / avgpool layer
    Gemm (transB, alpha, beta), MatMul [+ Add of a constant] -> dense layer
    BatchNormalization, Add of a per-channel constant right after a Conv/Gemm/MatMul
                                                             -> folded into its weights and bias
    Flatten, Reshape to (batch, features)                    -> the flatten before a dense layer
    Dropout, Identity                                        -> removed (inference)
    a final Softmax / LogSoftmax                             -> ignored: the decision is the arg-max
    Transpose NHWC -> NCHW on the input, NCHW -> NHWC before a flatten
                                                             -> channel order absorbed (the dense
                                                                weights' columns are permuted)
A MaxPool between a conv and its ReLU is accepted: max and ReLU commute, so the pair equals the
layer list's conv, ReLU, maxpool. Anything else raises UsageError with one line naming the node
(`node 'name' (OpType)`, or `node #i` when unnamed), its op type and why.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from snnconvert.errors import UsageError
from snnconvert.settings.model import check_layers

SUPPORTED = ("Conv", "Relu", "Clip", "MaxPool", "AveragePool", "GlobalAveragePool", "Gemm", "MatMul", "Add",
             "Flatten", "Reshape", "BatchNormalization", "Dropout", "Identity", "Softmax", "LogSoftmax",
             "Transpose", "Constant")
TO_NHWC, TO_NCHW = [0, 2, 3, 1], [0, 3, 1, 2]


@dataclass
class ImportedGraph:
    """What `read_graph` found: the layer list, one (weight, bias) float64 pair per conv/dense layer
    (torch layout: conv (O, C, k, k), dense (O, F) with torch's C, H, W flatten order), and how to
    feed the original graph (input name, channels-last or not, element type, fixed batch size)."""

    layers: list
    params: list
    input_shape: tuple            # (C, H, W) as the frames are
    input_name: str
    channels_last: bool           # the graph takes (N, H, W, C)
    input_dtype: type             # np.float32 or np.float64
    batch: int | None             # a fixed batch size of the graph input, or None
    scores_name: str              # the tensor holding the class scores (before a final Softmax)
    notes: list = field(default_factory=list)

    @property
    def n_classes(self) -> int:
        return int(self.params[-1][0].shape[0])


def read_graph(model) -> ImportedGraph:
    """Map an onnx.ModelProto onto the layer list (see the module docstring); UsageError if it cannot."""
    from onnx import TensorProto, numpy_helper

    g = model.graph
    consts = {t.name: numpy_helper.to_array(t) for t in g.initializer}
    for t in g.sparse_initializer:
        raise UsageError(f"the graph holds a sparse initializer '{t.values.name}'; only dense initializers are read")
    inputs = [v for v in g.input if v.name not in consts]
    if not inputs:
        raise UsageError("the graph has no input (every input has an initializer)")
    if len(inputs) > 1:
        extra = inputs[1].name
        for i, n in enumerate(g.node):
            if extra in n.input:
                raise UsageError(f"{_label(i, n)}: it reads a second graph input '{extra}'; an imported model "
                                 f"takes one input, the frames")
        raise UsageError(f"the graph has a second input '{extra}'; an imported model takes one input, the frames")
    if len(g.output) != 1:
        raise UsageError(f"the graph has {len(g.output)} outputs ({', '.join(o.name for o in g.output)}); "
                         f"an imported model gives one tensor, the class scores")
    inp = inputs[0]
    elem = inp.type.tensor_type.elem_type
    if elem not in (TensorProto.FLOAT, TensorProto.DOUBLE):
        raise UsageError(f"the graph input '{inp.name}' has element type "
                         f"{TensorProto.DataType.Name(elem)}; float or double frames are read")
    dims = [d.dim_value if d.HasField("dim_value") else None for d in inp.type.tensor_type.shape.dim]
    if len(dims) != 4:
        raise UsageError(f"the graph input '{inp.name}' has shape {_shape_text(dims)}; frames come as a "
                         f"4-D batch (N, C, H, W) or (N, H, W, C)")
    if any(d is None for d in dims[1:]):
        raise UsageError(f"the graph input '{inp.name}' has shape {_shape_text(dims)}; its channel and "
                         f"spatial sizes must be fixed numbers")
    st = _Chain(inp.name, dims, consts)
    for i, node in enumerate(g.node):
        st.step(i, node)
    return st.finish(g.output[0].name, np.float64 if elem == TensorProto.DOUBLE else np.float32)


def _label(i: int, node) -> str:
    return f"node '{node.name}' ({node.op_type})" if node.name else f"node #{i} ({node.op_type})"


def _shape_text(dims) -> str:
    return "(" + ", ".join("N" if d is None else str(d) for d in dims) + ")"


def _attrs(node) -> dict:
    from onnx import helper
    return {a.name: helper.get_attribute_value(a) for a in node.attribute}


class _Chain:
    """The walk along the chain: current tensor, its shape and channel order, pending ReLU."""

    def __init__(self, input_name, dims, consts):
        self.consts = consts
        self.cur = input_name
        self.input_name = input_name
        self.dims = dims
        self.batch = dims[0]
        self.channels_last = None     # decided by the first node
        self.shape = None             # (C, H, W) channels-first, or (F,) once flat
        self.layout = "NCHW"          # NCHW | NHWC | flat
        self.flat_perm = None         # ONNX feature j is torch feature flat_perm[j] (flatten in NHWC order)
        self.layers, self.params = [], []
        self.pending = None           # label of the conv/dense still waiting for its ReLU
        self.fold = None              # index into params that a BN / bias Add right now may fold into
        self.nonneg = False           # the current tensor is >= 0 (after a ReLU and max/avg pools)
        self.last_relu = None
        self.scores = None            # set by a final Softmax
        self.seen = 0

    # -- helpers
    def _const(self, name, label, what):
        if name not in self.consts:
            raise UsageError(f"{label}: its {what} '{name}' is computed in the graph; it must be an initializer "
                             f"or a Constant")
        return np.asarray(self.consts[name], dtype=np.float64)

    def _needs_nchw(self, label):
        if self.layout == "NHWC":
            raise UsageError(f"{label}: its input is in channels-last order (NHWC); it needs NCHW (transpose "
                             f"back with perm {TO_NCHW} first)")
        if self.layout == "flat":
            raise UsageError(f"{label}: its input is already flattened to {self.shape[0]} features; it needs a "
                             f"(N, C, H, W) tensor")

    def _missing_relu(self, label):
        if self.pending is not None:
            raise UsageError(f"{label}: the layer before it, {self.pending}, has no ReLU after it; every hidden "
                             f"conv/dense layer must be followed by a ReLU")

    def _add_layer(self, layer, weight, bias, label):
        try:
            check_layers([layer] if layer["type"] == "dense" else [layer, {"type": "dense"}])
        except UsageError as exc:
            raise UsageError(f"{label}: {exc}") from None
        self.layers.append(layer)
        self.params.append([weight, bias])
        self.pending, self.fold, self.nonneg = label, len(self.params) - 1, False

    # -- the walk
    def step(self, i, node):
        label, op = _label(i, node), node.op_type
        if op == "Constant":
            from onnx import numpy_helper
            a = _attrs(node)
            if "value" not in a:
                raise UsageError(f"{label}: only a tensor 'value' Constant is read. Got {sorted(a)} instead.")
            self.consts[node.output[0]] = numpy_helper.to_array(a["value"])
            return
        if self.scores is not None:
            raise UsageError(f"{label}: it follows the final Softmax/LogSoftmax; a Softmax is only accepted as "
                             f"the last node")
        dyn = [x for x in node.input if x and x not in self.consts]
        if op == "Identity" and not dyn and node.input:
            self.consts[node.output[0]] = self.consts[node.input[0]]   # an alias of a weight
            return
        if op == "Add" and len(dyn) == 2:
            raise UsageError(f"{label}: it adds two computed tensors (a residual or branch connection); an "
                             f"imported model is a single chain of layers")
        for x in dyn:
            if x != self.cur:
                if x == self.input_name:
                    raise UsageError(f"{label}: it reads the graph input '{x}' again (a branch); an imported model "
                                     f"is a single chain of layers")
                raise UsageError(f"{label}: it reads '{x}', which is not the output of the node before it (a "
                                 f"branch); an imported model is a single chain of layers")
        if self.cur not in node.input:
            raise UsageError(f"{label}: it does not read the chain's tensor '{self.cur}' (a branch); an imported "
                             f"model is a single chain of layers")
        if op not in SUPPORTED:
            raise UsageError(f"{label}: the op type {op} has no place in the layer list (supported: "
                             f"{', '.join(s for s in SUPPORTED if s != 'Constant')})")
        if self.channels_last is None:
            self._start(label, op, node)
        self.seen += 1
        getattr(self, "_" + op)(label, node, _attrs(node))
        if op not in ("Softmax", "LogSoftmax"):
            self.cur = node.output[0]
        if op in ("Dropout", "MaxPool", "BatchNormalization"):
            extra = [o for o in node.output[1:] if o]
            if extra:
                raise UsageError(f"{label}: its second output '{extra[0]}' (training-mode statistics or indices) "
                                 f"is not read; export the model for inference")

    def _start(self, label, op, node):
        d = self.dims
        if op == "Transpose" and list(_attrs(node).get("perm", [])) == TO_NCHW:
            self.channels_last, self.shape, self.layout = True, (d[3], d[1], d[2]), "NHWC"
        else:
            self.channels_last, self.shape = False, (d[1], d[2], d[3])

    def _Identity(self, label, node, a):
        pass

    _Dropout = _Identity

    def _Transpose(self, label, node, a):
        perm = list(a.get("perm", []))
        if self.layout == "NHWC" and perm == TO_NCHW:
            self.layout = "NCHW"
        elif self.layout == "NCHW" and perm == TO_NHWC:
            self.layout = "NHWC"
        else:
            raise UsageError(f"{label}: perm {perm} on a {self.layout} tensor is not a channel-order change "
                             f"(accepted: {TO_NCHW} on channels-last input, {TO_NHWC} before a flatten)")

    def _Conv(self, label, node, a):
        self._needs_nchw(label)
        self._missing_relu(label)
        w = self._const(node.input[1], label, "weight")
        c, h, wd = self.shape
        if w.ndim != 4:
            raise UsageError(f"{label}: only 2-D convolutions are read; its weight has shape {w.shape}")
        if a.get("group", 1) != 1:
            raise UsageError(f"{label}: group={a['group']}; only ungrouped convolutions (group 1) are read")
        if any(v != 1 for v in a.get("dilations", [1, 1])):
            raise UsageError(f"{label}: dilations {list(a['dilations'])}; only dilation 1 is read")
        o, ci, kh, kw = w.shape
        if ci != c:
            raise UsageError(f"{label}: its weight expects {ci} input channels but the tensor has {c}")
        if kh != kw:
            raise UsageError(f"{label}: kernel {kh}x{kw} is not square; the layer list has square kernels")
        strides = list(a.get("strides", [1, 1]))
        if strides[0] != strides[1]:
            raise UsageError(f"{label}: strides {strides} differ; the layer list has one stride for both axes")
        s = int(strides[0])
        pads = _pads(label, a, (h, wd), kh, s)
        b = self._const(node.input[2], label, "bias") if len(node.input) > 2 and node.input[2] else np.zeros(o)
        out_h, out_w = (h + 2 * pads - kh) // s + 1, (wd + 2 * pads - kw) // s + 1
        self._add_layer({"type": "conv", "out": int(o), "kernel": int(kh), "stride": s, "padding": pads, "bn": False},
                        w.copy(), b.reshape(o).copy(), label)
        self.shape = (int(o), out_h, out_w)

    def _Relu(self, label, node, a):
        if self.pending is None:
            if self.nonneg:
                return          # ReLU of a tensor that is already >= 0 changes nothing
            raise UsageError(f"{label}: there is no conv/dense layer before it to carry the ReLU")
        self.last_relu, self.pending, self.fold, self.nonneg = label, None, None, True

    def _Clip(self, label, node, a):
        lo = a.get("min", None)
        hi = a.get("max", None)
        if len(node.input) > 1 and node.input[1]:
            lo = float(self._const(node.input[1], label, "min"))
        if len(node.input) > 2 and node.input[2]:
            hi = float(self._const(node.input[2], label, "max"))
        if lo != 0.0 or (hi is not None and np.isfinite(hi)):
            raise UsageError(f"{label}: Clip with min {lo} and max {hi} is not a ReLU (a ReLU is a Clip with min 0 "
                             f"and no max)")
        self._Relu(label, node, a)

    def _pool(self, label, node, a, kind):
        self._needs_nchw(label)
        c, h, w = self.shape
        k = list(a.get("kernel_shape", []))
        if len(k) != 2 or k[0] != k[1]:
            raise UsageError(f"{label}: kernel_shape {k} is not a square 2-D window")
        strides = list(a.get("strides", [1, 1]))
        if strides[0] != strides[1]:
            raise UsageError(f"{label}: strides {strides} differ; the layer list has one stride for both axes")
        if any(v != 1 for v in a.get("dilations", [1, 1])):
            raise UsageError(f"{label}: dilations {list(a['dilations'])}; only dilation 1 is read")
        size, s = int(k[0]), int(strides[0])
        if _pads(label, a, (h, w), size, s) != 0:
            raise UsageError(f"{label}: padded pooling is not in the layer list (pools take no padding)")
        out_h, out_w = (h - size) // s + 1, (w - size) // s + 1
        if a.get("ceil_mode", 0):
            ceil_h, ceil_w = -(-(h - size) // s) + 1, -(-(w - size) // s) + 1
            if (ceil_h, ceil_w) != (out_h, out_w):
                raise UsageError(f"{label}: ceil_mode=1 gives a {ceil_h}x{ceil_w} output where the layer list's "
                                 f"pool gives {out_h}x{out_w}; export with ceil_mode=0")
        try:
            check_layers([{"type": kind, "size": size, "stride": s}, {"type": "dense"}])
        except UsageError as exc:
            raise UsageError(f"{label}: {exc}") from None
        if out_h < 1 or out_w < 1:
            raise UsageError(f"{label}: a {size}x{size} window does not fit the {h}x{w} input")
        self.layers.append({"type": kind, "size": size, "stride": s})
        self.shape, self.fold = (c, out_h, out_w), None

    def _MaxPool(self, label, node, a):
        self._pool(label, node, a, "maxpool")   # a pending ReLU may follow: max and ReLU commute

    def _AveragePool(self, label, node, a):
        if self.pending is not None:
            raise UsageError(f"{label}: it averages the output of {self.pending} before its ReLU; the layer list "
                             f"applies the ReLU first")
        self._pool(label, node, a, "avgpool")   # no padding, so count_include_pad changes nothing

    def _GlobalAveragePool(self, label, node, a):
        if self.pending is not None:
            raise UsageError(f"{label}: it averages the output of {self.pending} before its ReLU; the layer list "
                             f"applies the ReLU first")
        self._needs_nchw(label)
        c, h, w = self.shape
        if h != w:
            raise UsageError(f"{label}: a global pool over a {h}x{w} map is not a square window")
        self._pool(label, node, {"kernel_shape": [h, h], "strides": [h, h]}, "avgpool")

    def _BatchNormalization(self, label, node, a):
        if self.fold is None:
            raise UsageError(f"{label}: it does not directly follow a Conv, Gemm or MatMul, so it cannot be folded "
                             f"into one")
        if a.get("training_mode", 0):
            raise UsageError(f"{label}: training_mode=1; export the model for inference")
        if self.layout == "NHWC":
            self._needs_nchw(label)
        scale, beta, mean, var = (self._const(node.input[j], label, what)
                                  for j, what in ((1, "scale"), (2, "B"), (3, "mean"), (4, "var")))
        wb = self.params[self.fold]
        # g = scale / sqrt(var + eps);  w' = w * g[o];  b' = (b - mean) * g + beta
        gain = scale / np.sqrt(var + float(a.get("epsilon", 1e-5)))
        wb[0] = wb[0] * gain.reshape(-1, *[1] * (wb[0].ndim - 1))
        wb[1] = (wb[1] - mean) * gain + beta

    def _Add(self, label, node, a):
        if self.fold is None:
            raise UsageError(f"{label}: it adds a constant that does not directly follow a Conv, Gemm or MatMul; "
                             f"only a bias add can be folded")
        c = self._const(next(x for x in node.input if x != self.cur), label, "addend")
        wb = self.params[self.fold]
        o = wb[1].shape[0]
        per_channel = {(o,), (1, o)} if self.layout == "flat" else {(o, 1, 1), (1, o, 1, 1)}
        if c.size != 1 and tuple(c.shape) not in per_channel:
            raise UsageError(f"{label}: the added constant of shape {tuple(c.shape)} is not one value per "
                             f"output channel ({o})")
        wb[1] = wb[1] + np.broadcast_to(c.reshape(-1), (o,))

    def _flatten(self, label):
        if self.layout == "flat":
            return
        c, h, w = self.shape
        if self.layout == "NHWC":
            self.flat_perm = np.arange(c * h * w).reshape(c, h, w).transpose(1, 2, 0).reshape(-1)
        self.shape, self.layout, self.fold = (c * h * w,), "flat", None

    def _Flatten(self, label, node, a):
        if a.get("axis", 1) not in (1, -3 if self.layout != "flat" else -1):
            raise UsageError(f"{label}: axis={a['axis']}; only a flatten to (batch, features), axis 1, is read")
        self._flatten(label)

    def _Reshape(self, label, node, a):
        target = [int(v) for v in self._const(node.input[1], label, "shape").reshape(-1)]
        feats = int(np.prod(self.shape))
        ok_batch = len(target) == 2 and (target[0] in (-1, 0) or target[0] == self.batch)
        ok_feat = len(target) == 2 and (target[1] in (-1, feats) or (target[1] == 0 and self.layout == "flat"))
        if not (ok_batch and ok_feat) or target == [-1, -1]:
            raise UsageError(f"{label}: reshape to {target}; only a reshape to (batch, {feats}) is read")
        self._flatten(label)

    def _dense(self, label, w, b):
        """w: (F, O) as the graph multiplies x @ w; b: (O,)."""
        if self.layout != "flat":
            raise UsageError(f"{label}: its input is a {len(self.shape) + 1}-D tensor; flatten it first")
        self._missing_relu(label)
        f, o = w.shape
        if f != self.shape[0]:
            raise UsageError(f"{label}: its weight expects {f} features but the tensor has {self.shape[0]}")
        wt = w.T.copy()
        if self.flat_perm is not None:
            wt[:, self.flat_perm] = w.T
            self.flat_perm = None
        self._add_layer({"type": "dense", "units": int(o), "bn": False}, wt, b, label)
        self.shape = (int(o),)

    def _Gemm(self, label, node, a):
        if node.input[0] != self.cur:
            raise UsageError(f"{label}: the frames must be its first input A (the layer computes A * B + C)")
        if a.get("transA", 0):
            raise UsageError(f"{label}: transA=1 would transpose the batch of frames; only transA=0 is read")
        w = self._const(node.input[1], label, "weight B")
        if w.ndim != 2:
            raise UsageError(f"{label}: its weight B has shape {w.shape}; a 2-D matrix is read")
        w = (w.T if a.get("transB", 0) else w) * float(a.get("alpha", 1.0))
        o = w.shape[1]
        b = np.zeros(o)
        if len(node.input) > 2 and node.input[2]:
            c = self._const(node.input[2], label, "bias C")
            if c.size != 1 and tuple(c.shape) not in ((o,), (1, o)):
                raise UsageError(f"{label}: its bias C of shape {tuple(c.shape)} is not one value per output ({o})")
            b = np.broadcast_to(c.reshape(-1), (o,)) * float(a.get("beta", 1.0))
        self._dense(label, w, np.array(b, dtype=np.float64))

    def _MatMul(self, label, node, a):
        if node.input[0] != self.cur:
            raise UsageError(f"{label}: the frames must be its first input (the layer computes x * W)")
        w = self._const(node.input[1], label, "weight")
        if w.ndim != 2:
            raise UsageError(f"{label}: its weight has shape {w.shape}; a 2-D matrix is read")
        self._dense(label, w, np.zeros(w.shape[1]))

    def _Softmax(self, label, node, a):
        if not self.layers or self.layers[-1]["type"] != "dense" or self.pending is None or self.layout != "flat":
            raise UsageError(f"{label}: a Softmax is only accepted on the class scores of the last Gemm/MatMul")
        if a.get("axis", -1) not in (-1, 1):
            raise UsageError(f"{label}: axis={a['axis']}; only the class axis (1 or -1) is read")
        self.scores = self.cur
        self.cur = node.output[0]

    _LogSoftmax = _Softmax

    def finish(self, output_name, dtype) -> ImportedGraph:
        if self.seen == 0:
            raise UsageError("the graph has no nodes")
        if output_name != self.cur:
            raise UsageError(f"the graph output '{output_name}' is not the end of the chain of layers "
                             f"('{self.cur}')")
        if not self.layers or self.layers[-1]["type"] != "dense" or self.layout != "flat":
            raise UsageError("the graph does not end with a Gemm or MatMul giving the class scores")
        if self.pending is None:
            raise UsageError(f"{self.last_relu}: it applies a ReLU to the class scores; the last Gemm/MatMul "
                             f"must give them directly")
        layers = check_layers(self.layers)
        return ImportedGraph(layers=layers, params=[tuple(p) for p in self.params], input_shape=tuple(self.shape_in),
                             input_name=self.input_name, channels_last=bool(self.channels_last), input_dtype=dtype,
                             batch=self.batch, scores_name=self.scores or self.cur)

    @property
    def shape_in(self):
        d = self.dims
        return (d[3], d[1], d[2]) if self.channels_last else (d[1], d[2], d[3])


def _pads(label, a, hw, k, s) -> int:
    """The equal padding p on every side that `pads` / `auto_pad` give for a k x k window with stride s
    on an H x W input. SAME_UPPER / SAME_LOWER pad total = max((ceil(X / s) - 1) * s + k - X, 0) per axis
    (ONNX operator spec), the odd one at the end / the start; UsageError when the sides differ."""
    mode = a.get("auto_pad", b"NOTSET")
    mode = mode.decode() if isinstance(mode, bytes) else str(mode)
    if mode in ("SAME_UPPER", "SAME_LOWER"):
        sides = []
        for x in hw:
            total = max((-(-x // s) - 1) * s + k - x, 0)
            small, big = total // 2, total - total // 2
            sides += [small, big] if mode == "SAME_UPPER" else [big, small]
        pads = [sides[0], sides[2], sides[1], sides[3]]   # begin h, begin w, end h, end w
    elif mode == "VALID":
        pads = [0, 0, 0, 0]
    elif mode == "NOTSET":
        pads = list(a.get("pads", [0, 0, 0, 0]))
    else:
        raise UsageError(f"{label}: auto_pad {mode!r} is not an ONNX padding mode")
    if len(set(pads)) != 1:
        where = f"auto_pad {mode}" if mode != "NOTSET" else "pads"
        raise UsageError(f"{label}: {where} gives padding {pads} (top, left, bottom, right); the layer list pads "
                         f"every side equally")
    return int(pads[0])
