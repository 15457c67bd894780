"""The Python package against the command line: the same image and request give the same map, bit
for bit, and the same figures; numpy inputs of every accepted dtype and layout; errors; interrupt;
the ledger's durability through Python calls.

The reference here is spurion's own command line (target/debug/spurion, or $SPURION_BIN), which the
Rust test suite checks against onnxruntime, PyTorch fixtures and the published sources; these tests
check that the Python layer adds nothing and loses nothing.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import numpy as np
import pytest

import spurion

REPO = Path(__file__).resolve().parents[2]
MODEL = REPO / "sample-models" / "shortcut.onnx"


def cli_binary() -> Path:
    b = os.environ.get("SPURION_BIN")
    p = Path(b) if b else REPO / "target" / "debug" / "spurion"
    if not p.exists():
        pytest.fail(f"the spurion binary {p} is missing: run `cargo build` first or set SPURION_BIN")
    return p


def cli(*args: str) -> subprocess.CompletedProcess:
    r = subprocess.run([str(cli_binary()), *args], capture_output=True, text=True)
    assert r.returncode == 0, f"spurion {' '.join(args)} failed: {r.stderr}"
    return r


def demo_image(site: str) -> Path:
    found = sorted(p for p in (REPO / "assets" / "demo").rglob(f"*{site}*.png") if "mask" not in str(p))
    assert found, f"no demo image of {site} under assets/demo"
    return found[0]


@pytest.fixture(scope="module")
def model() -> spurion.Model:
    return spurion.Model(MODEL)


def decoded(image: Path, tmp: Path) -> np.ndarray:
    """The image as spurion decodes it (before resizing), from `spurion feed`: grey values k/255."""
    out = tmp / f"{image.stem}.feed.npy"
    cli("feed", "--image", str(image), "--out", str(out))
    return np.load(out)


def strip_timing(d: dict) -> dict:
    return {k: v for k, v in d.items() if k not in ("elapsed_ms",)}


def test_same_map_and_figures_as_the_command_line_at_default_settings(model, tmp_path):
    image = demo_image("hillmoor")
    out = tmp_path / "cli"
    cli("explain", "--model", str(MODEL), "--image", str(image), "--out", str(out), "--quiet")
    want_map = np.load(out / "map.npy")
    want = json.loads((out / "reading.json").read_text())

    got = spurion.explain(model, image, progress=False)
    assert got.map.dtype == np.float32
    assert got.map.shape == want_map.shape
    assert np.array_equal(got.map, want_map), "the map differs from the command line's"
    assert strip_timing(got.to_dict()) == strip_timing(want)
    assert got.suspect == want["suspect"]
    assert got.evidence == list(want.get("suspect_evidence") or [])
    assert got.regions == want["regions"]
    assert got.completeness_gap == want.get("completeness_gap")
    assert got.steps == want.get("steps")
    assert json.loads(got.to_json()) == got.to_dict()


def test_options_are_the_command_line_flags(model, tmp_path):
    image = demo_image("north-quay")
    out = tmp_path / "cli"
    cli("explain", "--model", str(MODEL), "--image", str(image), "--out", str(out), "--quiet",
        "--method", "integrated-gradients", "--baseline", "black", "--steps", "16", "--rule", "midpoint")
    got = spurion.explain(model, image, method="integrated-gradients", baseline="black", steps=16, rule="midpoint",
                          out=tmp_path / "py", progress=False)
    assert np.array_equal(got.map, np.load(out / "map.npy"))
    assert got.steps == 16
    # out= writes the command's files too.
    assert np.array_equal(np.load(tmp_path / "py" / "map.npy"), got.map)
    assert (tmp_path / "py" / "overlay.png").is_file()


@pytest.mark.parametrize("layout", ["HxW", "HxWx1", "HxWx3"])
@pytest.mark.parametrize("dtype", ["uint8", "uint16", "float32", "float64"])
def test_numpy_images_of_every_dtype_and_layout(model, tmp_path, layout, dtype):
    image = demo_image("hillmoor")
    grey = decoded(image, tmp_path)  # H×W or H×W×1, values k/255
    grey = grey.reshape(grey.shape[0], grey.shape[1])
    k = np.rint(grey * 255).astype(np.uint8)
    assert np.array_equal(k.astype(np.float32) / np.float32(255), grey.astype(np.float32)), "the demo PNG is 8-bit grey"
    arr = {"uint8": k, "uint16": k.astype(np.uint16) * 257, "float32": k.astype(np.float32) / np.float32(255),
           "float64": k.astype(np.float64) / 255.0}[dtype]
    if layout == "HxWx1":
        arr = arr[:, :, None]
    elif layout == "HxWx3":
        arr = np.repeat(arr[:, :, None], 3, axis=2)

    args = dict(method="gradient", progress=False)
    want = spurion.explain(model, image, **args)
    got = spurion.explain(model, arr, **args)
    assert got.map.shape[:2] == want.map.shape[:2] == grey.shape
    if layout == "HxWx3":
        # The map of a colour picture spreads each pixel's attribution over its three channels
        # (the adjoint of taking the grey value); their sum is the grey picture's map.
        assert got.map.shape == (*grey.shape, 3)
        got_map, want_map = got.map.sum(axis=2), want.map[:, :, 0]
    else:
        assert got.map.shape == want.map.shape
        got_map, want_map = got.map, want.map
    if layout != "HxWx3" and dtype in ("uint8", "float32"):
        # The same samples as the file: the same map, bit for bit.
        assert np.array_equal(got_map, want_map)
    else:
        # 16-bit windowing, float64 → float32 and grey from three equal channels round differently
        # in the last bit; the map may move by as much.
        scale = float(np.abs(want_map).max())
        assert np.allclose(got_map, want_map, rtol=1e-4, atol=1e-5 * scale)
    assert got.target == want.target


def test_a_tensor_is_fed_as_given(model, tmp_path):
    shape = model.info["inputs"][0]["shape"]
    x = np.random.default_rng(3).random(shape, dtype=np.float32)
    t = tmp_path / "x.npy"
    np.save(t, x)
    out = tmp_path / "cli"
    cli("explain", "--model", str(MODEL), "--tensor", str(t), "--method", "gradient", "--out", str(out), "--quiet")
    got = spurion.explain(model, x, method="gradient", progress=False)
    assert got.map.shape == x.shape
    assert np.array_equal(got.map, np.load(out / "map.npy"))
    predicted = json.loads(cli("predict", "--model", str(MODEL), "--tensor", str(t), "--json").stdout)
    assert np.array_equal(model.predict(x), np.asarray(predicted["outputs"], dtype=np.float32))


def test_errors_name_the_file_and_what_to_do(model, tmp_path):
    missing = tmp_path / "nowhere.png"
    with pytest.raises(spurion.SpurionError, match="nowhere.png"):
        spurion.explain(model, missing, progress=False)
    bad = tmp_path / "scan.png"
    bad.write_text("this is not a picture")
    with pytest.raises(spurion.SpurionError, match="scan.png"):
        spurion.explain(model, bad, progress=False)
    with pytest.raises(spurion.SpurionError, match="broken.onnx"):
        (tmp_path / "broken.onnx").write_bytes(b"\x00\x01 not a model")
        spurion.Model(tmp_path / "broken.onnx")
    with pytest.raises(ValueError, match="unknown method"):
        spurion.explain(model, demo_image("hillmoor"), method="no-such-method", progress=False)
    with pytest.raises(ValueError, match="--no-such-option"):
        spurion.explain(model, demo_image("hillmoor"), no_such_option=3, progress=False)
    with pytest.raises(TypeError):
        spurion.explain(model, np.zeros((8, 8), dtype=np.int32), progress=False)
    with pytest.raises(spurion.SpurionError, match="H×W"):
        spurion.explain(model, np.zeros((8, 8, 7), dtype=np.uint8), progress=False)


def test_progress_reaches_the_callback(model):
    seen = []
    spurion.explain(model, demo_image("hillmoor"), method="integrated-gradients", steps=64, baseline="black",
                    progress=lambda done, total: seen.append((done, total)))
    assert seen, "no progress was reported"
    assert all(0 <= d <= t for d, t in seen)
    assert seen[-1][0] > 0


def test_ctrl_c_stops_a_long_reading(model):
    # Occlusion with stride 1 on the sample model is minutes of work in a debug build; Ctrl-C
    # (SIGINT to this process) must end it within a moment.
    timer = threading.Timer(1.0, lambda: os.kill(os.getpid(), signal.SIGINT))
    started = time.monotonic()
    timer.start()
    with pytest.raises(KeyboardInterrupt):
        spurion.explain(model, demo_image("hillmoor"), method="occlusion", window=4, stride=1, progress=False)
    took = time.monotonic() - started
    timer.cancel()
    assert took < 30, f"the reading went on for {took:.1f} s after Ctrl-C"


def test_a_callback_that_raises_stops_the_work(model):
    def stop(done, total):
        raise RuntimeError("stop here")

    with pytest.raises(RuntimeError, match="stop here"):
        spurion.explain(model, demo_image("hillmoor"), method="occlusion", window=4, stride=1, progress=stop)


def test_sweep_rows_and_resume(model, tmp_path):
    folder = tmp_path / "images"
    for site in ("hillmoor", "north-quay"):
        (folder / site).mkdir(parents=True)
        src = demo_image(site)
        (folder / site / src.name).write_bytes(src.read_bytes())
    out = tmp_path / "sweep"
    rows = spurion.sweep(model, folder, out=out, method="gradient", progress=False)
    records = rows.to_dict("records") if hasattr(rows, "to_dict") else rows
    assert len(records) == 2
    assert {Path(r["path"]).parent.name for r in records} == {"hillmoor", "north-quay"}
    assert (out / "report.html").is_file() and (out / "groups.json").is_file()
    first = (out / "sweep.jsonl").read_text()
    # A second call is served from the cache and gives the same rows.
    again = spurion.sweep(model, folder, out=out, method="gradient", progress=False)
    assert len(again) == 2
    strip = lambda text: [{k: v for k, v in json.loads(l).items() if "seconds" not in k and k != "elapsed_ms"}
                          for l in text.splitlines() if l.strip()]
    assert strip(first) == strip((out / "sweep.jsonl").read_text())


def test_review_returns_review_json(model, tmp_path):
    got = spurion.review(model, demo_image("hillmoor"), out=tmp_path / "r", method="gradient",
                         skip=["shapley", "convergence", "curves"], cascade_layers=1, progress=False)
    assert got == json.loads((tmp_path / "r" / "review.json").read_text())
    assert (tmp_path / "r" / "review.png").is_file()


def test_ledger_set_get_and_table(tmp_path):
    root = tmp_path / "data"
    root.mkdir()
    for n in ("a.png", "b.png"):
        (root / n).write_bytes(demo_image("hillmoor").read_bytes())
    ledger = spurion.Ledger(root)
    said = ledger.set(root / "a.png", "marked", note="tag in the corner")
    assert "a.png" in said and "marked" in said
    on_disk = json.loads((root / "spurion-ledger.json").read_text())
    assert on_disk["images"]["a.png"]["verdict"] == "marked"
    assert ledger.get("a.png")["note"] == "tag in the corner"
    assert ledger.get(root / "b.png") is None
    ledger.set(root / "b.png", "clean")
    table = ledger.to_dataframe()
    records = table.to_dict("records") if hasattr(table, "to_dict") else table
    assert {r["image"]: r["verdict"] for r in records} == {"a.png": "marked", "b.png": "clean"}
    with pytest.raises(spurion.SpurionError, match="nothere.png"):
        ledger.set(root / "nothere.png", "clean")
    with pytest.raises(ValueError):
        ledger.set(root / "a.png", "maybe")


DURABLE_CHILD = r"""
import sys, spurion
root = sys.argv[1]
ledger = spurion.Ledger(root)
verdicts = ["clean", "marked", "unsure", "exclude"]
i = 0
while True:
    image = f"img{i % 20}.png"
    v = verdicts[i % 4]
    ledger.set(f"{root}/{image}", v, note=f"change {i}")
    print(f"{image} {v} {i}", flush=True)
    i += 1
"""


def test_ledger_changes_survive_a_kill_at_any_moment(tmp_path):
    root = tmp_path / "data"
    root.mkdir()
    for i in range(20):
        (root / f"img{i}.png").write_bytes(b"")
    rng = np.random.default_rng(7)
    for round_ in range(4):
        child = subprocess.Popen([sys.executable, "-c", DURABLE_CHILD, str(root)], stdout=subprocess.PIPE, text=True)
        time.sleep(0.5 + float(rng.uniform(0, 1.0)))
        child.kill()
        out, _ = child.communicate()
        acknowledged = [l.split() for l in out.splitlines() if l.strip()]
        # The file is whole JSON, and every change the call acknowledged is in it (a later,
        # unacknowledged change to the same image may be there too).
        on_disk = json.loads((root / "spurion-ledger.json").read_text())
        last = {}
        for image, verdict, i in acknowledged:
            last[image] = (verdict, int(i))
        for image, (verdict, i) in last.items():
            note = on_disk["images"][image]["note"]
            n = int(note.split()[-1])
            assert n >= i, f"round {round_}: {image} lost acknowledged change {i} (file has {n})"
            if n == i:
                assert on_disk["images"][image]["verdict"] == verdict
