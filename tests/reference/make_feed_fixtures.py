"""Builds the small ONNX graphs the feed tests run on (tests/fixtures/feed/).

Run by hand: /path/to/python tests/reference/make_feed_fixtures.py
Made with onnx 1.23.2 and numpy 2.4.6 (onnx.helper builds the graphs; nothing is trained).
The weights are seeded random numbers.

- plain_rgb.onnx: a small RGB classifier exported without its normalisation, the usual case
  (mean and std applied in the training code, not in the graph): input [1, 3, 32, 32] straight
  into a Conv, ReLU, global average pool and a Gemm to 3 logits.
- graph_norm_rgb.onnx: the same network with the normalisation inside the graph: Sub of a
  per-channel mean and Div by a per-channel std right after the input, as an export that
  wraps the normalisation into the model has them.
- plain_nhwc.onnx: the plain network taking NHWC input [1, 32, 32, 3] (a Transpose first),
  so the layout a card is written with has to come from the graph.
"""
import os
import numpy as np
import onnx
from onnx import TensorProto, helper, numpy_helper

OUT = os.path.join(os.path.dirname(__file__), "..", "fixtures", "feed")


def init(name, a, dtype=np.float32):
    return numpy_helper.from_array(np.asarray(a, dtype=dtype), name)


def save(graph, name):
    m = helper.make_model(graph, opset_imports=[helper.make_opsetid("", 17)], producer_name="spurion-fixtures")
    onnx.checker.check_model(m)
    onnx.save(m, os.path.join(OUT, name))


def body(first):
    """The network from tensor `first` (NCHW) to `logits`, and its initialisers."""
    r = np.random.default_rng(29)
    nodes = [
        helper.make_node("Conv", [first, "w1", "b1"], ["c1"], pads=[1, 1, 1, 1], kernel_shape=[3, 3], name="conv1"),
        helper.make_node("Relu", ["c1"], ["r1"]),
        helper.make_node("GlobalAveragePool", ["r1"], ["g"]),
        helper.make_node("Flatten", ["g"], ["f"], axis=1),
        helper.make_node("Gemm", ["f", "w2", "b2"], ["logits"], transB=1, name="fc"),
    ]
    inits = [
        init("w1", r.normal(0, 0.5, (6, 3, 3, 3))),
        init("b1", r.normal(0, 0.2, (6,))),
        init("w2", r.normal(0, 1.0, (3, 6))),
        init("b2", r.normal(0, 0.1, (3,))),
    ]
    return nodes, inits


def plain():
    nodes, inits = body("image")
    g = helper.make_graph(nodes, "plain_rgb", [helper.make_tensor_value_info("image", TensorProto.FLOAT, [1, 3, 32, 32])],
                          [helper.make_tensor_value_info("logits", TensorProto.FLOAT, [1, 3])], inits)
    save(g, "plain_rgb.onnx")


def graph_norm():
    nodes, inits = body("normed")
    pre = [
        helper.make_node("Sub", ["image", "mean"], ["centred"], name="sub_mean"),
        helper.make_node("Div", ["centred", "std"], ["normed"], name="div_std"),
    ]
    # ImageNet's per-channel statistics (common practice; values from memory).
    inits += [init("mean", np.array([0.485, 0.456, 0.406]).reshape(1, 3, 1, 1)),
              init("std", np.array([0.229, 0.224, 0.225]).reshape(1, 3, 1, 1))]
    g = helper.make_graph(pre + nodes, "graph_norm_rgb", [helper.make_tensor_value_info("image", TensorProto.FLOAT, [1, 3, 32, 32])],
                          [helper.make_tensor_value_info("logits", TensorProto.FLOAT, [1, 3])], inits)
    save(g, "graph_norm_rgb.onnx")


def nhwc():
    nodes, inits = body("nchw")
    pre = [helper.make_node("Transpose", ["image"], ["nchw"], perm=[0, 3, 1, 2])]
    g = helper.make_graph(pre + nodes, "plain_nhwc", [helper.make_tensor_value_info("image", TensorProto.FLOAT, [1, 32, 32, 3])],
                          [helper.make_tensor_value_info("logits", TensorProto.FLOAT, [1, 3])], inits)
    save(g, "plain_nhwc.onnx")


if __name__ == "__main__":
    os.makedirs(OUT, exist_ok=True)
    plain()
    graph_norm()
    nhwc()
