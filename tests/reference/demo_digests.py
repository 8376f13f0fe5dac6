"""Digests of the demo's outputs, to show a change of code leaves them byte-identical.

Run as a script to (re)write ``demo_digests.json`` after a change that is meant to change
outputs:  python tests/reference/demo_digests.py
The test ``tests/test_outputs_stable.py`` runs the same commands and compares. Text outputs are
hashed with the run's own folder replaced by ``<run>``, so the digests do not depend on where
the commands ran, and with every decimal number rounded to 9 significant digits (numbers below
1e-12 in size written as 0), so the last bits that differ between releases of numpy, scipy or
the BLAS on a fresh machine do not count as a change; a change in the ninth digit still does.
"""

from __future__ import annotations

import hashlib
import json
import re
import subprocess
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent.parent

#: (output folder, arguments of `policy`), run in order in one folder; {root} is the repository
COMMANDS = (
    ("demo", ["demo", "--out", "demo"]),
    ("solvec", ["solve", "{root}/scenarios/demo_constrained.toml", "--out", "solvec"]),
    ("compare", ["compare", "demo/scenario.toml", "--out", "compare", "--replicates", "20"]),
    ("sweep", ["sweep", "demo/scenario.toml", "--out", "sweep", "--ratio", "new_offense", "--replicates", "10"]),
    ("map", ["sweep", "demo/scenario.toml", "--out", "map", "--ratio", "new_offense", "--ratio", "missed_court"]),
)
TEXT = {".csv", ".json", ".toml", ".svg", ".html"}
#: a decimal number with a fraction or an exponent (integers, hashes and dates are left alone)
NUMBER = re.compile(rb"(?<![\w.])-?\d+(?:\.\d+(?:[eE][-+]?\d+)?|[eE][-+]?\d+)(?![\w.])")


def _rounded(match: re.Match) -> bytes:
    value = float(match.group())
    return b"0" if abs(value) < 1e-12 else f"{value:.9g}".encode()


def digest(path: Path, run: Path) -> str:
    data = path.read_bytes()
    if path.suffix in TEXT:
        data = data.replace(str(run).encode(), b"<run>").replace(str(ROOT).encode(), b"<root>")
        data = NUMBER.sub(_rounded, data)
    return hashlib.sha256(data).hexdigest()


def run_all(run: Path) -> dict[str, str]:
    for _, args in COMMANDS:
        cmd = [sys.executable, "-m", "policy"] + [a.format(root=ROOT) for a in args]
        subprocess.run(cmd, cwd=run, check=True, capture_output=True, timeout=600)
    return {f"{folder}/{p.name}": digest(p, run)
            for folder, _ in COMMANDS for p in sorted((run / folder).iterdir()) if not p.name.startswith(".")}


if __name__ == "__main__":
    with tempfile.TemporaryDirectory() as tmp:
        digests = run_all(Path(tmp).resolve())
    (HERE / "demo_digests.json").write_text(json.dumps(digests, indent=1, sort_keys=True) + "\n", encoding="utf-8")
    print(f"wrote {len(digests)} digests")
