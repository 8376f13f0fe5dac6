"""Costs built from the cost library: a scenario's ``cost_from`` expression evaluated over
library components, with the arithmetic and every component's source kept for the outputs.

A ``cost_from`` is an arithmetic expression over component keys of the library
(``policy/data/cost_components.csv`` or the scenario's own ``[cost_library] file``), numbers,
``+ - * /`` and parentheses, e.g. ``"days_held_felony * (jail_day + liberty_day) + detention_harm"``.
With ``[cost_library] price_year`` every component with a price year is brought to that year's
prices with a factor of the stated index table; a component whose year has no factor at hand
is refused unless the scenario lists it in ``unadjusted`` (it then stays in its published
year's prices, and the worksheet says so). No factor is ever guessed.
"""

from __future__ import annotations

import ast
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Mapping

from policy.errors import InputError

__all__ = ["ComponentUse", "BuiltCost", "CostBuild", "CostLibrary", "load_cost_library", "build_cost", "fmt_amount"]


def fmt_amount(value: float) -> str:
    """A number as the worksheet writes it: whole numbers with thousands separators, others to
    a few significant digits (``3,532``, ``1.457``, ``5,146.12``)."""
    if abs(value - round(value)) < 1e-9:
        return f"{value:,.0f}"
    if abs(value) >= 1000:
        return f"{value:,.2f}"
    return f"{value:.6g}"


@dataclass(frozen=True)
class ComponentUse:
    """One library component as a build uses it: as published, and in the scenario's prices."""

    key: str
    component: str
    value: float
    unit: str
    year: int | None
    source: str
    provenance: str
    #: price-index factor applied (1 when none)
    factor: float
    #: how the price year was handled, in words
    price_note: str

    @property
    def adjusted(self) -> float:
        return self.value * self.factor

    def shown(self) -> str:
        """The value as the arithmetic shows it: ``3,532 x 1.457`` when adjusted."""
        return fmt_amount(self.value) if self.factor == 1.0 else f"({fmt_amount(self.value)} x {self.factor:g})"


@dataclass(frozen=True)
class BuiltCost:
    """One ``cost_from`` expression evaluated."""

    expression: str
    value: float
    #: the expression with each component's value in place, and its result
    arithmetic: str
    components: tuple[ComponentUse, ...]
    #: bare numbers written in the expression itself (the scenario's own assumptions)
    numbers: tuple[float, ...] = ()


@dataclass(frozen=True)
class CostBuild:
    """How a decision level's or outcome's cost is built: one expression, or one per value of a
    cell column (``by``) for a level whose per-case cost comes from a column."""

    parts: tuple[tuple[str | None, BuiltCost], ...]
    by: str | None = None

    @property
    def value(self) -> float:
        """The built cost (a single expression only)."""
        if self.by is not None:
            raise ValueError("a build by class has one value per class; read parts")
        return self.parts[0][1].value

    @property
    def components(self) -> tuple[ComponentUse, ...]:
        """Every component used, once each, in order of first use."""
        seen: dict[str, ComponentUse] = {}
        for _, built in self.parts:
            for c in built.components:
                seen.setdefault(c.key, c)
        return tuple(seen.values())

    def describe(self, by_label: str | None = None) -> str:
        """The arithmetic in one line (``by`` builds: one clause per class, each named by
        ``by_label``, the cell column's display name, or else the column itself)."""
        if self.by is None:
            return self.parts[0][1].arithmetic
        return "; ".join(f"{by_label or self.by} {name}: {built.arithmetic}" for name, built in self.parts)


@dataclass(frozen=True)
class CostLibrary:
    """The components a scenario builds its costs from, and how prices are adjusted."""

    frame: Any  # pandas.DataFrame of policy.inputs.cost_library.cost_components
    path: Path | None = None
    price_year: int | None = None
    price_index: Path | None = None
    unadjusted: tuple[str, ...] = ()

    def use(self, key: str, where: str) -> ComponentUse:
        """One component as used in a build, in the scenario's price year when one is set."""
        from policy.inputs.cost_library import price_factor

        rows = self.frame[self.frame["key"] == key]
        if rows.empty:
            raise InputError(f"{where}: cost component {key!r} is not in the cost library; expected one of: "
                             f"{', '.join(self.frame['key'])}.")
        row = rows.iloc[0]
        year = None if row["year"] is None or str(row["year"]) in ("<NA>", "nan") else int(row["year"])
        factor, note = 1.0, "no price year (a quantity or an assumption)" if year is None else f"{year} prices"
        if year is not None and self.price_year is not None and year != self.price_year:
            if key in self.unadjusted:
                note = f"{year} prices, not adjusted to {self.price_year} (listed in [cost_library] unadjusted)"
            else:
                try:
                    factor = price_factor(year, self.price_year, self.price_index)
                except InputError as exc:
                    raise InputError(f"{where}: component {key!r} is in {year} prices and {exc} Or list {key!r} in "
                                     "[cost_library] unadjusted to keep its published year's prices.") from None
                note = f"{year} prices x {factor:g} to {self.price_year} (price index table)"
        elif year is not None and self.price_year is None:
            note = f"{year} prices, not adjusted (no [cost_library] price_year)"
        return ComponentUse(key, str(row["component"]), float(row["value"]), str(row["unit"]), year,
                            str(row["source"]), str(row["provenance"]), factor, note)


def load_cost_library(settings: Mapping[str, Any], base: Path, file: str) -> CostLibrary:
    """The library a scenario names in ``[cost_library]`` (validated keys), read and checked."""
    from policy.inputs.cost_library import DATA, cost_components

    def path_of(key: str, default: Path) -> Path:
        if settings.get(key) is None:
            return default
        target = (base / settings[key]).resolve()
        if not target.is_file():
            raise InputError(f"{file}: [cost_library] {key} {settings[key]!r} does not exist (looked for {target}).")
        return target

    path = path_of("file", DATA / "cost_components.csv")
    index = path_of("price_index", DATA / "price_index.csv")
    frame = cost_components(path)
    unadjusted = tuple(settings.get("unadjusted") or ())
    for key in unadjusted:
        if key not in set(frame["key"]):
            raise InputError(f"{file}: [cost_library] unadjusted lists {key!r}, which is not in the cost library.")
    year = settings.get("price_year")
    if year is not None and not 1800 <= year <= 2200:
        raise InputError(f"{file}: key 'price_year' in [cost_library] must be a year such as 2024; got {year!r}.")
    return CostLibrary(frame, path, year, index, unadjusted)


_OPS = {ast.Add: ("+", 1), ast.Sub: ("-", 1), ast.Mult: ("x", 2), ast.Div: ("/", 2)}


def _evaluate(node: ast.AST, library: CostLibrary, where: str, used: dict, numbers: list) -> tuple[float, str, int]:
    """Value, shown arithmetic and precedence of one expression node."""
    if isinstance(node, ast.BinOp) and type(node.op) in _OPS:
        symbol, prec = _OPS[type(node.op)]
        a, ta, pa = _evaluate(node.left, library, where, used, numbers)
        b, tb, pb = _evaluate(node.right, library, where, used, numbers)
        ta = f"({ta})" if pa < prec else ta
        # the right side of - and / needs brackets at equal precedence too
        tb = f"({tb})" if pb < prec or (pb == prec and symbol in "-/") else tb
        if symbol == "/" and b == 0:
            raise InputError(f"{where}: divides by zero.")
        value = {"+": a + b, "-": a - b, "x": a * b, "/": a / b if b else 0.0}[symbol]
        return value, f"{ta} {symbol} {tb}", prec
    if isinstance(node, ast.Name):
        use = used.get(node.id) or library.use(node.id, where)
        used[node.id] = use
        return use.adjusted, use.shown(), 3
    if isinstance(node, ast.Constant) and isinstance(node.value, (int, float)) and not isinstance(node.value, bool):
        numbers.append(float(node.value))
        return float(node.value), fmt_amount(float(node.value)), 3
    raise InputError(f"{where}: {ast.unparse(node)!r} is not allowed; expected component keys, numbers, "
                     "+ - * / and parentheses.")


def _build_one(expression: str, library: CostLibrary, where: str) -> BuiltCost:
    try:
        tree = ast.parse(expression.strip(), mode="eval")
    except SyntaxError:
        raise InputError(f"{where}: {expression!r} is not an arithmetic expression; expected component keys, "
                         "numbers, + - * / and parentheses, e.g. \"days_held_felony * jail_day + detention_harm\".") from None
    used: dict[str, ComponentUse] = {}
    numbers: list[float] = []
    value, shown, _ = _evaluate(tree.body, library, where, used, numbers)
    if isinstance(tree.body, ast.Name) and shown.startswith("("):
        shown = shown[1:-1]
    if value < 0:
        raise InputError(f"{where}: {expression!r} comes to {fmt_amount(value)}; a cost must be >= 0.")
    arithmetic = shown if shown == fmt_amount(value) else f"{shown} = {fmt_amount(value)}"
    return BuiltCost(expression.strip(), value, arithmetic, tuple(used.values()), tuple(numbers))


def build_cost(spec: str | Mapping[str, str], library: CostLibrary, where: str, by: str | None = None) -> CostBuild:
    """A cost built from the library.

    Parameters
    ----------
    spec : str or mapping
        One expression, or (with ``by``) a table of class value -> expression.
    library : CostLibrary
    where : str
        How the key is named in messages, e.g. ``"demo.toml: key 'cost_from' in [[decisions]] #3"``.
    by : str, optional
        The cell column whose values key the table.
    """
    if isinstance(spec, str):
        if by is not None:
            raise InputError(f"{where}: with cost_by {by!r} give a table of {by} value = expression; got one expression.")
        return CostBuild(((None, _build_one(spec, library, where)),))
    if by is None:
        raise InputError(f"{where}: a table of expressions needs cost_by, the cell column whose values key it.")
    if not spec:
        raise InputError(f"{where}: the table is empty; give one expression per value of {by!r}.")
    parts = []
    for name, expression in spec.items():
        if not isinstance(expression, str):
            raise InputError(f"{where}: entry {name!r} must be an expression (a string); got {expression!r}.")
        parts.append((str(name), _build_one(expression, library, f"{where}, {by} {name!r}")))
    return CostBuild(tuple(parts), by)
