"""Readers for market-data CSV files, each checked in full before anything is fitted.

Two formats (UTF-8, comma-separated, a header row first):

**Curve inputs**::

    maturity_years,par_rate          (or zero_rate, or discount_factor)
    1,0.0312
    2,0.0298
    ...

``maturity_years`` in years (positive, strictly increasing); exactly one value column:
``par_rate`` (annual fixed leg, decimals; whole-year maturities), ``zero_rate`` (annually
compounded, decimals, as the regulator publishes) or ``discount_factor`` (positive). Rates are
decimals: ``0.035`` for 3.5%, and a rate of 1 or more in absolute value is refused as a likely
percentage. An optional ``llfr_weight`` column carries the weights of the last liquid forward
rate (the ``last_liquid_forward`` extrapolation): an empty cell counts as 0; weights are not
negative and sum to 1. With that column a row may leave its rate empty (a maturity that is not
liquid, kept for layout): it is left out, and may not carry a positive weight.

**Correlation matrix**::

    driver,rates,equity
    rates,1,-0.2
    equity,-0.2,1

The first column holds the driver names and the header row the same names in the same order.
Entries must be numbers in ``[-1, 1]``, with a unit diagonal and symmetric within ``1e-12``.
Positive semi-definiteness is not required here: check it with
:func:`pqflow.market.correlation.check_correlation_matrix` or repair it with
:func:`pqflow.market.correlation.nearest_correlation_matrix`, as the run configuration says.

**Swaption quotes** (ATM, payer, annual fixed leg)::

    expiry_years,tenor_years,normal_vol_bp,weight
    1,5,82.0,1
    ...

exactly one vol column: ``normal_vol_bp`` (Bachelier, basis points), ``lognormal_vol`` (Black,
decimal) or ``shifted_lognormal_vol`` (decimal, with a ``shift`` column, a decimal rate);
``weight`` optional (default 1, not negative).

**Equity indices**::

    index,spot_level,dividend_yield
    veldmark_all_share,1000,0.028

**Equity implied volatilities** (Black-Scholes, decimals)::

    index,expiry_years,implied_vol,strike,weight
    veldmark_all_share,1,0.185,ATMF,1
    veldmark_all_share,1,0.231,0.8,1

``strike`` is optional: ``ATMF`` (or the column left out) means at the money forward, a number
is the moneyness ``K / F`` (strike over the forward ``S_0 e^{-qT} / P(0, T)``; 0.8 is 80% of
the forward). Several strikes per expiry form a smile (fitted by an index with
``volatility_model = "heston"``); a deterministic volatility uses one quote per expiry (the
ATMF one where there are several). ``weight`` is optional (default 1, not negative; used by the
smile fit). The equity-index file also carries property indices (``dividend_yield`` is then the
rental yield).

**Zero-coupon inflation swaps** (fair fixed rate, annually compounded, decimals)::

    maturity_years,zc_rate
    1,0.0231

**Year-on-year inflation caps and floors** (annual caplets on ``I_i / I_{i-1} - 1``; premium per
unit notional in basis points; ``weight`` optional)::

    maturity_years,strike,kind,premium_bp
    5,0.03,cap,160.9

**Credit spreads** (zero-coupon spread over the risk-free zero rate, continuous, basis points)::

    rating,maturity_years,spread_bp
    A,1,62

Every problem raises :class:`pqflow.errors.MarketDataError` naming the file, the row and the
column. Rows are counted as **data rows, 1-based, the header excluded**; the message also gives
the line number in the file (the header is line 1), so either count finds the cell. Blank lines
are skipped (they do not count as data rows, but line numbers stay true).
"""

from __future__ import annotations

import csv
import math
from dataclasses import dataclass
from os import PathLike
from pathlib import Path

import numpy as np

from pqflow.errors import MarketDataError
from pqflow.market.smith_wilson import (
    CurveInstruments,
    par_swap_instruments,
    zero_coupon_instruments,
)

__all__ = [
    "CurveInputFile",
    "CorrelationFile",
    "SwaptionQuoteRow",
    "EquityIndexRow",
    "EquityVolRow",
    "read_curve_inputs",
    "read_correlation_matrix",
    "read_swaption_quotes",
    "read_equity_indices",
    "read_equity_vols",
    "InflationSwapRow",
    "CreditSpreadCurve",
    "read_inflation_swaps",
    "read_credit_spreads",
    "InflationCapRow",
    "read_inflation_caps",
    "NumberRow",
    "read_number_table",
]

MATURITY_COLUMN = "maturity_years"
VALUE_COLUMNS = ("par_rate", "zero_rate", "discount_factor")
WEIGHT_COLUMN = "llfr_weight"
_NOT_AVAILABLE = {"nan", "+nan", "-nan", "na", "n/a", "#n/a", "null", "none"}
_WHOLE_YEAR_TOL = 1e-9
_UNIT_TOL = 1e-12
#: Largest normal (Bachelier) swaption vol accepted, in bp: a quote beyond it is a typo or a
#: unit error, not a market (common practice).
MAX_NORMAL_VOL_BP = 1000.0


@dataclass(frozen=True, kw_only=True)
class CurveInputFile:
    """A checked curve-input file.

    source: the file path as given. quantity: ``"par_rate"``, ``"zero_rate"`` (annually
    compounded) or ``"discount_factor"``. maturities, values: ``(n,)``.
    """

    source: str
    quantity: str
    maturities: np.ndarray
    values: np.ndarray
    #: LLFR weights, one per row kept, ``(n,)``; ``None`` when the file has no ``llfr_weight`` column.
    llfr_weights: np.ndarray | None = None
    #: "data row N (line L)" of each row kept, for messages.
    row_labels: tuple[str, ...] = ()

    def instruments(self, *, credit_risk_adjustment_bp: float = 0.0) -> CurveInstruments:
        """The inputs as Smith-Wilson calibration instruments (zero-coupon bonds or par swaps)."""
        if self.quantity == "par_rate":
            return par_swap_instruments(
                self.maturities, self.values, credit_risk_adjustment_bp=credit_risk_adjustment_bp
            )
        if self.quantity == "zero_rate":
            rates = self.values
        else:
            rates = self.values ** (-1.0 / self.maturities) - 1.0
        return zero_coupon_instruments(
            self.maturities, rates, credit_risk_adjustment_bp=credit_risk_adjustment_bp
        )


@dataclass(frozen=True, kw_only=True)
class CorrelationFile:
    """A checked correlation-matrix file: driver ``names`` ``(n,)`` and ``matrix`` ``(n, n)``."""

    source: str
    names: tuple[str, ...]
    matrix: np.ndarray


@dataclass(frozen=True)
class _Row:
    number: int  # data row, 1-based, header excluded
    line: int  # line in the file, header = line 1
    cells: list[str]


def _at(path: str, row: _Row | None = None, column: str | None = None) -> str:
    parts = [f"{path}"]
    if row is not None:
        parts.append(f"data row {row.number} (line {row.line})")
    if column is not None:
        parts.append(f"column {column!r}")
    return ", ".join(parts)


def _read_rows(path: str | PathLike[str]) -> tuple[str, list[str], int, list[_Row]]:
    name = str(path)
    p = Path(path)
    if not p.is_file():
        raise MarketDataError(f"{name}: market-data file not found")
    try:
        with p.open(newline="", encoding="utf-8-sig") as handle:
            reader = csv.reader(handle)
            header: list[str] | None = None
            header_line = 0
            rows: list[_Row] = []
            for cells in reader:
                if not cells or all(not c.strip() for c in cells):
                    continue
                cells = [c.strip() for c in cells]
                if header is None:
                    header, header_line = cells, reader.line_num
                else:
                    rows.append(_Row(number=len(rows) + 1, line=reader.line_num, cells=cells))
    except UnicodeDecodeError as exc:
        raise MarketDataError(f"{name}: not a UTF-8 text file ({exc.reason})") from exc
    except csv.Error as exc:
        raise MarketDataError(f"{name}: not a readable CSV file ({exc})") from exc
    if header is None:
        raise MarketDataError(f"{name}: the file is empty (a header row is expected)")
    if not rows:
        raise MarketDataError(f"{name}: the file has a header but no data rows")
    for row in rows:
        if len(row.cells) != len(header):
            raise MarketDataError(
                f"{_at(name, row)}: {len(row.cells)} cells but the header (line {header_line}) has "
                f"{len(header)} columns; every row needs a value in every column"
            )
    return name, header, header_line, rows


def _number(cell: str, where: str) -> float:
    if cell == "":
        raise MarketDataError(f"{where}: missing value (empty cell)")
    if cell.lower() in _NOT_AVAILABLE:
        raise MarketDataError(
            f"{where}: value is {cell!r} (NaN / not available); a number is needed"
        )
    try:
        value = float(cell)
    except ValueError:
        raise MarketDataError(f"{where}: {cell!r} is not a number") from None
    if math.isnan(value):
        raise MarketDataError(f"{where}: value is NaN; a number is needed")
    if not math.isfinite(value):
        raise MarketDataError(f"{where}: value {cell!r} is not finite")
    return value


def read_curve_inputs(path: str | PathLike[str]) -> CurveInputFile:
    """Read and check a curve-input CSV (see the module docstring for the format)."""
    name, header, header_line, rows = _read_rows(path)
    seen = set()
    for col in header:
        if col == "":
            raise MarketDataError(f"{name}, line {header_line}: a header cell is empty")
        if col in seen:
            raise MarketDataError(f"{name}, line {header_line}: column {col!r} appears twice")
        seen.add(col)
    if MATURITY_COLUMN not in header:
        raise MarketDataError(
            f"{name}, line {header_line}: no {MATURITY_COLUMN!r} column (header is {header})"
        )
    value_cols = [c for c in header if c in VALUE_COLUMNS]
    unknown = [c for c in header if c not in (MATURITY_COLUMN, WEIGHT_COLUMN) and c not in VALUE_COLUMNS]
    if unknown:
        raise MarketDataError(
            f"{name}, line {header_line}: unknown column {unknown[0]!r}; expected "
            f"{MATURITY_COLUMN!r}, one of {', '.join(VALUE_COLUMNS)} and optionally {WEIGHT_COLUMN!r}"
        )
    if len(value_cols) != 1:
        raise MarketDataError(
            f"{name}, line {header_line}: exactly one value column is needed, one of "
            f"{', '.join(VALUE_COLUMNS)}; found {value_cols or 'none'}"
        )
    quantity = value_cols[0]
    i_t, i_v = header.index(MATURITY_COLUMN), header.index(quantity)
    i_w = header.index(WEIGHT_COLUMN) if WEIGHT_COLUMN in header else None

    maturities: list[float] = []
    values: list[float] = []
    weights: list[float] = []
    labels: list[str] = []
    previous: float | None = None
    for row in rows:
        where_t = _at(name, row, MATURITY_COLUMN)
        where_v = _at(name, row, quantity)
        t = _number(row.cells[i_t], where_t)
        if t <= 0.0:
            raise MarketDataError(f"{where_t}: maturity {t:g} must be positive")
        if previous is not None and t <= previous:
            raise MarketDataError(
                f"{where_t}: maturity {t:g} is not greater than the previous row's {previous:g}; "
                "maturities must be strictly increasing"
            )
        previous = t
        w = 0.0
        if i_w is not None:
            where_w = _at(name, row, WEIGHT_COLUMN)
            w = 0.0 if row.cells[i_w] == "" else _number(row.cells[i_w], where_w)
            if w < 0.0:
                raise MarketDataError(f"{where_w}: weight {w:g} must not be negative")
            if row.cells[i_v] == "":
                if w > 0.0:
                    raise MarketDataError(
                        f"{where_w}: maturity {t:g} has a weight ({w:g}) but no rate; only liquid "
                        "maturities (rows with a rate) carry LLFR weights"
                    )
                continue  # a maturity without a quote: left out
        v = _number(row.cells[i_v], where_v)
        if quantity == "par_rate" and abs(t - round(t)) > _WHOLE_YEAR_TOL:
            raise MarketDataError(
                f"{where_t}: maturity {t:g} is not a whole number of years, which an annual "
                "fixed leg needs"
            )
        if quantity == "discount_factor":
            if v <= 0.0:
                raise MarketDataError(f"{where_v}: discount factor {v:g} must be positive")
        elif abs(v) >= 1.0:
            raise MarketDataError(
                f"{where_v}: rate {v:g} is 100% or more in size; rates are decimals "
                "(0.035 for 3.5%)"
            )
        maturities.append(t)
        values.append(v)
        weights.append(w)
        labels.append(f"data row {row.number} (line {row.line})")
    if not maturities:
        raise MarketDataError(f"{name}: no row has a rate")
    llfr = None
    if i_w is not None:
        llfr = np.array(weights)
        positive = [k for k, x in enumerate(weights) if x > 0.0]
        if not positive:
            raise MarketDataError(
                f"{name}, column {WEIGHT_COLUMN!r}: no row has a positive weight, so there is no first "
                "smoothing point; give the first smoothing point and the liquid maturities after it "
                "weights that sum to 1"
            )
        total = math.fsum(weights)
        if abs(total - 1.0) > 1e-9:
            listed = "; ".join(f"{labels[k]}: maturity {maturities[k]:g}, weight {weights[k]:g}" for k in positive)
            raise MarketDataError(f"{name}, column {WEIGHT_COLUMN!r}: the weights sum to {total:.10g}, "
                                  f"not 1 ({listed})")
        if maturities[positive[0]] < 1.0:
            raise MarketDataError(
                f"{name}, {labels[positive[0]]}, column {WEIGHT_COLUMN!r}: the first smoothing point "
                f"{maturities[positive[0]]:g} (the first positive weight) is shorter than one year; "
                "the one-year forward into it is not defined"
            )
    return CurveInputFile(
        source=name, quantity=quantity, maturities=np.array(maturities), values=np.array(values),
        llfr_weights=llfr, row_labels=tuple(labels),
    )


def read_correlation_matrix(path: str | PathLike[str]) -> CorrelationFile:
    """Read and check a correlation-matrix CSV (see the module docstring for the format)."""
    name, header, header_line, rows = _read_rows(path)
    names = header[1:]
    if not names:
        raise MarketDataError(f"{name}, line {header_line}: the header names no drivers")
    seen: set[str] = set()
    for j, driver in enumerate(names):
        if driver == "":
            raise MarketDataError(
                f"{name}, line {header_line}: the name of column {j + 2} is empty"
            )
        if driver in seen:
            raise MarketDataError(
                f"{name}, line {header_line}: driver {driver!r} appears twice in the header"
            )
        seen.add(driver)
    n = len(names)
    if len(rows) != n:
        raise MarketDataError(
            f"{name}: {len(rows)} data rows but the header names {n} drivers; "
            "the matrix must be square"
        )
    label = header[0] or "first column"
    matrix = np.empty((n, n))
    for i, row in enumerate(rows):
        if row.cells[0] != names[i]:
            raise MarketDataError(
                f"{_at(name, row, label)}: driver {row.cells[0]!r} where the header order needs "
                f"{names[i]!r}; rows and columns must list the drivers in the same order"
            )
        for j in range(n):
            where = _at(name, row, names[j])
            value = _number(row.cells[j + 1], where)
            if abs(value) > 1.0:
                raise MarketDataError(f"{where}: correlation {value:g} is outside [-1, 1]")
            if i == j and abs(value - 1.0) > _UNIT_TOL:
                raise MarketDataError(
                    f"{where}: a driver's correlation with itself must be 1, not {value:g}"
                )
            matrix[i, j] = value
    for i in range(n):
        for j in range(i):
            if abs(matrix[i, j] - matrix[j, i]) > _UNIT_TOL:
                raise MarketDataError(
                    f"{_at(name, rows[i], names[j])}: {matrix[i, j]:.12g} differs from its mirror "
                    f"at {_at(name, rows[j], names[i]).split(', ', 1)[1]} ({matrix[j, i]:.12g}); "
                    "the matrix must be symmetric"
                )
    return CorrelationFile(source=name, names=tuple(names), matrix=matrix)


def _header_index(name: str, header: list[str], header_line: int, required: tuple[str, ...],
                  optional: tuple[str, ...]) -> dict[str, int]:
    seen: set[str] = set()
    for col in header:
        if col == "":
            raise MarketDataError(f"{name}, line {header_line}: a header cell is empty")
        if col in seen:
            raise MarketDataError(f"{name}, line {header_line}: column {col!r} appears twice")
        seen.add(col)
    for col in required:
        if col not in header:
            raise MarketDataError(f"{name}, line {header_line}: no {col!r} column (header is {header})")
    unknown = [c for c in header if c not in required and c not in optional]
    if unknown:
        raise MarketDataError(
            f"{name}, line {header_line}: unknown column {unknown[0]!r}; expected "
            f"{', '.join(required)} and optionally {', '.join(optional)}"
        )
    return {c: header.index(c) for c in header}


@dataclass(frozen=True, kw_only=True)
class SwaptionQuoteRow:
    """One checked swaption quote: ``vol`` in the convention's market unit (bp for normal)."""

    expiry: float
    tenor: float
    convention: str
    vol: float
    shift: float
    weight: float
    row: int


_VOL_COLUMNS = {"normal_vol_bp": "normal", "lognormal_vol": "lognormal", "shifted_lognormal_vol": "shifted_lognormal"}


def read_swaption_quotes(path: str | PathLike[str]) -> tuple[SwaptionQuoteRow, ...]:
    """Read and check a swaption-quote CSV (see the module docstring for the format)."""
    name, header, header_line, rows = _read_rows(path)
    vol_cols = [c for c in header if c in _VOL_COLUMNS]
    if len(vol_cols) != 1:
        raise MarketDataError(
            f"{name}, line {header_line}: exactly one volatility column is needed, one of "
            f"{', '.join(_VOL_COLUMNS)}; found {vol_cols or 'none'}"
        )
    vol_col = vol_cols[0]
    convention = _VOL_COLUMNS[vol_col]
    required = ("expiry_years", "tenor_years", vol_col) + (("shift",) if convention == "shifted_lognormal" else ())
    idx = _header_index(name, header, header_line, required, ("weight",))
    out = []
    seen: set[tuple[float, float]] = set()
    for row in rows:
        t = _number(row.cells[idx["expiry_years"]], _at(name, row, "expiry_years"))
        n = _number(row.cells[idx["tenor_years"]], _at(name, row, "tenor_years"))
        v = _number(row.cells[idx[vol_col]], _at(name, row, vol_col))
        shift = _number(row.cells[idx["shift"]], _at(name, row, "shift")) if "shift" in idx else 0.0
        w = _number(row.cells[idx["weight"]], _at(name, row, "weight")) if "weight" in idx else 1.0
        if t <= 0.0:
            raise MarketDataError(f"{_at(name, row, 'expiry_years')}: expiry {t:g} must be positive")
        if n <= 0.0 or abs(n - round(n)) > _WHOLE_YEAR_TOL:
            raise MarketDataError(
                f"{_at(name, row, 'tenor_years')}: tenor {n:g} must be a positive whole number of "
                "years (annual fixed leg)"
            )
        if v <= 0.0:
            raise MarketDataError(f"{_at(name, row, vol_col)}: volatility {v:g} must be positive")
        if convention == "normal" and v > MAX_NORMAL_VOL_BP:
            raise MarketDataError(
                f"{_at(name, row, vol_col)}: {v:g} bp is outside the plausible range of normal "
                f"swaption vols, 1 to {MAX_NORMAL_VOL_BP:,.0f} bp (common practice: quoted normal vols "
                "of major currencies lie well inside it); check the quote and its unit"
            )
        if convention == "normal" and v < 1.0:
            raise MarketDataError(
                f"{_at(name, row, vol_col)}: {v:g} bp is implausibly small; normal vols are in basis "
                "points (85 bp is 85, not 0.0085)"
            )
        if convention != "normal" and v > 5.0:
            raise MarketDataError(
                f"{_at(name, row, vol_col)}: {v:g} is outside the plausible range of lognormal vols, "
                "0 to 5 (500%; common practice); lognormal vols are decimals (20% is 0.20)"
            )
        if w < 0.0:
            raise MarketDataError(f"{_at(name, row, 'weight')}: weight {w:g} must not be negative")
        if (t, n) in seen:
            raise MarketDataError(f"{_at(name, row)}: expiry {t:g} x tenor {n:g} is quoted twice")
        seen.add((t, n))
        out.append(SwaptionQuoteRow(expiry=t, tenor=float(round(n)), convention=convention, vol=v,
                                    shift=shift, weight=w, row=row.number))
    return tuple(out)


@dataclass(frozen=True, kw_only=True)
class EquityIndexRow:
    index: str
    spot_level: float
    dividend_yield: float


def read_equity_indices(path: str | PathLike[str]) -> dict[str, EquityIndexRow]:
    """Read and check an equity-index CSV: ``index,spot_level,dividend_yield``."""
    name, header, header_line, rows = _read_rows(path)
    idx = _header_index(name, header, header_line, ("index", "spot_level", "dividend_yield"), ())
    out: dict[str, EquityIndexRow] = {}
    for row in rows:
        index = row.cells[idx["index"]]
        if not index:
            raise MarketDataError(f"{_at(name, row, 'index')}: missing index name")
        if index in out:
            raise MarketDataError(f"{_at(name, row, 'index')}: index {index!r} appears twice")
        spot = _number(row.cells[idx["spot_level"]], _at(name, row, "spot_level"))
        q = _number(row.cells[idx["dividend_yield"]], _at(name, row, "dividend_yield"))
        if spot <= 0.0:
            raise MarketDataError(f"{_at(name, row, 'spot_level')}: spot level {spot:g} must be positive")
        if abs(q) >= 1.0:
            raise MarketDataError(f"{_at(name, row, 'dividend_yield')}: dividend yields are decimals (0.03 for 3%)")
        out[index] = EquityIndexRow(index=index, spot_level=spot, dividend_yield=q)
    return out


@dataclass(frozen=True, kw_only=True)
class EquityVolRow:
    index: str
    expiry: float
    implied_vol: float
    moneyness: float | None  # K / F; None: at the money forward (ATMF)
    row: int
    weight: float = 1.0

    @property
    def is_atmf(self) -> bool:
        return self.moneyness is None or abs(self.moneyness - 1.0) < 1e-12


_MONEYNESS_RANGE = (0.05, 5.0)


def read_equity_vols(path: str | PathLike[str]) -> tuple[EquityVolRow, ...]:
    """Read and check an equity implied-volatility CSV (see the module docstring): per index,
    expiries in non-decreasing order, at most one quote per (expiry, strike); ``strike`` is
    ``ATMF`` or the moneyness ``K / F``; ``weight`` optional (default 1, not negative)."""
    name, header, header_line, rows = _read_rows(path)
    idx = _header_index(name, header, header_line, ("index", "expiry_years", "implied_vol"), ("strike", "weight"))
    out = []
    last: dict[str, float] = {}
    seen: set[tuple[str, float, float]] = set()
    for row in rows:
        index = row.cells[idx["index"]]
        if not index:
            raise MarketDataError(f"{_at(name, row, 'index')}: missing index name")
        t = _number(row.cells[idx["expiry_years"]], _at(name, row, "expiry_years"))
        v = _number(row.cells[idx["implied_vol"]], _at(name, row, "implied_vol"))
        moneyness = None
        if "strike" in idx:
            cell = row.cells[idx["strike"]]
            if cell.upper() != "ATMF":
                moneyness = _number(cell, _at(name, row, "strike"))
                lo, hi = _MONEYNESS_RANGE
                if not lo <= moneyness <= hi:
                    raise MarketDataError(
                        f"{_at(name, row, 'strike')}: strike {moneyness:g} is read as moneyness K/F (the strike "
                        f"over the forward: 0.9 for 90% of the forward, or ATMF) and must lie in [{lo:g}, {hi:g}]"
                    )
        weight = 1.0
        if "weight" in idx:
            weight = _number(row.cells[idx["weight"]], _at(name, row, "weight"))
            if weight < 0.0:
                raise MarketDataError(f"{_at(name, row, 'weight')}: weight {weight:g} must not be negative")
        if t <= 0.0:
            raise MarketDataError(f"{_at(name, row, 'expiry_years')}: expiry {t:g} must be positive")
        if index in last and t < last[index]:
            raise MarketDataError(
                f"{_at(name, row, 'expiry_years')}: expiry {t:g} is less than the previous "
                f"{last[index]:g} for {index!r}; expiries must not decrease per index"
            )
        key = (index, t, 1.0 if moneyness is None else moneyness)
        if key in seen:
            raise MarketDataError(
                f"{_at(name, row, 'strike')}: a second quote for {index!r} at expiry {t:g} and strike "
                f"{'ATMF' if moneyness is None else f'{moneyness:g}'} (ATMF is moneyness 1)"
            )
        seen.add(key)
        if not 0.0 < v < 5.0:
            raise MarketDataError(f"{_at(name, row, 'implied_vol')}: implied vol {v:g} must be a positive decimal "
                                  f"(0.20 for 20%)")
        last[index] = t
        out.append(EquityVolRow(index=index, expiry=t, implied_vol=v, moneyness=moneyness, row=row.number,
                                weight=weight))
    return tuple(out)


@dataclass(frozen=True, kw_only=True)
class InflationSwapRow:
    maturity: float
    rate: float
    row: int


def read_inflation_swaps(path: str | PathLike[str]) -> tuple[InflationSwapRow, ...]:
    """Read and check a zero-coupon inflation swap CSV: ``maturity_years,zc_rate`` (the fair
    fixed rate, annually compounded, decimals; maturities strictly increasing)."""
    name, header, header_line, rows = _read_rows(path)
    idx = _header_index(name, header, header_line, ("maturity_years", "zc_rate"), ())
    out: list[InflationSwapRow] = []
    for row in rows:
        t = _number(row.cells[idx["maturity_years"]], _at(name, row, "maturity_years"))
        k = _number(row.cells[idx["zc_rate"]], _at(name, row, "zc_rate"))
        if t <= 0.0:
            raise MarketDataError(f"{_at(name, row, 'maturity_years')}: maturity {t:g} must be positive")
        if out and t <= out[-1].maturity:
            raise MarketDataError(
                f"{_at(name, row, 'maturity_years')}: maturity {t:g} is not greater than the previous "
                f"{out[-1].maturity:g}; maturities must be strictly increasing"
            )
        if abs(k) >= 0.5:
            raise MarketDataError(f"{_at(name, row, 'zc_rate')}: {k:g} is not a plausible decimal rate "
                                  "(0.025 for 2.5%)")
        out.append(InflationSwapRow(maturity=t, rate=k, row=row.number))
    return tuple(out)


@dataclass(frozen=True, kw_only=True)
class CreditSpreadCurve:
    rating: str
    maturities: np.ndarray
    spreads: np.ndarray  # decimals


def read_credit_spreads(path: str | PathLike[str]) -> dict[str, CreditSpreadCurve]:
    """Read and check a credit-spread CSV: ``rating,maturity_years,spread_bp`` (zero-coupon
    spreads over the risk-free zero rate, continuously compounded, in basis points; maturities
    strictly increasing within each rating)."""
    name, header, header_line, rows = _read_rows(path)
    idx = _header_index(name, header, header_line, ("rating", "maturity_years", "spread_bp"), ())
    points: dict[str, list[tuple[float, float]]] = {}
    for row in rows:
        rating = row.cells[idx["rating"]]
        if not rating:
            raise MarketDataError(f"{_at(name, row, 'rating')}: missing rating name")
        t = _number(row.cells[idx["maturity_years"]], _at(name, row, "maturity_years"))
        s = _number(row.cells[idx["spread_bp"]], _at(name, row, "spread_bp"))
        if t <= 0.0:
            raise MarketDataError(f"{_at(name, row, 'maturity_years')}: maturity {t:g} must be positive")
        prev = points.setdefault(rating, [])
        if prev and t <= prev[-1][0]:
            raise MarketDataError(
                f"{_at(name, row, 'maturity_years')}: maturity {t:g} is not greater than the previous "
                f"{prev[-1][0]:g} for rating {rating!r}; maturities must be strictly increasing per rating"
            )
        if not 0.0 <= s < 5000.0:
            raise MarketDataError(f"{_at(name, row, 'spread_bp')}: spread {s:g} bp must lie in [0, 5000) basis points")
        prev.append((t, s * 1e-4))
    return {
        r: CreditSpreadCurve(rating=r, maturities=np.array([p[0] for p in v]), spreads=np.array([p[1] for p in v]))
        for r, v in points.items()
    }


@dataclass(frozen=True, kw_only=True)
class InflationCapRow:
    maturity: float
    strike: float
    kind: str
    premium: float  # per unit notional
    weight: float
    row: int


def read_inflation_caps(path: str | PathLike[str]) -> tuple[InflationCapRow, ...]:
    """Read and check a year-on-year inflation cap/floor CSV:
    ``maturity_years,strike,kind,premium_bp[,weight]`` (whole-year maturities, annual caplets;
    ``kind`` cap or floor; the premium per unit notional in basis points)."""
    name, header, header_line, rows = _read_rows(path)
    idx = _header_index(name, header, header_line, ("maturity_years", "strike", "kind", "premium_bp"), ("weight",))
    out: list[InflationCapRow] = []
    for row in rows:
        t = _number(row.cells[idx["maturity_years"]], _at(name, row, "maturity_years"))
        k = _number(row.cells[idx["strike"]], _at(name, row, "strike"))
        kind = row.cells[idx["kind"]].lower()
        p = _number(row.cells[idx["premium_bp"]], _at(name, row, "premium_bp"))
        w = _number(row.cells[idx["weight"]], _at(name, row, "weight")) if "weight" in idx else 1.0
        if t < 1.0 or abs(t - round(t)) > _WHOLE_YEAR_TOL:
            raise MarketDataError(f"{_at(name, row, 'maturity_years')}: maturity {t:g} must be a whole number of years "
                                  f"(at least 1)")
        if kind not in ("cap", "floor"):
            raise MarketDataError(f"{_at(name, row, 'kind')}: kind {row.cells[idx['kind']]!r} must be cap or floor")
        if abs(k) >= 0.5:
            raise MarketDataError(f"{_at(name, row, 'strike')}: strike {k:g} is not a plausible decimal rate (0.03 for "
                                  f"3%)")
        if not p > 0.0:
            raise MarketDataError(f"{_at(name, row, 'premium_bp')}: premium {p:g} bp must be positive")
        if w < 0.0:
            raise MarketDataError(f"{_at(name, row, 'weight')}: weight {w:g} must not be negative")
        out.append(InflationCapRow(maturity=float(round(t)), strike=k, kind=kind, premium=p * 1e-4, weight=w,
                                   row=row.number))
    return tuple(out)


@dataclass(frozen=True, kw_only=True)
class NumberRow:
    """One data row of a table of numbers: its values by column, its data row number."""

    values: dict[str, float]
    row: int


def read_number_table(path: str | PathLike[str], required: tuple[str, ...],
                      optional: dict[str, float] | None = None) -> tuple[NumberRow, ...]:
    """Read and check a CSV of numbers with the named columns (a part plug-in's quote file):
    every cell a finite number, ``optional`` columns filled with their default when left out;
    a bad cell names file, data row, line and column. The kind checks what the numbers mean."""
    defaults = dict(optional or {})
    name, header, header_line, rows = _read_rows(path)
    idx = _header_index(name, header, header_line, required, tuple(defaults))
    out: list[NumberRow] = []
    for row in rows:
        values = {c: _number(row.cells[idx[c]], _at(name, row, c)) if c in idx else float(defaults[c])
                  for c in (*required, *defaults)}
        out.append(NumberRow(values=values, row=row.number))
    return tuple(out)
