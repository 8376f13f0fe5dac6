"""The output folder: a manifest of what the tool wrote, no output over an input or over a file
the tool did not write, stale files of an earlier run removed, one writer at a time, and a
command killed at any point leaves the old complete set or (after recovery) the new one."""

from __future__ import annotations

import hashlib
import json
import os
import random
import signal
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest

from policy.errors import InputError
from policy.outputs import (MANIFEST, claim_output_folder, read_manifest, recover, release_output_folders,
                            spreadsheet_safe, write_outputs)

from .conftest import ROOT, run_cli


def _visible(folder: Path) -> dict:
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in sorted(folder.iterdir())
            if p.is_file() and not p.name.startswith(".")}


def test_a_later_run_removes_files_of_an_earlier_one_it_does_not_write(tmp_path):
    write_outputs(tmp_path, {"rule.csv": "a\n1\n", "constrained_rule.csv": "a\n2\n"})
    write_outputs(tmp_path, {"rule.csv": "a\n3\n"})
    assert sorted(_visible(tmp_path)) == ["rule.csv"]
    manifest = read_manifest(tmp_path)
    assert manifest["state"] == "complete" and sorted(manifest["files"]) == ["rule.csv"]


def test_files_the_tool_did_not_write_are_refused_unless_overwrite(tmp_path):
    (tmp_path / "rule.csv").write_text("the user's own\n")
    with pytest.raises(InputError, match="--overwrite.*|did not write"):
        write_outputs(tmp_path, {"rule.csv": "a\n1\n"})
    assert (tmp_path / "rule.csv").read_text() == "the user's own\n"
    write_outputs(tmp_path, {"rule.csv": "a\n1\n"}, overwrite=True)
    assert (tmp_path / "rule.csv").read_text() == "a\n1\n"


def test_an_output_changed_by_the_user_is_neither_replaced_nor_removed(tmp_path):
    write_outputs(tmp_path, {"rule.csv": "a\n1\n", "extra.csv": "b\n1\n"})
    (tmp_path / "rule.csv").write_text("edited by hand\n")
    (tmp_path / "extra.csv").write_text("edited too\n")
    with pytest.raises(InputError, match="changed since"):
        write_outputs(tmp_path, {"rule.csv": "a\n2\n"})
    (tmp_path / "rule.csv").unlink()
    write_outputs(tmp_path, {"rule.csv": "a\n2\n"})
    assert (tmp_path / "extra.csv").read_text() == "edited too\n"  # not the tool's any more: kept


def test_an_output_never_replaces_an_input_even_with_overwrite(tmp_path):
    write_outputs(tmp_path, {"cells.csv": "a\n1\n"})
    with pytest.raises(InputError, match="an input of this run"):
        write_outputs(tmp_path, {"cells.csv": "a\n2\n"}, inputs=[tmp_path / "cells.csv"], overwrite=True)
    assert (tmp_path / "cells.csv").read_text() == "a\n1\n"


def test_one_writer_at_a_time(tmp_path):
    claim_output_folder(tmp_path)
    try:
        code = ("import sys; from policy.outputs import write_outputs; from policy.errors import InputError\n"
                "try:\n    write_outputs(sys.argv[1], {'a.csv': 'x\\n'})\nexcept InputError as e:\n    print(e); sys.exit(2)\n")
        done = subprocess.run([sys.executable, "-c", code, str(tmp_path)], capture_output=True, text=True,
                              env={**os.environ, "PYTHONPATH": str(ROOT)}, timeout=120)
        assert done.returncode == 2 and "another command is writing" in done.stdout
    finally:
        release_output_folders()
    write_outputs(tmp_path, {"a.csv": "x\n"})  # released: writes


def test_stale_staging_folders_and_partial_files_are_removed(tmp_path):
    (tmp_path / ".policy-staging-1-dead").mkdir()
    (tmp_path / ".policy-staging-1-dead" / "rule.csv").write_text("half")
    (tmp_path / ".rule.csv.abc.partial").write_text("half")
    write_outputs(tmp_path, {"rule.csv": "a\n1\n"})
    assert sorted(p.name for p in tmp_path.iterdir()) == [MANIFEST, "rule.csv"]


def test_csv_cells_a_spreadsheet_would_evaluate_are_neutralized(tmp_path):
    # OWASP Foundation, "CSV Injection": prefix cells starting with = + - @ (common practice)
    frame = pd.DataFrame({"name": ["=HYPERLINK(\"x\")", "+1+1", "@SUM(A1)", "-5", "plain", "-x"], "value": [-1.5, 2, 3, -4, 5, 6]})
    write_outputs(tmp_path, {"t.csv": frame})
    back = pd.read_csv(tmp_path / "t.csv", dtype={"name": str})
    assert back["name"].tolist() == ["'=HYPERLINK(\"x\")", "'+1+1", "'@SUM(A1)", "-5", "plain", "'-x"]
    assert back["value"].tolist() == [-1.5, 2, 3, -4, 5, 6]  # numbers stay numbers
    assert spreadsheet_safe(frame[["value"]]).equals(frame[["value"]])


def test_json_outputs_record_the_scenario_relative_to_the_output_folder(tmp_path, capsys):
    code, _, err = run_cli(["demo", "--out", tmp_path / "demo", "--cases", "600"], capsys)
    assert code == 0, err
    assert json.loads((tmp_path / "demo" / "evaluation.json").read_text())["scenario_file"] == "scenario.toml"
    code, _, err = run_cli(["solve", tmp_path / "demo" / "scenario.toml", "--out", tmp_path / "solved"], capsys)
    assert code == 0, err
    assert json.loads((tmp_path / "solved" / "evaluation.json").read_text())["scenario_file"] == "../demo/scenario.toml"
    # a second demo into its own folder replaces its own files without --overwrite
    code, _, err = run_cli(["demo", "--out", tmp_path / "demo", "--cases", "600"], capsys)
    assert code == 0, err


def test_control_characters_in_labels_are_shown_visibly(tmp_path, capsys):
    code, _, err = run_cli(["demo", "--out", tmp_path / "demo", "--cases", "600"], capsys)
    assert code == 0, err
    scenario = tmp_path / "demo" / "scenario.toml"
    scenario.write_text(scenario.read_text().replace('title = "Quarrow', 'title = "\\u001b[2J\\u001b]0;owned\\u0007Quarrow'))
    code, out, err = run_cli(["solve", scenario, "--out", tmp_path / "s"], capsys)
    assert code == 0, err
    assert "\x1b[2J" not in out and "\x07" not in out and "\\x1b[2J" in out


def test_blank_case_ids_mean_no_id_and_the_cases_count(tmp_path, capsys):
    code, _, err = run_cli(["demo", "--out", tmp_path / "demo", "--cases", "600"], capsys)
    assert code == 0, err
    cases = pd.read_csv(tmp_path / "demo" / "cases.csv")
    cases.loc[[3, 7], "case_id"] = None
    cases.to_csv(tmp_path / "demo" / "cases.csv", index=False)
    code, out, err = run_cli(["solve", tmp_path / "demo" / "scenario.toml", "--out", tmp_path / "s"], capsys)
    assert code == 0, err
    assert json.loads((tmp_path / "s" / "evaluation.json").read_text())["overview"]["cases"] == 600


def _run_killed(argv, cwd, delay):
    proc = subprocess.Popen([sys.executable, "-m", "policy"] + argv, cwd=cwd, stdout=subprocess.DEVNULL,
                            stderr=subprocess.DEVNULL, env={**os.environ, "PYTHONPATH": str(ROOT)})
    try:
        proc.wait(timeout=delay)
    except subprocess.TimeoutExpired:
        proc.send_signal(signal.SIGKILL)
        proc.wait(timeout=60)
    return proc.returncode


def _check_complete(folder: Path, sets: list[dict]) -> None:
    recover(folder)
    manifest = read_manifest(folder)
    visible = _visible(folder)
    assert manifest["state"] == "complete"
    assert {n: e["sha256"] for n, e in manifest["files"].items()} == {n: visible[n] for n in manifest["files"]}
    outputs = {n: h for n, h in visible.items() if n not in ("cases.csv", "scenario.toml")}
    assert any(outputs == {n: h for n, h in s.items() if n not in ("cases.csv", "scenario.toml")} for s in sets), \
        "the folder mixes files of two runs"
    assert not [p for p in folder.iterdir() if p.name.startswith(".policy-staging-") or p.name.endswith(".partial")]


def test_a_command_killed_at_random_points_leaves_one_complete_set(tmp_path, capsys):
    """kill -9 a real `solve` at random moments (bounded tries); the folder holds the old
    complete set, or the new one once the next command (here: recover) finishes the swap."""
    code, _, err = run_cli(["demo", "--out", tmp_path / "d", "--cases", "600"], capsys)
    assert code == 0, err
    scenario = tmp_path / "d" / "scenario.toml"
    out = tmp_path / "out"
    sets = []
    for cost in ("5000", "9000"):
        assert run_cli(["solve", scenario, "--out", out, "--cost", f"new_offense={cost}"], capsys)[0] == 0
        sets.append(_visible(out))
    assert sets[0] != sets[1]
    assert run_cli(["solve", scenario, "--out", out, "--cost", "new_offense=5000"], capsys)[0] == 0
    rng = random.Random(20261202)
    for attempt in range(6):
        cost = ("5000", "9000")[attempt % 2]
        # a subprocess takes longer than the in-process run (imports): spread kills over it
        _run_killed(["solve", str(scenario), "--out", str(out), "--cost", f"new_offense={cost}"], tmp_path,
                    rng.uniform(0.5, 6.0))
        _check_complete(out, sets)


def test_a_writer_killed_while_renaming_is_finished_by_recover(tmp_path):
    """Writing 400 files, killed at random moments of the write itself (bounded tries): before
    recovery the manifest says 'replacing' or the set it lists is whole; after recovery the
    folder holds one run's complete set."""
    code = ("import sys, time\nfrom policy.outputs import write_outputs\n"
            "files = {f'f{i:04d}.csv': ('v,' + sys.argv[2] + '\\n') * 2000 for i in range(400)}\n"
            "print('go', flush=True)\nstart = time.perf_counter()\nwrite_outputs(sys.argv[1], files)\n"
            "print(time.perf_counter() - start, flush=True)\n")
    folder = tmp_path / "many"
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    first = subprocess.run([sys.executable, "-c", code, str(folder), "old"], check=True, env=env, timeout=300,
                           capture_output=True, text=True)
    duration = float(first.stdout.split()[-1])
    rng = random.Random(7)
    for attempt in range(8):
        proc = subprocess.Popen([sys.executable, "-c", code, str(folder), f"new{attempt}"], env=env,
                                stdout=subprocess.PIPE, text=True)
        assert proc.stdout.readline().strip() == "go"
        try:
            proc.wait(timeout=rng.uniform(0, 1.2 * duration))
        except subprocess.TimeoutExpired:
            proc.send_signal(signal.SIGKILL)
        proc.wait(timeout=60)
        proc.stdout.close()
        manifest = read_manifest(folder)
        if manifest["state"] == "complete":
            assert _visible(folder) == {n: e["sha256"] for n, e in manifest["files"].items()}
        recover(folder)
        manifest = read_manifest(folder)
        assert manifest["state"] == "complete"
        assert _visible(folder) == {n: e["sha256"] for n, e in manifest["files"].items()}
        contents = {(folder / n).read_text() for n in manifest["files"]}
        assert len(contents) == 1, "the folder mixes files of two runs"
        assert not list(folder.glob(".policy-staging-*"))


def test_solve_without_constraints_after_one_with_removes_the_constrained_files(tmp_path, capsys):
    code, _, err = run_cli(["demo", "--out", tmp_path / "w", "--cases", "600"], capsys)
    assert code == 0, err
    scenario = tmp_path / "w" / "scenario.toml"
    assert run_cli(["solve", scenario, "--out", tmp_path / "w", "--max-share", "bond=0.1"], capsys)[0] == 0
    assert (tmp_path / "w" / "constrained_rule.csv").is_file()
    assert run_cli(["solve", scenario, "--out", tmp_path / "w"], capsys)[0] == 0
    assert not list((tmp_path / "w").glob("constrained_*"))
    assert (tmp_path / "w" / "cases.csv").is_file() and scenario.is_file()  # the demo's data stay


def test_a_switch_stopped_halfway_is_finished_by_the_next_writer(tmp_path, monkeypatch):
    """A stop in the middle of the renames (as kill -9 there would leave it): the manifest says
    'replacing', and the next command writing into the folder first completes the new set."""
    import policy.outputs as outputs

    write_outputs(tmp_path, {f"f{i}.csv": "old\n" for i in range(6)} | {"gone.csv": "old\n"})
    real_replace, calls = os.replace, []

    def stop_after_three(src, dst):
        if str(dst).endswith(".csv"):
            calls.append(dst)
            if len(calls) > 3:
                raise KeyboardInterrupt  # stands for the kill: nothing after it runs
        return real_replace(src, dst)

    monkeypatch.setattr(outputs.os, "replace", stop_after_three)
    with pytest.raises(KeyboardInterrupt):
        write_outputs(tmp_path, {f"f{i}.csv": "new\n" for i in range(6)})
    monkeypatch.setattr(outputs.os, "replace", real_replace)
    assert read_manifest(tmp_path)["state"] == "replacing"
    assert {(tmp_path / f"f{i}.csv").read_text() for i in range(6)} == {"old\n", "new\n"}  # mixed until finished
    recover(tmp_path)  # what the next command writing here does first
    manifest = read_manifest(tmp_path)
    assert manifest["state"] == "complete"
    assert {(tmp_path / f"f{i}.csv").read_text() for i in range(6)} == {"new\n"}
    assert not (tmp_path / "gone.csv").exists()
    assert not list(tmp_path.glob(".policy-staging-*"))
