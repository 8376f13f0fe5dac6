"""Output files are written all at once or not at all, with ordinary permissions."""

from __future__ import annotations

import os
import stat

import pandas as pd
import pytest

from policy.outputs import atomic_path, write_outputs


def test_all_or_nothing(tmp_path):
    def broken(path):
        raise RuntimeError("figure failed")

    with pytest.raises(RuntimeError):
        write_outputs(tmp_path, {"a.csv": pd.DataFrame({"x": [1]}), "b.json": {"y": 2}, "c.png": broken})
    assert list(tmp_path.iterdir()) == []


def test_files_get_the_usual_permissions(tmp_path):
    mask = os.umask(0o022)
    try:
        paths = write_outputs(tmp_path, {"a.csv": pd.DataFrame({"x": [1.5]}), "b.json": {"y": float("nan")}})
        with atomic_path(tmp_path / "c.txt") as tmp:
            tmp.write_text("hello")
    finally:
        os.umask(mask)
    for p in paths + [tmp_path / "c.txt"]:
        assert stat.S_IMODE(p.stat().st_mode) == 0o644
    assert (tmp_path / "b.json").read_text().strip().endswith("}") and "null" in (tmp_path / "b.json").read_text()
    assert not list(tmp_path.glob("*.partial")) and not list(tmp_path.glob(".*.partial"))
