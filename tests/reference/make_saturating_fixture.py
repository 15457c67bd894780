"""Builds two classifiers for the adaptive refinement's tests (tests/fixtures/methods/):
saturating.onnx with its input saturating.x.npy, and stepped.onnx.

Run by hand: /path/to/python tests/reference/make_saturating_fixture.py
Made with onnx 1.23.2 and numpy 2.4.6 (onnx.helper builds the graph; nothing is trained).

The model: x (1x1x16x16) -> flatten -> Gemm -> Sigmoid -> Gemm -> logits (2) -> Softmax. On the
straight path from a black (zero) baseline to the stored input, x' + a (x - x') = a x, each of
the eight hidden units turns from 0 to 1 within about 1/100 of the path, all of them between
a = 0.57 and a = 0.63: the score is flat on most of the path and changes in a narrow stretch,
as a confident classifier's softmax output does. Evenly spaced quadrature points spend almost
all their gradients where nothing happens. The hidden units are scaled to the stored input on
purpose (a fixture, not a model of anything).

stepped.onnx: x (1x1x16x16) -> two weighted means (Gemm) -> Sign(mean - 0.31 | 0.47) -> Gemm ->
logits (2) -> Softmax. Its score jumps where the path's brightness crosses those levels, and its
gradient is zero everywhere else (Sign has a zero derivative): no quadrature can make the
attributions add up to the jumps, so a refinement must stop at its cap and say so.
"""
import os
import numpy as np
import onnx
from onnx import TensorProto, helper, numpy_helper

OUT = os.path.join(os.path.dirname(__file__), "..", "fixtures", "methods")
rng = np.random.default_rng(20261205)

H = 8          # hidden units
SHARP = 400.0  # slope of each unit's turn along the path: width about 4 / SHARP


def init(name, a):
    return numpy_helper.from_array(np.asarray(a, dtype=np.float32), name)


def main():
    x = rng.uniform(0.2, 1.0, size=(1, 1, 16, 16)).astype(np.float32)
    f = x.reshape(-1).astype(np.float64)
    w = rng.uniform(0.0, 1.0, size=(H, 256))
    s = w @ f                                   # each unit's input at a = 1
    turn = np.linspace(0.57, 0.63, H)           # where along the path each unit turns
    w1 = SHARP * w / s[:, None]                 # unit j's pre-activation: SHARP (a - turn_j)
    b1 = -SHARP * turn
    w2 = np.stack([rng.normal(0.0, 1.0, size=H), rng.uniform(1.0, 2.0, size=H)])  # class 1 rises with every unit
    b2 = np.array([0.5, -4.0])
    g = helper.make_graph(
        [
            helper.make_node("Flatten", ["x"], ["f"], axis=1),
            helper.make_node("Gemm", ["f", "w1", "b1"], ["z"], transB=1),
            helper.make_node("Sigmoid", ["z"], ["h"]),
            helper.make_node("Gemm", ["h", "w2", "b2"], ["logits"], transB=1),
            helper.make_node("Softmax", ["logits"], ["p"], axis=1),
        ],
        "saturating",
        [helper.make_tensor_value_info("x", TensorProto.FLOAT, [1, 1, 16, 16])],
        [helper.make_tensor_value_info("p", TensorProto.FLOAT, [1, 2])],
        [init("w1", w1), init("b1", b1), init("w2", w2), init("b2", b2)],
    )
    m = helper.make_model(g, opset_imports=[helper.make_opsetid("", 17)], producer_name="spurion-fixtures")
    onnx.checker.check_model(m)
    onnx.save(m, os.path.join(OUT, "saturating.onnx"))
    np.save(os.path.join(OUT, "saturating.x.npy"), x)
    # A check of the design with onnx's reference evaluator: the class-1 probability at a few
    # points of the path.
    from onnx.reference import ReferenceEvaluator
    ev = ReferenceEvaluator(m)
    for a in (0.0, 0.5, 0.56, 0.6, 0.64, 0.7, 1.0):
        p = ev.run(None, {"x": (a * x).astype(np.float32)})[0][0, 1]
        print(f"a = {a:.2f}: p(class 1) = {p:.6f}")


def stepped():
    # Two units, each a weighted mean of the pixels (weights summing to 1), jumping where the
    # path's mean crosses 0.31 and 0.47 (on a uniform 0.6 input: a = 0.517 and 0.783).
    w1 = np.random.default_rng(7).uniform(0.5, 1.5, size=(2, 256))
    w1 /= w1.sum(axis=1, keepdims=True)
    g = helper.make_graph(
        [
            helper.make_node("Flatten", ["x"], ["f"], axis=1),
            helper.make_node("Gemm", ["f", "w1", "b1"], ["z"], transB=1),
            helper.make_node("Sign", ["z"], ["h"]),
            helper.make_node("Gemm", ["h", "w2", "b2"], ["logits"], transB=1),
            helper.make_node("Softmax", ["logits"], ["p"], axis=1),
        ],
        "stepped",
        [helper.make_tensor_value_info("x", TensorProto.FLOAT, [1, 1, 16, 16])],
        [helper.make_tensor_value_info("p", TensorProto.FLOAT, [1, 2])],
        [init("w1", w1), init("b1", [-0.31, -0.47]), init("w2", [[-1.0, -1.0], [1.0, 1.0]]), init("b2", [0.0, 0.0])],
    )
    m = helper.make_model(g, opset_imports=[helper.make_opsetid("", 17)], producer_name="spurion-fixtures")
    onnx.checker.check_model(m)
    onnx.save(m, os.path.join(OUT, "stepped.onnx"))


if __name__ == "__main__":
    stepped()
    main()
