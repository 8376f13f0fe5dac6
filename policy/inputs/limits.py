"""Numbers a user gives, checked at the boundary: finite, in range, and small enough to compute.

Every number read from a scenario file or a command-line option passes through here, so a cost
of ``nan``, a tolerance of ``inf`` or a request that would need more memory than the machine
has is refused with the key or option named, before anything is computed or written.
"""

from __future__ import annotations

import math
import os
from typing import Any

from policy.errors import InputError

__all__ = ["LARGEST", "MAX_REPLICATES", "SIMULATED_CASE_BYTES", "simulated_cases", "number", "whole_number", "available_memory", "require_memory", "describe_bytes"]

#: largest size of any number a user gives (costs, caps, ranges): beyond it sums per 1,000
#: cases lose every digit a reader would look at; such a value is a typo, not a cost
LARGEST = 1e15
#: most bootstrap replicates (each is a full re-estimate; beyond this the intervals' Monte Carlo
#: error is far below anything a reader of them could use)
MAX_REPLICATES = 100_000
#: memory one simulated case takes while the demo simulator draws it and its text columns are
#: built (measured: about 1.5 kB at peak for 200,000 cases, pandas text columns; a lower bound)
SIMULATED_CASE_BYTES = 1000


def _shown(value: Any) -> str:
    return repr(value) if not isinstance(value, float) else format(value, "g") if not math.isfinite(value) else repr(value)


def number(value: Any, what: str, *, low: float | None = None, high: float | None = None,
           low_open: bool = False, high_open: bool = False, expected: str | None = None) -> float:
    """``value`` as a finite float within [low, high] (open ends where asked), or InputError.

    Parameters
    ----------
    value : number
    what : str
        The key or option named in the message, e.g. ``"--cost new_offense"`` or
        ``"demo.toml: key 'cost' in [[outcomes]] #2"``.
    low, high : float, optional
        Bounds; ``LARGEST`` bounds the size of every number in any case.
    expected : str, optional
        What was expected, in words, for the message (default: built from the bounds).
    """
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise InputError(f"{what} must be a number; got {value!r}.")
    x = float(value)
    if expected is None:
        parts = []
        if low is not None:
            parts.append(f"{'>' if low_open else '>='} {low:g}")
        if high is not None:
            parts.append(f"{'<' if high_open else '<='} {high:g}")
        expected = "a finite number" + (" " + " and ".join(parts) if parts else "")
    if not math.isfinite(x):
        raise InputError(f"{what} must be {expected}; got {_shown(x)}.")
    if abs(x) > LARGEST:
        raise InputError(f"{what} must be {expected}, at most {LARGEST:g} in size; got {x:g}.")
    if low is not None and (x < low or (low_open and x == low)):
        raise InputError(f"{what} must be {expected}; got {x:g}.")
    if high is not None and (x > high or (high_open and x == high)):
        raise InputError(f"{what} must be {expected}; got {x:g}.")
    return x


def whole_number(value: Any, what: str, *, low: int | None = None, high: int | None = None,
                 expected: str | None = None) -> int:
    """``value`` as an int within [low, high], or InputError naming ``what``."""
    if isinstance(value, bool) or not isinstance(value, int):
        raise InputError(f"{what} must be a whole number; got {value!r}.")
    if expected is None:
        parts = []
        if low is not None:
            parts.append(f">= {low:,}")
        if high is not None:
            parts.append(f"<= {high:,}")
        expected = "a whole number" + (" " + " and ".join(parts) if parts else "")
    if (low is not None and value < low) or (high is not None and value > high):
        raise InputError(f"{what} must be {expected}; got {value}.")
    return int(value)


def available_memory() -> int:
    """Bytes of memory this process may still use: the machine's available memory (Linux
    ``MemAvailable``; elsewhere physical memory), capped by an address-space limit if set."""
    avail = None
    try:
        with open("/proc/meminfo", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    avail = int(line.split()[1]) * 1024
                    break
    except OSError:
        pass
    if avail is None:
        try:
            avail = os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
        except (ValueError, OSError, AttributeError):  # pragma: no cover - no way to ask
            avail = 1 << 34
    try:
        import resource

        soft, _ = resource.getrlimit(resource.RLIMIT_AS)
        if soft != resource.RLIM_INFINITY:
            avail = min(avail, soft)
    except (ImportError, OSError, ValueError):  # pragma: no cover - not on this platform
        pass
    return int(avail)


def describe_bytes(n: float) -> str:
    """``n`` bytes in words: 1.5 GB, 300 MB, ..."""
    for unit, size in (("TB", 1e12), ("GB", 1e9), ("MB", 1e6), ("kB", 1e3)):
        if n >= size:
            return f"{n / size:,.1f} {unit}"
    return f"{n:,.0f} bytes"


def require_memory(needed: float, what: str, advice: str = "") -> None:
    """Refuse a request that needs more memory than this machine has available.

    ``needed`` is an estimate in bytes (a lower bound is enough: what is refused would fail anyway).
    """
    have = available_memory()
    if needed > have:
        raise InputError(f"{what} would need about {describe_bytes(needed)} of memory; this machine has "
                         f"{describe_bytes(have)} available.{' ' + advice if advice else ''}")


def simulated_cases(n: Any, what: str) -> int:
    """A number of cases to simulate: a whole number >= 1 that fits in this machine's memory."""
    n = whole_number(n, what, low=1, expected="a positive whole number of cases")
    require_memory(float(n) * SIMULATED_CASE_BYTES, f"{what} = {n:,}",
                   "Simulate fewer cases (a few million are plenty for a demonstration).")
    return n
