"""Writing output files: all of a command's files at once, never over a file the user owns.

A command's files are first rendered into a hidden staging folder inside the output folder.
Only when every one of them is complete does a manifest (``.policy-outputs.json``) record the
switch ("replacing"); the staged files are then renamed over their final names (``os.replace``,
atomic per file on one file system), the files of the folder's previous run that the new run
does not write are removed, and the manifest is rewritten as "complete". A run killed during the
renames is finished by the next command that writes into the folder (:func:`recover`); until
then the manifest says the folder is being replaced. A run killed earlier leaves only its
staging folder, which the next command removes.

The manifest also says which files the tool wrote (with their SHA-256): a file the tool did not
write, or one changed since, is never replaced unless the caller asks (``overwrite``), and no
output may replace an input of the same run. One command at a time writes into a folder (an
exclusive lock (``flock``) on the folder itself). Paths recorded in JSON outputs (``scenario_file``) are
written relative to the output folder, so shared outputs do not reveal a user's folders.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import shutil
import tempfile
import uuid
from contextlib import contextmanager
from pathlib import Path
from typing import Any, Iterator

import numpy as np
import pandas as pd

__all__ = ["atomic_path", "write_outputs", "to_json_text", "table_bytes", "check_output_folder", "claim_output_folder",
           "release_output_folders", "recover", "read_manifest", "MANIFEST", "spreadsheet_safe"]


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


#: first characters that make a spreadsheet read a cell as a formula
_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")


def _neutralize(value: Any) -> Any:
    if isinstance(value, str) and value.startswith(_FORMULA_START):
        try:
            float(value)
        except ValueError:
            return "'" + value
    return value


def spreadsheet_safe(frame: pd.DataFrame) -> pd.DataFrame:
    """The frame with text cells a spreadsheet would evaluate as a formula (starting with
    ``= + - @``, tab or carriage return) prefixed by ``'``, and such column names too.

    Numbers, and text that reads as a number (``-5``), are left alone.

    References
    ----------
    OWASP Foundation, "CSV Injection" (common practice for CSV files opened in spreadsheets).
    """
    out = None
    for i, col in enumerate(frame.columns):
        series = frame.iloc[:, i]
        if series.dtype == object or pd.api.types.is_string_dtype(series.dtype) or isinstance(series.dtype, pd.CategoricalDtype):
            values = series.astype(object)
            starts = values.map(lambda v: isinstance(v, str) and v.startswith(_FORMULA_START))
            if starts.any():
                out = frame.copy() if out is None else out
                out.isetitem(i, values.map(_neutralize))
    names = [_neutralize(c) for c in frame.columns]
    if names != list(frame.columns):
        out = (frame.copy() if out is None else out)
        out.columns = names
    return frame if out is None else out


def table_bytes(frame: pd.DataFrame, suffix: str) -> bytes:
    """Render a table as CSV or Parquet bytes, chosen by the file suffix."""
    if suffix == ".parquet":
        import io

        buf = io.BytesIO()
        frame.to_parquet(buf, index=False)
        return buf.getvalue()
    if suffix == ".csv":
        return spreadsheet_safe(frame).to_csv(index=False, lineterminator="\n").encode("utf-8")
    raise ValueError(f"unknown table suffix {suffix!r}; expected .csv or .parquet")


MANIFEST = ".policy-outputs.json"
_STAGING = ".policy-staging-"
#: keys of JSON outputs holding a path; written relative to the output folder (at most two
#: levels up), else as the file's name alone
PATH_KEYS = ("scenario_file", "folder")
#: folders claimed by this process (resolved path -> (open lock file, whether we created it))
_HELD: dict[Path, tuple[Any, bool]] = {}


def check_output_folder(folder: str | os.PathLike, option: str = "--out") -> Path:
    """Refuse an output folder that cannot be written, before anything is computed.

    A path that is a file, lies under a file, or sits in a folder this process may not write
    in raises :class:`~policy.errors.InputError` naming ``option``.
    """
    from policy.errors import InputError

    folder = Path(folder)
    if folder.exists() and not folder.is_dir():
        raise InputError(f"{option} {str(folder)!r} is a file, not a folder; give a folder for the outputs.")
    existing = folder
    while not existing.exists():
        if existing.parent == existing:
            break
        existing = existing.parent
    if existing.exists() and not existing.is_dir():
        raise InputError(f"{option} {str(folder)!r} lies under {str(existing)!r}, which is a file, not a folder; "
                         "no folder can be made there.")
    try:
        fd, probe = tempfile.mkstemp(prefix=".policy-probe-", dir=existing)
        os.close(fd)
        os.unlink(probe)
    except OSError as exc:
        raise InputError(f"{option} {str(folder)!r}: cannot write in {str(existing)!r} ({exc.strerror}); "
                         "choose a folder you may write in.") from None
    if shutil.disk_usage(existing).free < (1 << 20):
        raise InputError(f"{option} {str(folder)!r}: the disk holding {str(existing)!r} is full; free some space "
                         "or choose another folder.")
    return folder


def _lock(folder: Path, option: str) -> Any:
    """A descriptor of ``folder`` holding an exclusive lock on it (None where locks do not exist)."""
    from policy.errors import InputError

    try:
        import fcntl
    except ImportError:  # pragma: no cover - not POSIX
        return None
    handle = os.open(folder, os.O_RDONLY)
    try:
        fcntl.flock(handle, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except OSError:
        os.close(handle)
        raise InputError(f"{option} {str(folder)!r}: another command is writing into this folder now; wait for it "
                         "to finish or choose another folder.") from None
    return handle


def claim_output_folder(folder: str | os.PathLike, option: str = "--out") -> Path:
    """Check ``folder`` can be written and hold it for this process until
    :func:`release_output_folders`: a second command writing there meanwhile is refused.

    A folder that does not exist yet is created (and removed again on release if still empty).
    """
    folder = check_output_folder(folder, option)
    key = folder.resolve()
    if key in _HELD:
        return folder
    created = not folder.exists()
    folder.mkdir(parents=True, exist_ok=True)
    try:
        _HELD[key] = (_lock(folder, option), created)
    except BaseException:
        if created:
            folder.rmdir()
        raise
    return folder


def release_output_folders() -> None:
    """Release every folder this process claimed; remove those it created and left empty."""
    for key, (handle, created) in list(_HELD.items()):
        _HELD.pop(key, None)
        if handle is not None:
            os.close(handle)
        if created:
            try:
                key.rmdir()  # only if still empty
            except OSError:
                pass


def _sha256(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def read_manifest(folder: str | os.PathLike) -> dict | None:
    """The manifest of ``folder`` (what the tool wrote there), or None if there is none readable."""
    path = Path(folder) / MANIFEST
    try:
        manifest = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    return manifest if isinstance(manifest, dict) and isinstance(manifest.get("files"), dict) else None


def _write_manifest(folder: Path, manifest: dict) -> None:
    fd, tmp = tempfile.mkstemp(prefix=".policy-manifest-", suffix=".partial", dir=folder)
    with os.fdopen(fd, "w", encoding="utf-8") as fh:
        fh.write(json.dumps(manifest, indent=1, sort_keys=True) + "\n")
    _publish(Path(tmp), folder / MANIFEST)


def _finish(folder: Path, manifest: dict) -> dict:
    """Complete a replacement the manifest records: staged files into place, old ones out."""
    staging = folder / manifest.get("staging", "")
    if manifest.get("staging"):
        for name in manifest["files"]:
            staged = staging / name
            if staged.is_file():
                (folder / name).parent.mkdir(parents=True, exist_ok=True)
                os.replace(staged, folder / name)
    for name in manifest.get("remove", []):
        target = folder / name
        if target.is_file():
            target.unlink()
    done = {k: v for k, v in manifest.items() if k not in ("staging", "remove")}
    done["state"] = "complete"
    _write_manifest(folder, done)
    if manifest.get("staging") and staging.is_dir():
        shutil.rmtree(staging, ignore_errors=True)
    return done


def recover(folder: str | os.PathLike) -> dict | None:
    """Bring ``folder`` to a complete state after a command was killed while writing into it.

    A replacement the manifest records as begun is finished (the new files were all complete
    before it began); staging folders and temporary files of killed runs are removed. Call it
    only while no other command writes into the folder (the commands hold its lock).
    Returns the manifest afterwards.
    """
    folder = Path(folder)
    if not folder.is_dir():
        return None
    manifest = read_manifest(folder)
    if manifest is not None and manifest.get("state") == "replacing":
        manifest = _finish(folder, manifest)
    for stale in folder.glob(_STAGING + "*"):
        shutil.rmtree(stale, ignore_errors=True)
    for pattern in (".*.partial", "*/.*.partial"):
        for stale in folder.glob(pattern):
            if stale.is_file():
                stale.unlink()
    return manifest


def _relative_paths(content: Any, folder: Path) -> Any:
    """JSON content with absolute paths under :data:`PATH_KEYS` made relative to ``folder``."""
    if isinstance(content, dict):
        out = {}
        for k, v in content.items():
            if k in PATH_KEYS and isinstance(v, (str, Path)) and os.path.isabs(str(v)):
                rel = Path(os.path.relpath(str(v), str(folder.resolve())))
                # near the outputs (same or a nearby folder): the relative path; else the name only
                v = rel.as_posix() if rel.parts.count("..") <= 2 else rel.name
            out[k] = _relative_paths(v, folder)
        return out
    if isinstance(content, list):
        return [_relative_paths(v, folder) for v in content]
    return content


def _render(content: Any, path: Path, name: str, folder: Path) -> None:
    if isinstance(content, pd.DataFrame):
        path.write_bytes(table_bytes(content, path.suffix))
    elif isinstance(content, (dict, list)):
        path.write_text(to_json_text(_relative_paths(content, folder)), encoding="utf-8")
    elif isinstance(content, str):
        path.write_text(content, encoding="utf-8")
    elif isinstance(content, bytes):
        path.write_bytes(content)
    elif callable(content):
        content(path)
    else:
        raise TypeError(f"cannot write {type(content).__name__} to {name}")
    if path.exists():
        os.chmod(path, 0o666 & ~_umask())


def write_outputs(folder: str | os.PathLike, files: dict[str, Any], *, inputs=(), overwrite: bool = False,
                  keep: tuple[str, ...] = (), command: str = "", option: str = "--out") -> list[Path]:
    """Write a command's files into ``folder``, all at once, never over a file the user owns.

    Parameters
    ----------
    folder : path
        Output folder; created if missing.
    files : dict
        File name -> content. A DataFrame is written as CSV or Parquet by the name's suffix
        (CSV text cells neutralized for spreadsheets, :func:`spreadsheet_safe`), a dict or list
        as JSON, ``str`` as UTF-8 text, ``bytes`` verbatim, and a callable is called with a
        temporary path it must write (used for figures).
    inputs : iterable of path
        Files this run reads; an output that would replace one is refused.
    overwrite : bool
        Replace files the tool did not write (or that were changed since); without it such a
        file is refused, naming it.
    keep : tuple of str
        Names among ``files`` that are data for later runs (the demo's case table and scenario):
        a later run into the folder that does not write them leaves them in place.
    command : str
        The command's name, recorded in the manifest.
    option : str
        How the folder was given, for messages.

    Returns
    -------
    list of Path
        The files written, in the order given.

    Raises
    ------
    InputError
        If the folder cannot be written, is being written by another command, or an output
        would replace an input of this run or (without ``overwrite``) a file the tool did not write.
    """
    from policy.errors import InputError

    folder = Path(folder)
    claimed = folder.resolve() in _HELD if folder.exists() else False
    check_output_folder(folder, option)
    folder.mkdir(parents=True, exist_ok=True)
    handle = None if claimed else _lock(folder, option)
    try:
        previous = recover(folder) or {}
        ours = previous.get("files", {}) if previous.get("state") == "complete" else {}
        read = {Path(p).resolve() for p in inputs if p is not None}
        foreign = []
        for name in files:
            target = folder / name
            if target.resolve() in read:
                raise InputError(f"{option} {str(folder)!r}: the output {name} would replace {name}, an input of this run; "
                                 "choose another output folder.")
            if target.is_dir():
                raise InputError(f"{option} {str(folder)!r}: {name} is a folder there, where this run writes a file; "
                                 "choose another output folder.")
            if target.exists() and not overwrite and (name not in ours or ours[name].get("sha256") != _sha256(target)):
                foreign.append(name)
        if foreign:
            shown = ", ".join(foreign[:8]) + (", ..." if len(foreign) > 8 else "")
            raise InputError(f"{option} {str(folder)!r} already holds {len(foreign)} file(s) this run would replace that "
                             f"the tool did not write or that were changed since: {shown}. Choose another output folder, "
                             "move them, or give --overwrite to replace them.")
        staging = folder / f"{_STAGING}{os.getpid()}-{uuid.uuid4().hex[:8]}"
        staging.mkdir()
        try:
            entries = {}
            for name, content in files.items():
                path = staging / name
                path.parent.mkdir(parents=True, exist_ok=True)
                _render(content, path, name, folder)
                entries[name] = {"sha256": _sha256(path), "kept": name in keep}
        except OSError as exc:
            shutil.rmtree(staging, ignore_errors=True)
            raise InputError(f"{option} {str(folder)!r}: could not write the outputs there ({exc.strerror or exc}); "
                             "nothing in the folder was changed.") from None
        except BaseException:
            shutil.rmtree(staging, ignore_errors=True)
            raise
        # files of the previous run that this one does not write: removed unless kept as data,
        # read by this run, or changed since the tool wrote them
        remove, carried = [], {}
        for name, entry in ours.items():
            if name in files:
                continue
            target = folder / name
            if not target.is_file() or _sha256(target) != entry.get("sha256"):
                continue
            if entry.get("kept") or target.resolve() in read:
                carried[name] = entry
            else:
                remove.append(name)
        manifest = {"tool": "policy", "command": command, "state": "replacing", "staging": staging.name,
                    "files": {**carried, **entries}, "remove": remove}
        _write_manifest(folder, manifest)
        _finish(folder, manifest)
        return [folder / name for name in files]
    finally:
        if handle is not None:
            os.close(handle)
