"""Tiny one-op ONNX graphs for spurion's per-op reverse-step tests (tests/engine_ops.rs).

Each graph takes one float input `x` and produces one output `y`; constants are seeded random.
The Rust test checks the exact reverse pass against central finite differences of the same
forward, and that tract's simplified graph really contains the op family named in
`ops.json` (so every reverse step is exercised).

Made with onnx 1.23.2 (onnx.helper) and onnxruntime 1.32.0 (output shapes); run:  python tests/reference/engine_op_fixtures.py
"""
import json
import os

import numpy as np
import onnx
from onnx import TensorProto, helper, numpy_helper
import onnxruntime as ort

OUT = os.path.join(os.path.dirname(__file__), "..", "fixtures", "engine", "ops")
rng = np.random.default_rng(20260301)
manifest = {}


def const(name, arr):
    return numpy_helper.from_array(np.asarray(arr, dtype=np.float32), name)


def save(name, nodes, in_shape, inits=(), expect=(), opset=17):
    def build(out_shape):
        x = helper.make_tensor_value_info("x", TensorProto.FLOAT, list(in_shape))
        y = helper.make_tensor_value_info("y", TensorProto.FLOAT, out_shape)
        g = helper.make_graph(nodes, name, [x], [y], initializer=list(inits))
        m = helper.make_model(g, opset_imports=[helper.make_opsetid("", opset)], producer_name="spurion-fixtures")
        m.ir_version = 8
        return m

    # The output shape is whatever onnxruntime computes for the graph.
    probe = build(None)
    sess = ort.InferenceSession(probe.SerializeToString(), providers=["CPUExecutionProvider"])
    y = sess.run(None, {"x": np.zeros(in_shape, dtype=np.float32)})[0]
    m = build(list(y.shape))
    onnx.checker.check_model(m)
    onnx.save(m, os.path.join(OUT, name + ".onnx"))
    manifest[name] = {"input_shape": list(in_shape), "expect": list(expect)}


def w(*shape, scale=0.5):
    return (rng.standard_normal(shape) * scale).astype(np.float32)


N = helper.make_node
X = (1, 3, 6, 6)

# Convolutions
save("conv_basic", [N("Conv", ["x", "w", "b"], ["y"], pads=[1, 1, 1, 1])], X,
     [const("w", w(4, 3, 3, 3)), const("b", w(4))], ["Conv"])
save("conv_stride_dilation_asym_pad", [N("Conv", ["x", "w"], ["y"], strides=[2, 1], dilations=[2, 2], pads=[0, 1, 2, 0])],
     (1, 3, 9, 8), [const("w", w(5, 3, 3, 2))], ["Conv"])
save("conv_grouped", [N("Conv", ["x", "w", "b"], ["y"], group=2, pads=[1, 0, 1, 0], strides=[1, 2])],
     (1, 4, 6, 7), [const("w", w(6, 2, 3, 3)), const("b", w(6))], ["Conv"])
save("conv_depthwise", [N("Conv", ["x", "w"], ["y"], group=3, strides=[2, 2], pads=[1, 1, 1, 1])],
     (1, 3, 7, 7), [const("w", w(3, 1, 3, 3))], ["Conv"])
save("conv_depthwise_multiplier", [N("Conv", ["x", "w"], ["y"], group=3, pads=[2, 2, 2, 2], dilations=[2, 2])],
     X, [const("w", w(6, 1, 3, 3))], ["Conv"])
save("conv_same_upper", [N("Conv", ["x", "w"], ["y"], auto_pad="SAME_UPPER", strides=[2, 2])],
     (1, 3, 8, 8), [const("w", w(2, 3, 4, 4))], ["Conv"])
save("conv_1d", [N("Conv", ["x", "w"], ["y"], pads=[1, 1], strides=[2])],
     (1, 2, 9), [const("w", w(3, 2, 3))], ["Conv"])
save("conv_1x1", [N("Conv", ["x", "w", "b"], ["y"])], X, [const("w", w(5, 3, 1, 1)), const("b", w(5))], ["EinSum"])
# Gemm / matmul
save("gemm", [N("Flatten", ["x"], ["f"]), N("Gemm", ["f", "w", "b"], ["y"], transB=1, alpha=0.7)],
     (1, 2, 3, 2), [const("w", w(4, 12)), const("b", w(4))], ["EinSum"])
save("matmul", [N("MatMul", ["x", "w"], ["y"])], (1, 3, 5), [const("w", w(5, 4))], ["EinSum"])
save("matmul_self", [N("Transpose", ["x"], ["t"], perm=[0, 2, 1]), N("MatMul", ["x", "t"], ["y"])], (1, 3, 4), [], ["EinSum"])
# Binary ops with broadcasting
save("add_broadcast", [N("Add", ["x", "c"], ["y"])], X, [const("c", w(3, 1, 1))], ["Add"])
save("sub_broadcast", [N("Sub", ["c", "x"], ["y"])], X, [const("c", w(1, 6))], ["Sub"])
save("mul_broadcast", [N("Mul", ["x", "c"], ["y"])], X, [const("c", w(1, 3, 1, 6))], ["Mul"])
# x in the numerator: c/x with x ~ N(0,1) is singular near 0 and float32 differences fail there.
save("div_broadcast", [N("Div", ["x", "c"], ["e"]), N("Div", ["e", "d"], ["y"])], X,
     [const("c", np.abs(w(3, 1, 1)) + 0.5), const("d", np.abs(w(6)) + 1)], ["Mul"])  # constant divisors fold to Mul  # tract 0.23.9 rewrites Div as Mul by Recip
save("mul_self_broadcast", [N("ReduceMean", ["x"], ["m"], axes=[2, 3], keepdims=1), N("Mul", ["x", "m"], ["y"])], X, [], ["Mul"], opset=17)
save("div_by_input", [N("Abs", ["x"], ["a"]), N("Add", ["a", "one"], ["d"]), N("Div", ["x", "d"], ["y"])], X,
     [const("one", [1.0])], ["Recip"])
save("max_min", [N("Max", ["x", "c"], ["m"]), N("Min", ["m", "d"], ["y"])], X,
     [const("c", w(3, 1, 1)), const("d", w(1, 6) + 0.5)], ["Max", "Min"])
save("max_of_two_branches", [N("Neg", ["x"], ["n"]), N("Mul", ["n", "s"], ["t"]), N("Max", ["x", "t"], ["y"])], X,
     [const("s", [0.7])], ["Max"])
save("relu", [N("Relu", ["x"], ["y"])], X, [], ["Max"])
save("clip_relu6", [N("Mul", ["x", "k"], ["s"]), N("Clip", ["s", "lo", "hi"], ["y"])], X,
     [const("k", [4.0]), const("lo", 0.0), const("hi", 6.0)], ["Max", "Min"])
save("pow_tensor", [N("Sigmoid", ["x"], ["s"]), N("Add", ["s", "h"], ["b"]), N("Pow", ["b", "e"], ["y"])], X,
     [const("h", [0.5]), const("e", w(1, 6) + 1.0)], ["Pow"])
save("pow_exponent_input", [N("Pow", ["base", "x"], ["y"])], X, [const("base", np.abs(w(3, 1, 1)) + 0.5)], ["Pow"])
save("pow_const", [N("Abs", ["x"], ["a"]), N("Add", ["a", "h"], ["b"]), N("Pow", ["b", "e"], ["y"])], X,
     [const("h", [0.5]), const("e", 1.7)], [])
# Element-wise
for op, extra, expect in [
    ("Sigmoid", {}, ["Sigmoid"]), ("Tanh", {}, ["Tanh"]), ("Exp", {}, ["Exp"]), ("Erf", {}, ["Erf"]),
    ("LeakyRelu", {"alpha": 0.1}, ["LeakyRelu"]), ("Elu", {"alpha": 0.8}, ["Iff"]), ("Softplus", {}, ["Ln"]),
    ("HardSwish", {}, []), ("HardSigmoid", {"alpha": 0.25, "beta": 0.4}, ["Max", "Min"]), ("Abs", {}, ["Abs"]),
    ("Neg", {}, []), ("Selu", {}, ["Iff"]), ("Softsign", {}, ["Abs", "Recip"]), ("Celu", {"alpha": 1.3}, ["Min"]),
    ("Sin", {}, ["Sin"]), ("Cos", {}, ["Cos"]),
]:
    save("ew_" + op.lower(), [N(op, ["x"], ["y"], **extra)], X, [], expect)
save("ew_log_sqrt_recip", [N("Exp", ["x"], ["e"]), N("Add", ["e", "h"], ["p"]), N("Log", ["p"], ["l"]), N("Sqrt", ["p"], ["s"]),
                           N("Reciprocal", ["p"], ["r"]), N("Sum", ["l", "s", "r"], ["y"])], X, [const("h", [0.3])], ["Ln", "Sqrt", "Recip"])
save("ew_square_rsqrt", [N("Mul", ["x", "x"], ["q"]), N("Add", ["q", "h"], ["p"]), N("Sqrt", ["p"], ["s"]), N("Div", ["x", "s"], ["y"])], X,
     [const("h", [1.0])], [])
save("gelu_erf", [N("Div", ["x", "r2"], ["a"]), N("Erf", ["a"], ["e"]), N("Add", ["e", "one"], ["b"]), N("Mul", ["x", "b"], ["c"]),
                  N("Mul", ["c", "half"], ["y"])], X, [const("r2", [np.sqrt(2.0)]), const("one", [1.0]), const("half", [0.5])], [])
save("gelu_op", [N("Gelu", ["x"], ["y"])], X, [], [], opset=20)
save("gelu_tanh_op", [N("Gelu", ["x"], ["y"], approximate="tanh")], X, [], [], opset=20)
save("silu", [N("Sigmoid", ["x"], ["s"]), N("Mul", ["x", "s"], ["y"])], X, [], [])
save("prelu", [N("PRelu", ["x", "slope"], ["y"])], X, [const("slope", w(3, 1, 1))], [])
save("mish", [N("Mish", ["x"], ["y"])], X, [], [], opset=18)
save("batchnorm", [N("BatchNormalization", ["x", "g", "b", "m", "v"], ["y"])], X,
     [const("g", w(3)), const("b", w(3)), const("m", w(3)), const("v", np.abs(w(3)) + 0.5)], [])
# Pooling
save("maxpool", [N("MaxPool", ["x"], ["y"], kernel_shape=[3, 3], strides=[2, 2], pads=[1, 1, 1, 1])], (1, 3, 7, 7), [], ["MaxPool"])
save("maxpool_ceil_dilated", [N("MaxPool", ["x"], ["y"], kernel_shape=[2, 3], strides=[2, 2], dilations=[1, 2], ceil_mode=1)],
     (1, 2, 8, 9), [], ["MaxPool"])
save("avgpool_exclude_pad", [N("AveragePool", ["x"], ["y"], kernel_shape=[3, 3], strides=[2, 2], pads=[1, 1, 1, 1])], (1, 3, 7, 7), [], ["SumPool"])
save("avgpool_include_pad", [N("AveragePool", ["x"], ["y"], kernel_shape=[3, 2], strides=[1, 2], pads=[1, 0, 1, 1], count_include_pad=1)],
     (1, 3, 6, 7), [], ["SumPool"])
save("avgpool_ceil", [N("AveragePool", ["x"], ["y"], kernel_shape=[3, 3], strides=[2, 2], ceil_mode=1)], (1, 2, 8, 8), [], ["SumPool"])
save("global_avgpool", [N("GlobalAveragePool", ["x"], ["y"])], X, [], [])
save("global_maxpool", [N("GlobalMaxPool", ["x"], ["y"])], X, [], [])
# Reductions, softmax
save("reduce_mean", [N("ReduceMean", ["x"], ["y"], axes=[1, 3], keepdims=0)], X, [], [], opset=17)
save("reduce_sum", [N("ReduceSum", ["x", "ax"], ["y"], keepdims=1)], X, [numpy_helper.from_array(np.array([2], dtype=np.int64), "ax")], [], opset=17)
save("reduce_max", [N("ReduceMax", ["x"], ["y"], axes=[2], keepdims=1)], X, [], [], opset=17)
save("reduce_min", [N("ReduceMin", ["x"], ["y"], axes=[1], keepdims=0)], X, [], [], opset=17)
save("reduce_sum_square", [N("ReduceSumSquare", ["x"], ["y"], axes=[3], keepdims=1)], X, [], [], opset=17)
save("softmax", [N("Flatten", ["x"], ["f"]), N("Gemm", ["f", "w"], ["l"], transB=1), N("Softmax", ["l"], ["y"], axis=-1)],
     (1, 2, 3, 2), [const("w", w(5, 12, scale=1.0))], ["Softmax"])
save("log_softmax", [N("LogSoftmax", ["x"], ["y"], axis=1)], X, [], ["Softmax", "Ln"])  # tract: Ln(Softmax)
# Shape ops
save("transpose_reshape", [N("Transpose", ["x"], ["t"], perm=[0, 2, 3, 1]), N("Reshape", ["t", "s"], ["r"]), N("Mul", ["r", "c"], ["y"])], X,
     [numpy_helper.from_array(np.array([1, 12, 9], dtype=np.int64), "s"), const("c", w(12, 9))], [])
save("squeeze_unsqueeze", [N("ReduceMean", ["x"], ["m"], axes=[2, 3], keepdims=1), N("Squeeze", ["m", "ax"], ["s"]), N("Unsqueeze", ["s", "ax0"], ["u"]),
                           N("Mul", ["u", "c"], ["y"])], X,
     [numpy_helper.from_array(np.array([2, 3], dtype=np.int64), "ax"), numpy_helper.from_array(np.array([0], dtype=np.int64), "ax0"), const("c", w(1, 1, 3))], [])
for mode in ["constant", "reflect", "edge"]:
    save("pad_" + mode, [N("Pad", ["x", "p", "v"], ["q"], mode=mode), N("Mul", ["q", "c"], ["y"])], X,
         [numpy_helper.from_array(np.array([0, 0, 2, 1, 0, 0, 1, 2], dtype=np.int64), "p"), const("v", 0.3), const("c", w(3, 9, 9))], ["Pad"])
save("concat", [N("Sigmoid", ["x"], ["s"]), N("Concat", ["x", "s", "x"], ["c"], axis=1), N("Mul", ["c", "k"], ["y"])], X, [const("k", w(9, 1, 1))], ["Concat"])
save("slice_split", [N("Split", ["x", "sp"], ["a", "b"], axis=3), N("Slice", ["a", "st", "en", "axs"], ["s"]), N("Tanh", ["b"], ["t"]),
                     N("Concat", ["s", "t"], ["c"], axis=2), N("Mul", ["c", "k"], ["y"])], X,
     [numpy_helper.from_array(np.array([3, 3], dtype=np.int64), "sp"), numpy_helper.from_array(np.array([1], dtype=np.int64), "st"),
      numpy_helper.from_array(np.array([3], dtype=np.int64), "en"), numpy_helper.from_array(np.array([2], dtype=np.int64), "axs"),
      const("k", w(3, 8, 3))], ["Slice"])
save("slice_step", [N("Slice", ["x", "st", "en", "axs", "stp"], ["s"]), N("Mul", ["s", "c"], ["y"])], X,
     [numpy_helper.from_array(np.array([1, 0], dtype=np.int64), "st"), numpy_helper.from_array(np.array([6, 5], dtype=np.int64), "en"),
      numpy_helper.from_array(np.array([2, 3], dtype=np.int64), "axs"), numpy_helper.from_array(np.array([2, 2], dtype=np.int64), "stp"),
      const("c", w(3, 3, 3))], [])
save("expand", [N("ReduceMean", ["x"], ["m"], axes=[1], keepdims=1), N("Expand", ["m", "s"], ["e"]), N("Mul", ["e", "c"], ["y"])], X,
     [numpy_helper.from_array(np.array([1, 4, 6, 6], dtype=np.int64), "s"), const("c", w(4, 6, 6))], [], opset=17)
save("cast_identity_dropout", [N("Cast", ["x"], ["c"], to=TensorProto.FLOAT), N("Identity", ["c"], ["i"]), N("Dropout", ["i"], ["d"]),
                               N("Mul", ["d", "k"], ["y"])], X, [const("k", w(3, 6, 6))], [])
save("resize_nearest_2x", [N("Resize", ["x", "", "sc"], ["r"], mode="nearest"), N("Mul", ["r", "c"], ["y"])], (1, 2, 3, 4),
     [const("sc", [1, 1, 2, 2]), const("c", w(2, 6, 8))], [])
save("resize_linear", [N("Resize", ["x", "", "sc"], ["r"], mode="linear", coordinate_transformation_mode="half_pixel"),
                       N("Mul", ["r", "c"], ["y"])], (1, 2, 3, 4), [const("sc", [1, 1, 2, 1.5]), const("c", w(2, 6, 6))], ["Resize"])
save("resize_linear_align", [N("Resize", ["x", "", "", "sz"], ["r"], mode="linear", coordinate_transformation_mode="align_corners"),
                             N("Mul", ["r", "c"], ["y"])], (1, 2, 4, 5),
     [numpy_helper.from_array(np.array([1, 2, 7, 3], dtype=np.int64), "sz"), const("c", w(2, 7, 3))], ["Resize"])
save("resize_nearest_sizes", [N("Resize", ["x", "", "", "sz"], ["r"], mode="nearest", coordinate_transformation_mode="asymmetric", nearest_mode="floor"),
                              N("Mul", ["r", "c"], ["y"])], (1, 2, 4, 5),
     [numpy_helper.from_array(np.array([1, 2, 6, 7], dtype=np.int64), "sz"), const("c", w(2, 6, 7))], [])

# Gathers (the torch.export exporter writes GatherND for adaptive pooling); repeated and negative
# indices must add up in the reverse step.
I64 = lambda name, a: numpy_helper.from_array(np.array(a, dtype=np.int64), name)
save("gather_axis_repeats", [N("Gather", ["x", "ix"], ["g"], axis=2), N("Mul", ["g", "c"], ["y"])], X,
     [I64("ix", [[0, 2], [5, 2]]), const("c", w(3, 2, 2, 6))], ["Gather"])
save("gather_negative", [N("Gather", ["x", "ix"], ["g"], axis=3), N("Mul", ["g", "c"], ["y"])], X,
     [I64("ix", [-1, 0, 3, -1]), const("c", w(3, 6, 4))], ["Gather"])
save("gathernd", [N("GatherND", ["x", "ix"], ["g"]), N("Mul", ["g", "c"], ["y"])], X,
     [I64("ix", [[0, 1, 2], [0, 2, 5], [0, 1, 2]]), const("c", w(3, 6))], ["GatherNd"])
save("gathernd_batch", [N("GatherND", ["x", "ix"], ["g"], batch_dims=1), N("Mul", ["g", "c"], ["y"])], X,
     [I64("ix", [[[1, 0], [2, 5], [1, 0], [0, 3]]]), const("c", w(1, 4, 6))], ["GatherNd"])

# Local response normalisation across channels (AlexNet / GoogLeNet exports); onnxruntime takes odd sizes only.
save("lrn_odd", [N("LRN", ["x"], ["l"], size=3, alpha=0.8, beta=0.75, bias=1.0), N("Mul", ["l", "c"], ["y"])], (1, 5, 3, 3),
     [const("c", w(5, 3, 3))], ["Lrn"])
save("lrn_wide", [N("LRN", ["x"], ["l"], size=5, alpha=0.5, beta=0.6, bias=2.0), N("Mul", ["l", "c"], ["y"])], (1, 6, 2, 3),
     [const("c", w(6, 2, 3))], ["Lrn"])

# Transformer pieces (issue 24). Layer normalisation reaches tract's RmsNorm from one op (opset
# 17+) and from the ReduceMean/Sub/Pow/Sqrt/Div that older exports write; over two axes it stays
# Reduce<MeanOfSquares>/Rsqrt. T is a token tensor (batch, tokens, width).
T = (1, 6, 8)
save("layernorm_op", [N("LayerNormalization", ["x", "g", "b"], ["y"], axis=-1, epsilon=1e-5)], T,
     [const("g", w(8) + 1.0), const("b", w(8))], ["RmsNorm"])
save("layernorm_two_axes", [N("LayerNormalization", ["x", "g", "b"], ["y"], axis=-2, epsilon=1e-3)], T,
     [const("g", w(6, 8) + 1.0), const("b", w(6, 8))], ["Rsqrt"])
save("layernorm_decomposed", [N("ReduceMean", ["x"], ["m"], axes=[-1], keepdims=1), N("Sub", ["x", "m"], ["d"]),
                              N("Pow", ["d", "two"], ["p"]), N("ReduceMean", ["p"], ["v"], axes=[-1], keepdims=1),
                              N("Add", ["v", "eps"], ["ve"]), N("Sqrt", ["ve"], ["s"]), N("Div", ["d", "s"], ["n"]),
                              N("Mul", ["n", "g"], ["ng"]), N("Add", ["ng", "b"], ["y"])], T,
     [const("two", 2.0), const("eps", 1e-5), const("g", w(8) + 1.0), const("b", w(8))], ["RmsNorm"], opset=13)
# Channels-last layer norm on an NCHW map between transposes (ConvNeXt's LayerNorm2d).
save("layernorm_channels", [N("Transpose", ["x"], ["t"], perm=[0, 2, 3, 1]),
                            N("LayerNormalization", ["t", "g", "b"], ["n"], axis=-1, epsilon=1e-6),
                            N("Transpose", ["n"], ["y"], perm=[0, 3, 1, 2])], X,
     [const("g", w(3) + 1.0), const("b", w(3))], ["RmsNorm"])
# Multi-head self-attention: MatMul of two computed tensors, softmax over the last axis.
save("attention", [N("MatMul", ["x", "wq"], ["q"]), N("MatMul", ["x", "wk"], ["k"]), N("MatMul", ["x", "wv"], ["v"]),
                   N("Reshape", ["q", "hs"], ["qh"]), N("Reshape", ["k", "hs"], ["kh"]), N("Reshape", ["v", "hs"], ["vh"]),
                   N("Transpose", ["qh"], ["qt"], perm=[0, 2, 1, 3]), N("Transpose", ["kh"], ["kt"], perm=[0, 2, 3, 1]),
                   N("Transpose", ["vh"], ["vt"], perm=[0, 2, 1, 3]), N("MatMul", ["qt", "kt"], ["s"]),
                   N("Mul", ["s", "scale"], ["ss"]), N("Softmax", ["ss"], ["a"], axis=-1), N("MatMul", ["a", "vt"], ["o"]),
                   N("Transpose", ["o"], ["ot"], perm=[0, 2, 1, 3]), N("Reshape", ["ot", "ts"], ["oc"]),
                   N("MatMul", ["oc", "wo"], ["y"])], T,
     [const("wq", w(8, 8)), const("wk", w(8, 8)), const("wv", w(8, 8)), const("wo", w(8, 8)),
      I64("hs", [1, 6, 2, 4]), I64("ts", [1, 6, 8]), const("scale", 0.5)], ["EinSum", "Softmax"])
# Swin's shifted windows: torch.roll as the exporter writes it (two slices and a concat per axis).
save("roll", [N("Slice", ["x", "s0", "e0", "a2"], ["r1"]), N("Slice", ["x", "z", "s0", "a2"], ["r2"]),
              N("Concat", ["r1", "r2"], ["r"], axis=2), N("Slice", ["r", "s1", "e0", "a3"], ["c1"]),
              N("Slice", ["r", "z", "s1", "a3"], ["c2"]), N("Concat", ["c1", "c2"], ["c"], axis=3),
              N("Mul", ["c", "k"], ["y"])], X,
     [I64("s0", [2]), I64("s1", [4]), I64("e0", [6]), I64("z", [0]), I64("a2", [2]), I64("a3", [3]), const("k", w(3, 6, 6))],
     ["Slice", "Concat"])
# Swin V2's cosine attention normalises with F.normalize: x / max(‖x‖₂, ε).
save("l2_normalize", [N("ReduceL2", ["x"], ["n"], axes=[-1], keepdims=1), N("Clip", ["n", "lo"], ["c"]),
                      N("Div", ["x", "c"], ["y"])], T, [const("lo", 1e-12)], ["Sqrt", "Max", "Recip"], opset=13)
# An Einsum op of two computed operands (MaxViT's relative attention writes one).
save("einsum_two_inputs", [N("Tanh", ["x"], ["t"]), N("Einsum", ["x", "t"], ["e"], equation="bic,bjc->bij"),
                           N("Mul", ["e", "k"], ["y"])], T, [const("k", w(6, 6))], ["EinSum"])
# ViT takes the class token: x[:, 0].
save("gather_token", [N("Gather", ["x", "i0"], ["g"], axis=1), N("Mul", ["g", "k"], ["y"])], T,
     [I64("i0", 0), const("k", w(1, 8))], [])
# Softmax over a middle axis of a rank-4 tensor.
save("softmax_middle_axis", [N("Mul", ["x", "k"], ["m"]), N("Softmax", ["m"], ["y"], axis=1)], X,
     [const("k", w(3, 1, 6) + 1.0)], ["Softmax"])
save("tile", [N("Tile", ["x", "reps"], ["t"]), N("Mul", ["t", "k"], ["y"])], T,
     [I64("reps", [2, 1, 3]), const("k", w(2, 6, 24))], ["Tile"])

with open(os.path.join(OUT, "ops.json"), "w") as f:
    json.dump(manifest, f, indent=1, sort_keys=True)
print(len(manifest), "fixtures")
