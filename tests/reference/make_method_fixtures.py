"""Builds the small ONNX graphs the method tests run on (tests/fixtures/methods/).

Run by hand: /path/to/python tests/reference/make_method_fixtures.py
Made with onnx 1.23.2 and numpy 2.4.6 (onnx.helper builds the graphs; nothing is trained).
The weights are seeded random numbers; the graphs are only there to exercise the methods.
"""
import os
import numpy as np
import onnx
from onnx import TensorProto, helper, numpy_helper

OUT = os.path.join(os.path.dirname(__file__), "..", "fixtures", "methods")
rng = np.random.default_rng(20261201)


def init(name, a):
    return numpy_helper.from_array(np.asarray(a, dtype=np.float32), name)


def save(graph, name):
    m = helper.make_model(graph, opset_imports=[helper.make_opsetid("", 17)], producer_name="spurion-fixtures")
    onnx.checker.check_model(m)
    onnx.save(m, os.path.join(OUT, name))


def linear():
    # y = W·flatten(x) + b : integrated gradients must equal (x - x')·W[t] exactly.
    w = rng.normal(size=(3, 64)).astype(np.float32)
    b = rng.normal(size=(3,)).astype(np.float32)
    np.save(os.path.join(OUT, "linear_w.npy"), w)
    g = helper.make_graph(
        [
            helper.make_node("Flatten", ["x"], ["f"], axis=1),
            helper.make_node("Gemm", ["f", "w", "b"], ["y"], transB=1),
        ],
        "linear",
        [helper.make_tensor_value_info("x", TensorProto.FLOAT, [1, 1, 8, 8])],
        [helper.make_tensor_value_info("y", TensorProto.FLOAT, [1, 3])],
        [init("w", w), init("b", b)],
    )
    save(g, "linear.onnx")


def small_cnn(with_softmax):
    nodes = [
        helper.make_node("Conv", ["x", "w1", "b1"], ["c1"], pads=[1, 1, 1, 1], kernel_shape=[3, 3]),
        helper.make_node("Relu", ["c1"], ["r1"]),
        helper.make_node("MaxPool", ["r1"], ["p1"], kernel_shape=[2, 2], strides=[2, 2]),
        helper.make_node("Conv", ["p1", "w2", "b2"], ["c2"], pads=[1, 1, 1, 1], kernel_shape=[3, 3]),
        helper.make_node("Sigmoid", ["c2"], ["s2"]),
        helper.make_node("Mul", ["c2", "s2"], ["a2"]),  # swish: smooth, so finite checks are tight
        helper.make_node("GlobalAveragePool", ["a2"], ["g"]),
        helper.make_node("Flatten", ["g"], ["f"], axis=1),
        helper.make_node("Gemm", ["f", "w3", "b3"], ["logits"], transB=1),
    ]
    out = "logits"
    if with_softmax:
        nodes.append(helper.make_node("Softmax", ["logits"], ["prob"], axis=1))
        out = "prob"
    r = np.random.default_rng(7)
    inits = [
        init("w1", r.normal(scale=0.5, size=(6, 1, 3, 3))), init("b1", r.normal(scale=0.1, size=(6,))),
        init("w2", r.normal(scale=0.3, size=(8, 6, 3, 3))), init("b2", r.normal(scale=0.1, size=(8,))),
        init("w3", r.normal(scale=1.0, size=(3, 8))), init("b3", r.normal(scale=0.1, size=(3,))),
    ]
    g = helper.make_graph(
        nodes, "small_cnn",
        [helper.make_tensor_value_info("x", TensorProto.FLOAT, [1, 1, 16, 16])],
        [helper.make_tensor_value_info(out, TensorProto.FLOAT, [1, 3])],
        inits,
    )
    save(g, "small_cnn_softmax.onnx" if with_softmax else "small_cnn.onnx")


def nan_model():
    # Output is sqrt(-|W·x| - 1): NaN for every input, to check that spurion refuses NaN scores.
    w = rng.normal(size=(2, 64)).astype(np.float32)
    g = helper.make_graph(
        [
            helper.make_node("Flatten", ["x"], ["f"], axis=1),
            helper.make_node("Gemm", ["f", "w"], ["y"], transB=1),
            helper.make_node("Abs", ["y"], ["a"]),
            helper.make_node("Neg", ["a"], ["n"]),
            helper.make_node("Sub", ["n", "one"], ["m"]),
            helper.make_node("Sqrt", ["m"], ["out"]),
        ],
        "nan",
        [helper.make_tensor_value_info("x", TensorProto.FLOAT, [1, 1, 8, 8])],
        [helper.make_tensor_value_info("out", TensorProto.FLOAT, [1, 2])],
        [init("w", w), init("one", [1.0])],
    )
    save(g, "nan.onnx")


def corner_mean():
    # Logits [mean of the top-left 4x4 patch, 0]: the answer is known by construction, so painting
    # a region out must lower logit 0 by exactly what the patch loses, and a region elsewhere by 0.
    g = helper.make_graph(
        [
            helper.make_node("Slice", ["x", "starts", "ends", "axes"], ["patch"]),
            helper.make_node("ReduceMean", ["patch"], ["m"], axes=[1, 2, 3], keepdims=0),
            helper.make_node("Unsqueeze", ["m", "uaxes"], ["m1"]),
            helper.make_node("Mul", ["m1", "zero"], ["z"]),
            helper.make_node("Concat", ["m1", "z"], ["y"], axis=1),
        ],
        "corner_mean",
        [helper.make_tensor_value_info("x", TensorProto.FLOAT, [1, 1, 16, 16])],
        [helper.make_tensor_value_info("y", TensorProto.FLOAT, [1, 2])],
        [
            numpy_helper.from_array(np.array([0, 0], dtype=np.int64), "starts"),
            numpy_helper.from_array(np.array([4, 4], dtype=np.int64), "ends"),
            numpy_helper.from_array(np.array([2, 3], dtype=np.int64), "axes"),
            numpy_helper.from_array(np.array([1], dtype=np.int64), "uaxes"),
            init("zero", [0.0]),
        ],
    )
    save(g, "corner_mean.onnx")


def dynamic_hw():
    # A classifier whose input height and width are left open (N, 1, H, W), as many exports are.
    r = np.random.default_rng(11)
    g = helper.make_graph(
        [
            helper.make_node("Conv", ["x", "w1", "b1"], ["c1"], pads=[1, 1, 1, 1], kernel_shape=[3, 3]),
            helper.make_node("Relu", ["c1"], ["r1"]),
            helper.make_node("GlobalAveragePool", ["r1"], ["g"]),
            helper.make_node("Flatten", ["g"], ["f"], axis=1),
            helper.make_node("Gemm", ["f", "w2", "b2"], ["logits"], transB=1),
        ],
        "dynamic_hw",
        [helper.make_tensor_value_info("x", TensorProto.FLOAT, ["N", 1, "H", "W"])],
        [helper.make_tensor_value_info("logits", TensorProto.FLOAT, ["N", 2])],
        [
            init("w1", r.normal(scale=0.5, size=(4, 1, 3, 3))), init("b1", r.normal(scale=0.1, size=(4,))),
            init("w2", r.normal(scale=1.0, size=(2, 4))), init("b2", r.normal(scale=0.1, size=(2,))),
        ],
    )
    save(g, "dynamic_hw.onnx")


def many_outputs():
    # Models with several outputs (issue 24): which one holds the class scores.
    #   three_outputs.onnx: features [1,32,1,1] (an intermediate, listed first), logits [1,10],
    #                       probs = softmax(logits) [1,10]: two class-shaped outputs, ambiguous;
    #   two_outputs.onnx:   features [1,32,1,1] first, logits [1,10]: one class-shaped output;
    #   two_heads.onnx:     a [1,10] and b [1,5]: the feed card's label count picks one.
    r = np.random.default_rng(24)
    w1, b1 = r.normal(0, 0.4, (32, 3, 3, 3)), r.normal(0, 0.1, 32)
    w2, b2 = r.normal(0, 0.3, (10, 32)), r.normal(0, 0.1, 10)
    w3, b3 = r.normal(0, 0.3, (5, 32)), r.normal(0, 0.1, 5)
    trunk = [
        helper.make_node("Conv", ["x", "w1", "b1"], ["c"], pads=[1, 1, 1, 1], kernel_shape=[3, 3]),
        helper.make_node("Tanh", ["c"], ["t"]),
        helper.make_node("GlobalAveragePool", ["t"], ["features"]),
        helper.make_node("Flatten", ["features"], ["f"], axis=1),
        helper.make_node("Gemm", ["f", "w2", "b2"], ["logits"], transB=1),
    ]
    x = helper.make_tensor_value_info("x", TensorProto.FLOAT, [1, 3, 8, 8])
    out = lambda name, shape: helper.make_tensor_value_info(name, TensorProto.FLOAT, shape)
    inits = [init("w1", w1), init("b1", b1), init("w2", w2), init("b2", b2)]
    g = helper.make_graph(trunk + [helper.make_node("Softmax", ["logits"], ["probs"], axis=1)], "three_outputs", [x],
                          [out("features", [1, 32, 1, 1]), out("logits", [1, 10]), out("probs", [1, 10])], inits)
    save(g, "three_outputs.onnx")
    g = helper.make_graph(trunk, "two_outputs", [x], [out("features", [1, 32, 1, 1]), out("logits", [1, 10])], inits)
    save(g, "two_outputs.onnx")
    heads = trunk[:4] + [helper.make_node("Gemm", ["f", "w2", "b2"], ["a"], transB=1),
                         helper.make_node("Gemm", ["f", "w3", "b3"], ["b"], transB=1)]
    g = helper.make_graph(heads, "two_heads", [x], [out("a", [1, 10]), out("b", [1, 5])],
                          inits + [init("w3", w3), init("b3", b3)])
    save(g, "two_heads.onnx")


def main():
    os.makedirs(OUT, exist_ok=True)
    nan_model()
    linear()
    small_cnn(False)
    small_cnn(True)
    x = np.random.default_rng(3).random((1, 1, 16, 16), dtype=np.float32)
    np.save(os.path.join(OUT, "x16.npy"), x)
    corner_mean()
    dynamic_hw()
    many_outputs()
    print("wrote", sorted(os.listdir(OUT)))


if __name__ == "__main__":
    main()
