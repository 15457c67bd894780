"""spurion from Python: what an image classifier is looking at, and whether the answer is a shortcut.

The same engine as the ``spurion`` program, numpy in and out::

    import spurion
    model = spurion.Model("sample-models/shortcut.onnx")      # feed card beside it, as on the command line
    reading = spurion.explain(model, "demo/hillmoor/0001.png")  # the command line's defaults
    reading.map          # numpy array shaped like the image
    reading.suspect      # True when the attribution sits on a mark whose removal moves the score
    rows = spurion.sweep(model, "demo", out="sweep-out")        # a pandas DataFrame when pandas is installed

Options are the command line's flags as keyword arguments (``--baseline blur:8`` is
``baseline="blur:8"``), with its defaults, checks and messages. Long calls release the GIL, show
progress (a callback, or tqdm when installed) and stop on KeyboardInterrupt.

spurion is a research and data-quality tool, not a diagnostic device. An attribution map is a hint
about what a model responds to, not proof of what it does. Any clinical use defers to local
regulation and licensed practice.
"""

from __future__ import annotations

import json
import os
import sys
from pathlib import Path
from typing import Any, Callable, Optional, Union

import numpy as np

from . import _engine
from ._engine import CAUTION, SpurionError

__all__ = ["Model", "Reading", "Ledger", "explain", "sweep", "review", "SpurionError", "CAUTION", "__version__"]
__version__: str = _engine.VERSION

PathLike = Union[str, "os.PathLike[str]"]
Progress = Optional[Union[bool, Callable[[int, int], Any]]]


def _flags(options: dict) -> list:
    """Keyword arguments as the command line's flags: ``steps=64`` is ``--steps 64``, ``True`` a bare
    flag, a list a comma-separated value; ``None`` and ``False`` leave the flag out."""
    argv = []
    for key, value in options.items():
        flag = "--" + key.replace("_", "-")
        if value is None or value is False:
            continue
        if value is True:
            argv.append(flag)
        elif isinstance(value, (list, tuple)):
            argv += [flag, ",".join(str(v) for v in value)]
        else:
            argv += [flag, os.fspath(value) if isinstance(value, os.PathLike) else str(value)]
    return argv


class _Bar:
    """Progress for a long call: the user's callback, else tqdm where installed, else nothing."""

    def __init__(self, progress: Progress, what: str):
        self.callback = None
        self.bar = None
        if callable(progress):
            self.callback = progress
        elif progress is not False:
            try:
                from tqdm.auto import tqdm  # notebooks get a widget, terminals a text bar
            except ImportError:
                tqdm = None
            if tqdm is not None:
                self.bar = tqdm(total=1, desc=what, leave=False)

    def __call__(self, done: int, total: int) -> None:
        if self.callback is not None:
            self.callback(done, total)
        elif self.bar is not None:
            if self.bar.total != total:
                self.bar.total = total
            self.bar.n = done
            self.bar.refresh()

    def close(self) -> None:
        if self.bar is not None:
            self.bar.close()

    @property
    def hook(self):
        return self if (self.callback is not None or self.bar is not None) else None


def _run(progress: Progress, what: str, call: Callable[[Any], Any]) -> Any:
    bar = _Bar(progress, what)
    try:
        return call(bar.hook)
    finally:
        bar.close()


def _array_parts(x: np.ndarray) -> tuple:
    """The bytes, shape and dtype name the engine takes (little-endian, C order)."""
    if x.dtype == np.bool_ or x.dtype.kind not in "uif":
        raise TypeError(f"arrays of {x.dtype} are not images or tensors; use uint8, uint16, float32 or float64")
    if x.dtype.kind == "i":
        raise TypeError(f"signed integer arrays ({x.dtype}) are ambiguous; convert to uint8, uint16 or float")
    if x.dtype.kind == "u" and x.dtype.itemsize not in (1, 2):
        raise TypeError(f"{x.dtype} images are not supported; use uint8 or uint16, or float in 0..1")
    if x.dtype.kind == "f" and x.dtype.itemsize == 2:
        x = x.astype(np.float32)
    x = np.ascontiguousarray(x, dtype=x.dtype.newbyteorder("<"))
    return x.tobytes(), list(x.shape), x.dtype.name


class Model:
    """An ONNX classifier and how to feed it.

    ``path``: the .onnx file. ``feed``: a feed card (default: ``PATH.feed.toml`` beside the model,
    else one inferred from the graph). ``input_shape``: for graphs with dynamic input dimensions.
    ``output``: the output to score, by its ONNX name, for models with several.
    """

    def __init__(self, path: PathLike, feed: Optional[PathLike] = None, input_shape: Optional[list] = None,
                 output: Optional[str] = None):
        self._handle = _engine.ModelHandle(
            os.fspath(path), os.fspath(feed) if feed is not None else None, list(input_shape) if input_shape else None,
            output,
        )
        self.path = Path(os.fspath(path))
        self.feed = Path(os.fspath(feed)) if feed is not None else None
        self.input_shape = list(input_shape) if input_shape else None
        self.output = output

    def _model_flags(self) -> list:
        argv = ["--model", os.fspath(self.path)]
        if self.feed is not None:
            argv += ["--feed", os.fspath(self.feed)]
        if self.input_shape:
            argv += ["--input-shape", ",".join(str(d) for d in self.input_shape)]
        if self.output is not None:
            argv += ["--output", self.output]
        return argv

    def __repr__(self) -> str:
        return f"spurion.Model({str(self.path)!r})"

    @property
    def info(self) -> dict:
        """Inputs, outputs and ops, and which ops have a reverse step (``spurion info --json``)."""
        return json.loads(self._handle.info_json())

    @property
    def card(self) -> dict:
        """The feed card in use."""
        return json.loads(self._handle.card_json())

    def _input_kind(self, x: np.ndarray) -> str:
        """An array shaped exactly as the model's input is a tensor; other H×W and H×W×C arrays are images."""
        try:
            shape = list(self.info["inputs"][0]["shape"])
        except SpurionError:
            shape = []  # dynamic dimensions: the array's own shape decides
        if list(x.shape) == shape or x.ndim >= 4:
            return "tensor"
        if x.ndim in (2, 3):
            return "image"
        return "tensor"

    def predict(self, x: Union[PathLike, np.ndarray]) -> np.ndarray:
        """The model's raw outputs for an image file, an image array (H×W or H×W×C) or an input tensor."""
        if isinstance(x, (str, os.PathLike)):
            values, _ = self._handle.predict("image", os.fspath(x), None, None, None)
        else:
            x = np.asarray(x)
            b, s, d = _array_parts(x)
            values, _ = self._handle.predict(self._input_kind(x), None, b, s, d)
        return np.asarray(values, dtype=np.float32)

    @property
    def labels(self) -> list:
        return list(self.card.get("output", {}).get("labels", []))


class Reading:
    """One reading: the map and what reading.json says of it."""

    def __init__(self, data: dict, map_: np.ndarray):
        self._data = data
        self.map: np.ndarray = map_
        """The attribution map: shaped like the image for a picture (H×W), like the tensor for a tensor."""

    def __repr__(self) -> str:
        d = self._data
        return f"<spurion.Reading {d.get('method')} on {d.get('input')}, suspect={self.suspect}>"

    @property
    def suspect(self) -> Optional[bool]:
        """Whether the reading is suspect (None where no region could be assessed, e.g. a raw tensor)."""
        v = self._data.get("suspect")
        return None if v is None else bool(v)

    @property
    def evidence(self) -> list:
        """What made the reading suspect (attribution, removal, the file's own Burned In Annotation, ...)."""
        return list(self._data.get("suspect_evidence") or [])

    @property
    def reason(self) -> Optional[str]:
        """The flag's reason in words."""
        return self._data.get("suspect_reason")

    @property
    def regions(self) -> list:
        """The regions found and drawn, each a dict as in reading.json."""
        return list(self._data.get("regions") or [])

    @property
    def completeness_gap(self) -> Optional[float]:
        return self._data.get("completeness_gap")

    @property
    def steps(self) -> Optional[int]:
        return self._data.get("steps")

    @property
    def target(self) -> dict:
        return dict(self._data.get("target", {}))

    def __getitem__(self, key: str) -> Any:
        return self._data[key]

    def to_dict(self) -> dict:
        return json.loads(json.dumps(self._data))

    def to_json(self) -> str:
        """reading.json's text, as ``spurion explain`` writes it."""
        return json.dumps(self._data, indent=2, ensure_ascii=False)


def explain(model: Model, x: Union[PathLike, np.ndarray], *, progress: Progress = None, **options: Any) -> Reading:
    """One reading of ``x`` under ``model``.

    ``x``: an image file (PNG, JPEG, TIFF, BMP, DICOM), an image array (H×W or H×W×C; uint8,
    uint16 or float in 0..1), or an input tensor shaped as the model's input. ``options``: the
    flags of ``spurion explain`` (method, baseline, steps, rule, adaptive, window, stride, noise,
    samples, seed, target, score, ledger, frame, out, sign, opacity, with_patient_data), with its
    defaults. ``out=FOLDER`` also writes the command's files there.
    """
    argv = _flags(options)
    if isinstance(x, (str, os.PathLike)):
        call = lambda hook: _engine.explain(model._handle, argv, os.fspath(x), "image", None, None, None, hook)
    else:
        arr = np.asarray(x)
        b, s, d = _array_parts(arr)
        kind = model._input_kind(arr)
        call = lambda hook: _engine.explain(model._handle, argv, None, kind, b, s, d, hook)
    text, raw, shape = _run(progress, options.get("method") or "reading", call)
    return Reading(json.loads(text), np.frombuffer(raw, dtype="<f4").reshape(shape).copy())


def _table(path: Path):
    rows = [json.loads(line) for line in path.read_text(encoding="utf-8").splitlines() if line.strip()]
    try:
        import pandas as pd
    except ImportError:
        return rows
    return pd.json_normalize(rows, max_level=0) if rows else pd.DataFrame()


def sweep(model: Model, folder: PathLike, *, out: PathLike, progress: Progress = None, **options: Any):
    """One reading per image of ``folder`` (searched recursively), written to ``out`` as ``spurion
    sweep`` writes it (sweep.csv, sweep.jsonl, groups.json, report.html, the cache); resumable: a
    stopped sweep goes on where it stopped. Returns the rows as a pandas DataFrame when pandas is
    installed, a list of dicts otherwise. ``options``: the flags of ``spurion sweep``."""
    argv = model._model_flags() + ["--images", os.fspath(folder), "--out", os.fspath(out)]
    argv += _flags(options)
    done = _run(progress, "sweep", lambda hook: _engine.sweep(argv, hook))
    return _table(Path(done) / "sweep.jsonl")


def review(model: Model, x: PathLike, *, out: Optional[PathLike] = None, progress: Progress = None, **options: Any) -> dict:
    """The reviewer's tests of a reading of the image file ``x`` (curves, randomisation cascade,
    convergence, Shapley values; ``spurion review``'s flags as options). Writes review.json and
    review.png to ``out`` (default: review-NAME) and returns review.json's content."""
    if not isinstance(x, (str, os.PathLike)):
        raise TypeError("review takes an image file; save the array first (e.g. as PNG)")
    argv = model._model_flags() + ["--image", os.fspath(x)]
    if out is not None:
        argv += ["--out", os.fspath(out)]
    argv += _flags(options)
    done = _run(progress, "review", lambda hook: _engine.review(argv, hook))
    return json.loads((Path(done) / "review.json").read_text(encoding="utf-8"))


VERDICTS = ("clean", "marked", "unsure", "exclude")


class Ledger:
    """A curator's ledger: verdicts, notes and drawn regions per image, each change on disk before
    the call returns (the same commit as ``spurion ledger set``).

    ``path``: the ledger file, or a folder (its spurion-ledger.json). ``root``: the dataset's
    folder that image paths are kept relative to, recorded when the ledger is made.
    """

    def __init__(self, path: PathLike, root: Optional[PathLike] = None):
        self.path = Path(os.fspath(path))
        self.root = Path(os.fspath(root)) if root is not None else None

    def __repr__(self) -> str:
        return f"spurion.Ledger({str(self.path)!r})"

    def set(self, image: PathLike, verdict: Optional[str] = None, *, note: Optional[str] = None) -> str:
        """Sets the image's verdict (clean, marked, unsure, exclude, or "none" to clear) and/or note."""
        if verdict is None and note is None:
            raise ValueError("give a verdict, a note or both")
        argv = ["--ledger", os.fspath(self.path), "--image", os.fspath(image)]
        if self.root is not None:
            argv += ["--root", os.fspath(self.root)]
        if verdict is not None:
            argv += ["--verdict", str(verdict)]
        if note is not None:
            argv += ["--note", note]
        return _engine.ledger_set(argv)

    def _json(self) -> dict:
        text = _engine.ledger_json(os.fspath(self.path))
        return json.loads(text) if text else {}

    def get(self, image: PathLike) -> Optional[dict]:
        """The image's entry (verdict, note, drawn regions, changed), or None."""
        key = _engine.ledger_key(os.fspath(self.path), os.fspath(image))
        return (self._json().get("images") or {}).get(key)

    def to_dataframe(self):
        """The ledger as ``spurion ledger export`` writes it: a pandas DataFrame (a list of dicts without pandas)."""
        import csv
        import io

        text = _engine.ledger_csv(os.fspath(self.path))
        try:
            import pandas as pd
        except ImportError:
            return list(csv.DictReader(io.StringIO(text)))
        return pd.read_csv(io.StringIO(text), keep_default_na=False)
