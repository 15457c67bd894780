"""Live reference for the feed tests: a picture fed to an ONNX model the way its training code
would, written directly in numpy, scored by onnxruntime.

    python ort_feed.py MODEL PIXELS.npy MODE [MEAN STD]

PIXELS.npy: uint8, H x W x 3, the same values the test wrote into the PNG that spurion reads.
The picture is scaled to 0..1 (v / 255), shrunk to the model's grid by exact block means when
its sides are whole multiples of the grid's (area averaging, common practice), then:
  MODE fixed     (x - mean) / std per channel, MEAN and STD comma-separated
  MODE per-image (x - x.mean()) / max(x.std(), 1 / sqrt(x.size)) over all pixels and channels
                 (the standardisation TensorFlow's per_image_standardization documents)
and laid out as the model's input (NCHW or NHWC, read from the model). Prints JSON:
{"scores": [...], "tensor_sum": float}.
"""
import json
import sys

import numpy as np
import onnxruntime as ort

model, pixels, mode = sys.argv[1], sys.argv[2], sys.argv[3]
sess = ort.InferenceSession(model, providers=["CPUExecutionProvider"])
inp = sess.get_inputs()[0]
shape = inp.shape
nchw = shape[1] == 3
h, w = (shape[2], shape[3]) if nchw else (shape[1], shape[2])

x = np.load(pixels).astype(np.float64) / 255.0
H, W, C = x.shape
assert H % h == 0 and W % w == 0, "the reference shrinks by whole factors only"
x = x.reshape(h, H // h, w, W // w, C).mean(axis=(1, 3))
if mode == "fixed":
    mean = np.array([float(v) for v in sys.argv[4].split(",")])
    std = np.array([float(v) for v in sys.argv[5].split(",")])
    x = (x - mean) / std
elif mode == "per-image":
    x = (x - x.mean()) / max(x.std(), 1.0 / np.sqrt(x.size))
else:
    raise SystemExit(f"unknown mode {mode}")
t = x.transpose(2, 0, 1)[None] if nchw else x[None]
out = sess.run(None, {inp.name: t.astype(np.float32)})[0]
print(json.dumps({"scores": out.reshape(-1).tolist(), "tensor_sum": float(t.sum())}))
