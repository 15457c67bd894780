"""By hand, not CI: spurion's input gradient on torchvision's classification networks at full
size with random weights, against PyTorch float64 autograd (issue 24's table).

usage: torchvision_full_grads.py SPURION_BINARY OUT_DIR [--size N] [NAME ...]

For each network (default: all in FAMILIES below) it builds torchvision's class with random
weights (no download; seed fixed per network), re-draws what torchvision initialises to zero
(ViT's head) and the batch-norm statistics (so folding them matters), exports it with the legacy
TorchScript exporter at opset 17 (batch 1), draws a smooth image-like input, takes d score[top] /
d x from autograd on a float64 copy, and runs `SPURION_BINARY explain --method gradient --score
raw --target TOP --tensor x.npy` on the export. It prints one row per network: output relative
error (largest coordinate over largest reference coordinate), the gradient's relative L2
‖g − g_ref‖ / ‖g_ref‖, and the same for PyTorch's own float32 gradient (what float32 arithmetic
alone costs: max-pool ties and ReLU kinks may flip under rounding), and writes
OUT_DIR/results.json.

--size: the input side (default 224; inception_v3 always takes 299, and the transformers whose
position tables fix the size are built for the size asked). Needs torch, torchvision, onnx,
numpy. Made with torch 2.15.0, torchvision 0.29.2.
"""
import argparse
import json
import os
import subprocess
import time

import numpy as np
import torch
import torch.nn as nn
import torchvision.models as tvm

# name, builder(size) -> module
FAMILIES = [
    ("alexnet", lambda s: tvm.alexnet()),
    ("vgg11_bn", lambda s: tvm.vgg11_bn()),
    ("vgg16", lambda s: tvm.vgg16()),
    ("resnet18", lambda s: tvm.resnet18()),
    ("resnet50", lambda s: tvm.resnet50()),
    ("resnext50_32x4d", lambda s: tvm.resnext50_32x4d()),
    ("wide_resnet50_2", lambda s: tvm.wide_resnet50_2()),
    ("densenet121", lambda s: tvm.densenet121()),
    ("squeezenet1_1", lambda s: tvm.squeezenet1_1()),
    ("googlenet", lambda s: tvm.googlenet(aux_logits=False, init_weights=True)),
    ("inception_v3", lambda s: tvm.inception_v3(aux_logits=False, init_weights=True)),
    ("shufflenet_v2_x1_0", lambda s: tvm.shufflenet_v2_x1_0()),
    ("mobilenet_v2", lambda s: tvm.mobilenet_v2()),
    ("mobilenet_v3_large", lambda s: tvm.mobilenet_v3_large()),
    ("mnasnet1_0", lambda s: tvm.mnasnet1_0()),
    ("efficientnet_b0", lambda s: tvm.efficientnet_b0()),
    ("efficientnet_v2_s", lambda s: tvm.efficientnet_v2_s()),
    ("regnet_y_400mf", lambda s: tvm.regnet_y_400mf()),
    ("regnet_x_400mf", lambda s: tvm.regnet_x_400mf()),
    ("convnext_tiny", lambda s: tvm.convnext_tiny()),
    ("vit_b_16", lambda s: tvm.vit_b_16(image_size=s)),
    ("swin_t", lambda s: tvm.swin_t()),
    ("swin_v2_t", lambda s: tvm.swin_v2_t()),
    ("maxvit_t", lambda s: tvm.maxvit_t(input_size=(s, s))),
]


# torchvision initialises these from a truncated normal of std 0.01-0.1: the signal vanishes
# (GoogLeNet's input gradient is about 1e-13, all float32 noise), so they are re-drawn He-normal.
HE = {"googlenet", "inception_v3"}


def prepare(net, name):
    with torch.no_grad():
        for m in net.modules():
            if isinstance(m, (nn.Linear, nn.Conv2d)) and (not m.weight.any() or name in HE):
                m.weight.normal_(0, (2.0 if name in HE else 1.0) ** 0.5 / m.weight[0].numel() ** 0.5)
            if isinstance(m, nn.BatchNorm2d):
                m.running_mean.uniform_(-0.1, 0.1)
                m.running_var.uniform_(0.8, 1.2)
    return net.eval()


def image(size, seed):
    rng = np.random.default_rng(seed)
    yy, xx = np.mgrid[0:size, 0:size] / size
    base = np.stack([np.sin(2 * np.pi * (xx * (1 + c) + yy * (2 - c) / 2) + c) for c in range(3)])
    return (base + 0.3 * rng.standard_normal((3, size, size)))[None].astype(np.float32)


def one(a, name, build, i):
    size = 299 if name == "inception_v3" else a.size
    torch.manual_seed(1000 + i)
    net = prepare(build(size), name)
    x = image(size, 2000 + i)
    d = os.path.join(a.out, name)
    os.makedirs(d, exist_ok=True)
    onnx_path, x_path = os.path.join(d, "model.onnx"), os.path.join(d, "x.npy")
    torch.onnx.export(net, (torch.from_numpy(x),), onnx_path, dynamo=False, opset_version=17,
                      input_names=["x"], output_names=["y"], do_constant_folding=True)
    np.save(x_path, x)
    # PyTorch's own float32 gradient: how far float32 arithmetic alone lands from float64
    # (max-pool ties and ReLU kinks can flip under rounding), the floor for spurion's.
    x32 = torch.from_numpy(x).requires_grad_(True)
    y32 = net(x32)[0]
    (g32,) = torch.autograd.grad(y32[int(torch.argmax(y32))], x32)
    net64 = net.double()
    x64 = torch.from_numpy(x.astype(np.float64)).requires_grad_(True)
    y = net64(x64)[0]
    top = int(torch.argmax(y))
    (g,) = torch.autograd.grad(y[top], x64)
    want_y, want_g = y.detach().numpy(), g.numpy()
    del net, net64
    t0 = time.time()
    run = subprocess.run([a.spurion, "explain", "--model", onnx_path, "--tensor", x_path, "--method", "gradient",
                          "--score", "raw", "--target", str(top), "--out", os.path.join(d, "reading"), "-q"],
                         capture_output=True, text=True)
    secs = time.time() - t0
    if run.returncode != 0:
        row = {"error": run.stderr.strip()[-400:]}
    else:
        got_g = np.load(os.path.join(d, "reading", "map.npy")).astype(np.float64).reshape(want_g.shape)
        reading = json.load(open(os.path.join(d, "reading", "reading.json")))
        got_y = np.array(reading["scores"], dtype=np.float64)
        row = {
            "size": size,
            "output_rel": float(np.abs(got_y - want_y).max() / np.abs(want_y).max()),
            "grad_rel_l2": float(np.linalg.norm(got_g - want_g) / np.linalg.norm(want_g)),
            "torch_f32_rel_l2": float(np.linalg.norm(g32.numpy() - want_g) / np.linalg.norm(want_g)),
            "grad_norm": float(np.linalg.norm(want_g)),
            "spurion_seconds": round(secs, 1),
        }
    return row


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("spurion")
    ap.add_argument("out")
    ap.add_argument("--size", type=int, default=224)
    ap.add_argument("names", nargs="*")
    a = ap.parse_intermixed_args()
    os.makedirs(a.out, exist_ok=True)
    rpath = os.path.join(a.out, "results.json")
    results = json.load(open(rpath)) if os.path.exists(rpath) else {}
    torch.set_num_threads(1)
    for i, (name, build) in enumerate(FAMILIES):
        if a.names and name not in a.names:
            continue
        try:
            row = one(a, name, build, i)
        except Exception as e:  # an export the legacy exporter refuses at this size, say
            row = {"error": f"{type(e).__name__}: {str(e)[:300]}"}
        results[name] = row
        print(f"{name:20s} {json.dumps(row)}", flush=True)
        with open(rpath, "w") as f:
            json.dump(results, f, indent=1, sort_keys=True)
        onnx_path = os.path.join(a.out, name, "model.onnx")
        if os.path.exists(onnx_path):
            os.remove(onnx_path)  # full-size exports are large; the numbers are what is kept


if __name__ == "__main__":
    main()
