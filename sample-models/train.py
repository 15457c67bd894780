#!/usr/bin/env python3
"""Training recipe for spurion's sample models: demo models with a known shortcut.

THESE ARE DEMO MODELS, NOT MEDICAL MODELS. They are trained on procedural phantoms of the
invented Brackenridge Imaging Cooperative (see ../../shared/SCENARIO.md in the project notes) and
exist so that spurion's checks have models whose shortcut is known for certain.

Run by hand from the crate root (not in CI), with the pinned versions of requirements-train.txt:

    python sample-models/train.py                  # uses `cargo run --quiet -- demo ...`
    python sample-models/train.py --generator target/debug/spurion

What it does, all seeded:
1. asks spurion's own generator (`spurion demo`, src/demo/) for the training and held-out sets,
   so the pixels are exactly those a user of `spurion demo` gets;
2. feeds them exactly as each model's feed card says (the same area-averaging resize as
   src/feed/prepare.rs: 256 -> 128 is a 2x2 mean), trains three small CNNs on CPU;
3. folds BatchNorm into the convolutions and exports ONNX (opset 17, batch 1, logits, no softmax);
4. measures the shortcut: accuracy on held-out sets as generated, with the tag and frame
   removed, and with them swapped between the classes -> shortcut-proof.json;
5. records onnxruntime's logits on assets/demo (and the exact input tensors of a few images)
   -> expected-predictions.json and recorded/*.npy, which the Rust tests reproduce.
"""

import argparse
import csv
import hashlib
import json
import os
import shlex
import subprocess
import sys
import tempfile
import time

import numpy as np
import onnx
import onnxruntime as ort
import torch
import torch.nn as nn
from PIL import Image

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.dirname(HERE)
SEED = 20261201
LABELS = ["no finding", "finding present"]

# The three models: name -> feed card input and which training mix.
# mean/std for the RGB model are the ImageNet channel statistics (common practice for models
# fine-tuned from natural-image backbones; values from memory: 0.485/0.456/0.406, 0.229/0.224/0.225).
MODELS = {
    "shortcut": dict(mix="pooled", channels=1, size=128, mean=[0.0], std=[1.0]),
    "control": dict(mix="even", channels=1, size=128, mean=[0.0], std=[1.0]),
    "shortcut-rgb224": dict(mix="pooled", channels=3, size=224, mean=[0.485, 0.456, 0.406], std=[0.229, 0.224, 0.225]),
}

# Set seeds: distinct so no training image is a held-out image.
TRAIN_SEED = {"pooled": 101, "even": 202}
HELD_OUT_SEED = {"pooled": 303, "even": 404}


def seed_everything():
    torch.manual_seed(SEED)
    np.random.seed(SEED)
    torch.set_num_threads(2)
    torch.use_deterministic_algorithms(True)


# ---------------------------------------------------------------- data from spurion's generator

def generate(gen, out, count, seed, mix, marks, contrast, masks=False):
    cmd = gen + ["demo", "--out", out, "--count", str(count), "--seed", str(seed), "--mix", mix,
                 "--marks", marks, "--contrast", str(contrast)]
    if not masks:
        cmd.append("--no-masks")
    subprocess.run(cmd, check=True, cwd=ROOT)
    return load_set(out)


def load_set(folder):
    """(uint8 images N x H x W, labels N, manifest rows) of a folder written by `spurion demo`."""
    with open(os.path.join(folder, "manifest.csv"), newline="") as f:
        rows = list(csv.DictReader(f))
    imgs = np.stack([np.array(Image.open(os.path.join(folder, r["file"])).convert("L")) for r in rows])
    labels = np.array([LABELS.index(r["label"]) for r in rows], dtype=np.int64)
    return imgs, labels, rows


# ---------------------------------------------------------------- feeding, as the feed card says

def axis_weights(n_in, n_out):
    """The resampling matrix of src/feed/prepare.rs (`axis_weights`): area averaging when
    shrinking, bilinear with half-pixel centres when growing; rows sum to one."""
    m = np.zeros((n_out, n_in), dtype=np.float64)
    r = n_in / n_out
    if n_out < n_in:
        for j in range(n_out):
            a, b = j * r, (j + 1) * r
            i = int(np.floor(a))
            while i < b and i < n_in:
                m[j, i] += max(min(b, i + 1.0) - max(a, float(i)), 0.0) / r
                i += 1
    else:
        for j in range(n_out):
            src = min(max((j + 0.5) * r - 0.5, 0.0), n_in - 1)
            i0 = int(np.floor(src))
            f = src - i0
            i1 = min(i0 + 1, n_in - 1)
            m[j, i0] += 1.0 - f
            m[j, i1] += f
    return m.astype(np.float32)


class Feed:
    """Picture (uint8) -> model input tensor, in float32 and in the order the Rust feed uses:
    value/255, rows @ plane @ cols^T, replicate gray to the model's channels, (v - mean) / std."""

    def __init__(self, card, src=256):
        self.card = card
        self.w = torch.from_numpy(axis_weights(src, card["size"]))
        self.mean = torch.tensor(card["mean"], dtype=torch.float32).view(1, -1, 1, 1)
        self.std = torch.tensor(card["std"], dtype=torch.float32).view(1, -1, 1, 1)

    def __call__(self, u8):
        x = torch.from_numpy(np.ascontiguousarray(u8)).to(torch.float32) / 255.0
        g = torch.matmul(torch.matmul(self.w, x), self.w.T).unsqueeze(1)
        g = g.expand(-1, self.card["channels"], -1, -1)
        return (g - self.mean) / self.std

    def toml(self):
        c = self.card
        nums = lambda v: "[" + ", ".join(repr(float(x)) for x in v) + "]"
        return (
            "# Feed card for the demo model beside it (see the model card .md). Written by train.py.\n"
            "[input]\n"
            'layout = "nchw"\n'
            f"channels = {c['channels']}\n"
            f"height = {c['size']}\n"
            f"width = {c['size']}\n"
            'resize = "stretch"\n'
            'gray_to_rgb = "replicate"\n'
            'scale = "unit"\n'
            f"mean = {nums(c['mean'])}\n"
            f"std = {nums(c['std'])}\n"
            "\n[output]\n"
            'kind = "logits"\n'
            'labels = ["no finding", "finding present"]\n'
        )


# ---------------------------------------------------------------- the networks

def block(cin, cout, stride=1, pool=True):
    layers = [nn.Conv2d(cin, cout, 3, stride, 1, bias=False), nn.BatchNorm2d(cout), nn.ReLU()]
    if pool:
        layers.append(nn.MaxPool2d(2))
    return layers


def make_net(card):
    # Pool down to a 4x4 (7x7) grid before the global average, so that a small opacity is not
    # averaged away against the whole image.
    if card["size"] == 128:
        layers = block(1, 8) + block(8, 16) + block(16, 32) + block(32, 32) + block(32, 32) + block(32, 32, pool=False)
    else:  # 224: a strided first convolution keeps the cost near the 128 model's
        c = card["channels"]
        layers = (block(c, 8, stride=2, pool=False) + block(8, 16) + block(16, 32) + block(32, 32) + block(32, 32)
                  + block(32, 32, pool=False))
    return nn.Sequential(*layers, nn.AdaptiveAvgPool2d(1), nn.Flatten(), nn.Linear(32, 2))


def fold_batchnorm(net):
    """The same function without BatchNorm: each Conv+BN pair becomes one Conv with a bias."""
    out, mods, i = [], list(net), 0
    while i < len(mods):
        m = mods[i]
        if isinstance(m, nn.Conv2d) and i + 1 < len(mods) and isinstance(mods[i + 1], nn.BatchNorm2d):
            bn = mods[i + 1]
            s = bn.weight / torch.sqrt(bn.running_var + bn.eps)
            conv = nn.Conv2d(m.in_channels, m.out_channels, m.kernel_size, m.stride, m.padding, bias=True)
            conv.weight.data = m.weight.data * s.view(-1, 1, 1, 1)
            conv.bias.data = bn.bias.data - bn.running_mean * s
            out.append(conv)
            i += 2
        else:
            out.append(m)
            i += 1
    return nn.Sequential(*out).eval()


def train(net, feed, imgs, labels, epochs, batch=64, lr=2e-3):
    gen = torch.Generator().manual_seed(SEED)
    opt = torch.optim.Adam(net.parameters(), lr=lr, weight_decay=1e-4)
    sched = torch.optim.lr_scheduler.CosineAnnealingLR(opt, T_max=epochs * ((len(imgs) + batch - 1) // batch))
    lossf = nn.CrossEntropyLoss()
    y_all = torch.from_numpy(labels)
    for ep in range(epochs):
        net.train()
        perm = torch.randperm(len(imgs), generator=gen).numpy()
        tot, n, t0 = 0.0, 0, time.time()
        for k in range(0, len(perm), batch):
            idx = perm[k:k + batch]
            x, y = feed(imgs[idx]), y_all[idx]
            opt.zero_grad()
            loss = lossf(net(x), y)
            loss.backward()
            opt.step()
            sched.step()
            tot += loss.item() * len(idx)
            n += len(idx)
        print(f"    epoch {ep + 1}/{epochs}: loss {tot / n:.4f} ({time.time() - t0:.0f} s)", flush=True)
    return net.eval()


@torch.no_grad()
def accuracy(net, feed, imgs, labels, batch=128):
    pred = np.concatenate([net(feed(imgs[k:k + batch])).argmax(1).numpy() for k in range(0, len(imgs), batch)])
    return float((pred == labels).mean())


def export(net, card, path):
    x = torch.zeros(1, card["channels"], card["size"], card["size"])
    torch.onnx.export(net, (x,), path, dynamo=False, opset_version=17, input_names=["image"],
                      output_names=["logits"], do_constant_folding=True)
    m = onnx.load(path)
    onnx.checker.check_model(m)
    ops = sorted({n.op_type for n in m.graph.node})
    allowed = {"Conv", "Relu", "MaxPool", "GlobalAveragePool", "ReduceMean", "Flatten", "Gemm", "MatMul", "Add"}
    assert set(ops) <= allowed, f"unexpected ops {ops}"
    return ops


def sha256(path):
    with open(path, "rb") as f:
        return hashlib.sha256(f.read()).hexdigest()


# ---------------------------------------------------------------- the recipe

def main():
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--generator", default=os.environ.get("SPURION_BIN", "cargo run --quiet --"),
                    help="command that runs spurion (default: cargo run --quiet --, or $SPURION_BIN)")
    ap.add_argument("--train-count", type=int, default=4000)
    ap.add_argument("--held-out-count", type=int, default=900)
    ap.add_argument("--epochs", type=int, default=6)
    ap.add_argument("--contrast", type=float, default=None,
                    help="opacity contrast for all sets (default: spurion's default)")
    ap.add_argument("--only", nargs="*", default=list(MODELS), help="train only these models")
    ap.add_argument("--work", default=None, help="folder for the generated sets (default: a temporary one)")
    args = ap.parse_args()
    seed_everything()
    gen = shlex.split(args.generator)
    contrast = args.contrast
    if contrast is None:
        contrast = 22.0  # spurion's DEFAULT_CONTRAST (src/demo/phantom.rs); the demo set uses it too
    work = args.work or tempfile.mkdtemp(prefix="spurion-train-")
    print(f"generated sets go to {work}")

    sets = {}

    def get(name, count, seed, mix, marks):
        if name not in sets:
            sets[name] = generate(gen, os.path.join(work, name), count, seed, mix, marks, contrast)
        return sets[name]

    proof = {
        "what": "Accuracy of each demo model on held-out phantom sets: as generated, with Hillmoor's tag "
                "and frame removed from every image, and with them swapped between the classes "
                "(exactly the negatives carry them). Same images in all three; only the marks differ.",
        "pooled_positive_share": {"hillmoor": 0.9, "north-quay": 0.1, "saltmarsh": 0.1},
        "held_out_count": args.held_out_count,
        "train_count": args.train_count,
        "finding_contrast": contrast,
        "versions": {"torch": torch.__version__, "onnx": onnx.__version__, "onnxruntime": ort.__version__,
                     "numpy": np.__version__},
        "models": {},
    }
    proof_path = os.path.join(HERE, "shortcut-proof.json")
    if os.path.exists(proof_path):
        old = json.load(open(proof_path))
        proof["models"].update({k: v for k, v in old.get("models", {}).items() if k not in args.only})

    for name in args.only:
        card = MODELS[name]
        feed = Feed(card)
        print(f"== {name}: training on the {card['mix']} mix", flush=True)
        imgs, labels, _ = get(f"train-{card['mix']}", args.train_count, TRAIN_SEED[card["mix"]], card["mix"], "by-site")
        torch.manual_seed(SEED)
        net = train(make_net(card), feed, imgs, labels, args.epochs)
        folded = fold_batchnorm(net)
        onnx_path = os.path.join(HERE, f"{name}.onnx")
        ops = export(folded, card, onnx_path)
        with open(os.path.join(HERE, f"{name}.feed.toml"), "w") as f:
            f.write(feed.toml())
        result = {"architecture_ops": ops, "parameters": int(sum(p.numel() for p in folded.parameters())),
                  "onnx_sha256": sha256(onnx_path), "train_mix": card["mix"],
                  "train_accuracy": accuracy(folded, feed, imgs, labels)}
        for mix in ["pooled", "even"]:
            accs = {}
            for marks, key in [("by-site", "as_generated"), ("none", "marks_removed"), ("swapped", "marks_swapped")]:
                hi, hl, _ = get(f"held-{mix}-{marks}", args.held_out_count, HELD_OUT_SEED[mix], mix, marks)
                accs[key] = accuracy(folded, feed, hi, hl)
            accs["drop_when_swapped_points"] = 100.0 * (accs["as_generated"] - accs["marks_swapped"])
            accs["drop_when_removed_points"] = 100.0 * (accs["as_generated"] - accs["marks_removed"])
            result[f"held_out_{mix}"] = accs
        proof["models"][name] = result
        print(json.dumps(result, indent=1), flush=True)

    with open(proof_path, "w") as f:
        json.dump(proof, f, indent=2)
        f.write("\n")
    record_predictions()


def record_predictions(tensor_images=(0, 5)):
    """onnxruntime logits for every assets/demo image through each model's feed card, and the
    exact input tensors of a few images (a North Quay negative and a Hillmoor positive)."""
    demo = os.path.join(ROOT, "assets", "demo")
    imgs, labels, rows = load_set(demo)
    rec_dir = os.path.join(HERE, "recorded")
    os.makedirs(rec_dir, exist_ok=True)
    out = {
        "what": "Logits recorded with onnxruntime (CPUExecutionProvider) at export time, for the images "
                "of assets/demo fed as each model's feed card says; tensors[] are the exact inputs fed.",
        "onnxruntime": ort.__version__,
        "numpy": np.__version__,
        "models": {},
    }
    for name, card in MODELS.items():
        path = os.path.join(HERE, f"{name}.onnx")
        if not os.path.exists(path):
            continue
        sess = ort.InferenceSession(path, providers=["CPUExecutionProvider"])
        feed = Feed(card)
        preds, tensors = [], []
        for i, r in enumerate(rows):
            x = feed(imgs[i:i + 1]).numpy().astype(np.float32)
            logits = sess.run(None, {"image": x})[0][0]
            preds.append({"file": r["file"], "label": r["label"], "logits": [float(v) for v in logits]})
            if i in tensor_images:
                npy = f"recorded/{name}.{os.path.splitext(r['file'])[0]}.npy"
                np.save(os.path.join(HERE, npy), x)
                tensors.append({"file": r["file"], "tensor": npy, "logits": [float(v) for v in logits]})
        acc = float(np.mean([int(np.argmax(p["logits"])) == LABELS.index(p["label"]) for p in preds]))
        out["models"][name] = {"onnx": f"{name}.onnx", "onnx_sha256": sha256(path), "demo_accuracy": acc,
                               "tensors": tensors, "predictions": preds}
    with open(os.path.join(HERE, "expected-predictions.json"), "w") as f:
        json.dump(out, f, indent=1)
        f.write("\n")
    print("recorded predictions on", len(rows), "demo images")


if __name__ == "__main__":
    if len(sys.argv) > 1 and sys.argv[1] == "--record-only":
        seed_everything()
        record_predictions()
    else:
        main()
