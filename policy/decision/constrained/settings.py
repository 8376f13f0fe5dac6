"""How the linear program is solved: the scenario's ``[linear_program]`` section and its tolerances."""

from __future__ import annotations

import functools

from dataclasses import dataclass
from typing import Any


from policy.errors import InputError
from policy.inputs.scenario import Key, read_section, register_section


#: largest violation of any row accepted in a returned point (probability / share units)
FEASIBILITY_TOLERANCE = 1e-6
#: a row whose slack is at most this holds with equality ("binding")
BINDING_TOLERANCE = 1e-7
#: bound value that makes any row inactive (every row's value lies in [-1, 1])
INACTIVE_BOUND = 2.0

# ----------------------------------------------------------------------------------------------
# Settings: the scenario's [linear_program] section
# ----------------------------------------------------------------------------------------------
LP_KEYS: tuple[Key, ...] = (
    Key("solver", (str,), False, "HIGHS", "LP solver: HIGHS (default) or another LP solver cvxpy offers, e.g. CLARABEL, SCIPY"),
    Key("direct", (bool,), False, True, "HIGHS only: call HiGHS directly with warm starts (true) or through cvxpy (false)"),
    Key("method", (str,), False, "auto", "HIGHS only: first-solve method, 'auto' (dual simplex from the unconstrained optimum's basis), 'ipm' (interior point with crossover), 'simplex' (cold) or 'choose'"),
    Key("time_limit", (float,), doc="seconds a single solve may take; a solve that stops at it is an error"),
    Key("lenient_ties", (bool,), False, True, "among several optimal rules, return the most lenient (HIGHS direct only)"),
)
HIGHS_METHODS = ("auto", "ipm", "simplex", "choose")
#: solvers that return a vertex (HiGHS's simplex, or its interior point with crossover; SCIPY runs HiGHS)
VERTEX_SOLVERS = ("HIGHS", "SCIPY")
#: where the LP cannot start warm (method 'auto' through cvxpy), the first solve uses the
#: interior-point method (with crossover) from this many decision probabilities (columns) on,
#: the dual simplex below: the faster of the two cold on the benchmark LP
#: (benchmarks/bench_constrained.py; docs/performance.md)
IPM_FROM_COLUMNS = 20_000


@dataclass(frozen=True)
class LPSettings:
    """How the linear program is solved (see ``[linear_program]`` in docs/scenario.md)."""

    solver: str = "HIGHS"
    direct: bool = True
    method: str = "auto"
    time_limit: float | None = None
    lenient_ties: bool = True

    @property
    def uses_direct(self) -> bool:
        return self.solver == "HIGHS" and self.direct

    def first_method(self, n_cols: int) -> str:
        """The HiGHS method of a cold first solve of an LP with ``n_cols`` columns (HiGHS called
        directly with method ``auto`` starts warm instead, from the unconstrained optimum's basis)."""
        if self.method != "auto":
            return self.method
        return "ipm" if n_cols >= IPM_FROM_COLUMNS else "simplex"

    @property
    def _first_label(self) -> str:
        return "dual simplex from the unconstrained optimum's basis" if self.method == "auto" else self.method

    @property
    def label(self) -> str:
        return self.label_for(cumulative=False)

    def label_for(self, cumulative: bool) -> str:
        """The solver's description; ``cumulative``: the LP was loaded in cumulative variables."""
        if self.uses_direct:
            first = "dual simplex in cumulative variables P(D >= t), from HiGHS's own start" if cumulative else self._first_label
            return f"HiGHS {highs_version()} via highspy (first solve: {first}; re-solves: warm dual simplex)"
        return f"{self.solver} via cvxpy"


def lp_settings_from_table(raw: Any, file: str = "<scenario>", where: str = "[linear_program]") -> LPSettings:
    """Validate a ``[linear_program]`` table."""
    s = read_section(raw, LP_KEYS, where, file)
    solver = s["solver"].upper()
    if solver != "HIGHS" or not s["direct"]:
        import cvxpy as cp  # only a solver called through cvxpy needs it (a second of start-up)

        installed = cp.installed_solvers()
    else:
        installed = ["HIGHS"]
    if solver not in installed:
        raise InputError(f"{file}: key 'solver' in {where} is {s['solver']!r}; expected one of the installed solvers: "
                         f"{', '.join(installed)}.")
    if s["method"] not in HIGHS_METHODS:
        raise InputError(f"{file}: key 'method' in {where} is {s['method']!r}; expected one of: {', '.join(HIGHS_METHODS)}.")
    if s["time_limit"] is not None and s["time_limit"] <= 0:
        raise InputError(f"{file}: key 'time_limit' in {where} must be > 0 seconds; got {s['time_limit']!r}.")
    return LPSettings(solver, s["direct"], s["method"], s["time_limit"], s["lenient_ties"])


def _parse_lp_section(raw: Any, scenario) -> LPSettings:
    return LPSettings() if raw is None else lp_settings_from_table(raw, scenario.file)


register_section("[linear_program]", LP_KEYS, _parse_lp_section)


# ----------------------------------------------------------------------------------------------
# HiGHS called directly
# ----------------------------------------------------------------------------------------------


@functools.lru_cache(maxsize=1)
def highs_version() -> str:
    try:
        from importlib.metadata import version

        return version("highspy")
    except Exception:  # pragma: no cover - metadata missing
        return "?"
