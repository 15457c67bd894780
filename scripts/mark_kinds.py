#!/usr/bin/env python3
"""Per mark kind: how often spurion flags the readings of a shortcut model and of a control model,
with every setting at its default, and what painting the mark out does.

Runs the command-line flow a user would run, nothing more: `spurion demo` writes a fresh set per
kind (the mark on half of the images of each class, `--plant KIND:0.5:0.5`), `spurion sweep`
reads it with each model of sample-models/marks/ (no option but --model, --images, --out and
--exclude masks), and `spurion predict` gives the model's answer on the same images drawn
without the mark (`--plant KIND:0:0`, same seed: every other pixel is the same), which is the
ground-truth removal. The manifest and the masks say which images carry the mark and where.

    python scripts/mark_kinds.py --spurion target/debug/spurion --count 40 --seed 90210 --out /tmp/kinds

Writes OUT/table.md and OUT/results.json and prints the table. Needs numpy and pillow.
The seed is for the measurement only: the models were trained and proven on other seeds
(sample-models/train_marks.py), and nothing in spurion is tuned to these sets.
"""

import argparse
import csv
import json
import os
import subprocess
import sys

import numpy as np
from PIL import Image

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
MODELS = os.path.join(ROOT, "sample-models", "marks")
KINDS = ["letter", "ring", "ruler", "arrow"]
COLUMN = {"letter": "letter", "ruler": "ruler", "ring": "annotation", "arrow": "annotation"}
EVIDENCE = ["attribution", "removal", "hotspot"]


def run(cmd):
    r = subprocess.run(cmd, capture_output=True, text=True)
    if r.returncode != 0:
        sys.exit(f"command failed ({r.returncode}): {' '.join(cmd)}\n{r.stderr}")
    return r.stdout


def manifest(folder):
    with open(os.path.join(folder, "manifest.csv"), newline="") as f:
        return {r["file"]: r for r in csv.DictReader(f)}


def mark_box(folder, row, kind):
    """Box [x0, y0, x1, y1) of the mark's ground-truth mask, or None."""
    stem = os.path.splitext(row["file"])[0]
    m = np.array(Image.open(os.path.join(folder, "masks", f"{stem}.{COLUMN[kind]}.png"))) > 0
    if not m.any():
        return None
    ys, xs = np.nonzero(m)
    return [int(xs.min()), int(ys.min()), int(xs.max()) + 1, int(ys.max()) + 1]


def overlaps(a, b):
    return a[0] < b[2] and b[0] < a[2] and a[1] < b[3] and b[1] < a[3]


def predict_top(spurion, model, image):
    out = json.loads(run([spurion, "predict", "--model", model, "--image", image, "--json"]))
    return int(np.argmax(out["outputs"]))


def measure(spurion, kind, role, folder, bare, out):
    model = os.path.join(MODELS, f"{kind}-{role}.onnx")
    sweep_dir = os.path.join(out, f"sweep-{kind}-{role}")
    run([spurion, "sweep", "--model", model, "--images", folder, "--out", sweep_dir, "--exclude", "masks", "-q"])
    rows = [json.loads(line) for line in open(os.path.join(sweep_dir, "sweep.jsonl"))]
    man = manifest(folder)
    per = {"marked": [], "unmarked": []}
    for r in rows:
        m = man[r["path"]]
        marked = m[COLUMN[kind]] != "none"
        box = mark_box(folder, m, kind) if marked else None
        evidence = [e for e in r["evidence"].split("+") if e]
        on_mark = [h for h in r.get("hotspots", []) if box is not None and overlaps(h["box"], box)]
        bare_top = predict_top(spurion, model, os.path.join(bare, r["path"]))
        per["marked" if marked else "unmarked"].append({
            "path": r["path"],
            "label": m["label"],
            "top": r["top"],
            "suspect": r["suspect"],
            "evidence": evidence,
            "regions": r["region_labels"],
            "found_removal_flip": r["top_after_removal"] is not None and r["top_after_removal"] != r["top"],
            "hotspot_on_mark": bool(on_mark),
            "hotspot_on_mark_flip": any(h.get("flipped") for h in on_mark),
            "hotspot_on_mark_roles": [h["role"] for h in on_mark],
            "truth_removal_flip": bare_top != r["top"],
        })
    return per


def rate(items, pred):
    n = len(items)
    k = sum(1 for x in items if pred(x))
    return k, n


def fmt(kn):
    k, n = kn
    return f"{k}/{n} ({100.0 * k / n:.0f} %)" if n else "0/0"


def main():
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--spurion", default=os.path.join(ROOT, "target", "debug", "spurion"))
    ap.add_argument("--count", type=int, default=40, help="images per kind (the mark on about half)")
    ap.add_argument("--seed", type=int, required=True, help="a fresh seed, not one the models were trained or proven on")
    ap.add_argument("--kinds", nargs="*", default=KINDS)
    ap.add_argument("--roles", nargs="*", default=["shortcut", "control"])
    ap.add_argument("--out", required=True, help="output folder; a second run into the same folder reuses the sweeps' caches")
    args = ap.parse_args()
    os.makedirs(args.out, exist_ok=True)
    results = {"command": " ".join(sys.argv), "count": args.count, "seed": args.seed, "kinds": {}}
    lines = [
        "| kind | model | marked: suspect | by attribution / removal / hotspot | hotspot on the mark | "
        "flip, spurion's removal (found regions / hotspot on mark) | flip, mark drawn away | "
        "unmarked: suspect (false flags) | by attribution / removal / hotspot |",
        "| --- | --- | --- | --- | --- | --- | --- | --- | --- |",
    ]
    for kind in args.kinds:
        seed = args.seed + KINDS.index(kind)
        folder = os.path.join(args.out, f"demo-{kind}")
        bare = os.path.join(args.out, f"demo-{kind}-bare")
        run([args.spurion, "demo", "--out", folder, "--count", str(args.count), "--seed", str(seed),
             "--plant", f"{kind}:0.5:0.5"])
        run([args.spurion, "demo", "--out", bare, "--count", str(args.count), "--seed", str(seed),
             "--plant", f"{kind}:0:0", "--no-masks"])
        results["kinds"][kind] = {"seed": seed}
        for role in args.roles:
            per = measure(args.spurion, kind, role, folder, bare, args.out)
            mk, un = per["marked"], per["unmarked"]
            ev = lambda items: " / ".join(str(rate(items, lambda x, e=e: e in x["evidence"])[0]) for e in EVIDENCE)
            summary = {
                "marked_suspect": rate(mk, lambda x: x["suspect"]),
                "unmarked_suspect": rate(un, lambda x: x["suspect"]),
                "marked_by_evidence": {e: rate(mk, lambda x, e=e: e in x["evidence"])[0] for e in EVIDENCE},
                "unmarked_by_evidence": {e: rate(un, lambda x, e=e: e in x["evidence"])[0] for e in EVIDENCE},
                "marked_hotspot_on_mark": rate(mk, lambda x: x["hotspot_on_mark"]),
                "marked_found_removal_flip": rate(mk, lambda x: x["found_removal_flip"]),
                "marked_hotspot_on_mark_flip": rate(mk, lambda x: x["hotspot_on_mark_flip"]),
                "marked_truth_removal_flip": rate(mk, lambda x: x["truth_removal_flip"]),
                "images": per,
            }
            results["kinds"][kind][role] = summary
            lines.append(
                f"| {kind} | {role} | {fmt(summary['marked_suspect'])} | {ev(mk)} | {fmt(summary['marked_hotspot_on_mark'])} | "
                f"{summary['marked_found_removal_flip'][0]} / {summary['marked_hotspot_on_mark_flip'][0]} of {len(mk)} | "
                f"{fmt(summary['marked_truth_removal_flip'])} | {fmt(summary['unmarked_suspect'])} | {ev(un)} |"
            )
            print(lines[-1], flush=True)
    table = "\n".join(lines) + "\n"
    with open(os.path.join(args.out, "table.md"), "w") as f:
        f.write(table)
    with open(os.path.join(args.out, "results.json"), "w") as f:
        json.dump(results, f, indent=1)
    print(table)


if __name__ == "__main__":
    main()
