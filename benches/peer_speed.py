"""The reference peer for `cargo bench --bench speed` (see benches/speed.rs).

usage: peer_speed.py OUT_DIR THREADS REPEATS

Builds a ResNet-18 (torchvision's architecture, random weights from a fixed seed, no download),
exports it to OUT_DIR/resnet18.onnx (batch 1, opset 17) and OUT_DIR/resnet18-batch.onnx (dynamic
batch), writes the input OUT_DIR/x.npy, then times on THREADS threads, REPEATS times each:

  - integrated gradients, 64 midpoint steps, black baseline, with PyTorch CPU autograd
    (interpolants in batches of 16, the usual way to run it);
  - occlusion, window 16, stride 8, black fill, with onnxruntime forwards, both one image per
    run and in batches of 32.

Prints one JSON object on stdout: library versions, medians and all times in seconds, and the
results (IG attribution sum, occlusion map) for the bench to compare with spurion's.
Needs torch, torchvision, onnx and onnxruntime; run by hand (PyTorch is not part of CI).
"""
import json
import os
import sys
import time

import numpy as np
import onnxruntime as ort
import torch
import torchvision


def starts(n, w, s):
    # Same window placement as spurion's occlusion: every s pixels plus one flush with the edge.
    if w >= n:
        return [0]
    v = list(range(0, n - w + 1, s))
    if v[-1] != n - w:
        v.append(n - w)
    return v


def main():
    out, threads, repeats = sys.argv[1], int(sys.argv[2]), int(sys.argv[3])
    torch.set_num_threads(threads)
    torch.manual_seed(18)
    net = torchvision.models.resnet18(weights=None, num_classes=1000).eval()
    rng = np.random.default_rng(18)
    x = rng.uniform(-1.0, 1.0, size=(1, 3, 224, 224)).astype(np.float32)
    np.save(os.path.join(out, "x.npy"), x)
    xt = torch.from_numpy(x)
    for name, dyn in (("resnet18.onnx", None), ("resnet18-batch.onnx", {"x": {0: "n"}, "y": {0: "n"}})):
        torch.onnx.export(net, (xt,), os.path.join(out, name), dynamo=False, opset_version=17,
                          input_names=["x"], output_names=["y"], dynamic_axes=dyn,
                          do_constant_folding=True)
    with torch.no_grad():
        logits = net(xt)[0]
    target = int(torch.argmax(logits))

    # Integrated gradients (Sundararajan et al. 2017), midpoint rule, black (zero) baseline.
    steps, chunk = 64, 16
    alphas = (torch.arange(steps, dtype=torch.float32) + 0.5) / steps
    baseline = torch.zeros_like(xt)

    def ig():
        total = torch.zeros_like(xt)
        for a in alphas.split(chunk):
            pts = (baseline + a.view(-1, 1, 1, 1) * (xt - baseline)).requires_grad_(True)
            y = net(pts)[:, target].sum()
            (g,) = torch.autograd.grad(y, pts)
            total += g.sum(0, keepdim=True)
        return (xt - baseline) * total / steps

    ig_times, ig_sum = [], None
    for _ in range(repeats):
        t0 = time.perf_counter()
        attr = ig()
        ig_times.append(time.perf_counter() - t0)
        ig_sum = float(attr.sum())

    # Occlusion (Zeiler & Fergus 2014) with onnxruntime forwards.
    so = ort.SessionOptions()
    so.intra_op_num_threads = threads
    so.inter_op_num_threads = 1
    single = ort.InferenceSession(os.path.join(out, "resnet18.onnx"), so, providers=["CPUExecutionProvider"])
    batch = ort.InferenceSession(os.path.join(out, "resnet18-batch.onnx"), so, providers=["CPUExecutionProvider"])
    win, stride = 16, 8
    wins = [(a, b) for a in starts(224, win, stride) for b in starts(224, win, stride)]

    def occluded(y0, x0):
        o = x.copy()
        o[:, :, y0:y0 + win, x0:x0 + win] = 0.0
        return o

    def occlusion(batched):
        f0 = float(single.run(None, {"x": x})[0][0, target])
        scores = []
        if batched:
            for i in range(0, len(wins), 32):
                part = np.concatenate([occluded(*w) for w in wins[i:i + 32]])
                scores.extend(batch.run(None, {"x": part})[0][:, target].tolist())
        else:
            for w in wins:
                scores.append(float(single.run(None, {"x": occluded(*w)})[0][0, target]))
        total = np.zeros((224, 224))
        count = np.zeros((224, 224))
        for (y0, x0), s in zip(wins, scores):
            total[y0:y0 + win, x0:x0 + win] += f0 - s
            count[y0:y0 + win, x0:x0 + win] += 1
        return total / count

    occ = {}
    for batched in (False, True):
        ts = []
        for _ in range(repeats):
            t0 = time.perf_counter()
            m = occlusion(batched)
            ts.append(time.perf_counter() - t0)
        occ["batched" if batched else "single"] = ts
    np.save(os.path.join(out, "occlusion-ort.npy"), m.astype(np.float32))

    med = lambda v: float(np.median(v))
    print(json.dumps({
        "torch": torch.__version__, "torchvision": torchvision.__version__, "onnxruntime": ort.__version__,
        "threads": threads, "target": target, "windows": len(wins),
        "ig_seconds": ig_times, "ig_median": med(ig_times), "ig_sum": ig_sum,
        "score_x": float(logits[target]),
        "occlusion_single_seconds": occ["single"], "occlusion_single_median": med(occ["single"]),
        "occlusion_batched_seconds": occ["batched"], "occlusion_batched_median": med(occ["batched"]),
    }))


if __name__ == "__main__":
    main()
