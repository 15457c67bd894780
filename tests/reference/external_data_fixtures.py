"""ONNX files whose weights live in external data, for the refusal checks in tests/engine_whole.rs.

Run by hand: python tests/reference/external_data_fixtures.py   (onnx 1.23.2, numpy 2.4.6)

The graph is y = x * w with w (1x1x4x4) stored outside the .onnx file, as the ONNX external-data
convention describes (a TensorProto with data_location EXTERNAL and a "location" entry):
  inside.onnx   + inside-weights.bin   location "inside-weights.bin": must load and run
  climbs.onnx   location "../outside-weights.bin": must be refused (leaves the folder)
  absolute.onnx location "/etc/hostname": must be refused (absolute path)
  missing.onnx  location "gone.bin": must be refused as missing
The test adds a symbolic link case itself (a link inside the folder to a file outside it).
"""
import os

import numpy as np
import onnx
from onnx import TensorProto, helper

OUT = os.path.join(os.path.dirname(__file__), "..", "fixtures", "engine", "external")
W = (np.arange(16, dtype=np.float32).reshape(1, 1, 4, 4) - 7.5) / 4


def model(name, location, write_data):
    w = onnx.TensorProto()
    w.name = "w"
    w.data_type = TensorProto.FLOAT
    w.dims.extend(W.shape)
    w.data_location = TensorProto.EXTERNAL
    for k, v in (("location", location), ("offset", "0"), ("length", str(W.nbytes))):
        e = w.external_data.add()
        e.key, e.value = k, v
    if write_data:
        with open(os.path.join(OUT, location), "wb") as f:
            f.write(W.tobytes())
    g = helper.make_graph([helper.make_node("Mul", ["x", "w"], ["y"])], name,
                          [helper.make_tensor_value_info("x", TensorProto.FLOAT, [1, 1, 4, 4])],
                          [helper.make_tensor_value_info("y", TensorProto.FLOAT, [1, 1, 4, 4])], [w])
    m = helper.make_model(g, opset_imports=[helper.make_opsetid("", 17)], producer_name="spurion-fixtures")
    m.ir_version = 8
    with open(os.path.join(OUT, name + ".onnx"), "wb") as f:
        f.write(m.SerializeToString())


os.makedirs(OUT, exist_ok=True)
model("inside", "inside-weights.bin", True)
model("climbs", "../outside-weights.bin", False)
model("absolute", "/etc/hostname", False)
model("missing", "gone.bin", False)
np.save(os.path.join(OUT, "weights.npy"), W)
