"""Writing output files so that nothing half-written is ever left behind.

Every file is first written under a temporary name in the target folder and then renamed
over its final name (``os.replace`` is atomic on one file system). A set of files is written
only after every one of them has been rendered: if rendering any of them fails, none is
renamed into place.
"""

from __future__ import annotations

import json
import math
import os
import tempfile
from contextlib import contextmanager
from pathlib import Path
from typing import Any, Iterator

import numpy as np
import pandas as pd

__all__ = ["atomic_path", "write_outputs", "to_json_text", "table_bytes"]


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def _publish(tmp: Path, target: Path) -> None:
    """Give the temporary file the permissions a newly created file gets, then rename it.

    ``mkstemp`` creates files readable by their owner only; outputs are meant to be shared.
    """
    os.chmod(tmp, 0o666 & ~_umask())
    os.replace(tmp, target)


@contextmanager
def atomic_path(target: str | os.PathLike) -> Iterator[Path]:
    """Yield a temporary path beside ``target``; rename it over ``target`` on success."""
    target = Path(target)
    target.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".partial", dir=target.parent)
    os.close(fd)
    tmp_path = Path(tmp)
    try:
        yield tmp_path
        _publish(tmp_path, target)
    finally:
        if tmp_path.exists():
            tmp_path.unlink()


def _json_default(obj: Any) -> Any:
    if isinstance(obj, np.generic):
        return obj.item()
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    if isinstance(obj, Path):
        return str(obj)
    if isinstance(obj, pd.DataFrame):
        return json.loads(obj.to_json(orient="records"))
    raise TypeError(f"cannot write {type(obj).__name__} as JSON")


def _finite(obj: Any) -> Any:
    """Replace NaN and infinities by None: JSON has no spelling for them."""
    if isinstance(obj, float) and not math.isfinite(obj):
        return None
    if isinstance(obj, dict):
        return {k: _finite(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_finite(v) for v in obj]
    return obj


def to_json_text(obj: Any) -> str:
    """JSON text of ``obj`` with numpy scalars converted and non-finite numbers as null."""
    return json.dumps(_finite(json.loads(json.dumps(obj, default=_json_default))), indent=2) + "\n"


def table_bytes(frame: pd.DataFrame, suffix: str) -> bytes:
    """Render a table as CSV or Parquet bytes, chosen by the file suffix."""
    if suffix == ".parquet":
        import io

        buf = io.BytesIO()
        frame.to_parquet(buf, index=False)
        return buf.getvalue()
    if suffix == ".csv":
        return frame.to_csv(index=False, lineterminator="\n").encode("utf-8")
    raise ValueError(f"unknown table suffix {suffix!r}; expected .csv or .parquet")


def write_outputs(folder: str | os.PathLike, files: dict[str, Any]) -> list[Path]:
    """Write several output files into ``folder``, all or nothing.

    Parameters
    ----------
    folder : path
        Output folder; created if missing.
    files : dict
        File name -> content. A DataFrame is written as CSV or Parquet by the name's suffix,
        a dict or list as JSON, ``str`` as UTF-8 text, ``bytes`` verbatim, and a callable
        is called with a temporary path it must write (used for figures).

    Returns
    -------
    list of Path
        The files written, in the order given.
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    staged: list[tuple[Path, Path]] = []
    try:
        for name, content in files.items():
            target = folder / name
            target.parent.mkdir(parents=True, exist_ok=True)
            fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".partial", dir=target.parent)
            os.close(fd)
            tmp_path = Path(tmp)
            staged.append((tmp_path, target))
            if isinstance(content, pd.DataFrame):
                tmp_path.write_bytes(table_bytes(content, target.suffix))
            elif isinstance(content, (dict, list)):
                tmp_path.write_text(to_json_text(content), encoding="utf-8")
            elif isinstance(content, str):
                tmp_path.write_text(content, encoding="utf-8")
            elif isinstance(content, bytes):
                tmp_path.write_bytes(content)
            elif callable(content):
                content(tmp_path)
            else:
                raise TypeError(f"cannot write {type(content).__name__} to {name}")
        for tmp_path, target in staged:
            _publish(tmp_path, target)
        return [target for _, target in staged]
    finally:
        for tmp_path, _ in staged:
            if tmp_path.exists():
                tmp_path.unlink()
