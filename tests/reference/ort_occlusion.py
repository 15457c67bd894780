"""Independent occlusion with onnxruntime, for tests/methods_reference.rs.

usage: ort_occlusion.py MODEL X.npy BASELINE.npy WINDOW STRIDE TARGET OUT.npy

Zeiler & Fergus (2014) occlusion written from the definition, not from spurion's code: slide a
WINDOW×WINDOW square over the spatial axes (2, 3 of an NCHW tensor) every STRIDE pixels, plus a
last window flush with the far edge so every pixel is covered; fill the square from BASELINE in
all channels; the pixel's value is the mean, over the windows covering it, of
score(x) - score(occluded x), where score is output[0, TARGET].
"""
import sys
import numpy as np
import onnxruntime as ort


def starts(n, w, s):
    if w >= n:
        return [0]
    v = list(range(0, n - w + 1, s))
    if v[-1] != n - w:
        v.append(n - w)
    return v


def main():
    model, xp, bp, w, s, t, outp = sys.argv[1:8]
    w, s, t = int(w), int(s), int(t)
    x = np.load(xp).astype(np.float32)
    b = np.load(bp).astype(np.float32)
    so = ort.SessionOptions()
    so.intra_op_num_threads = 1
    sess = ort.InferenceSession(model, so, providers=["CPUExecutionProvider"])
    name = sess.get_inputs()[0].name
    score = lambda a: float(sess.run(None, {name: a})[0].reshape(-1)[t])
    f0 = score(x)
    h, wd = x.shape[2], x.shape[3]
    total = np.zeros((h, wd))
    count = np.zeros((h, wd))
    for y0 in starts(h, w, s):
        for x0 in starts(wd, w, s):
            o = x.copy()
            o[:, :, y0:y0 + w, x0:x0 + w] = b[:, :, y0:y0 + w, x0:x0 + w]
            total[y0:y0 + w, x0:x0 + w] += f0 - score(o)
            count[y0:y0 + w, x0:x0 + w] += 1
    np.save(outp, (total / count).astype(np.float32))


if __name__ == "__main__":
    main()
