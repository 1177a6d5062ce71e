"""The project's float frame model -> an ONNX graph (`model_to_onnx`, `write_onnx`).

BatchNorm is folded first (`models.fold_batchnorm`, exact in eval mode) and Dropout left out, so
the graph is Conv / Relu / MaxPool / AveragePool / Flatten / Gemm, opset 17, with input
`frames` (N, C, H, W) float32 (N free) and output `scores` (N, classes). `onnx_read.read_graph`
reads it back into the same layer list.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from snnconvert import files

OPSET = 17


def model_to_onnx(model, input_shape, name: str = "snnconvert frame model"):
    """nn.Sequential of the build pattern (float, not conversion-aware) -> onnx.ModelProto."""
    import onnx
    from onnx import TensorProto, helper, numpy_helper
    from torch import nn

    from snnconvert import models

    folded = models.fold_batchnorm(model).eval()
    nodes, inits = [], []
    cur, n_out = "frames", None

    def add(op, inputs, **attrs):
        nonlocal cur
        out = f"t{len(nodes)}"
        nodes.append(helper.make_node(op, [cur, *inputs], [out], name=f"{op.lower()}{len(nodes)}", **attrs))
        cur = out

    def const(tag, tensor):
        name = f"{tag}{len(inits)}"
        inits.append(numpy_helper.from_array(tensor.detach().cpu().numpy().astype(np.float32), name))
        return name

    for m in folded:
        if isinstance(m, nn.Conv2d):
            k, s, p = m.kernel_size, m.stride, m.padding
            add("Conv", [const("W", m.weight), const("B", m.bias)], kernel_shape=list(k), strides=list(s),
                pads=[p[0], p[1], p[0], p[1]])
        elif isinstance(m, nn.Linear):
            add("Gemm", [const("W", m.weight), const("B", m.bias)], transB=1)
            n_out = m.out_features
        elif isinstance(m, nn.ReLU):
            add("Relu", [])
        elif isinstance(m, (nn.MaxPool2d, nn.AvgPool2d)):
            k = _pair(m.kernel_size)
            s = _pair(m.stride if m.stride is not None else m.kernel_size)
            add("MaxPool" if isinstance(m, nn.MaxPool2d) else "AveragePool", [], kernel_shape=list(k), strides=list(s))
        elif isinstance(m, nn.Flatten):
            add("Flatten", [], axis=1)
        elif isinstance(m, nn.Dropout):
            continue
        else:
            raise TypeError(f"{type(m).__name__} has no ONNX form here (float build-pattern models only)")
    nodes[-1].output[0] = "scores"
    c, h, w = (int(v) for v in input_shape)
    graph = helper.make_graph(nodes, name, [helper.make_tensor_value_info("frames", TensorProto.FLOAT, ["N", c, h, w])],
                              [helper.make_tensor_value_info("scores", TensorProto.FLOAT, ["N", n_out])], inits)
    proto = helper.make_model(graph, opset_imports=[helper.make_opsetid("", OPSET)], producer_name="snnconvert")
    proto.ir_version = 8    # readable by onnxruntime releases of the last years
    onnx.checker.check_model(proto)
    return proto


def write_onnx(model, input_shape, path) -> Path:
    """Write `model_to_onnx(model, input_shape)` to `path` atomically."""
    return files.atomic_write_bytes(path, model_to_onnx(model, input_shape).SerializeToString())


def _pair(v):
    return tuple(v) if isinstance(v, (tuple, list)) else (v, v)
