"""Risk-level draws in netCDF (the posterior group of an InferenceData file), read through xarray."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import xarray as xr

from .test_risk_level_draws import round_trip  # noqa: F401  (the fixture)
from policy.errors import InputError
from policy.estimation.from_scenario import load_risk_level_draws, risk_level_draws_from_frame
from policy.inputs.scenario import load_scenario


def to_posterior(table: pd.DataFrame, scenario, chains: int = 2) -> xr.Dataset:
    """The draws of a long table (point rows left out) as a posterior group: risk_level_probability with dims
    (chain, draw, cell, outcome, risk_level), the per-cell columns as coordinates along 'cell'."""
    draws = table[table["draw"] != "point"]
    labels = list(dict.fromkeys(draws["draw"]))
    J, R = len(scenario.outcome_keys), len(scenario.levels) + 1
    first = draws[draws["draw"] == labels[0]].reset_index(drop=True)
    n = len(first) // J
    q = draws[[f"risk_level_{r}" for r in range(R)]].to_numpy().reshape(chains, len(labels) // chains, n, J, R)
    cell = first.iloc[::J].reset_index(drop=True)
    coords = {c: ("cell", cell[c].to_numpy()) for c in list(scenario.cell_columns) + ["cases"] + list(scenario.cost_columns)}
    point = table[table["draw"] == "point"].reset_index(drop=True).iloc[::J]
    for c in [c for c in table.columns if c.startswith("decision_") or c == "aid_recommends"]:
        coords[c] = ("cell", point[c].to_numpy())
    coords["outcome"] = ("outcome", list(first["outcome"].iloc[:J]))
    coords["chain"], coords["draw"] = np.arange(chains), np.arange(len(labels) // chains)
    return xr.Dataset({"risk_level_probability": (("chain", "draw", "cell", "outcome", "risk_level"), q)}, coords=coords)


@pytest.fixture
def netcdf(round_trip, tmp_path):  # noqa: F811
    _, table_path, table = round_trip
    scenario = load_scenario(table_path)
    to_posterior(table, scenario).to_netcdf(tmp_path / "posterior.nc", group="posterior", engine="h5netcdf")
    path = tmp_path / "netcdf.toml"
    path.write_text(table_path.read_text().replace('"draws.csv"', '"posterior.nc"'))
    return path, table_path, table


def test_netcdf_draws_equal_the_long_table_and_compare_the_same(netcdf):
    # The same 40 draws two ways: chain c, draw d of the file is draw c * 20 + d + 1 of the table.
    from policy.assessment.compare import compare

    path, table_path, table = netcdf
    scenario = load_scenario(path)
    got = load_risk_level_draws(scenario)
    want = risk_level_draws_from_frame(table[table["draw"] != "point"], load_scenario(table_path))
    assert got.n_draws == 40 and got.draw_ids[:2] == ["0.0", "0.1"] and got.draw_ids[20] == "1.0"
    assert got.point_source == "mean over draws"
    np.testing.assert_allclose(got.p, want.p, atol=1e-12)
    on_nc = compare(path).comparison_frame()
    assert set(on_nc["kind"]) == {"optimal", "aid", "candidate", "observed"}  # rule columns as cell coordinates
    no_point = table[table["draw"] != "point"].copy()
    for c in [c for c in no_point.columns if c.startswith("decision_") or c == "aid_recommends"]:
        no_point[c] = np.tile(table[table["draw"] == "point"][c].to_numpy(), 40)
    no_point.to_csv(table_path.parent / "no_point.csv", index=False)
    csv_path = table_path.parent / "no_point.toml"
    csv_path.write_text(table_path.read_text().replace('"draws.csv"', '"no_point.csv"'))
    on_csv = compare(csv_path).comparison_frame()
    cols = [c for c in on_csv.columns if c.startswith(("cost_per", "regret_per", "share_"))]
    np.testing.assert_allclose(on_nc[cols].to_numpy(float), on_csv[cols].to_numpy(float), rtol=1e-9, atol=1e-9)


def test_bad_netcdf_draws_are_refused_naming_what_is_wrong(netcdf, tmp_path):
    path, table_path, table = netcdf
    scenario = load_scenario(path)
    ds = to_posterior(table, scenario)

    def bad(data, match):
        data.to_netcdf(tmp_path / "posterior.nc", group="posterior", engine="h5netcdf")
        from policy.estimation.from_scenario import _LAST_READ

        _LAST_READ.clear()
        with pytest.raises(InputError, match=match):
            load_risk_level_draws(load_scenario(path))

    bad(ds.rename({"risk_level_probability": "p"}), r"posterior.nc: no variable 'risk_level_probability' .*found: p")
    bad(ds.transpose("draw", "chain", ...), r"variable 'risk_level_probability' must have the dimensions \('chain', 'draw'")
    bad(ds.drop_vars("cases"), r"coordinates along 'cell' missing: cases")
    q = ds["risk_level_probability"].values.copy()
    q[1, 3, 5, 0, 1] = 1.4
    bad(ds.copy(data={"risk_level_probability": q}), r"posterior.nc: draw '1.3', cell .*risk_level_1' must hold a probability in "
                                         r"\[0, 1\]; got 1.4")
    bad(ds.isel(risk_level=slice(0, 3)), r"dimension 'risk_level' must have 4 entries")
    (tmp_path / "posterior.nc").write_text("not netCDF")
    with pytest.raises(InputError, match=r"posterior.nc: not a readable netCDF file"):
        from policy.estimation.from_scenario import _LAST_READ

        _LAST_READ.clear()
        load_risk_level_draws(load_scenario(path))
