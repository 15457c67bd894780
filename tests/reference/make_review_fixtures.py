"""Builds the small ONNX graphs the review tests run on (tests/fixtures/review/).

Run by hand: /path/to/python tests/reference/make_review_fixtures.py
Made with onnx 1.23.2 and numpy 2.4.6 (onnx.helper builds the graphs; nothing is trained).
The weights are seeded random numbers; each graph's answer is known by construction:

- half.onnx: a small ReLU network that reads only the left half of its 16x16 input (a Slice
  first), so every map, every re-drawn model's map and every Shapley value of the right half is 0.
- flat.onnx: a linear model of a flat [1, 64] input: a tensor-only model with no image layout.
- norm_net.onnx: Conv, BatchNormalization, MatMul with a constant weight and an Add, to check
  which nodes count as layers and how each parameter is re-drawn.
- no_reverse.onnx: a Conv and a Gemm followed by Atan, an op spurion has no reverse step for:
  gradient methods refuse it, forwards-only tests (occlusion, Shapley values, curves) run.
"""
import os
import numpy as np
import onnx
from onnx import TensorProto, helper, numpy_helper

OUT = os.path.join(os.path.dirname(__file__), "..", "fixtures", "review")


def init(name, a, dtype=np.float32):
    return numpy_helper.from_array(np.asarray(a, dtype=dtype), name)


def save(graph, name):
    m = helper.make_model(graph, opset_imports=[helper.make_opsetid("", 17)], producer_name="spurion-fixtures")
    onnx.checker.check_model(m)
    onnx.save(m, os.path.join(OUT, name))


def half():
    r = np.random.default_rng(41)
    g = helper.make_graph(
        [
            helper.make_node("Slice", ["x", "starts", "ends", "axes"], ["left"], name="left_half"),
            helper.make_node("Conv", ["left", "w1", "b1"], ["c1"], pads=[1, 1, 1, 1], kernel_shape=[3, 3], name="conv1"),
            helper.make_node("Relu", ["c1"], ["r1"]),
            helper.make_node("Conv", ["r1", "w2", "b2"], ["c2"], pads=[1, 1, 1, 1], kernel_shape=[3, 3], name="conv2"),
            helper.make_node("Relu", ["c2"], ["r2"]),
            helper.make_node("GlobalAveragePool", ["r2"], ["g"]),
            helper.make_node("Flatten", ["g"], ["f"], axis=1),
            helper.make_node("Gemm", ["f", "w3", "b3"], ["logits"], transB=1, name="fc"),
        ],
        "half",
        [helper.make_tensor_value_info("x", TensorProto.FLOAT, [1, 1, 16, 16])],
        [helper.make_tensor_value_info("logits", TensorProto.FLOAT, [1, 2])],
        [
            init("starts", [0], np.int64), init("ends", [8], np.int64), init("axes", [3], np.int64),
            init("w1", r.normal(scale=0.6, size=(4, 1, 3, 3))), init("b1", r.normal(scale=0.1, size=(4,))),
            init("w2", r.normal(scale=0.4, size=(4, 4, 3, 3))), init("b2", r.normal(scale=0.1, size=(4,))),
            init("w3", r.normal(scale=1.0, size=(2, 4))), init("b3", r.normal(scale=0.1, size=(2,))),
        ],
    )
    save(g, "half.onnx")


def flat():
    r = np.random.default_rng(43)
    g = helper.make_graph(
        [helper.make_node("Gemm", ["x", "w", "b"], ["y"], transB=1)],
        "flat",
        [helper.make_tensor_value_info("x", TensorProto.FLOAT, [1, 64])],
        [helper.make_tensor_value_info("y", TensorProto.FLOAT, [1, 2])],
        [init("w", r.normal(size=(2, 64))), init("b", r.normal(size=(2,)))],
    )
    save(g, "flat.onnx")


def norm_net():
    r = np.random.default_rng(47)
    g = helper.make_graph(
        [
            helper.make_node("Conv", ["x", "cw"], ["c"], pads=[1, 1, 1, 1], kernel_shape=[3, 3], name="conv"),
            helper.make_node("BatchNormalization", ["c", "gamma", "beta", "mean", "var"], ["n"], name="norm"),
            helper.make_node("Relu", ["n"], ["a"]),
            helper.make_node("Flatten", ["a"], ["f"], axis=1),
            helper.make_node("MatMul", ["f", "mw"], ["m"], name="dense"),
            helper.make_node("Add", ["m", "mb"], ["y"]),
        ],
        "norm_net",
        [helper.make_tensor_value_info("x", TensorProto.FLOAT, [1, 1, 8, 8])],
        [helper.make_tensor_value_info("y", TensorProto.FLOAT, [1, 2])],
        [
            init("cw", r.normal(scale=0.5, size=(3, 1, 3, 3))),
            init("gamma", r.uniform(0.5, 1.5, size=(3,))), init("beta", r.normal(scale=0.1, size=(3,))),
            init("mean", r.normal(scale=0.1, size=(3,))), init("var", r.uniform(0.5, 1.5, size=(3,))),
            init("mw", r.normal(scale=0.2, size=(192, 2))), init("mb", r.normal(scale=0.1, size=(2,))),
        ],
    )
    save(g, "norm_net.onnx")


def no_reverse():
    r = np.random.default_rng(53)
    g = helper.make_graph(
        [
            helper.make_node("Conv", ["x", "cw", "cb"], ["c"], pads=[1, 1, 1, 1], kernel_shape=[3, 3], name="conv"),
            helper.make_node("Relu", ["c"], ["a"]),
            helper.make_node("Flatten", ["a"], ["f"], axis=1),
            helper.make_node("Gemm", ["f", "w", "b"], ["z"], transB=1, name="fc"),
            helper.make_node("Atan", ["z"], ["y"]),
        ],
        "no_reverse",
        [helper.make_tensor_value_info("x", TensorProto.FLOAT, [1, 1, 8, 8])],
        [helper.make_tensor_value_info("y", TensorProto.FLOAT, [1, 2])],
        [
            init("cw", r.normal(scale=0.5, size=(2, 1, 3, 3))), init("cb", r.normal(scale=0.1, size=(2,))),
            init("w", r.normal(scale=0.3, size=(2, 128))), init("b", r.normal(scale=0.1, size=(2,))),
        ],
    )
    save(g, "no_reverse.onnx")


def main():
    os.makedirs(OUT, exist_ok=True)
    half()
    flat()
    norm_net()
    no_reverse()
    print("wrote", sorted(os.listdir(OUT)))


if __name__ == "__main__":
    main()
