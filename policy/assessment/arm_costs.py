"""The comparison of the two arms that needs no model: the realized cost of what courts did.

With the aid shown at random, the realized cost per case of arm z,

    (1 / n_z) sum_{i in z} [ c_dec(D_i, x_i) + sum_j c_j Y_ij ],

is an unbiased estimate of the expected cost of the courts' practice in arm z, by randomization
alone (method notes, section 10): it uses the decisions and outcomes observed, not the risk
levels, so it needs neither unconfoundedness nor monotonicity. The difference between the arms
is the effect on cost of showing the aid (intention to treat).

Missing outcome records need a stated treatment. The figure counts a missing record at the
outcome rate of its cell, arm and level (missing at random there; a cell-level with no record
takes its arm and level's rate over all cells), and the range beside it counts every missing
record as no event and as an event (no assumption about them).

Intervals come from the bootstrap over cases of :mod:`policy.assessment.uncertainty` (cases keep
their own outcomes; Poisson resampling by default, so each arm's size varies as it would under a
new randomization).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from policy.assessment.uncertainty import BootstrapResult, ResampledCounts, TaskRunner, bootstrap
from policy.decision.costs import Costs
from policy.errors import InputError
from policy.inputs.cells import CellTable

__all__ = ["ArmCosts", "RealizedCost", "realized_arm_costs"]

ASSUMES = ("the aid was shown or withheld at random (nothing else: no unconfoundedness, no monotonicity)",
           "missing outcome records fare like the recorded ones of their cell, arm and level (the range "
           "beside the figure drops this)",
           "the cost weights of the scenario (value judgments)")


class RealizedCost:
    """Realized cost per case of each arm, as a function of resampled counts (picklable).

    Parameters
    ----------
    decision : ndarray of shape (n_cells, L)
        Cost of each decision level per case of each cell.
    outcome : ndarray of shape (J,)
        Cost of one outcome of each kind.
    """

    def __init__(self, decision: np.ndarray, outcome: np.ndarray):
        self.decision = np.asarray(decision, dtype=np.float64)
        self.outcome = np.asarray(outcome, dtype=np.float64)

    def __call__(self, batch: ResampledCounts) -> dict[str, np.ndarray]:
        cases = batch.cases.astype(np.float64)  # (b, n, A, L)
        obs = batch.observed.astype(np.float64)  # (b, n, A, J, L)
        ev = batch.events.astype(np.float64)
        n_arm = cases.sum(axis=(1, 3))  # (b, A)
        dec = np.einsum("bxad,xd->ba", cases, self.decision)
        with np.errstate(invalid="ignore", divide="ignore"):
            fallback = ev.sum(axis=1) / obs.sum(axis=1)  # (b, A, J, L) over all cells
            rate = np.where(obs > 0, ev / np.where(obs > 0, obs, 1.0), np.nan_to_num(fallback)[:, None])
        count = cases[:, :, :, None, :]
        mar = np.einsum("bxajd,j->ba", rate * count, self.outcome)
        low = np.einsum("bxajd,j->ba", ev, self.outcome)
        high = np.einsum("bxajd,j->ba", ev + (count - obs), self.outcome)
        with np.errstate(invalid="ignore", divide="ignore"):
            cost = (dec + mar) / n_arm
            lower = (dec + low) / n_arm
            upper = (dec + high) / n_arm
        return {"cost": cost, "cost_lower_missing": lower, "cost_upper_missing": upper,
                "difference": cost[:, 1] - cost[:, 0],
                "difference_lower_missing": lower[:, 1] - upper[:, 0],
                "difference_upper_missing": upper[:, 1] - lower[:, 0],
                "cases": n_arm}


@dataclass(frozen=True)
class ArmCosts:
    """Realized cost per 1,000 cases of each arm and their difference, with intervals.

    Attributes
    ----------
    result : BootstrapResult
        Point values and replicates (per case; the tables scale them to 1,000 cases).
    arm_labels : tuple of str
        Not shown, shown.
    unit : str
    """

    result: BootstrapResult
    arm_labels: tuple[str, str]
    unit: str

    def to_frame(self) -> pd.DataFrame:
        """Rows: each arm, then the difference (shown minus not shown); per 1,000 cases, with the
        bootstrap interval and the range over the treatments of missing records."""
        r = self.result
        c, (c_lo, c_hi) = r.point["cost"], r.interval("cost")
        d, (d_lo, d_hi) = r.point["difference"], r.interval("difference")
        rows = [(self.arm_labels[a], float(r.point["cases"][a]), c[a], c_lo[a], c_hi[a],
                 r.point["cost_lower_missing"][a], r.point["cost_upper_missing"][a]) for a in range(2)]
        rows.append(("difference (shown - not shown)", float(r.point["cases"].sum()), d, d_lo, d_hi,
                     r.point["difference_lower_missing"], r.point["difference_upper_missing"]))
        frame = pd.DataFrame(rows, columns=["figure", "cases", "realized_cost_per_1000_cases", "lower", "upper",
                                            "if_missing_none", "if_missing_all"])
        for col in ("realized_cost_per_1000_cases", "lower", "upper", "if_missing_none", "if_missing_all"):
            frame[col] = 1000.0 * frame[col].astype(float)
        frame["unit"] = self.unit
        frame["interval"] = r.interval_label
        frame["replicates"] = r.n_replicates
        frame["seed"] = r.seed
        frame["assumes"] = "randomization of the arm only"
        return frame

    def lines(self) -> list[str]:
        """Plain words: each arm's realized cost and the difference, and what they assume."""
        f = self.to_frame()
        out = ["Assumption-free comparison of the arms (realized cost of observed decisions and outcomes; "
               "assumes only that the aid was shown at random):"]
        for _, row in f.iterrows():
            if not np.isfinite(row["realized_cost_per_1000_cases"]):
                out.append(f"  {row['figure']}: not estimated (an arm with no cases)")
                continue
            interval = (f" ({row['lower']:,.0f} to {row['upper']:,.0f})" if np.isfinite(row["lower"]) else "")
            out.append(f"  {row['figure']}: {row['realized_cost_per_1000_cases']:,.0f} {self.unit} per 1,000 cases"
                       f"{interval}; {row['if_missing_none']:,.0f} to {row['if_missing_all']:,.0f} whatever the "
                       "missing outcome records were")
        return out

    def summary(self) -> dict[str, Any]:
        f = self.to_frame()
        return {"figures": f.drop(columns=["unit", "interval", "replicates", "seed", "assumes"]).to_dict(orient="records"),
                "unit": self.unit, "interval": self.result.interval_label, "assumes": list(ASSUMES)}


def realized_arm_costs(cells: CellTable, costs: Costs, replicates: int = 1000, seed: int | None = None,
                       method: str = "poisson", level: float = 0.95, runner: TaskRunner | None = None,
                       workers: int | None = None, arm_labels: tuple[str, str] = ("aid not shown", "aid shown")) -> ArmCosts:
    """Realized cost per 1,000 cases of each arm and their difference, with bootstrap intervals.

    Parameters
    ----------
    cells : CellTable
        With a randomized arm.
    costs : Costs
        On the same cells (``costs.decision`` has one row per cell).
    replicates, seed, method, level, runner, workers
        As :func:`policy.assessment.uncertainty.bootstrap` (cases keep their own outcomes).
    """
    if not cells.has_arm or len(cells.arms) != 2:
        raise InputError(f"the realized cost of each arm needs a randomized arm; {cells.source} has none.")
    if costs.decision.shape[0] != cells.n_cells:
        raise InputError(f"costs are for {costs.decision.shape[0]} cells; the cell table has {cells.n_cells}.")
    result = bootstrap(cells, RealizedCost(costs.decision, costs.outcome), replicates, seed, method, level,
                       runner=runner, workers=workers, description="compare: realized cost of each arm")
    return ArmCosts(result, arm_labels, costs.unit)
