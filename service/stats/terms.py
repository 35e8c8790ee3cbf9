"""Model terms built from raw table columns: powers, products and categorical indicators.

Generated column names (stable, part of the contract):

- a power ``{"column": "x", "power": 3}`` is named ``x^3``;
- a product ``{"product": ["a", "b"]}`` is named ``a*b`` (in the order given);
- a categorical ``{"categorical": "shift", "reference": "night"}`` becomes one
  indicator column per level other than the reference, named ``shift=day``, with
  levels in sorted order (numbers numerically, text by code point).

Powers and products are formed here in double precision for the double-precision
path, and again, exactly, from the raw columns in multiple precision when the fit
takes the extended-precision path (:class:`ExactColumns`), so the accuracy of a
polynomial fit is not capped by rounding ``x^k`` to a double first.
"""

from __future__ import annotations

from dataclasses import dataclass

import mpmath
import numpy as np

__all__ = ["ColumnTerm", "PowerTerm", "ProductTerm", "CategoricalTerm", "Term",
           "ExpandedTerms", "ExactColumns", "TermError", "expand_terms"]


@dataclass(frozen=True)
class ColumnTerm:
    column: str


@dataclass(frozen=True)
class PowerTerm:
    column: str
    power: int


@dataclass(frozen=True)
class ProductTerm:
    columns: tuple[str, ...]


@dataclass(frozen=True)
class CategoricalTerm:
    column: str
    reference: object | None = None


Term = ColumnTerm | PowerTerm | ProductTerm | CategoricalTerm


class TermError(ValueError):
    """A term that cannot be built; ``index`` is its position, ``field`` the faulty member."""

    def __init__(self, message: str, index: int, field: str | None = None):
        super().__init__(message)
        self.index = index
        self.field = field


@dataclass(frozen=True)
class TermInfo:
    """How one term became design columns (reported in the response)."""

    name: str
    kind: str
    columns: tuple[str, ...]
    levels: tuple[object, ...] = ()
    reference: object | None = None


@dataclass(frozen=True)
class ExactColumns:
    """Recipes to rebuild the design's columns exactly from the raw columns.

    ``recipes[j]`` is ``("ones",)``, ``("raw", name)``, ``("power", name, p)``,
    ``("product", names)`` or ``("indicator", float_column)`` for design column j.
    """

    raw: dict[str, np.ndarray]
    recipes: tuple[tuple, ...]

    def with_intercept(self) -> "ExactColumns":
        return ExactColumns(self.raw, (("ones",),) + self.recipes)

    def mp_columns(self, rows: np.ndarray, columns: list[int],
                   exponents: np.ndarray) -> list[list[mpmath.mpf]]:
        """Design columns ``columns`` over ``rows``, each times ``2**-exponents[i]``, in mpmath."""
        mpf = mpmath.mpf
        out = []
        for j, e in zip(columns, exponents):
            recipe = self.recipes[j]
            kind = recipe[0]
            if kind == "ones":
                values = [mpf(1)] * rows.size
            elif kind == "raw":
                values = [mpf(v) for v in self.raw[recipe[1]][rows].tolist()]
            elif kind == "power":
                values = [mpf(v) ** recipe[2] for v in self.raw[recipe[1]][rows].tolist()]
            elif kind == "product":
                values = [mpf(1)] * rows.size
                for name in recipe[1]:
                    values = [a * mpf(b) for a, b in zip(values, self.raw[name][rows].tolist())]
            else:
                values = [mpf(v) for v in recipe[1][rows].tolist()]
            out.append([mpmath.ldexp(v, -int(e)) for v in values])
        return out


@dataclass(frozen=True)
class ExpandedTerms:
    matrix: np.ndarray
    names: tuple[str, ...]
    terms: tuple[TermInfo, ...]
    exact: ExactColumns


def _levels(values: list) -> list:
    present = {v for v in values if v is not None}
    if all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in present):
        return sorted(present)
    return sorted(present, key=str)


def expand_terms(terms: tuple[Term, ...], numeric: dict[str, np.ndarray],
                 labels: dict[str, list]) -> ExpandedTerms:
    """The design columns for ``terms``.

    Parameters
    ----------
    terms : the terms, in order
    numeric : numeric table columns by name (NaN for missing)
    labels : the raw values of the columns used as categorical
    """
    n = next(iter(numeric.values())).shape[0] if numeric else len(next(iter(labels.values())))
    columns: list[np.ndarray] = []
    names: list[str] = []
    recipes: list[tuple] = []
    infos: list[TermInfo] = []

    def add(name: str, values: np.ndarray, recipe: tuple, index: int) -> None:
        if name in names:
            raise TermError(f"makes the column {name!r} a second time", index)
        names.append(name)
        columns.append(values)
        recipes.append(recipe)

    for index, term in enumerate(terms):
        if isinstance(term, ColumnTerm):
            add(term.column, numeric[term.column], ("raw", term.column), index)
            infos.append(TermInfo(term.column, "column", (term.column,)))
        elif isinstance(term, PowerTerm):
            name = f"{term.column}^{term.power}"
            with np.errstate(over="ignore"):
                values = numeric[term.column] ** term.power
            add(name, values, ("power", term.column, term.power), index)
            infos.append(TermInfo(name, "power", (name,)))
        elif isinstance(term, ProductTerm):
            name = "*".join(term.columns)
            values = np.ones(n)
            with np.errstate(over="ignore"):
                for c in term.columns:
                    values = values * numeric[c]
            add(name, values, ("product", term.columns), index)
            infos.append(TermInfo(name, "product", (name,)))
        else:
            raw = labels[term.column]
            levels = _levels(raw)
            if len(levels) < 2:
                raise TermError(f"column {term.column!r} has {len(levels)} level(s); a "
                                "categorical term needs at least two", index, "categorical")
            reference = levels[0] if term.reference is None else term.reference
            if reference not in levels:
                raise TermError(f"{reference!r} is not a level of {term.column!r} (levels: "
                                f"{', '.join(map(str, levels))})", index, "reference")
            missing = np.array([v is None for v in raw])
            made = []
            for level in levels:
                if level == reference:
                    continue
                values = np.array([1.0 if v == level else 0.0 for v in raw])
                values[missing] = np.nan
                name = f"{term.column}={level}"
                add(name, values, ("indicator", values), index)
                made.append(name)
            infos.append(TermInfo(term.column, "categorical", tuple(made), tuple(levels),
                                  reference))
    raw_columns = {name: values for name, values in numeric.items()}
    matrix = np.column_stack(columns) if columns else np.empty((n, 0))
    return ExpandedTerms(matrix=matrix, names=tuple(names), terms=tuple(infos),
                         exact=ExactColumns(raw_columns, tuple(recipes)))
