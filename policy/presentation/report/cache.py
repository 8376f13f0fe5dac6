"""Reusing a report's costly results (the comparison's bootstrap and the sweeps) when the
scenario file, its data, the costs and the number of replicates are the same as last time.

The cache is one file per key under ``.policy-report-cache/`` in the report's output folder,
written with the report's other files (atomically, by :func:`policy.outputs.write_outputs`). The
key is a SHA-256 digest of the scenario file's bytes, the data file's bytes (size and
modification time for a file over 256 MB), the cost overrides, the replicates and the tool's
version, so an edit to any of them computes afresh. A cache file that cannot be read is ignored.
"""

from __future__ import annotations

import hashlib
import pickle
from pathlib import Path
from typing import Any, Mapping

#: folder of the cache, inside the report's output folder
CACHE_FOLDER = ".policy-report-cache"
#: data files above this size are keyed on their size and modification time, not their bytes
HASH_LIMIT = 256 * 2**20


def _file_digest(path: Path) -> str:
    stat = path.stat()
    if stat.st_size > HASH_LIMIT:
        return f"{path.resolve()}:{stat.st_size}:{stat.st_mtime_ns}"
    digest = hashlib.sha256()
    with path.open("rb") as fh:
        for block in iter(lambda: fh.read(2**20), b""):
            digest.update(block)
    return digest.hexdigest()


def cache_key(scenario, outcome_costs: Mapping[str, float] | None, decision_costs: Mapping[str, Any] | None,
              replicates: int | None, doubt: Any = None) -> str:
    """The digest naming a report's cached results (hex text); ``doubt``: the settings of the rules
    that hold under doubt (:class:`policy.decision.doubt.DoubtSettings`), when the report solves them."""
    from importlib.metadata import PackageNotFoundError, version

    try:
        tool = version("policy-release-rules")
    except PackageNotFoundError:  # run from a source tree
        tool = "source"
    parts = [tool, repr(sorted((outcome_costs or {}).items())),
             repr(sorted((k, type(v).__name__, float(v)) for k, v in (decision_costs or {}).items())), repr(replicates)]
    parts.append(_file_digest(scenario.path) if scenario.path is not None else repr(sorted(scenario.raw.items())))
    if scenario.data.path is not None:
        parts.append(_file_digest(scenario.data.path))
    if doubt is not None:
        parts.append(repr(doubt))
    return hashlib.sha256("\n".join(parts).encode("utf-8")).hexdigest()[:32]


def cache_name(key: str) -> str:
    """The cache file's path inside the output folder, as a name for :func:`policy.outputs.write_outputs`."""
    return f"{CACHE_FOLDER}/{key}.pickle"


def load_cached(folder: str | Path, key: str) -> Any | None:
    """The cached results for ``key`` in ``folder``, or None (missing, or unreadable)."""
    path = Path(folder) / cache_name(key)
    if not path.is_file():
        return None
    try:
        with path.open("rb") as fh:
            return pickle.load(fh)
    except Exception:  # a cache from another version or a damaged file: compute afresh
        return None


def cache_bytes(payload: Any) -> bytes:
    """The results as the cache file's bytes."""
    return pickle.dumps(payload, protocol=pickle.HIGHEST_PROTOCOL)
