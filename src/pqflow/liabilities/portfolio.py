"""A liability portfolio: decrement bases and model points, read from one TOML file.

Layout of the file (``scenario_configs/demo_liabilities.toml`` is a commented example)::

    [portfolio]                 insurer (label), currency, description (optional)
    [valuation]                 equity (index name, optional when the run has one index),
                                bond_extrapolation_years (default 0)
    [mortality.<name>]          kind = "gompertz_makeham", a, b, c:  mu_x = a + b c^x
    [[model_point]]             one table per model point (a "row"), fields by product below

Fields every model point has: ``id``, ``product``, ``policies`` (> 0), ``age``, ``term``
(whole years to maturity or retirement), ``mortality`` (a ``[mortality.<name>]`` table or
``"none"``), ``lapse_rate`` (annual probability, default 0).

``product = "unit_linked_gmmb"``: ``premium`` (fund per policy at time 0, invested in the
equity total-return index), ``guarantee`` (guaranteed maturity benefit per policy),
``roll_up_rate`` (annual, default 0: the guarantee grows to ``guarantee (1 + g)^term``),
``fund_charge`` (annual share of the fund, deducted at each year end, default 0).

``product = "participating"``: ``premium`` (account value per policy at time 0),
``guaranteed_rate`` (minimum annual crediting rate), ``bonus_share`` (share of the fund
return credited), ``equity_share``, ``bond_share``, ``cash_share`` (the asset mix, rebalanced
yearly, summing to 1), ``bond_maturity`` (whole years: the bond fund buys the zero bond with
this many years to run and sells it a year later; needed when ``bond_share > 0``),
``smoothing`` (default 0) and ``initial_smoothed_return`` (default ``guaranteed_rate``).

``product = "deferred_annuity_gao"``: ``accumulation`` (``"fixed"``: ``sum_at_retirement``
per policy, paid only to policies in force at retirement; ``"unit_linked"``: ``premium``
invested in the equity index with ``fund_charge``, exits before retirement paid the fund),
``guaranteed_annuity_rate`` (annual annuity per unit of the sum), ``annuity_term`` (whole
years of payments at most), ``annuity_timing`` (``"arrears"``, default, or ``"advance"``),
``annuity_mortality`` (default: the model point's ``mortality``).

Every problem is reported with the model point's position and id ("model point 3 (id
'UL-02')"); unknown keys are refused so a misspelt field never silently takes its default.
"""

from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Literal, overload

import numpy as np

from pqflow.errors import LiabilityDataError

__all__ = [
    "LiabilityDataError",
    "PRODUCTS",
    "GompertzMakeham",
    "UnitLinkedGMMB",
    "Participating",
    "DeferredAnnuityGAO",
    "ModelPoint",
    "Portfolio",
    "load_portfolio",
    "parse_portfolio",
]

PRODUCTS = ("unit_linked_gmmb", "participating", "deferred_annuity_gao")


@dataclass(frozen=True, kw_only=True)
class GompertzMakeham:
    """Force of mortality ``mu_x = a + b c^x`` (Makeham's law). Parameters are per year."""

    name: str
    a: float
    b: float
    c: float

    def integrated_hazard(self, age: float, years: Any) -> Any:
        """``int_0^t mu_{age+s} ds = a t + b c^age (c^t - 1) / ln c`` for ``t = years``."""
        t = np.asarray(years, dtype=float)
        return self.a * t + self.b * self.c**age * np.expm1(t * math.log(self.c)) / math.log(self.c)


@dataclass(frozen=True, kw_only=True)
class _Common:
    id: str
    row: int
    policies: float
    age: float
    term: int
    mortality: GompertzMakeham | None
    lapse_rate: float

    @property
    def label(self) -> str:
        return f"model point {self.row} (id {self.id!r})"


@dataclass(frozen=True, kw_only=True)
class UnitLinkedGMMB(_Common):
    """Unit-linked policy with a guaranteed minimum maturity benefit."""

    premium: float
    guarantee: float
    roll_up_rate: float
    fund_charge: float
    product: str = "unit_linked_gmmb"


@dataclass(frozen=True, kw_only=True)
class Participating(_Common):
    """Participating (with-profits) policy with a guaranteed minimum annual crediting rate."""

    premium: float
    guaranteed_rate: float
    bonus_share: float
    equity_share: float
    bond_share: float
    cash_share: float
    bond_maturity: int | None
    smoothing: float
    initial_smoothed_return: float
    product: str = "participating"


@dataclass(frozen=True, kw_only=True)
class DeferredAnnuityGAO(_Common):
    """Deferred annuity with a guaranteed annuity option at retirement (after ``term`` years)."""

    accumulation: str
    sum_at_retirement: float | None
    premium: float | None
    fund_charge: float
    guaranteed_annuity_rate: float
    annuity_term: int
    annuity_timing: str
    annuity_mortality: GompertzMakeham | None
    product: str = "deferred_annuity_gao"

    def annuity_maturities(self) -> list[int]:
        """Years after retirement at which the annuity pays: ``1..n`` (arrears), ``0..n-1``."""
        first = 1 if self.annuity_timing == "arrears" else 0
        return list(range(first, first + self.annuity_term))


ModelPoint = UnitLinkedGMMB | Participating | DeferredAnnuityGAO


@dataclass(frozen=True, kw_only=True)
class Portfolio:
    """A validated portfolio: the insurer's label, valuation options and model points."""

    insurer: str
    currency: str
    description: str
    source: str
    equity: str | None
    bond_extrapolation_years: float
    mortality_tables: tuple[GompertzMakeham, ...]
    model_points: tuple[ModelPoint, ...]

    @property
    def products(self) -> tuple[str, ...]:
        """Product types present, in the order of :data:`PRODUCTS`."""
        present = {mp.product for mp in self.model_points}
        return tuple(p for p in PRODUCTS if p in present)

    @property
    def max_term(self) -> int:
        return max(mp.term for mp in self.model_points)


# --------------------------------------------------------------------------------------------
# Parsing and validation


class _Row:
    """Reads the fields of one model point, recording which were used."""

    def __init__(self, source: str, where: str, data: dict[str, Any]) -> None:
        self.source, self.where, self.data, self.used = source, where, data, {"id", "product"}

    def fail(self, message: str) -> LiabilityDataError:
        return LiabilityDataError(f"{self.source}: {self.where}: {message}")

    # A required field (or one with a default) is always a number; only an optional one may be None.
    @overload
    def number(
        self, key: str, *, default: float | None = None, required: Literal[True] = True,
        low: float | None = None, high: float | None = None, low_open: bool = False,
        high_open: bool = False, what: str = "",
    ) -> float: ...

    @overload
    def number(
        self, key: str, *, default: float | None = None, required: bool,
        low: float | None = None, high: float | None = None, low_open: bool = False,
        high_open: bool = False, what: str = "",
    ) -> float | None: ...

    def number(
        self, key: str, *, default: float | None = None, required: bool = True,
        low: float | None = None, high: float | None = None, low_open: bool = False,
        high_open: bool = False, what: str = "",
    ) -> float | None:
        self.used.add(key)
        if key not in self.data:
            if default is not None or not required:
                return default
            raise self.fail(f"missing field {key!r}{' (' + what + ')' if what else ''}")
        value = self.data[key]
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
            raise self.fail(f"{key} = {value!r} is not a finite number")
        value = float(value)
        if low is not None and (value < low or (low_open and value == low)):
            if low == 0.0 and value < 0.0:
                raise self.fail(
                    f"{key} = {value:g} is negative"
                    + (f"; the {what} cannot be negative" if what else "; it must not be")
                )
            raise self.fail(f"{key} = {value:g} must be {'>' if low_open else '>='} {low:g}")
        if high is not None and (value > high or (high_open and value == high)):
            raise self.fail(f"{key} = {value:g} must be {'<' if high_open else '<='} {high:g}")
        return value

    @overload
    def whole(self, key: str, *, low: int, high: int, required: Literal[True] = True) -> int: ...

    @overload
    def whole(self, key: str, *, low: int, high: int, required: bool) -> int | None: ...

    def whole(self, key: str, *, low: int, high: int, required: bool = True) -> int | None:
        value = self.number(key, required=required, low=low, high=high)
        if value is None:
            return None
        if value != round(value):
            raise self.fail(
                f"{key} = {value:g} must be a whole number of years (the projection is annual)"
            )
        return int(round(value))

    def choice(self, key: str, options: tuple[str, ...], *, default: str | None = None) -> str:
        self.used.add(key)
        if key not in self.data:
            if default is not None:
                return default
            raise self.fail(f"missing field {key!r} (one of {', '.join(options)})")
        value = self.data[key]
        if value not in options:
            raise self.fail(f"{key} = {value!r} is not one of {', '.join(options)}")
        return str(value)

    def text(self, key: str, *, default: str | None = None) -> str:
        self.used.add(key)
        if key not in self.data:
            if default is not None:
                return default
            raise self.fail(f"missing field {key!r}")
        value = self.data[key]
        if not isinstance(value, str) or not value.strip():
            raise self.fail(f"{key} must be a non-empty string")
        return value

    def finish(self) -> None:
        unknown = sorted(set(self.data) - self.used)
        if unknown:
            names = ", ".join(map(repr, unknown))
            if "product" in self.data:
                raise self.fail(
                    f"unknown field(s) {names}: misspelt, or not used by product "
                    f"{self.data['product']!r} as given"
                )
            raise self.fail(f"unknown key(s) {names}")


_MAX_RATE = 0.5  # any annual rate beyond +-50% is a typing error (0.03 means 3%)


def _table(row: _Row, key: str, tables: dict[str, GompertzMakeham], *, default: str | None = None):
    name = row.text(key, default=default)
    if name == "none":
        return None
    if name not in tables:
        known = ", ".join(sorted(tables)) or "no [mortality.<name>] tables"
        raise row.fail(f"{key} = {name!r} names no mortality table (the file has: {known}; or 'none')")
    return tables[name]


def _common(row: _Row, tables: dict[str, GompertzMakeham], row_no: int, mp_id: str) -> dict[str, Any]:
    return {
        "id": mp_id,
        "row": row_no,
        "policies": row.number("policies", low=0.0, low_open=True, what="number of policies"),
        "age": row.number("age", low=0.0, high=120.0),
        "term": row.whole("term", low=1, high=150),
        "mortality": _table(row, "mortality", tables),
        "lapse_rate": row.number("lapse_rate", default=0.0, low=0.0, high=1.0, high_open=True),
    }


def _unit_linked(row: _Row, common: dict[str, Any]) -> UnitLinkedGMMB:
    return UnitLinkedGMMB(
        **common,
        premium=row.number("premium", low=0.0, what="fund per policy at time 0"),
        guarantee=row.number("guarantee", low=0.0, what="guaranteed maturity benefit (sum assured)"),
        roll_up_rate=row.number("roll_up_rate", default=0.0, low=0.0, high=_MAX_RATE),
        fund_charge=row.number("fund_charge", default=0.0, low=0.0, high=1.0, high_open=True),
    )


def _participating(row: _Row, common: dict[str, Any]) -> Participating:
    g = row.number("guaranteed_rate", low=-_MAX_RATE, high=_MAX_RATE)
    shares = {k: row.number(k, default=0.0, low=0.0, high=1.0) for k in ("equity_share", "bond_share", "cash_share")}
    if abs(sum(shares.values()) - 1.0) > 1e-9:
        raise row.fail(
            "equity_share + bond_share + cash_share = "
            f"{sum(shares.values()):g}; the asset mix must sum to 1"
        )
    bond_maturity = row.whole("bond_maturity", low=1, high=100, required=shares["bond_share"] > 0.0)
    return Participating(
        **common,
        premium=row.number("premium", low=0.0, what="account value per policy at time 0"),
        guaranteed_rate=g,
        bonus_share=row.number("bonus_share", low=0.0, high=1.0),
        equity_share=shares["equity_share"],
        bond_share=shares["bond_share"],
        cash_share=shares["cash_share"],
        bond_maturity=bond_maturity,
        smoothing=row.number("smoothing", default=0.0, low=0.0, high=1.0, high_open=True),
        initial_smoothed_return=row.number(
            "initial_smoothed_return", default=g, low=-_MAX_RATE, high=_MAX_RATE
        ),
    )


def _deferred_annuity(row: _Row, common: dict[str, Any], tables: dict[str, GompertzMakeham]) -> DeferredAnnuityGAO:
    accumulation = row.choice("accumulation", ("fixed", "unit_linked"))
    fixed = accumulation == "fixed"
    total_age = common["age"] + common["term"]
    mp = DeferredAnnuityGAO(
        **common,
        accumulation=accumulation,
        sum_at_retirement=(
            row.number("sum_at_retirement", low=0.0, what="sum assured at retirement") if fixed else None
        ),
        premium=None if fixed else row.number("premium", low=0.0, what="fund per policy at time 0"),
        fund_charge=0.0 if fixed else row.number("fund_charge", default=0.0, low=0.0, high=1.0, high_open=True),
        guaranteed_annuity_rate=row.number("guaranteed_annuity_rate", low=0.0, low_open=True, high=1.0),
        annuity_term=row.whole("annuity_term", low=1, high=100),
        annuity_timing=row.choice("annuity_timing", ("arrears", "advance"), default="arrears"),
        annuity_mortality=_table(row, "annuity_mortality", tables, default=row.data.get("mortality", "none")),
    )
    if total_age > 120.0:
        raise row.fail(f"retirement at age {total_age:g} is beyond age 120")
    return mp


def _mortality_tables(source: str, data: Any) -> dict[str, GompertzMakeham]:
    if not isinstance(data, dict):
        raise LiabilityDataError(f"{source}: [mortality] must hold tables [mortality.<name>]")
    tables = {}
    for name, body in data.items():
        where = f"[mortality.{name}]"
        if name == "none":
            raise LiabilityDataError(f"{source}: {where}: 'none' is reserved (no mortality)")
        row = _Row(source, where, body if isinstance(body, dict) else {})
        row.used = set()
        row.choice("kind", ("gompertz_makeham",))
        tables[name] = GompertzMakeham(
            name=name,
            a=row.number("a", low=0.0, high=1.0),
            b=row.number("b", low=0.0, low_open=True, high=1.0),
            c=row.number("c", low=1.0, low_open=True, high=2.0),
        )
        row.finish()
    return tables


def parse_portfolio(data: dict[str, Any], *, source: str = "<portfolio>") -> Portfolio:
    """Validate the content of a portfolio file (a dict as TOML gives it)."""
    allowed = {"portfolio", "valuation", "mortality", "model_point"}
    unknown = sorted(set(data) - allowed)
    if unknown:
        raise LiabilityDataError(
            f"{source}: unknown table(s) {', '.join(map(repr, unknown))}; expected {sorted(allowed)}"
        )
    head = _Row(source, "[portfolio]", data.get("portfolio", {}))
    head.used = set()
    insurer = head.text("insurer")
    currency = head.text("currency")
    description = head.text("description", default=" ").strip()
    head.finish()
    val = _Row(source, "[valuation]", data.get("valuation", {}))
    val.used = set()
    equity = val.text("equity") if "equity" in val.data else None
    extrapolation = val.number("bond_extrapolation_years", default=0.0, low=0.0, high=100.0)
    val.finish()
    tables = _mortality_tables(source, data.get("mortality", {}))

    rows = data.get("model_point")
    if not isinstance(rows, list) or not rows:
        raise LiabilityDataError(f"{source}: no [[model_point]] tables; a portfolio needs at least one")
    points: list[ModelPoint] = []
    seen: dict[str, int] = {}
    for k, body in enumerate(rows, start=1):
        if not isinstance(body, dict):
            raise LiabilityDataError(f"{source}: model point {k}: not a table")
        mp_id = body.get("id")
        where = f"model point {k}" + (f" (id {mp_id!r})" if isinstance(mp_id, str) else "")
        row = _Row(source, where, body)
        if not isinstance(mp_id, str) or not mp_id.strip():
            raise row.fail("missing field 'id' (a non-empty string naming the model point)")
        if mp_id in seen:
            raise row.fail(f"id {mp_id!r} repeats model point {seen[mp_id]}")
        seen[mp_id] = k
        product = body.get("product")
        if product is None:
            raise row.fail(f"missing field 'product' (one of {', '.join(PRODUCTS)})")
        if product not in PRODUCTS:
            raise row.fail(f"unknown product type {product!r}; known types: {', '.join(PRODUCTS)}")
        common = _common(row, tables, k, mp_id)
        if product == "unit_linked_gmmb":
            mp: ModelPoint = _unit_linked(row, common)
        elif product == "participating":
            mp = _participating(row, common)
        else:
            mp = _deferred_annuity(row, common, tables)
        row.finish()
        points.append(mp)
    return Portfolio(
        insurer=insurer,
        currency=currency,
        description=description,
        source=source,
        equity=equity,
        bond_extrapolation_years=float(extrapolation),
        mortality_tables=tuple(tables.values()),
        model_points=tuple(points),
    )


def load_portfolio(path: str | Path) -> Portfolio:
    """Read and validate a portfolio TOML file (read only; nothing is written)."""
    path = Path(path)
    try:
        with open(path, "rb") as fh:
            data = tomllib.load(fh)
    except FileNotFoundError:
        raise LiabilityDataError(f"{path}: liability portfolio file not found") from None
    except tomllib.TOMLDecodeError as exc:
        raise LiabilityDataError(f"{path}: not valid TOML: {exc}") from None
    return parse_portfolio(data, source=str(path))
