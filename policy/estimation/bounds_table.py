"""One table of every outcome probability under each assumption: the point estimate, the
sensitivity interval at each Gamma, and the monotone-response bounds (what ``estimate`` writes
as ``risk_bounds.csv``).

The intervals are those of :mod:`policy.estimation.bounds`; this module only lays them side by
side, one row per cell x outcome kind x decision level, so that a reader sees at once where a
figure stops being pinned down as the assumption is relaxed.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np
import pandas as pd

from policy.estimation.bounds import robust_assumptions
from policy.estimation.strata import RiskLevels
from policy.inputs.cells import CellTable

__all__ = ["SENSITIVITY_GAMMAS", "bounds_table"]

#: Gamma values shown when none are given: from slight confounding to odds that differ five-fold,
#: beyond which the sensitivity intervals are close to the monotone-response bounds shown after them
SENSITIVITY_GAMMAS = (1.1, 1.25, 1.5, 2.0, 3.0, 5.0)


def bounds_table(risk_levels: RiskLevels, cells: CellTable, gammas: Sequence[float] = SENSITIVITY_GAMMAS,
                 missing: str = "worst_case") -> pd.DataFrame:
    """Point estimate, sensitivity intervals and monotone bounds of every p_jd(x), side by side.

    Parameters
    ----------
    risk_levels : RiskLevels
        The point estimates.
    cells : CellTable
        The counts behind them (decision shares and the bounds' counts).
    gammas : sequence of float
        Sensitivity values (> 1; 1 is the point estimate).
    missing : {'worst_case', 'ignore'}
        Missing outcome records in the monotone bounds.

    Returns
    -------
    DataFrame
        One row per cell x outcome kind x decision level: the cell columns, ``cases``,
        ``outcome``, ``level``, ``point``, then ``gamma_<G>_lower`` / ``gamma_<G>_upper`` for each
        Gamma ascending, then ``bounds_lower`` / ``bounds_upper``.
    """
    intervals = robust_assumptions(risk_levels, cells, gammas, True, missing)
    out = intervals[0].to_frame(risk_levels).drop(columns=["assumption", "gamma", "lower", "upper"])
    for b in intervals[1:]:
        name = "bounds" if not np.isfinite(b.gamma) else f"gamma_{b.gamma:g}"
        out[f"{name}_lower"] = b.lower.reshape(-1)
        out[f"{name}_upper"] = b.upper.reshape(-1)
    return out
