"""The reference peers for `cargo bench --bench speed` (see benches/speed.rs), each timed at its
best setting.

usage: peer_speed.py OUT_DIR THREADS REPEATS
       peer_speed.py OUT_DIR THREADS REPEATS vit
       peer_speed.py OUT_DIR THREADS 1 vit-peak BATCH CHANNELS_LAST
       peer_speed.py OUT_DIR THREADS 1 user BATCH CHANNELS_LAST

Builds a ResNet-18 (torchvision's architecture, random weights from a fixed seed, no download),
exports it to OUT_DIR/resnet18.onnx (batch 1, opset 17) and OUT_DIR/resnet18-batch.onnx (dynamic
batch), writes the input OUT_DIR/x.npy, then times REPEATS runs of each setting:

  - integrated gradients, 64 midpoint steps, black baseline, with PyTorch CPU autograd:
    interpolants in batches of 1, 8 and 16, each in PyTorch's default (contiguous NCHW) and its
    channels-last memory format (the usual advice for CPU convolutions; common practice);
  - the time to a 1 % completeness gap: the midpoint rule at 16, 32, 64, ... steps (each count
    computed afresh: the midpoints of 2n cells are not those of n) until the gap
    |sum(attribution) - (F(x) - F(0))| / |F(x) - F(0)| is under 1 %, at the fastest IG setting;
  - occlusion, window 16, stride 8, black fill, with onnxruntime forwards, one image per run and
    in batches of 32.

Thread counts: THREADS for both runtimes (torch.set_num_threads, onnxruntime intra-op threads),
or each count in the environment's SPURION_BENCH_PEER_THREADS (comma-separated) to check
others; onnxruntime also runs at one thread. onnxruntime keeps its default graph optimisation
(all levels) and one inter-op thread.

The network: torchvision's ResNet-18 with random weights and random batch-norm statistics
(see below: with torchvision's initial batch norm the path from a black baseline is straight and
the completeness gap is 0 at any step count).

Prints one JSON object on stdout: library versions, every setting's times and median, and the
results (IG attribution sums, occlusion map in OUT_DIR/occlusion-ort.npy) for the bench to compare
with spurion's. Needs torch, torchvision, onnx and onnxruntime; run by hand (not part of CI).

Mode `vit` (issue 24): torchvision's ViT-B/16 at 224² with random weights (its zero-initialised
head re-drawn, or every score would be the bias), exported to OUT_DIR/vit_b_16.onnx with the input
OUT_DIR/vit-x.npy; integrated gradients, 64 midpoint steps, black baseline, PyTorch CPU autograd
in batches of 1, 8 and 16, NCHW and channels-last (which only touches the patch convolution).
Mode `vit-peak` runs one such setting once in a fresh process and reports its peak resident
memory (ru_maxrss: the interpreter, torch, the weights and autograd's tape at that batch), so
that the bench can set it beside spurion's.

Mode `user` is the peer as a user runs it once: a fresh process that imports torch, builds the
ResNet-18 and loads the weights the main run saved (OUT_DIR/resnet18.pt), reads OUT_DIR/x.npy,
computes integrated gradients (64 midpoint steps, black baseline) at the given setting and writes
the map (OUT_DIR/user-ig.npy). The bench times the whole process, set-up included, beside one
`spurion explain` command doing the same reading.
"""
import resource
import copy
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


def timed(fn, repeats):
    ts, out = [], None
    for _ in range(repeats):
        t0 = time.perf_counter()
        out = fn()
        ts.append(time.perf_counter() - t0)
    return ts, out


def vit_setup(out, export):
    torch.manual_seed(24)
    net = torchvision.models.vit_b_16(weights=None).eval()
    with torch.no_grad():
        net.heads.head.weight.normal_(0.0, 768 ** -0.5)
        net.heads.head.bias.uniform_(-0.1, 0.1)
    rng = np.random.default_rng(24)
    x = rng.uniform(-1.0, 1.0, size=(1, 3, 224, 224)).astype(np.float32)
    xt = torch.from_numpy(x)
    if export:
        np.save(os.path.join(out, "vit-x.npy"), x)
        torch.onnx.export(net, (xt,), os.path.join(out, "vit_b_16.onnx"), dynamo=False, opset_version=17,
                          input_names=["x"], output_names=["y"], do_constant_folding=True)
    with torch.no_grad():
        logits = net(xt)[0]
        target = int(torch.argmax(logits))
        f_x, f_0 = float(logits[target]), float(net(torch.zeros_like(xt))[0, target])
    return net, xt, target, f_x, f_0


def ig_runner(net, xt, target):
    nets = {False: net, True: copy.deepcopy(net).to(memory_format=torch.channels_last)}

    def ig(steps, chunk, channels_last):
        m = nets[channels_last]
        alphas = (torch.arange(steps, dtype=torch.float32) + 0.5) / steps
        total = torch.zeros_like(xt)
        for a in alphas.split(chunk):
            pts = a.view(-1, 1, 1, 1) * xt
            if channels_last:
                pts = pts.contiguous(memory_format=torch.channels_last)
            pts.requires_grad_(True)
            y = m(pts)[:, target].sum()
            (g,) = torch.autograd.grad(y, pts)
            total += g.sum(0, keepdim=True)
        return xt * total / steps

    return ig


def vit_main(out, threads, repeats, mode):
    torch.set_num_threads(threads)
    if mode == "vit-peak":
        batch, channels_last = int(sys.argv[5]), sys.argv[6] == "1"
        net, xt, target, _, _ = vit_setup(out, export=False)
        ig = ig_runner(net, xt, target)
        t0 = time.perf_counter()
        ig(64, batch, channels_last)
        print(json.dumps({"batch": batch, "channels_last": channels_last, "seconds": time.perf_counter() - t0,
                          "peak_rss_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024}))
        return
    net, xt, target, f_x, f_0 = vit_setup(out, export=True)
    ig = ig_runner(net, xt, target)
    runs = []
    for channels_last in (False, True):
        for chunk in (1, 8, 16):
            ig(chunk, chunk, channels_last)  # warm-up
            ts, attr = timed(lambda: ig(64, chunk, channels_last), repeats)
            runs.append({"batch": chunk, "channels_last": channels_last, "threads": threads,
                         "seconds": ts, "median": float(np.median(ts)), "sum": float(attr.sum())})
    print(json.dumps({"torch": torch.__version__, "torchvision": torchvision.__version__, "threads": threads,
                      "target": target, "score_x": f_x, "score_baseline": f_0, "ig": runs}))


def main():
    out, threads, repeats = sys.argv[1], int(sys.argv[2]), int(sys.argv[3])
    if len(sys.argv) > 4 and sys.argv[4] == "user":
        return user_main(out, threads, int(sys.argv[5]), sys.argv[6] == "1")
    if len(sys.argv) > 4:
        return vit_main(out, threads, repeats, sys.argv[4])
    thread_counts = [int(t) for t in os.environ.get("SPURION_BENCH_PEER_THREADS", str(threads)).split(",")]
    # onnxruntime's intra-op pool spins while it waits; on a shared machine one thread has been
    # faster than two, so its runs also try one thread (PyTorch's best one-thread setting was
    # 1.7x slower than its best two-thread one; see DEVELOPERS.md, 'Benchmarks').
    ort_thread_counts = sorted(set(thread_counts) | {1})
    torch.manual_seed(18)
    net = torchvision.models.resnet18(weights=None, num_classes=1000).eval()
    # torchvision initialises batch norm to the identity with zero shift, which leaves a network
    # of convolutions, ReLUs and pools without a bias before the last layer: positively
    # homogeneous, so F(a x) = a F'(x) + b and the path from a black baseline is a straight line
    # on which every quadrature is exact (the completeness gap is 0 at any step count). Random
    # batch-norm statistics and shifts make the path curve, as a trained network's does.
    with torch.no_grad():
        for m in net.modules():
            if isinstance(m, torch.nn.BatchNorm2d):
                m.weight.uniform_(0.5, 1.5)
                m.bias.normal_(0.0, 0.2)
                m.running_mean.normal_(0.0, 0.2)
                m.running_var.uniform_(0.5, 1.5)
    rng = np.random.default_rng(18)
    x = rng.uniform(-1.0, 1.0, size=(1, 3, 224, 224)).astype(np.float32)
    np.save(os.path.join(out, "x.npy"), x)
    torch.save(net.state_dict(), os.path.join(out, "resnet18.pt"))
    xt = torch.from_numpy(x)
    for name, dyn in (("resnet18.onnx", None), ("resnet18-batch.onnx", {"x": {0: "n"}, "y": {0: "n"}})):
        torch.onnx.export(net, (xt,), os.path.join(out, name), dynamo=False, opset_version=17,
                          input_names=["x"], output_names=["y"], dynamic_axes=dyn,
                          do_constant_folding=True)
    with torch.no_grad():
        logits = net(xt)[0]
        target = int(torch.argmax(logits))
        f_x = float(logits[target])
        f_0 = float(net(torch.zeros_like(xt))[0, target])

    # Integrated gradients (Sundararajan et al. 2017), midpoint rule, black (zero) baseline.
    nets = {False: net, True: copy.deepcopy(net).to(memory_format=torch.channels_last)}

    def ig(steps, chunk, channels_last):
        m = nets[channels_last]
        alphas = (torch.arange(steps, dtype=torch.float32) + 0.5) / steps
        total = torch.zeros_like(xt)
        for a in alphas.split(chunk):
            pts = a.view(-1, 1, 1, 1) * xt
            if channels_last:
                pts = pts.contiguous(memory_format=torch.channels_last)
            pts.requires_grad_(True)
            y = m(pts)[:, target].sum()
            (g,) = torch.autograd.grad(y, pts)
            total += g.sum(0, keepdim=True)
        return xt * total / steps

    ig_runs = []
    for th in thread_counts:
        torch.set_num_threads(th)
        for channels_last in (False, True):
            for chunk in (1, 8, 16):
                ig(chunk, chunk, channels_last)  # warm-up: one-time allocations and kernel choice
                ts, attr = timed(lambda: ig(64, chunk, channels_last), repeats)
                ig_runs.append({"batch": chunk, "channels_last": channels_last, "threads": th,
                                "seconds": ts, "median": float(np.median(ts)), "sum": float(attr.sum())})
    best = min(ig_runs, key=lambda r: r["median"])
    torch.set_num_threads(best["threads"])

    # Uniform midpoint doubling from 8 steps (8, 16, 32, ...; each count computed afresh, since
    # the midpoints of n cells are not among those of 2n), stopping at the first under 1 %.
    def refine():
        levels, steps = [], 8
        while True:
            t0 = time.perf_counter()
            attr = ig(steps, best["batch"], best["channels_last"])
            gap = abs(float(attr.sum()) - (f_x - f_0)) / abs(f_x - f_0)
            levels.append({"steps": steps, "gap": gap, "seconds": time.perf_counter() - t0})
            if gap < 0.01 or steps >= 4096:
                return levels
            steps *= 2

    refine_runs = [refine() for _ in range(repeats)]
    refine_totals = [sum(lv["seconds"] for lv in r) for r in refine_runs]

    # Occlusion (Zeiler & Fergus 2014) with onnxruntime forwards.
    win, stride = 16, 8
    wins = [(a, b) for a in starts(224, win, stride) for b in starts(224, win, stride)]

    def occluded(y0, x0):
        o = x.copy()
        o[:, :, y0:y0 + win, x0:x0 + win] = 0.0
        return o

    occ_runs, occ_map = [], None
    for th in ort_thread_counts:
        so = ort.SessionOptions()
        so.intra_op_num_threads = th
        so.inter_op_num_threads = 1
        single = ort.InferenceSession(os.path.join(out, "resnet18.onnx"), so, providers=["CPUExecutionProvider"])
        batched = ort.InferenceSession(os.path.join(out, "resnet18-batch.onnx"), so, providers=["CPUExecutionProvider"])

        def occlusion(batch):
            f = float(single.run(None, {"x": x})[0][0, target])
            scores = []
            if batch > 1:
                for i in range(0, len(wins), batch):
                    part = np.concatenate([occluded(*w) for w in wins[i:i + batch]])
                    scores.extend(batched.run(None, {"x": part})[0][:, target].tolist())
            else:
                for w in wins:
                    scores.append(float(single.run(None, {"x": occluded(*w)})[0][0, target]))
            total = np.zeros((224, 224))
            count = np.zeros((224, 224))
            for (y0, x0), s in zip(wins, scores):
                total[y0:y0 + win, x0:x0 + win] += f - s
                count[y0:y0 + win, x0:x0 + win] += 1
            return total / count

        for batch in (1, 32):
            ts, occ_map = timed(lambda: occlusion(batch), repeats)
            occ_runs.append({"batch": batch, "threads": th, "seconds": ts, "median": float(np.median(ts))})
    np.save(os.path.join(out, "occlusion-ort.npy"), occ_map.astype(np.float32))

    print(json.dumps({
        "torch": torch.__version__, "torchvision": torchvision.__version__, "onnxruntime": ort.__version__,
        "threads": threads, "target": target, "windows": len(wins), "score_x": f_x, "score_baseline": f_0,
        "ig": ig_runs,
        "refine": {"batch": best["batch"], "channels_last": best["channels_last"], "threads": best["threads"],
                   "runs": refine_runs, "seconds": refine_totals, "median": float(np.median(refine_totals))},
        "occlusion": occ_runs,
    }))


def user_main(out, threads, batch, channels_last):
    """One reading as a user runs it: everything from the interpreter's start is in the time."""
    torch.set_num_threads(threads)
    net = torchvision.models.resnet18(weights=None, num_classes=1000).eval()
    net.load_state_dict(torch.load(os.path.join(out, "resnet18.pt")))
    if channels_last:
        net = net.to(memory_format=torch.channels_last)
    xt = torch.from_numpy(np.load(os.path.join(out, "x.npy")))
    with torch.no_grad():
        target = int(torch.argmax(net(xt)[0]))
    steps = 64
    alphas = (torch.arange(steps, dtype=torch.float32) + 0.5) / steps
    total = torch.zeros_like(xt)
    for a in alphas.split(batch):
        pts = a.view(-1, 1, 1, 1) * xt
        if channels_last:
            pts = pts.contiguous(memory_format=torch.channels_last)
        pts.requires_grad_(True)
        (g,) = torch.autograd.grad(net(pts)[:, target].sum(), pts)
        total += g.sum(0, keepdim=True)
    attr = (xt * total / steps).detach().numpy()
    np.save(os.path.join(out, "user-ig.npy"), attr)
    print(json.dumps({"target": target, "sum": float(attr.sum())}))


if __name__ == "__main__":
    main()
