"""Scenario files: the analyst's single source of truth, read from TOML and validated once.

A scenario names the data (a case table, a counts table, an already estimated risk-level
table, or the built-in simulator), maps its columns, declares the ordered decision levels and
the outcome kinds with their costs, the cell covariates, protected attributes and what a rule
may use, and the estimator settings. Every key is documented in ``docs/scenario.md``; a test
checks that the documentation and :data:`SCHEMA` agree.

Later stages (constraints, candidate rules, sweeps) read their own sections from
:attr:`Scenario.raw` through :func:`read_section`, so every section is validated with the
same messages.
"""

from __future__ import annotations

import sys
from dataclasses import dataclass, field
from pathlib import Path
from dataclasses import replace
from typing import Any, Callable, Mapping, Sequence

from policy.errors import InputError
from policy.inputs.cost_build import CostBuild, CostLibrary, build_cost, fmt_amount, load_cost_library
from policy.inputs.limits import number, simulated_cases, whole_number
from policy.inputs.registry import SECTION_MODULES, register_section_module

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - exercised on Python 3.10 only
    import tomli as tomllib

__all__ = [
    "Key",
    "SCHEMA",
    "load_section_modules",
    "register_section_module",
    "Scenario",
    "DecisionLevel",
    "OutcomeKind",
    "DataSource",
    "EstimatorSettings",
    "AidSettings",
    "load_scenario",
    "read_section",
    "register_section",
]


@dataclass(frozen=True)
class Key:
    """One key of a scenario section: its name, accepted types, whether required, and its meaning."""

    name: str
    types: tuple[type, ...]
    required: bool = False
    default: Any = None
    doc: str = ""
    #: for list keys: the type every element must have
    item_type: type | None = None

    def expected(self) -> str:
        names = {str: "a string", int: "an integer", float: "a number", bool: "true or false",
                 list: "a list", dict: "a table"}
        text = " or ".join(names.get(t, t.__name__) for t in self.types)
        if self.item_type is not None:
            text += f" of {names.get(self.item_type, self.item_type.__name__).split(' ', 1)[1]}s"
        return text


def _type_ok(value: Any, key: Key) -> bool:
    # TOML integers are acceptable where a number is asked for; booleans never are numbers.
    if isinstance(value, bool):
        return bool in key.types
    ok = isinstance(value, key.types) or (float in key.types and isinstance(value, int))
    if ok and key.item_type is not None:
        return all(_type_ok(v, Key("item", (key.item_type,))) for v in value)
    return ok


def read_section(raw: Any, keys: Sequence[Key], where: str, file: str) -> dict[str, Any]:
    """Validate one table of a scenario file against its declared keys.

    Parameters
    ----------
    raw : dict
        The table as parsed from TOML.
    keys : sequence of Key
        The keys this table may have.
    where : str
        How the table is named in messages, e.g. ``"[estimator]"`` or ``"[[decisions]] #2"``.
    file : str
        The scenario file's name, for messages.

    Returns
    -------
    dict
        Every declared key, with defaults filled in for absent optional keys.
    """
    if not isinstance(raw, dict):
        raise InputError(f"{file}: {where} must be a table; got {type(raw).__name__} {raw!r}.")
    known = {k.name: k for k in keys}
    unknown = sorted(set(raw) - set(known))
    if unknown:
        raise InputError(
            f"{file}: unknown key {unknown[0]!r} in {where}; expected one of: "
            f"{', '.join(sorted(known))}."
        )
    out: dict[str, Any] = {}
    for key in keys:
        if key.name not in raw:
            if key.required:
                raise InputError(f"{file}: missing key {key.name!r} in {where}; expected {key.expected()} ({key.doc}).")
            out[key.name] = key.default
            continue
        value = raw[key.name]
        if not _type_ok(value, key):
            raise InputError(
                f"{file}: key {key.name!r} in {where} must be {key.expected()}; got {value!r}."
            )
        if isinstance(value, float) or (float in key.types and isinstance(value, int) and not isinstance(value, bool)):
            # every number must be finite and of a sane size (TOML spells nan and inf)
            number(value, f"{file}: key {key.name!r} in {where}")
        out[key.name] = float(value) if (float in key.types and int not in key.types and isinstance(value, int)) else value
    return out


# ---------------------------------------------------------------------------------------------
# The schema. Section name -> keys. "[[x]]" sections are arrays of tables.
# ---------------------------------------------------------------------------------------------
SCHEMA: dict[str, tuple[Key, ...]] = {
    "[scenario]": (
        Key("title", (str,), True, doc="a short title shown on every output"),
        Key("description", (str,), False, "", "a longer description of the question"),
        Key("seed", (int,), False, 20261202, "seed for every random step (simulation, bootstrap)"),
    ),
    "[data]": (
        Key("case_table", (str,), doc="path of a case table (CSV or Parquet), relative to the scenario file"),
        Key("counts_table", (str,), doc="path of an aggregated counts table (CSV or Parquet)"),
        Key("risk_level_table", (str,), doc="path of an already estimated risk-level table (CSV or Parquet)"),
        Key("simulate", (int,), doc="number of cases to draw from the built-in simulator of the invented demo jurisdiction"),
    ),
    "[columns]": (
        Key("case_id", (str,), doc="column of case identifiers; checked for duplicates"),
        Key("arm", (str,), doc="0/1 column: whether the court was shown the risk aid for this case"),
        Key("decision", (str,), False, "decision", "column of the release decision actually made"),
    ),
    "[[decisions]]": (
        Key("value", (str, int), True, doc="how this level is written in the decision column"),
        Key("label", (str,), True, doc="the level's name in outputs"),
        Key("cost", (float,), doc="cost of imposing this level on one case, in the cost unit"),
        Key("cost_column", (str,), doc="column holding a per-case cost of this level, averaged per cell"),
        Key("cost_factor", (float,), False, 1.0, "with cost_column: a factor on every cell's cost from the column (what-if runs; default 1)"),
        Key("cost_source", (str,), False, "", "where the cost comes from, with its provenance"),
        Key("cost_from", (str, dict), doc="the cost built from cost-library components: an expression, or with cost_by a table of class value = expression"),
        Key("cost_by", (str,), doc="with cost_column and a cost_from table: the cell column whose values key the table"),
    ),
    "[[outcomes]]": (
        Key("key", (str,), True, doc="short identifier of the outcome kind (letters, digits, _)"),
        Key("column", (str,), doc="0/1/empty column of the case table; defaults to the key"),
        Key("label", (str,), True, doc="the outcome's name in outputs"),
        Key("cost", (float,), doc="cost of one adverse outcome of this kind, in the cost unit (or give cost_from)"),
        Key("cost_source", (str,), False, "", "where the cost comes from, with its provenance"),
        Key("cost_from", (str,), doc="the cost built from cost-library components: an expression over their keys"),
        Key("impossible_from", (str, int), doc="a decision value from which on (it and every harsher level) the outcome cannot occur"),
    ),
    "[cost_library]": (
        Key("file", (str,), doc="a cost library of the package's shape (CSV), relative to the scenario file (default: the package's)"),
        Key("price_index", (str,), doc="a price-index table of the package's shape (default: the package's)"),
        Key("price_year", (int,), doc="bring every component with a price year to this year's prices"),
        Key("unadjusted", (list,), False, [], "component keys kept in their published year's prices (no factor at hand)", item_type=str),
    ),
    "[costs]": (
        Key("unit", (str,), True, doc="the unit of every cost, e.g. 'USD (2024)'"),
        Key("note", (str,), False, "", "what the costs mean and whether they are illustrative"),
    ),
    "[cells]": (
        Key("covariates", (list,), True, doc="discrete columns that define cells", item_type=str),
        Key("protected", (list,), False, [], "protected attributes; also part of the cell", item_type=str),
        Key("rule", (list,), True, doc="columns a rule may use; each a covariate or protected attribute", item_type=str),
        Key("order", (dict,), False, {}, "optional display order of a covariate's values: name = [values]"),
        Key("bins", (dict,), False, {}, "optional intervals of a numeric cell column: name = { cuts = [numbers], labels = [texts] }"),
        Key("labels", (dict,), False, {}, "optional display names of cell columns in outputs: name = \"label\" (default: the name with spaces for _)"),
    ),
    "[aid]": (
        Key("name", (str,), False, "the risk aid", "name of the risk-assessment aid"),
        Key("score", (str,), doc="cell covariate holding the aid's score or tier (ordered)"),
        Key("recommendation", (str,), doc="column of the aid's recommended decision value"),
    ),
    "[estimator]": (
        Key("prior_strength", (str, float), False, "auto", "'auto' (empirical Bayes) or the beta prior's strength in cases"),
        Key("target_covariates", (list,), doc="cell columns of the log-linear baseline model sparse cells borrow from (default: every cell column)", item_type=str),
        Key("sparse_below", (int,), False, 20, "a cell with fewer cases is reported as sparse"),
        Key("level_terms", (bool,), False, True,
            "let each level's risk ratio vary with a cell column where Akaike's criterion keeps that term (false: one ratio per level)"),
        Key("translation_limit", (float,), doc="keep each shrunk rate within this many standard errors of the cell's own rate (a number > 0; default: no limit)"),
    ),
}

#: Sections that later stages parse themselves (constraints, candidate rules, ...):
#: section name -> parser(raw value or None, scenario) -> parsed value, kept in
#: :attr:`Scenario.sections`. Each parser validates with :func:`read_section` and adds its
#: keys to :data:`SCHEMA` so they are documented like every other key.
SECTION_PARSERS: dict[str, Callable[[Any, "Scenario"], Any]] = {}


def register_section(name: str, keys: Sequence[Key], parser: Callable[[Any, "Scenario"], Any]) -> None:
    """Declare a scenario section read by a later stage: its keys and its parser."""
    SCHEMA[name] = tuple(keys)
    SECTION_PARSERS[name.strip("[]")] = parser


def load_section_modules() -> dict[str, tuple[Key, ...]]:
    """Import every module of :data:`SECTION_MODULES` (each registers its sections); the full :data:`SCHEMA`."""
    import importlib

    for module in SECTION_MODULES:  # named by the package (policy.inputs.registry)
        importlib.import_module(module)
    return SCHEMA


@dataclass(frozen=True)
class DataSource:
    """Where the data come from: exactly one of the four kinds."""

    kind: str  # "case_table" | "counts_table" | "risk_level_table" | "simulate"
    path: Path | None = None
    simulate: int | None = None


@dataclass(frozen=True)
class DecisionLevel:
    """One ordered decision level (index 0 is the most lenient)."""

    value: str
    label: str
    cost: float | None
    cost_column: str | None
    cost_source: str = ""
    #: factor on every cell's cost from ``cost_column`` (1 unless a what-if run sets it)
    cost_factor: float = 1.0
    #: how the cost is built from the cost library (``cost_from``), if it is
    cost_build: CostBuild | None = None


@dataclass(frozen=True)
class OutcomeKind:
    """One adverse outcome kind with its cost."""

    key: str
    column: str
    label: str
    cost: float
    cost_source: str = ""
    #: index of the least harsh level from which the outcome cannot occur (structural zero)
    impossible_from: int | None = None
    #: how the cost is built from the cost library (``cost_from``), if it is
    cost_build: CostBuild | None = None


@dataclass(frozen=True)
class EstimatorSettings:
    """Settings of the cell estimator of risk levels."""

    prior_strength: float | str = "auto"
    target_covariates: tuple[str, ...] | None = None
    sparse_below: int = 20
    level_terms: bool = True
    translation_limit: float | None = None


@dataclass(frozen=True)
class AidSettings:
    """The risk-assessment aid: its name, its score covariate and recommendation column."""

    name: str = "the risk aid"
    score: str | None = None
    recommendation: str | None = None


@dataclass(frozen=True)
class Scenario:
    """A validated scenario. Build one with :func:`load_scenario` or :meth:`from_dict`."""

    title: str
    data: DataSource
    levels: tuple[DecisionLevel, ...]
    outcomes: tuple[OutcomeKind, ...]
    covariates: tuple[str, ...]
    protected: tuple[str, ...]
    rule_covariates: tuple[str, ...]
    cost_unit: str
    description: str = ""
    seed: int = 20261202
    case_id: str | None = None
    arm: str | None = None
    decision: str = "decision"
    cost_note: str = ""
    order: Mapping[str, tuple] = field(default_factory=dict)
    #: display names of cell columns given in ``[cells] labels``
    labels: Mapping[str, str] = field(default_factory=dict)
    #: numeric cell columns cut into labelled intervals (``[cells] bins``; :mod:`policy.inputs.bins`)
    bins: Mapping[str, Any] = field(default_factory=dict)
    aid: AidSettings = AidSettings()
    estimator: EstimatorSettings = EstimatorSettings()
    path: Path | None = None
    raw: Mapping[str, Any] = field(default_factory=dict, repr=False)
    #: parsed sections of later stages, by section name (see :func:`register_section`)
    sections: Mapping[str, Any] = field(default_factory=dict, repr=False)
    #: the cost library the costs are built from (``[cost_library]``), when any cost is
    cost_library: CostLibrary | None = field(default=None, repr=False)

    # -- derived names ------------------------------------------------------------------------
    @property
    def file(self) -> str:
        """The scenario's file name for messages."""
        return self.path.name if self.path is not None else "<scenario>"

    @property
    def cell_columns(self) -> tuple[str, ...]:
        """Every column that defines a cell: covariates then protected attributes."""
        return self.covariates + tuple(p for p in self.protected if p not in self.covariates)

    def column_label(self, column: str) -> str:
        """A cell column's display name: its ``[cells] labels`` entry, else the name with spaces for ``_``."""
        return self.labels.get(column) or str(column).replace("_", " ")

    @property
    def level_values(self) -> tuple[str, ...]:
        return tuple(level.value for level in self.levels)

    @property
    def level_labels(self) -> tuple[str, ...]:
        return tuple(level.label for level in self.levels)

    @property
    def outcome_keys(self) -> tuple[str, ...]:
        return tuple(o.key for o in self.outcomes)

    @property
    def outcome_labels(self) -> tuple[str, ...]:
        return tuple(o.label for o in self.outcomes)

    @property
    def outcome_label_map(self) -> dict[str, str]:
        """Each outcome key's display label."""
        return {o.key: o.label for o in self.outcomes}

    @property
    def cost_columns(self) -> tuple[str, ...]:
        return tuple(level.cost_column for level in self.levels if level.cost_column)

    @property
    def base_dir(self) -> Path:
        return self.path.parent if self.path is not None else Path.cwd()

    def outcome_index(self, key: str, where: str = "outcome") -> int:
        """Position of an outcome kind by key, with a clear message if unknown."""
        keys = self.outcome_keys
        if key not in keys:
            raise InputError(f"{self.file}: {where} {key!r} is not a declared outcome kind; expected one of: {', '.join(keys)}.")
        return keys.index(key)

    def level_index(self, value: Any, where: str = "decision level") -> int:
        """Position of a decision level by its value or label, with a clear message if unknown."""
        text = str(value)
        for i, level in enumerate(self.levels):
            if text in (level.value, level.label):
                return i
        raise InputError(
            f"{self.file}: {where} {value!r} is not a declared decision level; expected one of: "
            f"{', '.join(self.level_values)}."
        )

    # -- construction ------------------------------------------------------------------------
    @classmethod
    def from_dict(cls, raw: Mapping[str, Any], path: str | Path | None = None) -> "Scenario":
        """Validate a parsed scenario (a dict as from TOML); ``path`` anchors relative paths."""
        path = Path(path).resolve() if path is not None else None
        file = path.name if path is not None else "<scenario>"
        raw = dict(raw)
        load_section_modules()
        allowed = {name.strip("[]") for name in SCHEMA}
        unknown = sorted(set(raw) - allowed)
        if unknown:
            raise InputError(f"{file}: unknown section [{unknown[0]}]; expected one of: {', '.join(sorted(allowed))}.")
        for required in ("scenario", "data", "decisions", "outcomes", "costs", "cells"):
            if required not in raw:
                raise InputError(f"{file}: missing section [{required}]; see docs/scenario.md.")

        head = read_section(raw["scenario"], SCHEMA["[scenario]"], "[scenario]", file)
        whole_number(head["seed"], f"{file}: key 'seed' in [scenario]", low=0, expected="a whole number >= 0")
        data = _data_source(read_section(raw["data"], SCHEMA["[data]"], "[data]", file), path, file)
        cols = read_section(raw.get("columns", {}), SCHEMA["[columns]"], "[columns]", file)
        costs = read_section(raw["costs"], SCHEMA["[costs]"], "[costs]", file)
        cells = read_section(raw["cells"], SCHEMA["[cells]"], "[cells]", file)
        aid = read_section(raw.get("aid", {}), SCHEMA["[aid]"], "[aid]", file)
        est = read_section(raw.get("estimator", {}), SCHEMA["[estimator]"], "[estimator]", file)

        library = _library(raw, path, file)
        levels = _levels(raw["decisions"], file, library)
        level_values = [lv.value for lv in levels]
        outcomes = _outcomes(raw["outcomes"], level_values, file, library)

        covariates = tuple(cells["covariates"])
        protected = tuple(cells["protected"])
        cell_columns = covariates + tuple(p for p in protected if p not in covariates)
        if not covariates and not protected:
            raise InputError(f"{file}: [cells] covariates and protected are both empty; at least one cell column is needed.")
        for name, seq in (("covariates", covariates), ("protected", protected), ("rule", cells["rule"])):
            dup = sorted({c for c in seq if list(seq).count(c) > 1})
            if dup:
                raise InputError(f"{file}: [cells] {name} lists {dup[0]!r} twice.")
        for r in cells["rule"]:
            if r not in cell_columns:
                raise InputError(
                    f"{file}: [cells] rule lists {r!r}, which is not a cell covariate or protected attribute; "
                    f"expected one of: {', '.join(cell_columns)}."
                )
        order = {}
        for name, values in cells["order"].items():
            if name not in cell_columns:
                raise InputError(f"{file}: [cells] order names {name!r}, which is not a cell column; expected one of: {', '.join(cell_columns)}.")
            if not isinstance(values, list) or not values:
                raise InputError(f"{file}: [cells] order.{name} must be a non-empty list of values; got {values!r}.")
            twice = sorted({str(v) for v in values if [str(w) for w in values].count(str(v)) > 1})
            if twice:
                raise InputError(f"{file}: [cells] order.{name} lists {twice[0]!r} twice; list each value once.")
            order[name] = tuple(values)
        from policy.inputs.bins import parse_bins

        bins = parse_bins(cells["bins"], cell_columns, order, file)
        order.update({name: b.labels for name, b in bins.items()})
        labels = {}
        for name, text in cells["labels"].items():
            if name not in cell_columns:
                raise InputError(f"{file}: [cells] labels names {name!r}, which is not a cell column; expected one of: {', '.join(cell_columns)}.")
            if not isinstance(text, str) or not text.strip():
                raise InputError(f"{file}: [cells] labels.{name} must be a non-empty text; got {text!r}.")
            labels[name] = text.strip()
        if aid["score"] is not None and aid["score"] not in cell_columns:
            raise InputError(f"{file}: [aid] score {aid['score']!r} must be a cell covariate; expected one of: {', '.join(cell_columns)}.")
        for p in est["target_covariates"] or ():
            if p not in cell_columns:
                raise InputError(f"{file}: [estimator] target_covariates lists {p!r}, which is not a cell column; expected one of: {', '.join(cell_columns)}.")
        strength = est["prior_strength"]
        if isinstance(strength, str) and strength != "auto":
            raise InputError(f"{file}: key 'prior_strength' in [estimator] must be 'auto' or a number >= 0; got {strength!r}.")
        if not isinstance(strength, str) and strength < 0:
            raise InputError(f"{file}: key 'prior_strength' in [estimator] must be 'auto' or a number >= 0; got {strength!r}.")
        if est["sparse_below"] < 0:
            raise InputError(f"{file}: key 'sparse_below' in [estimator] must be >= 0; got {est['sparse_below']!r}.")
        for i, level in enumerate(levels, 1):
            if level.cost_build is not None and level.cost_build.by is not None:
                _check_cost_by(level.cost_build, cell_columns, order, f"{file}: key 'cost_by' in [[decisions]] #{i}")
        if est["translation_limit"] is not None and not est["translation_limit"] > 0:
            raise InputError(f"{file}: key 'translation_limit' in [estimator] must be a number > 0 (standard errors); "
                             f"got {est['translation_limit']!r}.")
        if data.kind == "risk_level_table" and cols["arm"] is not None:
            raise InputError(f"{file}: [columns] arm has no meaning with [data] risk_level_table (no decisions are observed); remove it.")
        if data.kind == "simulate":
            simulated_cases(data.simulate, f"{file}: key 'simulate' in [data]")

        scenario = cls(
            title=head["title"],
            description=head["description"],
            seed=head["seed"],
            data=data,
            case_id=cols["case_id"],
            arm=cols["arm"],
            decision=cols["decision"],
            levels=tuple(levels),
            outcomes=tuple(outcomes),
            covariates=covariates,
            protected=protected,
            rule_covariates=tuple(cells["rule"]),
            order=order,
            labels=labels,
            bins=bins,
            cost_unit=costs["unit"],
            cost_note=costs["note"],
            aid=AidSettings(**aid),
            estimator=EstimatorSettings(
                prior_strength=strength,
                target_covariates=None if est["target_covariates"] is None else tuple(est["target_covariates"]),
                sparse_below=est["sparse_below"],
                level_terms=est["level_terms"],
                translation_limit=est["translation_limit"],
            ),
            path=path,
            raw=raw,
            cost_library=library,
        )
        parsed = {name: parser(raw.get(name), scenario) for name, parser in SECTION_PARSERS.items()}
        return replace(scenario, sections=parsed)


def _data_source(data: dict, path: Path | None, file: str) -> DataSource:
    given = [k for k in ("case_table", "counts_table", "risk_level_table", "simulate") if data[k] is not None]
    if len(given) != 1:
        raise InputError(
            f"{file}: [data] must give exactly one of case_table, counts_table, risk_level_table, simulate; "
            f"got {', '.join(given) if given else 'none'}."
        )
    kind = given[0]
    if kind == "simulate":
        return DataSource(kind, simulate=data["simulate"])
    base = path.parent if path is not None else Path.cwd()
    target = (base / data[kind]).resolve()
    if kind == "risk_level_table" and target.suffix.lower() in (".nc", ".nc4", ".netcdf"):
        return DataSource(kind, path=target)  # draws in netCDF (policy.estimation.draws_netcdf)
    if target.suffix.lower() not in (".csv", ".parquet"):
        extra = " (a risk-level table with draws may also be netCDF: .nc)" if kind == "risk_level_table" else ""
        raise InputError(f"{file}: [data] {kind} {data[kind]!r} must end in .csv or .parquet{extra}.")
    return DataSource(kind, path=target)


def _library(raw: Mapping[str, Any], path: Path | None, file: str) -> CostLibrary | None:
    """The cost library, read when ``[cost_library]`` is given or any cost is built from it."""
    entries = [e for name in ("decisions", "outcomes") if isinstance(raw.get(name), list) for e in raw[name]]
    if "cost_library" not in raw and not any(isinstance(e, dict) and "cost_from" in e for e in entries):
        return None
    settings = read_section(raw.get("cost_library", {}), SCHEMA["[cost_library]"], "[cost_library]", file)
    return load_cost_library(settings, path.parent if path is not None else Path.cwd(), file)


def _built_cost(d: dict, library: CostLibrary | None, where: str, file: str) -> tuple[float | None, CostBuild | None]:
    """The cost of one ``[[decisions]]``/``[[outcomes]]`` entry with its build: a stated ``cost``
    and a ``cost_from`` must agree to within half a unit (the stated number is kept)."""
    if d["cost_from"] is None:
        if d.get("cost_by") is not None:
            raise InputError(f"{file}: key 'cost_by' in {where} applies only with a cost_from table.")
        return d["cost"], None
    assert library is not None
    build = build_cost(d["cost_from"], library, f"{file}: key 'cost_from' in {where}", d.get("cost_by"))
    if build.by is not None:
        if d.get("cost_column") is None:
            raise InputError(f"{file}: a cost_from table by {build.by!r} in {where} states how the per-case costs of "
                             "'cost_column' were built; give cost_column too (or one expression for one cost).")
        return d["cost"], build
    if d.get("cost_column") is not None:
        raise InputError(f"{file}: {where} gives cost_column and one cost_from expression; a per-case column's build "
                         "is a table by class with cost_by.")
    if d["cost"] is not None and abs(d["cost"] - build.value) > 0.5:
        raise InputError(f"{file}: key 'cost' in {where} is {fmt_amount(d['cost'])} but its cost_from comes to "
                         f"{build.describe()}; make them agree (to the unit) or drop one.")
    return (build.value if d["cost"] is None else d["cost"]), build


def _check_cost_by(build: CostBuild, cell_columns: tuple[str, ...], order: Mapping[str, tuple], where: str) -> None:
    if build.by not in cell_columns:
        raise InputError(f"{where} is {build.by!r}, not a cell column; expected one of: {', '.join(cell_columns)}.")
    known = [str(v) for v in order.get(build.by, ())]
    names = [name for name, _ in build.parts]
    if known and sorted(names) != sorted(known):
        raise InputError(f"{where}: the cost_from table lists {', '.join(names)}; expected one entry for each "
                         f"value of {build.by!r}: {', '.join(known)}.")


def _levels(raw: Any, file: str, library: CostLibrary | None = None) -> list[DecisionLevel]:
    if not isinstance(raw, list) or len(raw) < 2:
        raise InputError(f"{file}: [[decisions]] must list at least two ordered decision levels, most lenient first.")
    out = []
    for i, entry in enumerate(raw, 1):
        where = f"[[decisions]] #{i}"
        d = read_section(entry, SCHEMA["[[decisions]]"], where, file)
        d["cost"], build = _built_cost(d, library, where, file)
        if (d["cost"] is None) == (d["cost_column"] is None):
            raise InputError(f"{file}: {where} must give exactly one of 'cost' (a number) or 'cost_column' (a column name).")
        if d["cost"] is not None and d["cost"] < 0:
            raise InputError(f"{file}: key 'cost' in {where} must be >= 0; got {d['cost']!r}.")
        if "cost_factor" in entry and d["cost_column"] is None:
            raise InputError(f"{file}: key 'cost_factor' in {where} applies only with 'cost_column'; give the cost itself in 'cost'.")
        if not (d["cost_factor"] >= 0 and d["cost_factor"] < float("inf")):
            raise InputError(f"{file}: key 'cost_factor' in {where} must be a finite number >= 0; got {d['cost_factor']!r}.")
        out.append(DecisionLevel(str(d["value"]), d["label"], d["cost"], d["cost_column"], d["cost_source"], float(d["cost_factor"]),
                                 build))
    for attr in ("value", "label"):
        seen = [getattr(lv, attr) for lv in out]
        dup = sorted({v for v in seen if seen.count(v) > 1})
        if dup:
            raise InputError(f"{file}: [[decisions]] {attr} {dup[0]!r} is declared twice.")
    return out


def _outcomes(raw: Any, level_values: list[str], file: str, library: CostLibrary | None = None) -> list[OutcomeKind]:
    if not isinstance(raw, list) or not raw:
        raise InputError(f"{file}: [[outcomes]] must list at least one outcome kind.")
    out = []
    for i, entry in enumerate(raw, 1):
        where = f"[[outcomes]] #{i}"
        o = read_section(entry, SCHEMA["[[outcomes]]"], where, file)
        o["cost"], build = _built_cost(o, library, where, file)
        if o["cost"] is None:
            raise InputError(f"{file}: missing key 'cost' in {where}; expected a number (or cost_from, a build from the cost library).")
        if not o["key"].replace("_", "").isalnum():
            raise InputError(f"{file}: key 'key' in {where} must use letters, digits and _ only; got {o['key']!r}.")
        if o["cost"] < 0:
            raise InputError(f"{file}: key 'cost' in {where} must be >= 0; got {o['cost']!r}.")
        impossible = None
        if o["impossible_from"] is not None:
            value = str(o["impossible_from"])
            if value not in level_values:
                raise InputError(
                    f"{file}: key 'impossible_from' in {where} is {value!r}, not a declared decision value; "
                    f"expected one of: {', '.join(level_values)}."
                )
            impossible = level_values.index(value)
            if impossible == 0:
                raise InputError(f"{file}: key 'impossible_from' in {where} names the most lenient level; the outcome would be impossible under every decision.")
        out.append(OutcomeKind(o["key"], o["column"] or o["key"], o["label"], o["cost"], o["cost_source"], impossible, build))
    keys = [o.key for o in out]
    dup = sorted({k for k in keys if keys.count(k) > 1})
    if dup:
        raise InputError(f"{file}: [[outcomes]] key {dup[0]!r} is declared twice.")
    return out


def as_scenario(scenario: "Scenario | str | Path") -> "Scenario":
    """A scenario as given, or loaded from its file."""
    return scenario if isinstance(scenario, Scenario) else load_scenario(scenario)


def load_scenario(path: str | Path) -> Scenario:
    """Read and validate a scenario file (TOML).

    Raises
    ------
    InputError
        If the file is missing, is not valid TOML, or breaks the schema; the message names
        the file, the key and what was expected.
    """
    path = Path(path)
    if path.is_dir():
        raise InputError(f"Scenario file {str(path)!r} is a folder, not a file; give the scenario's .toml file.")
    if not path.is_file():
        raise InputError(f"Scenario file {str(path)!r} does not exist.")
    try:
        raw = tomllib.loads(path.read_text(encoding="utf-8"))
    except UnicodeDecodeError as exc:
        raise InputError(f"{path.name}: not UTF-8 text ({exc.reason} at byte {exc.start}).") from None
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"{path.name}: not valid TOML: {exc}.") from None
    return Scenario.from_dict(raw, path)
