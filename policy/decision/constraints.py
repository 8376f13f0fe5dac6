"""Constraints on a release rule: what a committee may demand, declared and turned into LP rows.

Each constraint is a :class:`ConstraintSpec` (a kind, its arguments and a bound), declared in a
scenario file as one table of the ``[[constraints]]`` array or on the command line, and turned
by :func:`constraint_rows` into rows ``lower <= M delta <= upper`` over the decision
probabilities delta(d | g) of the rule cells, flattened as ``g * L + d`` (method notes,
section 5). Every row is written in probability or share units, so a row's value always lies
in [-1, 1]: the bound is a tolerance on a difference of probabilities, a share of cases or an
outcome rate.

Kinds
-----
principal_fairness
    For outcome kind j, each risk level r, each threshold t and each pair of groups a, b of a
    protected attribute: |P(D >= t | R_j = r, A = a) - P(D >= t | R_j = r, A = b)| <= tolerance
    ("Principal Fairness for Human and Algorithmic Decision-Making", Statistical Science, 2023).
statistical_parity
    |P(D >= t | A = a) - P(D >= t | A = b)| <= tolerance.
conditional_parity
    Statistical parity within each level of a stated covariate.
group_blind
    The rule may not use the protected attribute: rule cells that differ only in it get the
    same decision probabilities.
capacity
    Expected share (or number) of cases at level t or harsher is at most a cap.
outcome_cap
    Expected rate of outcome kind j is at most a cap.
monotone
    P(D >= t | g) does not fall as the aid's score rises, within rule cells otherwise equal.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from itertools import combinations
from typing import Any, Callable, Mapping, Sequence

import numpy as np
import scipy.sparse as sp

from policy.errors import InputError
from policy.inputs.scenario import Key, read_section, register_section

__all__ = [
    "KINDS",
    "CONSTRAINT_KEYS",
    "ConstraintSpec",
    "RowBlock",
    "Vocabulary",
    "constraint_rows",
    "parse_constraint_text",
    "scenario_specs",
    "shorthand_tables",
    "spec_from_table",
]

KINDS: tuple[str, ...] = (
    "principal_fairness",
    "statistical_parity",
    "conditional_parity",
    "group_blind",
    "capacity",
    "outcome_cap",
    "monotone",
)

#: keys of one ``[[constraints]]`` table
CONSTRAINT_KEYS: tuple[Key, ...] = (
    Key("kind", (str,), True, doc="one of: " + ", ".join(KINDS)),
    Key("name", (str,), doc="the constraint's name in outputs (default: its position and kind)"),
    Key("outcome", (str,), doc="outcome key (principal_fairness, outcome_cap)"),
    Key("attribute", (str,), doc="protected attribute (fairness kinds, group_blind); default: every protected attribute"),
    Key("within", (str,), doc="cell covariate whose levels conditional_parity holds within"),
    Key("risk_levels", (list,), doc="principal_fairness: risk levels 0..K+1 to hold it at (default: all)", item_type=int),
    Key("thresholds", (list,), doc="decision values t for the comparisons of P(D >= t) (default: every level but the most lenient)", item_type=str),
    Key("at_least", (str, int), doc="capacity: counts cases at this decision level or harsher (default: the harshest level)"),
    Key("tolerance", (float,), doc="largest allowed difference of probabilities, 0..1 (fairness kinds; monotone, default 0)"),
    Key("max_share", (float,), doc="capacity: largest expected share of cases, 0..1"),
    Key("max_cases", (float,), doc="capacity: largest expected number of cases"),
    Key("max_rate", (float,), doc="outcome_cap: largest expected rate of the outcome, 0..1"),
    Key("score", (str,), doc="monotone: the ordered rule column (default: [aid] score)"),
)

#: which keys each kind accepts, and which it requires (besides kind and name)
_ACCEPTS: dict[str, tuple[set[str], set[str]]] = {
    "principal_fairness": ({"outcome", "attribute", "risk_levels", "thresholds", "tolerance"}, {"outcome", "tolerance"}),
    "statistical_parity": ({"attribute", "thresholds", "tolerance"}, {"tolerance"}),
    "conditional_parity": ({"within", "attribute", "thresholds", "tolerance"}, {"within", "tolerance"}),
    "group_blind": ({"attribute"}, set()),
    "capacity": ({"at_least", "max_share", "max_cases"}, set()),
    "outcome_cap": ({"outcome", "max_rate"}, {"outcome", "max_rate"}),
    "monotone": ({"score", "thresholds", "tolerance"}, set()),
}

#: how the bound of each kind is named and in what unit it is declared
BOUND_UNITS = {
    "tolerance": "probability difference",
    "max_share": "share of cases",
    "max_cases": "cases",
    "max_rate": "outcome rate",
}


@dataclass(frozen=True)
class Vocabulary:
    """The names a constraint may refer to: decision levels, outcome kinds, columns."""

    level_values: tuple[str, ...]
    level_labels: tuple[str, ...]
    outcome_keys: tuple[str, ...]
    protected: tuple[str, ...]
    cell_columns: tuple[str, ...]
    rule_columns: tuple[str, ...]
    score: str | None
    file: str = "<constraints>"

    @classmethod
    def of_scenario(cls, scenario) -> "Vocabulary":
        return cls(scenario.level_values, scenario.level_labels, scenario.outcome_keys, scenario.protected,
                   scenario.cell_columns, scenario.rule_covariates, scenario.aid.score, scenario.file)

    @classmethod
    def of_risk_levels(cls, risk_levels, rule_columns: Sequence[str] | None = None) -> "Vocabulary":
        layout = risk_levels.layout
        return cls(risk_levels.level_values, risk_levels.level_labels, risk_levels.outcome_keys, layout.protected,
                   layout.columns, tuple(layout.rule_columns if rule_columns is None else rule_columns), layout.score)

    def level(self, value: Any, where: str) -> int:
        text = str(value)
        for i, (v, lab) in enumerate(zip(self.level_values, self.level_labels)):
            if text in (v, lab):
                return i
        raise InputError(f"{self.file}: {where} {value!r} is not a declared decision level; expected one of: "
                         f"{', '.join(self.level_values)}.")


@dataclass(frozen=True)
class ConstraintSpec:
    """One declared constraint.

    Attributes
    ----------
    kind : str
        One of :data:`KINDS`.
    name : str
        How outputs call it.
    outcome, attribute, within, at_least, score : str or None
        Arguments (see :data:`CONSTRAINT_KEYS`); ``attribute=None`` means every protected attribute.
    risk_levels : tuple of int or None
    thresholds : tuple of str or None
        Decision values t of the comparisons P(D >= t); None means every level but the most lenient.
    tolerance, max_share, max_cases, max_rate : float or None
        The bound (exactly one applies to each kind; group_blind has none, its bound is 0).
    """

    kind: str
    name: str
    outcome: str | None = None
    attribute: str | None = None
    within: str | None = None
    risk_levels: tuple[int, ...] | None = None
    thresholds: tuple[str, ...] | None = None
    at_least: str | None = None
    tolerance: float | None = None
    max_share: float | None = None
    max_cases: float | None = None
    max_rate: float | None = None
    score: str | None = None

    @property
    def bound_key(self) -> str:
        """Which key holds the bound: 'tolerance', 'max_share', 'max_cases' or 'max_rate'."""
        if self.kind == "capacity":
            return "max_cases" if self.max_cases is not None else "max_share"
        if self.kind == "outcome_cap":
            return "max_rate"
        return "tolerance"

    @property
    def bound(self) -> float:
        """The declared bound, in its own unit (0 for group_blind and a monotone rule without tolerance)."""
        value = getattr(self, self.bound_key)
        return 0.0 if value is None else float(value)

    @property
    def bound_unit(self) -> str:
        return BOUND_UNITS[self.bound_key]

    def arguments(self) -> str:
        """The arguments as ``key=value`` text, for tables."""
        parts = []
        for key in ("outcome", "attribute", "within", "risk_levels", "thresholds", "at_least", "score"):
            value = getattr(self, key)
            if value is not None:
                text = "|".join(map(str, value)) if isinstance(value, tuple) else str(value)
                parts.append(f"{key}={text}")
        return ", ".join(parts)

    def describe(self) -> str:
        """One line a committee member can read."""
        args = self.arguments()
        bound = "" if self.kind == "group_blind" else f", {self.bound_key} {self.bound:g}"
        return f"{self.name}: {self.kind}" + (f" ({args})" if args else "") + bound


def spec_from_table(raw: Any, vocab: Vocabulary, position: int, where: str | None = None) -> ConstraintSpec:
    """Validate one constraint table (as from TOML or the command line) against the names it may use.

    Parameters
    ----------
    raw : dict
        Keys of :data:`CONSTRAINT_KEYS`.
    vocab : Vocabulary
        Decision levels, outcome kinds and columns of the scenario or the risk levels.
    position : int
        1-based position, for the default name and messages.
    where : str, optional
        How the table is named in messages (default ``"[[constraints]] #<position>"``).
    """
    where = where or f"[[constraints]] #{position}"
    file = vocab.file
    c = read_section(raw, CONSTRAINT_KEYS, where, file)
    kind = c["kind"]
    if kind not in _ACCEPTS:
        raise InputError(f"{file}: key 'kind' in {where} is {kind!r}; expected one of: {', '.join(KINDS)}.")
    accepts, requires = _ACCEPTS[kind]
    for key in CONSTRAINT_KEYS:
        if key.name in ("kind", "name") or c[key.name] is None:
            continue
        if key.name not in accepts:
            raise InputError(f"{file}: key {key.name!r} in {where} has no meaning for kind {kind!r}; "
                             f"that kind takes: {', '.join(sorted(accepts)) or 'no arguments'}.")
    for key in sorted(requires):
        if c[key] is None:
            doc = next(k.doc for k in CONSTRAINT_KEYS if k.name == key)
            raise InputError(f"{file}: missing key {key!r} in {where} (kind {kind!r}); expected {doc}.")
    if c["outcome"] is not None and c["outcome"] not in vocab.outcome_keys:
        raise InputError(f"{file}: key 'outcome' in {where} is {c['outcome']!r}, not a declared outcome kind; "
                         f"expected one of: {', '.join(vocab.outcome_keys)}.")
    if c["attribute"] is not None and c["attribute"] not in vocab.protected:
        raise InputError(f"{file}: key 'attribute' in {where} is {c['attribute']!r}, not a protected attribute; "
                         f"expected one of: {', '.join(vocab.protected) or '(none declared in [cells] protected)'}.")
    if kind in ("principal_fairness", "statistical_parity", "conditional_parity", "group_blind") and not vocab.protected:
        raise InputError(f"{file}: {where} (kind {kind!r}) needs protected attributes; [cells] protected is empty.")
    if c["within"] is not None and c["within"] not in vocab.cell_columns:
        raise InputError(f"{file}: key 'within' in {where} is {c['within']!r}, not a cell column; expected one of: "
                         f"{', '.join(vocab.cell_columns)}.")
    if c["within"] is not None and c["within"] in vocab.protected:
        raise InputError(f"{file}: key 'within' in {where} names the protected attribute {c['within']!r}; "
                         "parity within its levels compares nothing.")
    n_levels = len(vocab.level_values)
    if c["risk_levels"] is not None:
        bad = [r for r in c["risk_levels"] if not 0 <= r <= n_levels]
        if bad or not c["risk_levels"]:
            raise InputError(f"{file}: key 'risk_levels' in {where} must list risk levels 0..{n_levels}; got {c['risk_levels']!r}.")
    thresholds = None
    if c["thresholds"] is not None:
        if not c["thresholds"]:
            raise InputError(f"{file}: key 'thresholds' in {where} is empty; list decision values or leave it out.")
        idx = [vocab.level(t, f"key 'thresholds' in {where}: level") for t in c["thresholds"]]
        if 0 in idx:
            raise InputError(f"{file}: key 'thresholds' in {where} names the most lenient level "
                             f"{vocab.level_values[0]!r}; P(D >= it) is 1 for every rule.")
        thresholds = tuple(vocab.level_values[i] for i in idx)
    at_least = None
    if kind == "capacity":
        t = vocab.level(c["at_least"], f"key 'at_least' in {where}: level") if c["at_least"] is not None else n_levels - 1
        if t == 0:
            raise InputError(f"{file}: key 'at_least' in {where} names the most lenient level; every case is at it or harsher.")
        at_least = vocab.level_values[t]
        if (c["max_share"] is None) == (c["max_cases"] is None):
            raise InputError(f"{file}: {where} (kind 'capacity') must give exactly one of 'max_share' (0..1) or 'max_cases'.")
        if c["max_share"] is not None and not 0 <= c["max_share"] <= 1:
            raise InputError(f"{file}: key 'max_share' in {where} must be a share in 0..1; got {c['max_share']!r}.")
        if c["max_cases"] is not None and c["max_cases"] < 0:
            raise InputError(f"{file}: key 'max_cases' in {where} must be >= 0; got {c['max_cases']!r}.")
    for key in ("tolerance", "max_rate"):
        if c[key] is not None and not 0 <= c[key] <= 1:
            raise InputError(f"{file}: key {key!r} in {where} must be in 0..1 (a probability); got {c[key]!r}.")
    score = None
    if kind == "monotone":
        score = c["score"] or vocab.score
        if score is None:
            raise InputError(f"{file}: {where} (kind 'monotone') needs an ordered score: give 'score' or [aid] score.")
        if score not in vocab.rule_columns:
            raise InputError(f"{file}: {where} (kind 'monotone'): the score {score!r} is not a rule column; "
                             f"expected one of: {', '.join(vocab.rule_columns)}.")
    return ConstraintSpec(
        kind=kind,
        name=c["name"] or f"#{position} {kind}",
        outcome=c["outcome"],
        attribute=c["attribute"],
        within=c["within"],
        risk_levels=None if c["risk_levels"] is None else tuple(sorted(set(c["risk_levels"]))),
        thresholds=thresholds,
        at_least=at_least,
        tolerance=c["tolerance"] if kind != "monotone" else (c["tolerance"] or 0.0),
        max_share=c["max_share"],
        max_cases=c["max_cases"],
        max_rate=c["max_rate"],
        score=score,
    )


def parse_constraint_text(text: str) -> dict[str, Any]:
    """Turn ``kind=capacity,at_least=bond,max_share=0.15`` into a constraint table.

    Values of list keys are separated by ``|`` (``thresholds=supervision|bond``); numbers are
    read as numbers. The result is validated by :func:`spec_from_table` like a scenario table.
    """
    keys = {k.name: k for k in CONSTRAINT_KEYS}
    out: dict[str, Any] = {}
    for part in filter(None, (p.strip() for p in text.split(","))):
        name, sep, value = part.partition("=")
        name, value = name.strip(), value.strip()
        if not sep or not name:
            raise InputError(f"constraint {text!r}: {part!r} must look like KEY=VALUE, "
                             "e.g. kind=capacity,at_least=bond,max_share=0.15.")
        key = keys.get(name)
        if key is None:
            raise InputError(f"constraint {text!r}: unknown key {name!r}; expected one of: {', '.join(sorted(keys))}.")
        if list in key.types:
            items = [v.strip() for v in value.split("|") if v.strip()]
            out[name] = [_number(v, int) if key.item_type is int else v for v in items]
        elif float in key.types:
            out[name] = _number(value, float)
        else:
            out[name] = value
    return out


def _number(text: str, kind: type) -> Any:
    """A number if the text is one (percent signs allowed for shares), else the text (read_section says what is wrong)."""
    try:
        if kind is float and text.endswith("%"):
            return float(text[:-1]) / 100.0
        return kind(text)
    except ValueError:
        return text


def _parse_section(raw: Any, scenario) -> tuple[ConstraintSpec, ...]:
    if raw is None:
        return ()
    if not isinstance(raw, list):
        raise InputError(f"{scenario.file}: constraints must be an array of tables ([[constraints]]); got {type(raw).__name__}.")
    vocab = Vocabulary.of_scenario(scenario)
    specs = tuple(spec_from_table(entry, vocab, i) for i, entry in enumerate(raw, 1))
    _check_unique_names(specs, scenario.file)
    return specs


def _check_unique_names(specs: Sequence[ConstraintSpec], file: str) -> None:
    names = [s.name for s in specs]
    dup = sorted({n for n in names if names.count(n) > 1})
    if dup:
        raise InputError(f"{file}: two constraints are named {dup[0]!r}; give each its own 'name'.")


register_section("[[constraints]]", CONSTRAINT_KEYS, _parse_section)


def scenario_specs(scenario, extra: Sequence[Mapping | ConstraintSpec] = (), use_scenario: bool = True) -> tuple[ConstraintSpec, ...]:
    """The scenario's constraints (unless ``use_scenario`` is false) followed by ``extra`` ones.

    Extra constraints given as tables (e.g. from the command line) are validated against the
    scenario like its own ``[[constraints]]``; they are numbered after them.
    """
    own = tuple(scenario.sections.get("constraints", ())) if use_scenario else ()
    vocab = Vocabulary.of_scenario(scenario)
    added = []
    for i, entry in enumerate(extra, len(own) + 1):
        if isinstance(entry, ConstraintSpec):
            added.append(entry)
        else:
            added.append(spec_from_table(dict(entry), vocab, i, where=f"added constraint #{i}"))
    specs = own + tuple(added)
    _check_unique_names(specs, scenario.file)
    return specs


def shorthand_tables(group_blind: bool = False, principal_fairness: Sequence[str] = (), max_share: Sequence[str] = (),
                     max_rate: Sequence[str] = ()) -> list[dict[str, Any]]:
    """Constraint tables from the command line's short forms.

    ``principal_fairness`` items are ``OUTCOME=TOLERANCE``, ``max_share`` items ``LEVEL=SHARE``
    (cases at that level or harsher) and ``max_rate`` items ``OUTCOME=RATE``; shares and rates
    may be written as percentages (``15%``).
    """
    tables: list[dict[str, Any]] = []
    if group_blind:
        tables.append({"kind": "group_blind"})
    for option, items, key, value_key, kind in (
        ("--principal-fairness", principal_fairness, "outcome", "tolerance", "principal_fairness"),
        ("--max-share", max_share, "at_least", "max_share", "capacity"),
        ("--max-rate", max_rate, "outcome", "max_rate", "outcome_cap"),
    ):
        for item in items:
            name, sep, value = item.partition("=")
            number = _number(value.strip(), float)
            if not sep or not name.strip() or not isinstance(number, float):
                raise InputError(f"{option} {item!r} must look like NAME=NUMBER, e.g. {option} "
                                 f"{'bond=0.15' if key == 'at_least' else 'new_offense=0.02'}.")
            tables.append({"kind": kind, key: name.strip(), value_key: number})
    return tables


# ----------------------------------------------------------------------------------------------
# Rows
# ----------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class RowBlock:
    """The rows of one constraint: ``lower <= matrix @ delta <= upper`` with delta flattened g * L + d.

    The bound b (in internal units: probability or share) enters as ``upper = b`` and, for
    two-sided rows, ``lower = -b``; one-sided rows have ``lower = -inf``.

    Attributes
    ----------
    matrix : csr_matrix of shape (n_rows, G * L)
    two_sided : bool
    scale : float
        Declared bound / scale = internal bound (the total weight for ``max_cases``, else 1).
    labels : callable
        ``labels(i)`` describes row i in words.
    note : str
        Why a constraint has no rows, if it has none.
    """

    matrix: sp.csr_matrix
    two_sided: bool
    scale: float = 1.0
    labels: Callable[[int], str] = field(default=lambda i: f"row {i}", repr=False)
    note: str = ""

    @property
    def n_rows(self) -> int:
        return self.matrix.shape[0]


@dataclass(frozen=True)
class RowContext:
    """What rows are built from: cells, their rule cells and the risk levels.

    Attributes
    ----------
    index : ndarray of shape (n_cells,)
        Rule cell of each cell.
    n_groups : int
        Number of rule cells G.
    rule_cells : DataFrame
        The rule cells' values.
    weights : ndarray of shape (n_cells,)
    p : ndarray of shape (n_cells, J, L)
    q : ndarray of shape (n_cells, J, L + 1)
    layout : CellLayout
    vocab : Vocabulary
    risk_level_names : list of str
    """

    index: np.ndarray
    n_groups: int
    rule_cells: Any
    weights: np.ndarray
    p: np.ndarray
    q: np.ndarray
    layout: Any
    vocab: Vocabulary
    risk_level_names: Sequence[str]

    @property
    def n_levels(self) -> int:
        return self.p.shape[-1]

    @property
    def total(self) -> float:
        return float(self.weights.sum())


def _attributes(spec: ConstraintSpec, ctx: RowContext) -> list[str]:
    return [spec.attribute] if spec.attribute is not None else list(ctx.vocab.protected)


def _threshold_index(spec: ConstraintSpec, ctx: RowContext) -> list[int]:
    if spec.thresholds is None:
        return list(range(1, ctx.n_levels))
    return [ctx.vocab.level(t, "threshold") for t in spec.thresholds]


def _tail_rows(coef: np.ndarray, thresholds: Sequence[int], n_levels: int) -> sp.csr_matrix:
    """Rows putting coef[row, g] on every delta(d | g) with d >= thresholds[row].

    coef : ndarray of shape (n_rows, G)
    """
    n_rows, G = coef.shape
    rows, cols, vals = [], [], []
    for i, t in enumerate(thresholds):
        nz = np.flatnonzero(coef[i])
        for d in range(t, n_levels):
            rows.append(np.full(len(nz), i))
            cols.append(nz * n_levels + d)
            vals.append(coef[i, nz])
    if not rows:
        return sp.csr_matrix((n_rows, G * n_levels))
    return sp.csr_matrix((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))),
                         shape=(n_rows, G * n_levels))


def _parity_block(stratum_weight: np.ndarray, stratum_names: Sequence[str], attrs: Sequence[str],
                  thresholds: Sequence[int], ctx: RowContext, what: str) -> RowBlock:
    """Rows |P(D >= t | s, A = a) - P(D >= t | s, A = b)| <= tol for each attribute, pair, stratum s, threshold t.

    stratum_weight : ndarray of shape (n_cells, S)
        Weight of each cell in each stratum (w q_jr for risk levels, w for the whole population,
        w 1[Z = z] for the levels of a covariate). P(D >= t | s, A = a) is
        sum_g m[g, s, a] sum_{d >= t} delta(d | g) / sum_g m[g, s, a].
    """
    G, L = ctx.n_groups, ctx.n_levels
    coefs, tlist, labels, skipped = [], [], [], 0
    for attr in attrs:
        codes = ctx.layout.codes(attr)
        cats = [str(c) for c in ctx.layout.categories(attr)]
        A = len(cats)
        key = ctx.index * A + codes
        m = np.stack([np.bincount(key, weights=stratum_weight[:, s], minlength=G * A).reshape(G, A)
                      for s in range(stratum_weight.shape[1])], axis=1)  # (G, S, A)
        total = m.sum(axis=0)  # (S, A)
        scale = max(float(total.max()), 1e-300)
        with np.errstate(invalid="ignore", divide="ignore"):
            share = np.where(total > 1e-12 * scale, m / total, np.nan)
        for a, b in combinations(range(A), 2):
            for s, sname in enumerate(stratum_names):
                if not (np.isfinite(share[0, s, a]) and np.isfinite(share[0, s, b])):
                    skipped += len(thresholds)
                    continue
                diff = share[:, s, a] - share[:, s, b]
                for t in thresholds:
                    coefs.append(diff)
                    tlist.append(t)
                    labels.append(f"{attr} {cats[a]} vs {cats[b]}, {sname}, P(D >= {ctx.vocab.level_labels[t]})")
    coef = np.array(coefs).reshape(len(coefs), G)
    note = f"{skipped} comparisons skipped: a group has no cases in the {what}" if skipped else ""
    return RowBlock(_tail_rows(coef, tlist, L), True, 1.0, labels.__getitem__, note)


def _principal_fairness(spec: ConstraintSpec, ctx: RowContext) -> RowBlock:
    j = ctx.vocab.outcome_keys.index(spec.outcome)
    levels = spec.risk_levels if spec.risk_levels is not None else tuple(range(ctx.n_levels + 1))
    sw = ctx.weights[:, None] * ctx.q[:, j, list(levels)]
    names = [f"risk level {r} ({ctx.risk_level_names[r]}) for {spec.outcome}" for r in levels]
    return _parity_block(sw, names, _attributes(spec, ctx), _threshold_index(spec, ctx), ctx, "risk level")


def _statistical_parity(spec: ConstraintSpec, ctx: RowContext) -> RowBlock:
    return _parity_block(ctx.weights[:, None], ["all cases"], _attributes(spec, ctx), _threshold_index(spec, ctx), ctx, "population")


def _conditional_parity(spec: ConstraintSpec, ctx: RowContext) -> RowBlock:
    codes = ctx.layout.codes(spec.within)
    cats = ctx.layout.categories(spec.within)
    sw = ctx.weights[:, None] * np.eye(len(cats))[codes]
    names = [f"{spec.within} = {c}" for c in cats]
    return _parity_block(sw, names, _attributes(spec, ctx), _threshold_index(spec, ctx), ctx, f"level of {spec.within}")


def _blind_groups(rule_cells, columns: Sequence[str], attrs: Sequence[str]) -> np.ndarray:
    """For each rule cell, the position of the first rule cell equal to it in every column but ``attrs``."""
    keep = [c for c in columns if c not in attrs]
    if not keep:
        return np.zeros(len(rule_cells), dtype=np.int64)
    codes = np.stack([rule_cells[c].cat.codes.to_numpy(dtype=np.int64) for c in keep], axis=1)
    _, first, inverse = np.unique(codes, axis=0, return_index=True, return_inverse=True)
    return first[inverse.reshape(-1)]


def _group_blind(spec: ConstraintSpec, ctx: RowContext) -> RowBlock:
    G, L = ctx.n_groups, ctx.n_levels
    columns = list(ctx.rule_cells.columns)
    attrs = [a for a in _attributes(spec, ctx) if a in columns]
    if not attrs:
        return RowBlock(sp.csr_matrix((0, G * L)), True, 1.0,
                        note="already blind: the rule columns hold no protected attribute it names")
    head = _blind_groups(ctx.rule_cells, columns, attrs)
    members = np.flatnonzero(head != np.arange(G))
    n = len(members) * (L - 1)
    rows = np.arange(n)
    g = np.repeat(members, L - 1)
    d = np.tile(np.arange(L - 1), len(members))
    matrix = sp.csr_matrix(
        (np.concatenate([np.ones(n), -np.ones(n)]),
         (np.concatenate([rows, rows]), np.concatenate([g * L + d, head[g] * L + d]))),
        shape=(n, G * L))

    def label(i: int) -> str:
        cell = ctx.rule_cells.iloc[g[i]]
        other = ctx.rule_cells.iloc[head[g[i]]]
        return (f"P(D = {ctx.vocab.level_labels[d[i]]}) equal for " + ", ".join(f"{c}={cell[c]}" for c in columns)
                + " and " + ", ".join(f"{a}={other[a]}" for a in attrs))

    return RowBlock(matrix, True, 1.0, label)


def _capacity(spec: ConstraintSpec, ctx: RowContext) -> RowBlock:
    G, L = ctx.n_groups, ctx.n_levels
    t = ctx.vocab.level(spec.at_least, "at_least")
    share = np.bincount(ctx.index, weights=ctx.weights, minlength=G) / ctx.total
    scale = ctx.total if spec.max_cases is not None else 1.0
    label = f"share of cases at {ctx.vocab.level_labels[t]} or harsher"
    return RowBlock(_tail_rows(share[None, :], [t], L), False, scale, lambda i: label)


def _outcome_cap(spec: ConstraintSpec, ctx: RowContext) -> RowBlock:
    G, L = ctx.n_groups, ctx.n_levels
    j = ctx.vocab.outcome_keys.index(spec.outcome)
    mass = np.stack([np.bincount(ctx.index, weights=ctx.weights * ctx.p[:, j, d], minlength=G) for d in range(L)], axis=1)
    coef = (mass / ctx.total).reshape(1, G * L)
    return RowBlock(sp.csr_matrix(coef), False, 1.0, lambda i: f"expected rate of {spec.outcome}")


def _monotone(spec: ConstraintSpec, ctx: RowContext) -> RowBlock:
    G, L = ctx.n_groups, ctx.n_levels
    columns = list(ctx.rule_cells.columns)
    score = ctx.rule_cells[spec.score].cat.codes.to_numpy(dtype=np.int64)
    head = _blind_groups(ctx.rule_cells, columns, [spec.score])
    order = np.lexsort((score, head))
    same = head[order][1:] == head[order][:-1]
    lo, hi = order[:-1][same], order[1:][same]  # adjacent present scores within otherwise equal rule cells
    thresholds = _threshold_index(spec, ctx)
    rows, cols, vals = [], [], []
    n_pairs = len(lo)
    for k, t in enumerate(thresholds):
        r = k * n_pairs + np.arange(n_pairs)
        for d in range(t, L):
            rows += [r, r]
            cols += [lo * L + d, hi * L + d]
            vals += [np.ones(n_pairs), -np.ones(n_pairs)]
    n = n_pairs * len(thresholds)
    matrix = sp.csr_matrix((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))), shape=(n, G * L)) \
        if n else sp.csr_matrix((0, G * L))

    def label(i: int) -> str:
        k, pair = divmod(i, n_pairs)
        a, b = ctx.rule_cells.iloc[lo[pair]], ctx.rule_cells.iloc[hi[pair]]
        rest = ", ".join(f"{c}={a[c]}" for c in columns if c != spec.score)
        return (f"P(D >= {ctx.vocab.level_labels[thresholds[k]]}) at {spec.score}={a[spec.score]} "
                f"<= at {spec.score}={b[spec.score]}" + (f" ({rest})" if rest else ""))

    note = "" if n else f"no two rule cells differ only in {spec.score}"
    return RowBlock(matrix, False, 1.0, label, note)


_BUILDERS: Mapping[str, Callable[[ConstraintSpec, RowContext], RowBlock]] = {
    "principal_fairness": _principal_fairness,
    "statistical_parity": _statistical_parity,
    "conditional_parity": _conditional_parity,
    "group_blind": _group_blind,
    "capacity": _capacity,
    "outcome_cap": _outcome_cap,
    "monotone": _monotone,
}


def constraint_rows(spec: ConstraintSpec, ctx: RowContext) -> RowBlock:
    """The LP rows of one constraint (see the module docstring for each kind's formula)."""
    return _BUILDERS[spec.kind](spec, ctx)
