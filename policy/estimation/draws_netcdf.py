"""Risk-level draws from a netCDF file in the layout of the common Python Bayesian tooling
(an ``InferenceData`` file: a ``posterior`` group whose variables have the dimensions ``chain``
and ``draw`` first), read with xarray (the optional extra ``netcdf``: xarray and h5netcdf).

Layout (docs/scenario.md): in the group ``posterior`` (or the file's root when it has no such
group), a variable ``risk_level_probability`` with dimensions ``(chain, draw, cell, outcome, risk_level)``:
the probability of each risk level 0 .. K+1 (K + 2 = the number of decision levels + 1) of each cell and outcome kind in every draw. Along
``cell``, one coordinate per cell column of the scenario, ``cases`` (the cell's weight), each cost
column and, optionally, the rule columns of :mod:`policy.decision.table_rules`; along ``outcome``,
the outcome keys. Every chain x draw is one draw, labelled ``<chain>.<draw>``; the point estimate
is the mean over draws. Draws are read and validated a block of draws at a time, exactly as a long
table of draws (:func:`policy.estimation.draws.read_draws`).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from policy.errors import InputError
from policy.estimation.draws import RiskLevelDraws, _Filler, _template
from policy.inputs.scenario import Scenario

__all__ = ["NETCDF_SUFFIXES", "VARIABLE", "netcdf_cell_frame", "netcdf_cells", "read_netcdf_draws"]

NETCDF_SUFFIXES = (".nc", ".nc4", ".netcdf")
VARIABLE = "risk_level_probability"
GROUP = "posterior"
DIMS = ("chain", "draw", "cell", "outcome", "risk_level")
#: draws read and validated at once
CHUNK_DRAWS = 25


def _open(path: Path):
    try:
        import xarray as xr
    except ImportError:
        raise InputError(f"{path.name}: reading draws from netCDF needs xarray and h5netcdf; install the extra: "
                         "pip install 'policy[netcdf]'.") from None
    try:
        try:
            return xr.open_dataset(path, group=GROUP)
        except OSError as exc:
            if "group" not in str(exc).lower():
                raise
            return xr.open_dataset(path)
    except ImportError as exc:
        raise InputError(f"{path.name}: no netCDF engine could open it ({exc}); install the extra: "
                         "pip install 'policy[netcdf]'.") from None
    except (OSError, ValueError) as exc:
        raise InputError(f"{path.name}: not a readable netCDF file ({exc}).") from None


def _variable(ds, path: Path, scenario: Scenario):
    if VARIABLE not in ds.data_vars:
        raise InputError(f"{path.name}: no variable {VARIABLE!r} (in the {GROUP!r} group or at the root); found: "
                         f"{', '.join(map(str, ds.data_vars)) or 'none'}.")
    var = ds[VARIABLE]
    if tuple(var.dims) != DIMS:
        raise InputError(f"{path.name}: variable {VARIABLE!r} must have the dimensions {DIMS}; it has {tuple(var.dims)}.")
    L = len(scenario.levels)
    if var.sizes["risk_level"] != L + 1:
        raise InputError(f"{path.name}: dimension 'risk_level' must have {L + 1} entries (risk levels 0..{L} of "
                         f"{L} decision levels); it has {var.sizes['risk_level']}.")
    return var


def netcdf_cells(ds, path: Path, scenario: Scenario, extra=()) -> pd.DataFrame:
    """The coordinates along ``cell``: the cell columns, ``cases``, the cost columns and the
    ``extra`` ones present, one row per cell."""
    need = list(scenario.cell_columns) + ["cases"] + list(scenario.cost_columns)
    coords = {name for name, c in ds.coords.items() if c.dims == ("cell",)}
    missing = [c for c in need if c not in coords]
    if missing:
        raise InputError(f"{path.name}: coordinates along 'cell' missing: {', '.join(missing)} (expected one per cell "
                         f"column, 'cases' and each cost column); found: {', '.join(sorted(coords)) or 'none'}.")
    names = need + [c for c in extra if c in coords and c not in need]
    return pd.DataFrame({c: np.asarray(ds.coords[c].values) for c in names})


def netcdf_cell_frame(path, scenario: Scenario, optional) -> pd.DataFrame:
    """The per-cell coordinates of a netCDF file of draws, with the optional ones that
    ``optional(names, level_values)`` picks (the rule columns of :mod:`policy.decision.table_rules`)."""
    path = Path(path)
    ds = _open(path)
    try:
        coords = [str(name) for name, c in ds.coords.items() if c.dims == ("cell",)]
        return netcdf_cells(ds, path, scenario, optional(coords, scenario.level_values))
    finally:
        ds.close()


def _outcomes(ds, path: Path, scenario: Scenario) -> list[str]:
    if "outcome" not in ds.coords:
        raise InputError(f"{path.name}: no coordinate 'outcome' (the outcome keys: {', '.join(scenario.outcome_keys)}).")
    keys = [str(k) for k in np.asarray(ds.coords["outcome"].values)]
    unknown = [k for k in keys if k not in scenario.outcome_keys]
    if unknown:
        raise InputError(f"{path.name}: coordinate 'outcome' has {unknown[0]!r}, not an outcome key of the scenario; "
                         f"expected: {', '.join(scenario.outcome_keys)}.")
    return keys


def _long(cells: pd.DataFrame, outcomes: list[str], q: np.ndarray, labels: list[str]) -> pd.DataFrame:
    """Long rows (draw, cell, outcome) of a block q of shape (b, n_cells, J, L + 1)."""
    b, n, J, R = q.shape
    frame = cells.loc[np.tile(np.repeat(np.arange(n), J), b)].reset_index(drop=True)
    frame["outcome"] = np.tile(np.asarray(outcomes, dtype=object), b * n)
    frame["draw"] = np.repeat(np.asarray(labels, dtype=object), n * J)
    flat = q.reshape(b * n * J, R)
    for r in range(R):
        frame[f"risk_level_{r}"] = flat[:, r]
    return frame


def read_netcdf_draws(path, scenario: Scenario, parse, chunk_draws: int = CHUNK_DRAWS) -> RiskLevelDraws:
    """Read the draws of a netCDF file (see the module's notes), ``chunk_draws`` at a time.

    Parameters
    ----------
    path : path
    scenario : Scenario
    parse : callable
        The validation of one table without draws (as for :func:`policy.estimation.draws.parse_draws`).
    chunk_draws : int
    """
    path = Path(path)
    ds = _open(path)
    try:
        var = _variable(ds, path, scenario)
        cells = netcdf_cells(ds, path, scenario)
        outcomes = _outcomes(ds, path, scenario)
        chains, draws = var.sizes["chain"], var.sizes["draw"]
        chain_ids = [str(c) for c in np.asarray(ds.coords["chain"].values)] if "chain" in ds.coords else list(map(str, range(chains)))
        draw_ids = [str(d) for d in np.asarray(ds.coords["draw"].values)] if "draw" in ds.coords else list(map(str, range(draws)))
        ids = [f"{c}.{d}" for c in chain_ids for d in draw_ids]
        if not ids:
            raise InputError(f"{path.name}: variable {VARIABLE!r} holds no draws.")
        # slices of the file's variable, read one block of draws of one chain at a time (never whole)
        first = _long(cells, outcomes, np.asarray(var.isel(chain=[0], draw=0).values, dtype=np.float64), ids[:1])
        filler = _Filler(_template(first, ids, scenario, parse, path.name), ids, scenario, path.name)
        rows = len(cells) * len(outcomes)
        for c in range(chains):
            for d in range(0, draws, chunk_draws):
                block = np.asarray(var.isel(chain=c, draw=slice(d, d + chunk_draws)).values, dtype=np.float64)
                at = c * draws + d
                frame = _long(cells, outcomes, block, ids[at:at + block.shape[0]])
                filler.add(frame, frame["draw"].to_numpy(), at * rows)
        return filler.finish()
    finally:
        ds.close()
