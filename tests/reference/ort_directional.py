"""Forward outputs and directional derivatives of whole networks with onnxruntime, for
tests/engine_whole.rs.

usage: ort_directional.py OUT_DIR SPEC [SPEC ...]
  SPEC = NAME=MODEL.onnx:X.npy:TARGET[:smooth64]   (TARGET -1: forward only; smooth64: the
         derivative from onnx's reference evaluator in float64, see derivative64(); for smooth
         models and for ones too flat for float32 differences)
  SPEC = NAME=MODEL.onnx:random:-1       (a seeded uniform input of the model's shape, written
                                          to OUT_DIR/NAME.x.npy)

For each SPEC it writes OUT_DIR/NAME.y.npy (onnxruntime's output 0 at x) and, for TARGET >= 0,
three directions OUT_DIR/NAME.d{0,1,2}.npy and their directional derivatives of output[TARGET],
printed as one JSON object {NAME: {"dd": [...]}} on stdout.

Directions are smooth and low-frequency (a few cosine waves across the image, one phase per
channel), the kind along which central differences of a ReLU / max-pool network stay meaningful
in float32. The derivative is a central difference D(h) = (f(x + h d) - f(x - h d)) / 2h with one
Richardson step and a step chosen where the estimates settle (see derivative()), computed with
onnxruntime 1.32.0 in float32, single-threaded. The chosen steps are reported as "h".
"""
import json
import os
import sys

import zlib

import numpy as np
import onnx
import onnxruntime as ort
from onnx import TensorProto, numpy_helper
from onnx.reference import ReferenceEvaluator


def session(path):
    so = ort.SessionOptions()
    so.intra_op_num_threads = 1
    return ort.InferenceSession(path, so, providers=["CPUExecutionProvider"])


def float64_evaluator(path):
    """onnx's reference evaluator (onnx 1.23.2) on a float64 copy of the model: onnxruntime has
    no float64 convolution, and float32 differences cannot resolve 1e-3 on a flat network."""
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


def directions(shape, rng):
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


def derivative(f, x, d):
    """Central differences at steps h_k = h0 / 2^k, one Richardson step each,
    R_k = (4 D(h_{k+1}) - D(h_k)) / 3, and the estimate where consecutive R agree best: large
    steps cross kinks and carry truncation error, small ones drown in float32 rounding; the flat
    part of the sequence between them is the derivative (step selection as in Ridders' method,
    common practice). Returns (value, step)."""
    h0 = 0.5 * max(float(np.abs(x).max()), 1e-3)
    hs = [h0 / 2 ** k for k in range(14)]
    D = [(f(x + h * d) - f(x - h * d)) / (2 * h) for h in hs]
    R = [(4 * D[k + 1] - D[k]) / 3 for k in range(len(D) - 1)]
    k = min(range(len(R) - 1), key=lambda k: abs(R[k] - R[k + 1]))
    return R[k + 1], hs[k + 1]


def derivative64(ref, x, d, target):
    """Float64 central differences with one Richardson step at a fixed small step (the model is
    smooth, so truncation is O(h^4) and rounding ~1e-16/h)."""
    name = ref.input_names[0]
    f = lambda a: float(ref.run(None, {name: a.astype(np.float64)})[0].reshape(-1)[target])
    x, d = x.astype(np.float64), d.astype(np.float64)
    h = 1e-3 * max(float(np.abs(x).max()), 1e-3)
    D = lambda s: (f(x + s * d) - f(x - s * d)) / (2 * s)
    return (4 * D(h / 2) - D(h)) / 3, h


def main():
    out_dir = sys.argv[1]
    report = {}
    for spec in sys.argv[2:]:
        name, rest = spec.split("=", 1)
        parts = rest.split(":")
        model, xp, target = parts[:3]
        kind = parts[3] if len(parts) > 3 else "ort"
        target = int(target)
        rng = np.random.default_rng(zlib.crc32(name.encode()))
        sess = session(model)
        inp = sess.get_inputs()[0]
        if xp == "random":
            shape = [d if isinstance(d, int) else 1 for d in inp.shape]
            x = rng.uniform(0.0, 1.0, size=shape).astype(np.float32)
            np.save(os.path.join(out_dir, f"{name}.x.npy"), x)
        else:
            x = np.load(xp).astype(np.float32)
        run = lambda a: sess.run(None, {inp.name: a})[0].reshape(-1)
        np.save(os.path.join(out_dir, f"{name}.y.npy"), run(x).astype(np.float32))
        entry = {}
        if target >= 0:
            f = lambda a: float(run(a.astype(np.float32))[target])
            ref = float64_evaluator(model) if kind == "smooth64" else None
            dd, steps = [], []
            for k, d in enumerate(directions(x.shape, rng)):
                np.save(os.path.join(out_dir, f"{name}.d{k}.npy"), d)
                if kind == "smooth64":
                    value, h = derivative64(ref, x, d, target)
                else:
                    value, h = derivative(f, x, d)
                dd.append(value)
                steps.append(h)
            entry["dd"] = dd
            entry["h"] = steps
        report[name] = entry
    print(json.dumps(report))


if __name__ == "__main__":
    main()
