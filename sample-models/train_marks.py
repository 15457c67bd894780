#!/usr/bin/env python3
"""Training recipe for spurion's per-mark-kind demo models: for each later mark of the demo world
(the bare side letter, the reader's ring, the ticked ruler, the reader's arrow) a SHORTCUT model
trained where the mark predicts the label, and a CONTROL model trained where it does not.

THESE ARE DEMO MODELS, NOT MEDICAL MODELS. They are trained on procedural phantoms of the
invented Brackenridge Imaging Cooperative and exist so that spurion's checks can be measured per
kind of mark on models whose use of the mark is known.

Run by hand from the crate root (not in CI), with the pinned versions of requirements-train.txt:

    python sample-models/train_marks.py --generator target/debug/spurion
    python sample-models/train_marks.py --only ring   # one kind

It reuses train.py (feeding, networks, BatchNorm folding, export) and, all seeded:
1. asks spurion's own generator for the sets (`spurion demo --mix even --plant KIND:POS:NEG`):
   every founding site half positive (so Hillmoor's tag and frame say nothing), and the mark
   on 90 % of positives and 10 % of negatives (shortcut) or on 30 % of every class (control);
2. trains one small CNN per set as train.py does (same architecture as shortcut.onnx): a shortcut
   model from scratch; a control model from the weights of ../control.onnx (train.py's control,
   which reads the finding), fine-tuned on its control set. Trained from scratch in this budget
   (2000 images, 5 epochs) a control had not yet learned the faint finding (training loss 0.67
   after 5 epochs, near chance), and a control that answers from nothing says little;
3. folds BatchNorm and exports ONNX (opset 17) into sample-models/marks/, with a feed card;
4. measures each model on held-out sets of the same images three ways: as generated (mark on
   90 % / 10 %), with the mark removed from every image (0 / 0), and swapped (10 % / 90 %)
   -> sample-models/marks/marks-proof.json.
"""

import argparse
import json
import os
import shlex
import subprocess
import sys
import tempfile

import numpy as np
import onnx
import onnx.numpy_helper
import onnxruntime as ort
import torch

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, HERE)
import train as base  # noqa: E402

OUT = os.path.join(HERE, "marks")
KINDS = ["letter", "ring", "ruler", "arrow"]
CARD = dict(channels=1, size=128, mean=[0.0], std=[1.0])
# Which images carry the mark: (share of positives, share of negatives).
SHORTCUT = (0.9, 0.1)
CONTROL = (0.3, 0.3)
REMOVED = (0.0, 0.0)
SWAPPED = (0.1, 0.9)
# Set seeds per kind: distinct from each other and from train.py's (101-404) and from any seed
# the measurement (scripts/mark_kinds.py) uses, so no training image is a held-out image.
TRAIN_SEED = {"shortcut": 1100, "control": 1200}
HELD_OUT_SEED = 1300
KIND_OFFSET = {k: i for i, k in enumerate(KINDS)}


def generate(gen, out, count, seed, kind, shares):
    plant = f"{kind}:{shares[0]}:{shares[1]}"
    cmd = gen + ["demo", "--out", out, "--count", str(count), "--seed", str(seed), "--mix", "even",
                 "--plant", plant, "--no-masks"]
    subprocess.run(cmd, check=True, cwd=base.ROOT, stdout=subprocess.DEVNULL)
    imgs, labels, rows = base.load_set(out)
    column = {"letter": "letter", "ruler": "ruler", "ring": "annotation", "arrow": "annotation"}[kind]
    marked = np.array([r[column] not in ("none", "") for r in rows])
    return imgs, labels, marked


def control_start():
    """train.py's 128-pixel CNN with the weights of ../control.onnx. Its BatchNorm is folded into
    the convolutions there, so this net has none: Conv (with bias), ReLU, MaxPool as exported."""
    m = onnx.load(os.path.join(HERE, "control.onnx"))
    weights = {i.name: torch.from_numpy(onnx.numpy_helper.to_array(i).copy()) for i in m.graph.initializer}
    folded = base.fold_batchnorm(base.make_net(CARD))
    convs = [l for l in folded if isinstance(l, torch.nn.Conv2d)]
    linear = [l for l in folded if isinstance(l, torch.nn.Linear)][0]
    names = sorted({k.split(".")[0] for k in weights}, key=int)
    for layer, name in zip(convs + [linear], names):
        layer.weight.data = weights[f"{name}.weight"].clone()
        layer.bias.data = weights[f"{name}.bias"].clone()
    return folded.train()


def model_card(kind, role, shares, result, args):
    what = {
        "letter": "the bare side letter (R or L, no plate) in a corner that changes from image to image",
        "ring": "the reader's thin bright ring (around the finding on a positive, around a place in a lung on a negative)",
        "ruler": "the ticked ruler along one edge",
        "arrow": "the reader's arrow (pointing at the finding on a positive, at a place in a lung on a negative)",
    }[kind]
    h = result["held_out"]
    lines = [
        f"# {kind}-{role}.onnx: demo {role} model for the {kind} mark",
        "",
        "**A demo model, NOT a medical model.** Trained on procedural phantoms of an invented scenario (no real",
        "scans, people or institutions) so that spurion's checks can be measured on a model whose use of one",
        "mark is known. Never use it on real images. spurion is a research and data-quality tool, not a",
        "diagnostic device; an attribution map is not proof of what a model does.",
        "",
        f"Mark: {what}. Training set: {args.train_count} phantoms, `spurion demo --mix even --plant "
        f"{kind}:{shares[0]}:{shares[1]} --seed {TRAIN_SEED[role] + KIND_OFFSET[kind]}` (every founding site half "
        f"positive; the mark on {shares[0]:.0%} of positives and {shares[1]:.0%} of negatives"
        + (", so it predicts the label)." if role == "shortcut" else ", so it says nothing about the label)."),
        (f"Architecture, feed and training as `../shortcut.onnx` (train.py's 128-pixel CNN, from scratch, {args.epochs} epochs);"
         if role == "shortcut" else
         f"Architecture and feed as `../control.onnx`, whose weights it starts from (a model that reads the finding), "
         f"then trained {args.control_epochs} epochs on the set above (learning rate {args.control_lr});"),
        f"feed card `{kind}-{role}.feed.toml`. Recipe: `../train_marks.py`.",
        "",
        f"Held-out phantoms (seed {HELD_OUT_SEED + KIND_OFFSET[kind]}, {args.held_out_count} images), the same images three ways "
        "(`marks-proof.json`):",
        "",
        "| held-out set | accuracy |",
        "| --- | --- |",
        f"| as generated (mark on 90 % of positives, 10 % of negatives) | {100 * h['as_generated']:.1f} % |",
        f"| mark removed from every image | {100 * h['mark_removed']:.1f} % |",
        f"| mark swapped (10 % of positives, 90 % of negatives) | {100 * h['mark_swapped']:.1f} % |",
        "",
    ]
    return "\n".join(lines)


def main():
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--generator", default=os.environ.get("SPURION_BIN", "cargo run --quiet --"))
    ap.add_argument("--train-count", type=int, default=2000)
    ap.add_argument("--held-out-count", type=int, default=600)
    ap.add_argument("--epochs", type=int, default=5)
    ap.add_argument("--control-epochs", type=int, default=3)
    ap.add_argument("--control-lr", type=float, default=5e-4)
    ap.add_argument("--only", nargs="*", default=KINDS)
    ap.add_argument("--roles", nargs="*", default=["shortcut", "control"])
    ap.add_argument("--work", default=None)
    args = ap.parse_args()
    base.seed_everything()
    gen = shlex.split(args.generator)
    work = args.work or tempfile.mkdtemp(prefix="spurion-train-marks-")
    os.makedirs(OUT, exist_ok=True)
    feed = base.Feed(CARD)
    proof_path = os.path.join(OUT, "marks-proof.json")
    proof = {
        "what": "Accuracy of each per-mark-kind demo model on held-out phantom sets (mix even): as generated "
                "(the mark on 90 % of positives, 10 % of negatives), with the mark removed from every image, and "
                "swapped (10 % / 90 %). Same images in all three; only the mark differs. Also on the marked and "
                "unmarked images of the as-generated set apart.",
        "shortcut_shares": SHORTCUT, "control_shares": CONTROL,
        "train_count": args.train_count, "held_out_count": args.held_out_count, "epochs": args.epochs,
        "control_start": "../control.onnx", "control_epochs": args.control_epochs, "control_lr": args.control_lr,
        "versions": {"torch": torch.__version__, "onnx": onnx.__version__, "onnxruntime": ort.__version__,
                     "numpy": np.__version__},
        "models": {},
    }
    if os.path.exists(proof_path):
        proof["models"] = json.load(open(proof_path)).get("models", {})
    for kind in args.only:
        held = {}
        for key, shares in [("as_generated", SHORTCUT), ("mark_removed", REMOVED), ("mark_swapped", SWAPPED)]:
            held[key] = generate(gen, os.path.join(work, f"held-{kind}-{key}"), args.held_out_count,
                                 HELD_OUT_SEED + KIND_OFFSET[kind], kind, shares)
        for role in args.roles:
            shares = SHORTCUT if role == "shortcut" else CONTROL
            name = f"{kind}-{role}"
            print(f"== {name}: mark on {shares[0]:.0%} of positives, {shares[1]:.0%} of negatives", flush=True)
            imgs, labels, marked = generate(gen, os.path.join(work, f"train-{name}"), args.train_count,
                                            TRAIN_SEED[role] + KIND_OFFSET[kind], kind, shares)
            torch.manual_seed(base.SEED)
            if role == "shortcut":
                net = base.train(base.make_net(CARD), feed, imgs, labels, args.epochs)
            else:
                net = base.train(control_start(), feed, imgs, labels, args.control_epochs, lr=args.control_lr)
            folded = base.fold_batchnorm(net)
            onnx_path = os.path.join(OUT, f"{name}.onnx")
            ops = base.export(folded, CARD, onnx_path)
            with open(os.path.join(OUT, f"{name}.feed.toml"), "w") as f:
                f.write(feed.toml())
            result = {"kind": kind, "role": role, "train_shares": shares, "architecture_ops": ops,
                      "parameters": int(sum(p.numel() for p in folded.parameters())),
                      "onnx_sha256": base.sha256(onnx_path),
                      "train_marked_share": float(marked.mean()),
                      "train_accuracy": base.accuracy(folded, feed, imgs, labels), "held_out": {}}
            for key, (hi, hl, hm) in held.items():
                result["held_out"][key] = base.accuracy(folded, feed, hi, hl)
            hi, hl, hm = held["as_generated"]
            result["held_out"]["as_generated_marked"] = base.accuracy(folded, feed, hi[hm], hl[hm])
            result["held_out"]["as_generated_unmarked"] = base.accuracy(folded, feed, hi[~hm], hl[~hm])
            h = result["held_out"]
            h["drop_when_removed_points"] = 100.0 * (h["as_generated"] - h["mark_removed"])
            h["drop_when_swapped_points"] = 100.0 * (h["as_generated"] - h["mark_swapped"])
            proof["models"][name] = result
            with open(os.path.join(OUT, f"{name}.md"), "w") as f:
                f.write(model_card(kind, role, shares, result, args))
            print(json.dumps(result["held_out"], indent=1), flush=True)
            with open(proof_path, "w") as f:
                json.dump(proof, f, indent=2)
                f.write("\n")


if __name__ == "__main__":
    main()
