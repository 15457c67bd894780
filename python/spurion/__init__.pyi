# Type hints for the spurion package. Options of explain/sweep/review are the command line's
# flags as keyword arguments (see `spurion explain --help`).
import os
from pathlib import Path
from typing import Any, Callable, Literal, Optional, Union

import numpy as np
import numpy.typing as npt

PathLike = Union[str, os.PathLike[str]]
Progress = Optional[Union[bool, Callable[[int, int], Any]]]
Verdict = Literal["clean", "marked", "unsure", "exclude", "none", "1", "2", "3", "4"]

__version__: str
CAUTION: str
VERDICTS: tuple[str, ...]

class SpurionError(Exception):
    """An error spurion reports: which file, what is wrong, what to do."""

class Model:
    path: Path
    feed: Optional[Path]
    input_shape: Optional[list[int]]
    output: Optional[str]
    def __init__(self, path: PathLike, feed: Optional[PathLike] = ..., input_shape: Optional[list[int]] = ..., output: Optional[str] = ...) -> None: ...
    @property
    def info(self) -> dict[str, Any]: ...
    @property
    def card(self) -> dict[str, Any]: ...
    @property
    def labels(self) -> list[str]: ...
    def predict(self, x: Union[PathLike, npt.NDArray[Any]]) -> npt.NDArray[np.float32]: ...

class Reading:
    map: npt.NDArray[np.float32]
    @property
    def suspect(self) -> Optional[bool]: ...
    @property
    def evidence(self) -> list[str]: ...
    @property
    def reason(self) -> Optional[str]: ...
    @property
    def regions(self) -> list[dict[str, Any]]: ...
    @property
    def completeness_gap(self) -> Optional[float]: ...
    @property
    def steps(self) -> Optional[int]: ...
    @property
    def target(self) -> dict[str, Any]: ...
    def __getitem__(self, key: str) -> Any: ...
    def to_dict(self) -> dict[str, Any]: ...
    def to_json(self) -> str: ...

def explain(
    model: Model,
    x: Union[PathLike, npt.NDArray[Any]],
    *,
    progress: Progress = ...,
    method: str = ...,
    baseline: str = ...,
    steps: int = ...,
    rule: str = ...,
    adaptive: float = ...,
    window: int = ...,
    stride: int = ...,
    noise: float = ...,
    samples: int = ...,
    seed: int = ...,
    target: Union[str, int] = ...,
    score: str = ...,
    ledger: PathLike = ...,
    frame: int = ...,
    out: PathLike = ...,
    sign: str = ...,
    opacity: float = ...,
    with_patient_data: bool = ...,
    **options: Any,
) -> Reading: ...

def sweep(model: Model, folder: PathLike, *, out: PathLike, progress: Progress = ..., **options: Any) -> Any: ...
def review(model: Model, x: PathLike, *, out: Optional[PathLike] = ..., progress: Progress = ..., **options: Any) -> dict[str, Any]: ...

class Ledger:
    path: Path
    root: Optional[Path]
    def __init__(self, path: PathLike, root: Optional[PathLike] = ...) -> None: ...
    def set(self, image: PathLike, verdict: Optional[Verdict] = ..., *, note: Optional[str] = ...) -> str: ...
    def get(self, image: PathLike) -> Optional[dict[str, Any]]: ...
    def to_dataframe(self) -> Any: ...
