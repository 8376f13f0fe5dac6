"""Write the small data files that the example scenarios in scenarios/ read.

Every file is drawn from the invented Quarrow County simulator (policy.demo.quarrow); nothing here is
real. Run from the repository root:

    python scenarios/data/make_data.py

tests/test_scenarios_data.py re-runs this and checks the committed files against it.
"""

from __future__ import annotations

import sys
from pathlib import Path


HERE = Path(__file__).resolve().parent
COARSE_CELLS = ["charge_class", "prior_record", "aid_tier", "sex", "race_group"]


def build(folder: Path) -> list[Path]:
    from policy import CellTable, estimate_risk_levels, load_scenario
    from policy.demo.quarrow import CONFOUNDED, simulate_cases

    folder.mkdir(parents=True, exist_ok=True)
    written = []

    # 1. a counts table of 20,000 hearings over coarse cells, both arms
    counts_scenario = load_scenario(HERE.parent / "counts_table.toml")
    frame, _ = simulate_cases(20_000, seed=101)
    table = CellTable.from_cases(frame, counts_scenario)
    path = folder / "quarrow_counts.csv"
    table.counts_frame(counts_scenario).to_csv(path, index=False)
    written.append(path)

    # 2. risk levels estimated from that counts table (the second way in)
    levels = estimate_risk_levels(counts_scenario, table).to_frame()
    prob = [c for c in levels.columns if c.startswith("risk_level_")]
    levels[prob] = levels[prob].round(9)
    levels[prob[-1]] = 1.0 - levels[prob[:-1]].sum(axis=1)
    levels = levels.drop(columns=[c for c in levels.columns if c.startswith("p_")])
    path = folder / "quarrow_risk_levels.csv"
    levels.to_csv(path, index=False, float_format="%.9f")
    written.append(path)

    # 3. an observational record (no experiment, no arm) of a court whose harshest level is
    #    detention: no missed court date or new offense can happen in custody (structural zero)
    obs_scenario = load_scenario(HERE.parent / "observational_detention.toml")
    frame, _ = simulate_cases(20_000, seed=202)
    frame = frame[frame["aid_shown"] == 0].drop(columns=["aid_shown", "aid_recommendation"])
    frame["decision"] = frame["decision"].replace({"bond": "detention"})
    held = frame["decision"] == "detention"
    for col in ("missed_court", "new_offense", "new_violent"):
        frame.loc[held & frame[col].notna(), col] = 0
    table = CellTable.from_cases(frame, obs_scenario)
    path = folder / "quarrow_detention_counts.csv"
    table.counts_frame(obs_scenario).to_csv(path, index=False)
    written.append(path)

    # 4. 20,000 hearings of a confounded Quarrow County: its courts also act on the person's ties to
    #    the community, which lower the risk and which neither the cells nor the screen record
    confounded_scenario = load_scenario(HERE.parent / "demo_confounded.toml")
    frame, _ = simulate_cases(20_000, seed=303, model=CONFOUNDED)
    table = CellTable.from_cases(frame, confounded_scenario)
    path = folder / "quarrow_confounded_counts.csv"
    table.counts_frame(confounded_scenario).to_csv(path, index=False)
    written.append(path)

    # 5. the counts table's risk levels with 50 of the tool's own bootstrap replicates as draws
    #    (cell sizes held, so feeding the table back reproduces the replicates' rule-level figures)
    from policy.assessment.draws_export import bootstrap_draws_table

    draws = bootstrap_draws_table(counts_scenario, replicates=50, seed=101, resampling="multinomial", workers=1)
    prob = [c for c in draws.columns if c.startswith("risk_level_")]
    draws[prob] = draws[prob].round(6)
    draws[prob[-1]] = (1.0 - draws[prob[:-1]].sum(axis=1)).clip(lower=0.0)
    path = folder / "quarrow_risk_level_draws.csv"
    draws.to_csv(path, index=False, float_format="%.6f")
    written.append(path)
    return written


if __name__ == "__main__":
    sys.path.insert(0, str(HERE.parents[1]))
    target = Path(sys.argv[1]) if len(sys.argv) > 1 else HERE
    for p in build(target):
        print(p)
