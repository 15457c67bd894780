"""Exports nobody here wrote, for tests/suite/zoo.rs: onnxruntime's forward and a float64
directional-derivative oracle.

usage: zoo_oracle.py OUT_DIR SPEC [SPEC ...]
  SPEC = NAME=MODEL.onnx:X:TARGET[:reweight]
    X       random (a seeded uniform input in [0, 1) of the model's shape, dynamic axes 1;
            written to OUT_DIR/NAME.x.npy) or a .npy file
    TARGET  the output index whose directional derivatives are wanted; -1: forward only
    reweight  the file's weights are ConstantOfShape placeholders (the onnx package's
            backend test data: every weight 0.02 or so); replace each with seeded random values
            (fan-in scaled, batch-norm variances positive) and list them as graph inputs with
            initializers, as the original lists its own initializers. The model actually used is
            written to OUT_DIR/NAME.onnx; everything else in the file (opset 9, LRN, Dropout,
            Sum, Softmax, the node names) stays as it was exported.

For each SPEC it writes OUT_DIR/NAME.y.npy (onnxruntime 1.32.0's output 0 at x, float32, one
thread) and, for TARGET >= 0, three directions OUT_DIR/NAME.d{0,1,2}.npy and the directional
derivatives of output[TARGET] along them, printed as one JSON object {NAME: {"dd": [...],
"h": [...], "seconds": s}} on stdout.

The oracle: onnx 1.23.2's reference evaluator on a float64 copy of the model (initializers,
Constant values, Cast targets and declared types turned to double), central differences
D(h) = (f(x + h d) - f(x - h d)) / 2h at h = 1e-4 and h/2, one Richardson step
(4 D(h/2) - D(h)) / 3. Float64 leaves rounding near 1e-16 / h ~ 1e-12; a ReLU or max-pool kink
crossed inside ±h moves the estimate by O(h) in the rare direction where it happens. Finite
differences are the oracle here, never the gradient under test.
"""
import json
import os
import sys
import time
import zlib

import numpy as np
import onnx
import onnxruntime as ort
from onnx import TensorProto, helper, numpy_helper
from onnx.reference import ReferenceEvaluator


def reweight(path, out_path, seed):
    """Random weights in place of ConstantOfShape placeholders (see the module doc)."""
    m = onnx.load(path)
    g = m.graph
    inits = {t.name: numpy_helper.to_array(t) for t in g.initializer}
    rng = np.random.default_rng(seed)
    # Which input slot of which op each placeholder feeds, to draw it sensibly.
    role = {}
    for n in g.node:
        for slot, name in enumerate(n.input):
            role.setdefault(name, (n.op_type, slot))
    keep, new = [], []
    for n in g.node:
        if n.op_type != "ConstantOfShape" or n.input[0] not in inits:
            keep.append(n)
            continue
        shape = [int(v) for v in inits[n.input[0]]]
        op, slot = role.get(n.output[0], ("", -1))
        if op in ("Conv", "Gemm") and slot == 1:
            fan_in = int(np.prod(shape[1:])) if op == "Conv" else shape[-1]
            if op == "Gemm":
                trans_b = next((a.i for c in g.node if n.output[0] in c.input for a in c.attribute if a.name == "transB"), 0)
                fan_in = shape[1] if trans_b else shape[0]
            v = rng.normal(0.0, np.sqrt(2.0 / fan_in), size=shape)
        elif op == "BatchNormalization" and slot == 1:  # scale
            v = rng.uniform(0.5, 1.5, size=shape)
        elif op == "BatchNormalization" and slot == 4:  # running variance
            v = rng.uniform(0.5, 1.5, size=shape)
        elif op == "BatchNormalization":  # shift, running mean
            v = rng.normal(0.0, 0.1, size=shape)
        else:  # biases and anything else
            v = rng.normal(0.0, 0.05, size=shape)
        t = numpy_helper.from_array(v.astype(np.float32), n.output[0])
        new.append(t)
    del g.node[:]
    g.node.extend(keep)
    g.initializer.extend(new)
    # The Caffe2-era files list their initializers as graph inputs; the new ones are listed too.
    g.input.extend(helper.make_tensor_value_info(t.name, TensorProto.FLOAT, list(t.dims)) for t in new)
    # The shape initializers no ConstantOfShape reads any more go.
    used = {i for n in g.node for i in n.input}
    for t in [t for t in g.initializer if t.name not in used and t.name.endswith("__SHAPE")]:
        g.initializer.remove(t)
        for i in [i for i in g.input if i.name == t.name]:
            g.input.remove(i)
    onnx.save(m, out_path)
    return out_path


def float64_evaluator(path):
    m = onnx.load(path)
    g = m.graph
    for i, t in enumerate(g.initializer):
        if t.data_type == TensorProto.FLOAT:
            g.initializer[i].CopyFrom(numpy_helper.from_array(numpy_helper.to_array(t).astype(np.float64), t.name))
    for v in list(g.input) + list(g.output) + list(g.value_info):
        if v.type.tensor_type.elem_type == TensorProto.FLOAT:
            v.type.tensor_type.elem_type = TensorProto.DOUBLE
    for n in g.node:
        for a in n.attribute:
            if a.type == onnx.AttributeProto.TENSOR and a.t.data_type == TensorProto.FLOAT:
                a.t.CopyFrom(numpy_helper.from_array(numpy_helper.to_array(a.t).astype(np.float64), a.t.name))
            if a.name == "to" and a.i == TensorProto.FLOAT:
                a.i = TensorProto.DOUBLE
    return ReferenceEvaluator(m)


def image_input(model):
    """The graph input without an initializer: the image."""
    inits = {t.name for t in model.graph.initializer}
    return next(i for i in model.graph.input if i.name not in inits)


def directions(shape, rng):
    """Smooth low-frequency directions (cosine waves, one phase per channel), largest |d| 1."""
    h, w = shape[-2], shape[-1]
    yy, xx = np.mgrid[0:h, 0:w]
    out = []
    for _ in range(3):
        d = np.zeros(shape, dtype=np.float64)
        for c in range(shape[1]):
            fy, fx = rng.integers(0, 3, size=2)
            phase = rng.uniform(0, 2 * np.pi)
            d[0, c] = np.cos(2 * np.pi * (fy * yy / h + fx * xx / w) + phase)
        out.append((d / np.abs(d).max()).astype(np.float32))
    return out


def main():
    out_dir = sys.argv[1]
    report = {}
    for spec in sys.argv[2:]:
        name, rest = spec.split("=", 1)
        parts = rest.split(":")
        model, xp, target = parts[:3]
        flags = parts[3:]
        target = int(target)
        rng = np.random.default_rng(zlib.crc32(name.encode()))
        if "reweight" in flags:
            model = reweight(model, os.path.join(out_dir, f"{name}.onnx"), zlib.crc32(name.encode()) + 1)
        proto = onnx.load(model)
        inp = image_input(proto)
        so = ort.SessionOptions()
        so.intra_op_num_threads = 1
        sess = ort.InferenceSession(model, so, providers=["CPUExecutionProvider"])
        if xp == "random":
            dims = [d.dim_value if d.dim_value > 0 else 1 for d in inp.type.tensor_type.shape.dim]
            x = rng.uniform(0.0, 1.0, size=dims).astype(np.float32)
        else:
            x = np.load(xp).astype(np.float32)
        np.save(os.path.join(out_dir, f"{name}.x.npy"), x)
        y = sess.run(None, {inp.name: x})[0].reshape(-1)
        np.save(os.path.join(out_dir, f"{name}.y.npy"), y.astype(np.float32))
        entry = {}
        if target >= 0:
            t0 = time.time()
            ref = float64_evaluator(model)
            f = lambda a: float(ref.run(None, {inp.name: a})[0].reshape(-1)[target])
            x64 = x.astype(np.float64)
            h = 1e-4
            dd = []
            for k, d in enumerate(directions(x.shape, rng)):
                np.save(os.path.join(out_dir, f"{name}.d{k}.npy"), d)
                d64 = d.astype(np.float64)
                D = lambda s: (f(x64 + s * d64) - f(x64 - s * d64)) / (2 * s)
                dd.append((4 * D(h / 2) - D(h)) / 3)
            entry = {"dd": dd, "h": h, "seconds": time.time() - t0}
        report[name] = entry
    print(json.dumps(report))


if __name__ == "__main__":
    main()
