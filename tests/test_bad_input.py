"""A catalogue of bad and unusual input: each case gets a clear message, its exit code, and
leaves every file of its output folder as it was.

Each case edits a copy of a small demo folder (``scenario.toml`` + a 600-case ``cases.csv``),
runs one command line in-process and checks: the exit code, key words of the message (the
file, key or option, the bad value), and that the output folder holds the same files with the
same bytes as before (a user's file placed there and an earlier run's outputs).
"""

from __future__ import annotations

import hashlib
import re
import shutil
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import pandas as pd
import pytest

from .conftest import run_cli


# ----------------------------------------------------------------------------------------------
# The small demo folder every case starts from
# ----------------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def base(tmp_path_factory):
    """A folder with the demo scenario (20 replicates) and its 600 cases, plus a counts table and
    a risk-level table of the same cases."""
    from policy.presentation.cli import main

    root = tmp_path_factory.mktemp("bad_input_base")
    assert main(["demo", "--out", str(root / "demo"), "--cases", "600"]) == 0
    folder = root / "in"
    folder.mkdir()
    shutil.copy(root / "demo" / "cases.csv", folder / "cases.csv")
    text = (root / "demo" / "scenario.toml").read_text()
    text = text.replace("replicates = 1000 ", "replicates = 20 ")
    (folder / "scenario.toml").write_text(text)
    shutil.copy(root / "demo" / "cells.csv", folder / "counts.csv")
    shutil.copy(root / "demo" / "risk_levels.csv", folder / "risk_levels.csv")
    return folder


def _replace(text: str, old: str, new: str) -> str:
    assert old in text, f"{old!r} not in the file being edited"
    return text.replace(old, new, 1)


@dataclass
class Case:
    """One bad-input run: edits of the input folder, the command line, what must come back."""

    name: str
    argv: list
    code: int
    words: tuple
    scenario: tuple = ()          # (old, new) text replacements in scenario.toml
    cases: Callable | None = None  # edit of cases.csv: text -> text
    counts: Callable | None = None  # edit of counts.csv (and the scenario then reads it)
    setup: Callable | None = None  # any other preparation: setup(folder)
    absent: tuple = ()             # words the message must not hold


def scn(*pairs) -> tuple:
    return tuple(pairs)


def _lines(fn):
    """An edit of a CSV file's lines (header first)."""
    def edit(text: str) -> str:
        lines = text.split("\n")
        return "\n".join(fn(lines))
    return edit


def _set_cell(row: int, column: str, value: str):
    """Set a cell of data row ``row`` (1-based) of a CSV text (no quoted commas in the demo)."""
    def fn(lines):
        header = lines[0].split(",")
        fields = lines[row].split(",")
        fields[header.index(column)] = value
        lines[row] = ",".join(fields)
        return lines
    return _lines(fn)


def _rename_column(old: str, new: str):
    def fn(lines):
        header = lines[0].split(",")
        header[header.index(old)] = new
        lines[0] = ",".join(header)
        return lines
    return _lines(fn)


COUNTS = ('case_table = "cases.csv"', 'counts_table = "counts.csv"')
RISK = ('case_table = "cases.csv"', 'risk_level_table = "risk_levels.csv"')
NO_ARM = ('arm = "aid_shown"', '')


S, O = "{scenario}", "{out}"


CASES = [
    # --- costs: finite, >= 0, not absurdly large -------------------------------------------------
    Case("outcome cost nan", ["solve", S, "-o", O], 2, ("cost", "[[outcomes]] #1", "nan"),
         scenario=scn(("cost = 1000.0", "cost = nan"))),
    Case("outcome cost inf", ["solve", S, "-o", O], 2, ("cost", "[[outcomes]] #2", "inf"),
         scenario=scn(("cost = 5146.0", "cost = inf"))),
    Case("outcome cost huge", ["solve", S, "-o", O], 2, ("cost", "[[outcomes]] #3", "1.7e+308"),
         scenario=scn(("cost = 155928.0", "cost = 1.7e308"))),
    Case("outcome cost negative", ["solve", S, "-o", O], 2, ("cost", "[[outcomes]] #1", "-1"),
         scenario=scn(("cost = 1000.0", "cost = -1.0"))),
    Case("decision cost nan", ["solve", S, "-o", O], 2, ("cost", "[[decisions]] #2", "nan"),
         scenario=scn(("cost = 750.0", "cost = nan"))),
    Case("decision cost -inf", ["solve", S, "-o", O], 2, ("cost", "[[decisions]] #2", "inf"),
         scenario=scn(("cost = 750.0", "cost = -inf"))),
    Case("check refuses a nan cost", ["check", S], 2, ("cost", "nan"),
         scenario=scn(("cost = 1000.0", "cost = nan"))),
    Case("option cost nan", ["solve", S, "-o", O, "--cost", "new_offense=nan"], 2, ("--cost", "new_offense=nan", "finite")),
    Case("option cost inf", ["solve", S, "-o", O, "--cost", "new_offense=inf"], 2, ("--cost", "new_offense=inf")),
    Case("option cost negative", ["solve", S, "-o", O, "--cost", "new_offense=-5"], 2, ("--cost", "new_offense=-5", ">= 0")),
    Case("option cost huge", ["solve", S, "-o", O, "--cost", "new_offense=1.7e308"], 2, ("--cost", "1.7e308")),
    Case("option cost not a number", ["solve", S, "-o", O, "--cost", "new_offense=lots"], 2, ("--cost", "new_offense=lots", "NAME=NUMBER")),
    Case("option cost unknown key", ["solve", S, "-o", O, "--cost", "nothing=5"], 2, ("nothing",)),
    Case("option decision cost nan", ["solve", S, "-o", O, "--decision-cost", "supervision=nan"], 2, ("--decision-cost", "nan")),
    Case("option decision cost negative", ["solve", S, "-o", O, "--decision-cost", "supervision=-1"], 2, ("--decision-cost", "-1")),
    Case("report option cost nan", ["report", S, "-o", O, "--cost", "missed_court=nan", "--no-progress"], 2, ("--cost", "nan")),
    Case("sweep option cost inf", ["sweep", S, "-o", O, "--ratio", "new_offense", "--cost", "missed_court=inf", "--no-figures", "--no-progress"],
         2, ("--cost", "inf")),
    Case("cost column text nan", ["solve", S, "-o", O], 2, ("bond_cost", "nan"), cases=_set_cell(3, "bond_cost", "nan")),
    Case("cost column text inf", ["solve", S, "-o", O], 2, ("bond_cost", "inf"), cases=_set_cell(3, "bond_cost", "inf")),
    Case("cost column huge", ["solve", S, "-o", O], 2, ("bond_cost", "1.7e+308"), cases=_set_cell(3, "bond_cost", "1.7e308")),
    Case("cost column word", ["solve", S, "-o", O], 2, ("bond_cost", "cheap", "row 3"), cases=_set_cell(3, "bond_cost", "cheap")),
    Case("cost column negative", ["solve", S, "-o", O], 2, ("bond_cost", "-5"), cases=_set_cell(3, "bond_cost", "-5")),
    Case("counts cost column nan", ["solve", S, "-o", O], 2, ("bond_cost", "nan"),
         scenario=scn(COUNTS), counts=_set_cell(2, "bond_cost", "nan")),
    Case("counts cost column huge", ["solve", S, "-o", O], 2, ("bond_cost", "1e+308"),
         scenario=scn(COUNTS), counts=_set_cell(2, "bond_cost", "1e308")),

    # --- other numbers of the scenario ---------------------------------------------------------
    Case("prior strength nan", ["solve", S, "-o", O], 2, ("prior_strength", "nan"),
         scenario=scn(('prior_strength = "auto"', "prior_strength = nan"))),
    Case("prior strength inf", ["solve", S, "-o", O], 2, ("prior_strength", "inf"),
         scenario=scn(('prior_strength = "auto"', "prior_strength = inf"))),
    Case("prior strength negative", ["solve", S, "-o", O], 2, ("prior_strength", "-2"),
         scenario=scn(('prior_strength = "auto"', "prior_strength = -2"))),
    Case("prior strength word", ["solve", S, "-o", O], 2, ("prior_strength", "'strong'"),
         scenario=scn(('prior_strength = "auto"', 'prior_strength = "strong"'))),
    Case("sparse_below negative", ["solve", S, "-o", O], 2, ("sparse_below", "-1"),
         scenario=scn(("sparse_below = 20", "sparse_below = -1"))),
    Case("interval nan", ["compare", S, "-o", O, "--no-progress"], 2, ("interval", "nan"),
         scenario=scn(("interval = 0.95", "interval = nan"))),
    Case("interval above 1", ["compare", S, "-o", O, "--no-progress"], 2, ("interval", "1.5"),
         scenario=scn(("interval = 0.95", "interval = 1.5"))),
    Case("replicates negative", ["compare", S, "-o", O, "--no-progress"], 2, ("replicates", "-3"),
         scenario=scn(("replicates = 20 ", "replicates = -3 "))),
    Case("replicates huge", ["compare", S, "-o", O, "--no-progress"], 2, ("replicates", "1000000000000", "100,000"),
         scenario=scn(("replicates = 20 ", "replicates = 1000000000000 "))),
    Case("scenario seed negative", ["compare", S, "-o", O, "--no-progress"], 2, ("seed", "-4"),
         scenario=scn(("seed = 20261202", "seed = -4"))),
    Case("simulate negative", ["solve", S, "-o", O], 2, ("simulate", "-5"),
         scenario=scn(('case_table = "cases.csv"', "simulate = -5"))),
    Case("simulate huge", ["solve", S, "-o", O], 2, ("simulate", "memory"),
         scenario=scn(('case_table = "cases.csv"', "simulate = 200000000000"))),
    Case("simulate absurd", ["solve", S, "-o", O], 2, ("simulate", "memory"),
         scenario=scn(('case_table = "cases.csv"', "simulate = 9000000000000000000"))),
    Case("constraint tolerance nan", ["solve", S, "-o", O], 2, ("tolerance", "nan"),
         setup=lambda f: _append(f, '[[constraints]]\nkind = "principal_fairness"\noutcome = "new_offense"\ntolerance = nan\n')),
    Case("constraint max_share inf", ["solve", S, "-o", O], 2, ("max_share", "inf"),
         setup=lambda f: _append(f, '[[constraints]]\nkind = "capacity"\nmax_share = inf\n')),
    Case("constraint max_cases nan", ["solve", S, "-o", O], 2, ("max_cases", "nan"),
         setup=lambda f: _append(f, '[[constraints]]\nkind = "capacity"\nmax_cases = nan\n')),
    Case("constraint max_rate above 1", ["solve", S, "-o", O], 2, ("max_rate", "2"),
         setup=lambda f: _append(f, '[[constraints]]\nkind = "outcome_cap"\noutcome = "missed_court"\nmax_rate = 2.0\n')),
    Case("lp time limit nan", ["solve", S, "-o", O], 2, ("time_limit", "nan"),
         setup=lambda f: _append(f, '[linear_program]\ntime_limit = nan\n')),
    Case("order lists a value twice", ["solve", S, "-o", O], 2, ("order.age_band", "'18-25'", "twice"),
         scenario=scn(('age_band = ["18-25", "26-40", "41+"]', 'age_band = ["18-25", "26-40", "18-25", "41+"]'))),

    # --- options of the command line -----------------------------------------------------------
    Case("option seed negative", ["compare", S, "-o", O, "--seed", "-1", "--no-progress"], 2, ("--seed", "-1")),
    Case("option replicates negative", ["compare", S, "-o", O, "--replicates", "-5", "--no-progress"], 2, ("--replicates", "-5")),
    Case("option replicates huge", ["compare", S, "-o", O, "--replicates", "100000000000", "--no-progress"], 2, ("--replicates", "100000000000", "100,000")),
    Case("option interval nan", ["compare", S, "-o", O, "--interval", "nan", "--no-progress"], 2, ("--interval", "nan")),
    Case("option interval 1", ["compare", S, "-o", O, "--interval", "1", "--no-progress"], 2, ("--interval", "1")),
    Case("option resampling unknown", ["compare", S, "-o", O, "--resampling", "jackknife", "--no-progress"], 2, ("resampling", "jackknife")),
    Case("option workers zero", ["compare", S, "-o", O, "--workers", "0", "--no-progress"], 2, ("--workers", "0")),
    Case("option workers huge", ["compare", S, "-o", O, "--workers", "100000", "--no-progress"], 2, ("--workers", "100000")),
    Case("sweep option seed negative", ["sweep", S, "-o", O, "--ratio", "new_offense", "--seed", "-3", "--no-figures",
                                        "--no-progress"], 2, ("--seed", "-3")),
    Case("option workers and run-on", ["compare", S, "-o", O, "--workers", "2", "--run-on", "here", "--no-progress"], 2, ("--workers", "--run-on")),
    Case("option max-share nan", ["solve", S, "-o", O, "--max-share", "bond=nan"], 2, ("--max-share", "nan")),
    Case("option max-share above 1", ["solve", S, "-o", O, "--max-share", "bond=1.5"], 2, ("--max-share", "bond=1.5", "0..1")),
    Case("option max-rate inf", ["solve", S, "-o", O, "--max-rate", "missed_court=inf"], 2, ("--max-rate", "inf")),
    Case("option principal fairness nan", ["solve", S, "-o", O, "--principal-fairness", "new_offense=nan"], 2, ("--principal-fairness", "nan")),
    Case("option constraint tolerance nan", ["solve", S, "-o", O, "--constraint", "kind=principal_fairness,outcome=new_offense,tolerance=nan"],
         2, ("tolerance", "nan")),
    Case("option constraint unknown kind", ["solve", S, "-o", O, "--constraint", "kind=wishful"], 2, ("kind", "wishful")),
    Case("option lp solver unknown", ["solve", S, "-o", O, "--max-share", "bond=0.1", "--lp-solver", "GUESS"], 2, ("GUESS",)),
    Case("demo cases zero", ["demo", "-o", O, "--cases", "0"], 2, ("--cases", "0")),
    Case("demo cases huge", ["demo", "-o", O, "--cases", "200000000"], 2, ("--cases", "memory")),
    Case("demo cases absurd", ["demo", "-o", O, "--cases", "9000000000000000000"], 2, ("--cases", "memory")),
    Case("sweep points huge", ["sweep", S, "-o", O, "--ratio", "new_offense", "--ratio", "missed_court", "--points", "200000",
                               "--no-figures", "--no-progress"], 2, ("--points", "200000")),
    Case("sweep points one", ["sweep", S, "-o", O, "--ratio", "new_offense", "--ratio", "missed_court", "--points", "1",
                              "--no-figures", "--no-progress"], 2, ("--points", "1")),
    Case("sweep table points huge", ["sweep", S, "-o", O, "--ratio", "new_offense", "--ratio", "missed_court", "--table-points", "100000",
                                     "--no-figures", "--no-progress"], 2, ("--table-points", "100000")),
    Case("sweep range nan", ["sweep", S, "-o", O, "--ratio", "new_offense", "--range", "0:nan", "--no-figures", "--no-progress"],
         2, ("--range", "nan")),
    Case("sweep range reversed", ["sweep", S, "-o", O, "--ratio", "new_offense", "--range", "5:1", "--no-figures", "--no-progress"],
         2, ("--range", "5", "1")),
    Case("sweep range negative", ["sweep", S, "-o", O, "--ratio", "new_offense", "--range", "-1:3", "--no-figures", "--no-progress"],
         2, ("--range", "negative")),
    Case("sweep range word", ["sweep", S, "-o", O, "--ratio", "new_offense", "--range", "a:b", "--no-figures", "--no-progress"],
         2, ("--range", "LOW:HIGH")),
    Case("sweep share nan", ["sweep", S, "-o", O, "--ratio", "new_offense", "--share", "nan", "--no-figures", "--no-progress"],
         2, ("--share", "nan")),
    Case("sweep share zero", ["sweep", S, "-o", O, "--ratio", "new_offense", "--share", "0", "--no-figures", "--no-progress"],
         2, ("--share", "0")),
    Case("sweep gamma below 1", ["sweep", S, "-o", O, "--ratio", "new_offense", "--gamma", "0.5", "--no-figures", "--no-progress"],
         2, ("--gamma", "0.5")),
    Case("sweep gamma nan", ["sweep", S, "-o", O, "--ratio", "new_offense", "--gamma", "nan", "--no-figures", "--no-progress"],
         2, ("--gamma", "nan")),
    Case("sweep vary nan", ["sweep", S, "-o", O, "--ratio", "new_offense", "--max-share", "bond=0.2", "--vary", "1=0.1,nan",
                            "--no-figures", "--no-progress"], 2, ("--vary", "nan")),
    Case("sweep lp points zero", ["sweep", S, "-o", O, "--ratio", "new_offense", "--max-share", "bond=0.2", "--lp-points", "0",
                                  "--no-figures", "--no-progress"], 2, ("--lp-points", "0")),
    Case("sweep figure format", ["sweep", S, "-o", O, "--ratio", "new_offense", "--figure", "gif", "--no-progress"], 2, ("--figure", "gif")),
    Case("sweep unknown ratio", ["sweep", S, "-o", O, "--ratio", "speeding", "--no-figures", "--no-progress"], 2, ("speeding",)),
    Case("sweep scale", ["sweep", S, "-o", O, "--ratio", "new_offense", "--scale", "cubic", "--no-figures", "--no-progress"], 2, ("cubic",)),
    Case("sweep missing treatment", ["sweep", S, "-o", O, "--ratio", "new_offense", "--missing", "guess", "--no-figures", "--no-progress"],
         2, ("guess",)),
    Case("run-on tls", ["compare", S, "-o", O, "--run-on", "tls://", "--no-progress"], 2, ("--run-on", "tls://")),
    Case("run-on local too many", ["compare", S, "-o", O, "--run-on", "local:100000", "--no-progress"], 2, ("--run-on", "local:100000")),
    Case("run-on local zero", ["compare", S, "-o", O, "--run-on", "local:0", "--no-progress"], 2, ("--run-on", "local:0")),
    Case("run-on nonsense", ["compare", S, "-o", O, "--run-on", "somewhere", "--no-progress"], 2, ("--run-on", "somewhere")),

    # --- tables ------------------------------------------------------------------------------------
    Case("csv row with extra fields", ["solve", S, "-o", O], 2, ("cases.csv", "line 5", "fields"),
         cases=_lines(lambda ls: ls[:4] + [ls[4] + ",x,y"] + ls[5:])),
    Case("csv row with missing fields", ["solve", S, "-o", O], 2, ("cases.csv", "line 5", "fields"),
         cases=_lines(lambda ls: ls[:4] + [ls[4].rsplit(",", 3)[0]] + ls[5:])),
    Case("nul byte in a value", ["solve", S, "-o", O], 2, ("cases.csv", "NUL", "line 4"),
         cases=_set_cell(3, "sex", "ma\x00le")),
    Case("text among rule integers", ["solve", S, "-o", O], 2, ("aid_tier", "'three'", "mixes numbers and text"),
         cases=_set_cell(3, "aid_tier", "three")),
    Case("duplicate column names", ["solve", S, "-o", O], 2, ("two columns named 'decision'", "columns 11 and 12"),
         cases=_rename_column("aid_recommendation", "decision")),
    Case("duplicate case ids", ["solve", S, "-o", O], 2, ("case_id", "QC-000001"),
         cases=_set_cell(2, "case_id", "QC-000001")),
    Case("undeclared decision value", ["solve", S, "-o", O], 2, ("decision", "'jail'", "row 3"),
         cases=_set_cell(3, "decision", "jail")),
    Case("outcome value 2", ["solve", S, "-o", O], 2, ("missed_court", "2", "row 3"),
         cases=_set_cell(3, "missed_court", "2")),
    Case("arm value maybe", ["solve", S, "-o", O], 2, ("aid_shown", "'maybe'", "row 3"),
         cases=_set_cell(3, "aid_shown", "maybe")),
    Case("empty cell covariate", ["solve", S, "-o", O], 2, ("age_band", "empty", "row 3"),
         cases=_set_cell(3, "age_band", "")),
    Case("blank lines keep file line numbers", ["solve", S, "-o", O], 2, ("decision", "'jail'", "row 6"),
         cases=lambda t: _set_cell(4, "decision", "jail")(t).replace("\n", "\n\n", 2)),
    Case("missing column", ["solve", S, "-o", O], 2, ("decision", "missing"),
         cases=_rename_column("decision", "choice")),
    Case("table not utf-8", ["solve", S, "-o", O], 2, ("cases.csv", "UTF-8"),
         setup=lambda f: (f / "cases.csv").write_bytes(b"case_id,age\n\xff\xfe,1\n")),
    Case("table empty", ["solve", S, "-o", O], 2, ("cases.csv", "empty"),
         setup=lambda f: (f / "cases.csv").write_text("")),
    Case("table header only", ["solve", S, "-o", O], 2, ("cases.csv", "no rows"),
         cases=_lines(lambda ls: ls[:1])),
    Case("table is a directory", ["solve", S, "-o", O], 2, ("cases.csv", "folder"),
         setup=lambda f: ((f / "cases.csv").unlink(), (f / "cases.csv").mkdir())),
    Case("table missing", ["solve", S, "-o", O], 2, ("cases.csv", "does not exist"),
         setup=lambda f: (f / "cases.csv").unlink()),
    Case("all-zero counts table", ["solve", S, "-o", O], 2, ("counts.csv", "age_band="),
         scenario=scn(COUNTS), counts=_lines(lambda ls: [ls[0]] + [
             ",".join("0" if re.match(r"cases|recommended|observed_|events_", ls[0].split(",")[i]) else v
                      for i, v in enumerate(line.split(",")))
             for line in ls[1:] if line])),
    Case("risk table negative probability", ["solve", S, "-o", O], 2, ("risk_levels.csv", "-0.1"), absent=("np.float64",),
         scenario=scn(RISK, NO_ARM), setup=lambda f: _edit_csv(f / "risk_levels.csv", 1, "risk_level_1", "-0.1")),

    Case("parquet outcome stored as text", ["solve", S, "-o", O], 2, ("cases.parquet", "missed_court", "holds text"),
         absent=("category",), scenario=scn(('case_table = "cases.csv"', 'case_table = "cases.parquet"')),
         setup=lambda f: _parquet(f, missed_court=lambda c: c.astype("Int64").astype(str))),
    Case("counts table with extra fields", ["solve", S, "-o", O], 2, ("counts.csv", "line 3", "fields"),
         scenario=scn(COUNTS), counts=_lines(lambda ls: ls[:2] + [ls[2] + ",1"] + ls[3:])),
    Case("counts table with a NUL byte", ["solve", S, "-o", O], 2, ("counts.csv", "NUL"),
         scenario=scn(COUNTS), counts=_set_cell(2, "sex", "fe\x00male")),
    Case("case table with a quoted value holding a stray comma", ["solve", S, "-o", O], 2, ("cases.csv", "line 3", "fields"),
         cases=_set_cell(2, "sex", "female,x")),

    # --- scenario text -------------------------------------------------------------------------
    Case("scenario missing", ["solve", "{dir}/nothing.toml", "-o", O], 2, ("nothing.toml", "does not exist")),
    Case("scenario is a directory", ["solve", "{dir}", "-o", O], 2, ("folder",)),
    Case("scenario not toml", ["solve", S, "-o", O], 2, ("scenario.toml", "TOML"),
         setup=lambda f: (f / "scenario.toml").write_text("[scenario\n")),
    Case("unknown section", ["solve", S, "-o", O], 2, ("[wishes]",),
         setup=lambda f: _append(f, "[wishes]\npony = 1\n")),
    Case("unknown key", ["solve", S, "-o", O], 2, ("'colour'", "[scenario]"),
         scenario=scn(("[scenario]\n", '[scenario]\ncolour = "red"\n'))),
    Case("cost is text", ["solve", S, "-o", O], 2, ("cost", "[[outcomes]] #1", "'high'"),
         scenario=scn(("cost = 1000.0", 'cost = "high"'))),
    Case("rule column not a cell column", ["solve", S, "-o", O], 2, ("rule", "'shoe_size'"),
         scenario=scn(('rule = ["aid_tier", "charge_class"]', 'rule = ["aid_tier", "shoe_size"]'))),
    Case("decision value declared twice", ["solve", S, "-o", O], 2, ("'supervision'", "twice"),
         scenario=scn(('value = "bond"', 'value = "supervision"'))),
    Case("two data sources", ["solve", S, "-o", O], 2, ("exactly one",),
         scenario=scn(('case_table = "cases.csv"', 'case_table = "cases.csv"\nsimulate = 100'))),

    Case("misspelt section", ["check", S], 2, ("unknown section [costs_gone]",),
         scenario=scn(("[costs]\n", "[costs_gone]\n"))),
    Case("missing section", ["check", S], 2, ("missing section [costs]",),
         setup=lambda f: _drop_section(f, "[costs]\n", "[cells]\n")),
    Case("missing required key", ["check", S], 2, ("missing key 'unit'", "[costs]"),
         scenario=scn(('unit = "USD (2024)"', ''))),
    Case("one decision level only", ["check", S], 2, ("[[decisions]]", "at least two"),
         setup=lambda f: _keep_one_decision(f)),
    Case("decision with cost and cost_column", ["check", S], 2, ("[[decisions]] #1", "exactly one of 'cost'"),
         scenario=scn(('cost = 0.0', 'cost = 0.0\ncost_column = "bond_cost"'))),
    Case("outcome key with a space", ["check", S], 2, ("'key'", "'missed court'"),
         scenario=scn(('key = "missed_court"', 'key = "missed court"'))),
    Case("impossible_from the most lenient level", ["check", S], 2, ("impossible_from", "most lenient"),
         scenario=scn(('key = "missed_court"', 'key = "missed_court"\nimpossible_from = "recognizance"'))),
    Case("impossible_from unknown level", ["check", S], 2, ("impossible_from", "'jail'"),
         scenario=scn(('key = "missed_court"', 'key = "missed_court"\nimpossible_from = "jail"'))),
    Case("aid score not a cell column", ["check", S], 2, ("[aid] score", "'aid_points'"),
         scenario=scn(('score = "aid_tier"', 'score = "aid_points"'))),
    Case("target covariate not a cell column", ["check", S], 2, ("target_covariates", "'shoe_size'"),
         scenario=scn(('sparse_below = 20', 'sparse_below = 20\ntarget_covariates = ["shoe_size"]'))),
    Case("order names a column that is not a cell column", ["check", S], 2, ("order", "'shoe_size'"),
         scenario=scn(('order = { age_band', 'order = { shoe_size = ["s"], age_band'))),
    Case("order misses a value of the data", ["check", S], 2, ("'41+'", "order.age_band"),
         scenario=scn(('age_band = ["18-25", "26-40", "41+"]', 'age_band = ["18-25", "26-40"]'))),
    Case("data path without a table suffix", ["check", S], 2, ("case_table", ".csv or .parquet"),
         scenario=scn(('case_table = "cases.csv"', 'case_table = "cases.txt"'))),
    Case("arm with a risk-level table", ["check", S], 2, ("arm", "risk_level_table"),
         scenario=scn(RISK)),
    Case("uncertainty resampling unknown", ["compare", S, "-o", O, "--no-progress"], 2, ("resampling", "'bayesian'"),
         scenario=scn(('resampling = "poisson"', 'resampling = "bayesian"'))),
    Case("candidate without a form", ["compare", S, "-o", O, "--no-progress"], 2, ("[[candidate_rules]]",),
         setup=lambda f: _append(f, '[[candidate_rules]]\nname = "nothing"\n')),
    Case("constraint kind unknown in the scenario", ["solve", S, "-o", O], 2, ("kind", "'wishful'"),
         setup=lambda f: _append(f, '[[constraints]]\nkind = "wishful"\n')),
    Case("capacity with both caps", ["solve", S, "-o", O], 2, ("capacity", "exactly one"),
         setup=lambda f: _append(f, '[[constraints]]\nkind = "capacity"\nmax_share = 0.1\nmax_cases = 100.0\n')),
    Case("batch folder missing", ["batch", "{dir}/nowhere", "-o", O, "--no-progress"], 2, ("nowhere", "does not exist")),
    Case("batch folder without scenarios", ["batch", "{dir}/empty", "-o", O, "--no-progress"], 2, ("no scenario files",),
         setup=lambda f: (f / "empty").mkdir()),
    Case("estimate into a folder holding the user's counts table", ["estimate", S, "-o", "{dir}"], 2,
         ("risk_levels.csv", "--overwrite")),

    # --- output folders --------------------------------------------------------------------------
    Case("out on a file system that cannot be written", ["solve", S, "-o", "/sys/policy-outputs"], 2,
         ("--out", "/sys/policy-outputs", "cannot write")),
    Case("out is a file", ["solve", S, "-o", "{dir}/cases.csv"], 2, ("--out", "cases.csv", "file")),
    Case("out under a file", ["solve", S, "-o", "{dir}/cases.csv/sub"], 2, ("--out", "cases.csv", "file")),
    Case("out would replace the case table", ["solve", S, "-o", "{dir}"], 2, ("cells.csv", "an input of this run"),
         scenario=scn(('case_table = "cases.csv"', 'case_table = "cells.csv"')),
         setup=lambda f: shutil.copy(f / "cases.csv", f / "cells.csv")),
    Case("out would replace a candidate table", ["solve", S, "-o", "{dir}"], 2, ("rule.csv", "input"),
         setup=lambda f: _rule_candidate(f)),
    Case("out holds files the tool did not write", ["solve", S, "-o", "{dir}"], 2, ("--overwrite", "risk_levels.csv", "did not write")),
    Case("demo into a folder with a user's scenario", ["demo", "-o", "{dir}", "--cases", "600"], 2, ("--overwrite", "scenario.toml")),
]


def _parquet(folder: Path, **edits) -> None:
    frame = pd.read_csv(folder / "cases.csv")
    for column, edit in edits.items():
        frame[column] = edit(frame[column])
    frame.to_parquet(folder / "cases.parquet", index=False)


def _drop_section(folder: Path, start: str, stop: str) -> None:
    text = (folder / "scenario.toml").read_text()
    (folder / "scenario.toml").write_text(text[:text.index(start)] + text[text.index(stop):])


def _keep_one_decision(folder: Path) -> None:
    text = (folder / "scenario.toml").read_text()
    first = text.index("[[decisions]]")
    last = text.index("[[outcomes]]")
    second = text.index("[[decisions]]", first + 1)
    (folder / "scenario.toml").write_text(text[:second] + text[last:])


def _append(folder: Path, text: str) -> None:
    path = folder / "scenario.toml"
    path.write_text(path.read_text() + "\n" + text)


def _edit_csv(path: Path, row: int, column: str, value: str) -> None:
    path.write_text(_set_cell(row, column, value)(path.read_text()))


def _rule_candidate(folder: Path) -> None:
    rows = pd.DataFrame({"aid_tier": [1, 2, 3, 4, 5] * 3,
                         "charge_class": ["misdemeanor"] * 5 + ["felony"] * 5 + ["violent felony"] * 5,
                         "level": ["recognizance"] * 15})
    rows.to_csv(folder / "rule.csv", index=False)
    _append(folder, '[[candidate_rules]]\nname = "all recognizance"\ntable = "rule.csv"\n')


def _snapshot(folder: Path) -> dict:
    if not folder.exists():
        return {}
    return {str(p.relative_to(folder)): (hashlib.sha256(p.read_bytes()).hexdigest() if p.is_file() else "dir")
            for p in sorted(folder.rglob("*"))}


@pytest.mark.parametrize("case", CASES, ids=[c.name for c in CASES])
def test_bad_input(case, base, tmp_path, capsys):
    folder = tmp_path / "in"
    shutil.copytree(base, folder)
    for old, new in case.scenario:
        (folder / "scenario.toml").write_text(_replace((folder / "scenario.toml").read_text(), old, new))
    if case.cases is not None:
        (folder / "cases.csv").write_text(case.cases((folder / "cases.csv").read_text()))
    if case.counts is not None:
        (folder / "counts.csv").write_text(case.counts((folder / "counts.csv").read_text()))
    if case.setup is not None:
        case.setup(folder)
    out = tmp_path / "out"
    out.mkdir()
    (out / "notes.txt").write_text("a user's own file\n")
    argv = [str(a).replace("{scenario}", str(folder / "scenario.toml")).replace("{out}", str(out))
            .replace("{dir}", str(folder)) for a in case.argv]
    watched = {"out": out, "in": folder}
    before = {k: _snapshot(v) for k, v in watched.items()}
    code, stdout, stderr = run_cli(argv, capsys)
    message = " ".join((stdout + stderr).split())
    assert code == case.code, message
    for word in case.words:
        assert word.lower() in message.lower(), f"{word!r} not in: {message}"
    for word in case.absent + ("Traceback",):
        assert word not in message, f"{word!r} in: {message}"
    after = {k: _snapshot(v) for k, v in watched.items()}
    assert after == before, "files changed by a failed run"


def test_an_arm_without_cases_gives_no_figure_and_says_why(base, tmp_path, capsys):
    """compare with every case in one arm: the aid's effect is not estimated (no 'nan' in a sentence)."""
    folder = tmp_path / "in"
    shutil.copytree(base, folder)
    cases = pd.read_csv(folder / "cases.csv")
    cases["aid_shown"] = 0
    cases.to_csv(folder / "cases.csv", index=False)
    code, out, err = run_cli(["compare", folder / "scenario.toml", "-o", tmp_path / "out", "--replicates", "0",
                              "--no-progress"], capsys)
    text = " ".join(out.split())
    assert code == 0, err
    assert not re.search(r"\bnan\b", text, flags=re.IGNORECASE)
    assert "no case where the aid was shown" in text and "not estimated" in text


def test_the_catalogue_is_large_enough():
    assert len(CASES) >= 80
    assert len({c.name for c in CASES}) == len(CASES)


def test_run_on_a_port_that_is_not_a_scheduler(base, tmp_path, capsys):
    """Something that is not a Dask scheduler answers: a message, no traceback, no files."""
    import socket
    import threading

    import distributed  # noqa: F401  (a test dependency: missing, this test fails, never skips)
    server = socket.socket()
    server.bind(("127.0.0.1", 0))
    server.listen(5)
    port = server.getsockname()[1]

    def serve():
        while True:
            try:
                conn, _ = server.accept()
            except OSError:
                return
            try:
                conn.sendall(b"\xff" * 64 + b"HTTP/1.1 200 OK\r\n\r\nnot a scheduler" * 10)
            except OSError:
                pass

    threading.Thread(target=serve, daemon=True).start()
    try:
        code, out, err = run_cli(["compare", base / "scenario.toml", "-o", tmp_path / "out", "--replicates", "2",
                                  "--no-progress", "--run-on", f"tcp://127.0.0.1:{port}"], capsys)
    finally:
        server.close()
    message = " ".join((out + err).split())
    assert code in (2, 5), message
    assert "--run-on" in message and str(port) in message and "Traceback" not in message
    assert not (tmp_path / "out").exists()
