"""Calibration of the parts beside the rates: the total-return indices, the full driver
correlation, inflation and credit; and their form in ``calibration.json``.

* **Indices** (the core equity ``[equity]`` and each ``[[indices]]`` entry alike, through
  :attr:`pqflow.config.schema.RunConfig.index_specs`): level and income yield typed in or from
  the index file; the volatility typed in or bootstrapped from the index's implied volatilities
  under the run's rates (:func:`pqflow.calibration.equity_vol.calibrate_equity_volatility`);
  real-world price of risk ``risk_premium / sigma(t)``.
* **Correlation**: one matrix over every driver (``rates``, each index, ``real_rate``,
  ``inflation``), typed in or from the file, checked positive definite (or Higham-repaired on
  request), the sub-matrix of the configured drivers taken in model order.
* **Inflation**: the real curve from zero-coupon inflation swaps,
  ``P_r(0, T) = P_n(0, T) (1 + k(T))^T`` at each quote (exact; Brigo and Mercurio 2006,
  ch. 15.2), the breakeven rate held flat beyond the last quote (common practice), pillars every
  year to the end of the nominal curve; volatilities typed in, or fitted to year-on-year caps
  and floors in closed form (:func:`pqflow.calibration.inflation.calibrate_jarrow_yildirim`).
* **Credit**: per rating a hazard curve bootstrapped from the spreads and the CIR++ parameters
  (:mod:`pqflow.calibration.credit`); the ratings' drivers (``credit_<rating>``) may be
  correlated with each other through the same matrix, not (in this version) with the market
  drivers.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

import numpy as np

from pqflow.calibration.credit import ZeroSpreadCurve, calibrate_credit
from pqflow.calibration.equity_vol import EquityVolQuote, calibrate_equity_volatility
from pqflow.calibration.inflation_kind import calibrate_inflation, inflation_from_json, inflation_to_json
from pqflow.config.schema import IndexSpec, RunConfig
from pqflow.errors import CalibrationError, ConfigError, MarketDataError
from pqflow.market.correlation import check_correlation_matrix, nearest_correlation_matrix
from pqflow.market.curve import DiscountCurve
from pqflow.market.data_files import (
    EquityVolRow,
    read_correlation_matrix,
    read_credit_spreads,
    read_equity_indices,
    read_equity_vols,
)
from pqflow.measure.cir_density import price_of_risk_for_long_run_mean
from pqflow.measure.prices_of_risk import equity_price_of_risk
from pqflow.models.cir_credit import CirCreditModel, CirParams, CreditRating, HazardCurve, real_world_cir
from pqflow.models.economy import INFLATION_DRIVER, RATES_DRIVERS, REAL_RATE_DRIVER, TotalReturnIndex
from pqflow.models.parts import PART_KINDS
from pqflow.models.rates import RatesModel
from pqflow.models.schedule import PiecewiseConstant
from pqflow.storage.calibration_file import IndexRecord
from pqflow.storage.calibration_sections import (
    CreditRecord,
    DriverCorrelationRecord,
)

__all__ = [
    "RATES_DRIVER",
    "DriverCorrelation",
    "driver_names",
    "driver_correlation",
    "calibrate_index",
    "calibrate_index_from_files",
    "INDEX_MARKET_DATA_KEYS",
    "fit_index_volatility",
    "calibrate_inflation",
    "calibrate_credit_part",
    "credit_driver",
    "credit_correlation",
    "schedule_json",
    "load_schedule",
    "index_record",
    "index_from_record",
    "inflation_to_json",
    "inflation_from_json",
    "credit_to_json",
    "credit_from_record",
]

#: Name of the short-rate driver in a correlation matrix (Hull-White; G2++ has ``rates_x`` and
#: ``rates_y``, :data:`pqflow.models.economy.RATES_DRIVERS`).
RATES_DRIVER = "rates"


def schedule_json(value: float | PiecewiseConstant) -> float | dict[str, list[float]]:
    return value.to_json() if isinstance(value, PiecewiseConstant) else float(value)


def load_schedule(data: Any) -> float | PiecewiseConstant:
    return float(data) if isinstance(data, (int, float)) else PiecewiseConstant.from_json(data)


# ------------------------------------------------------------------------------- correlation


@dataclass(frozen=True, kw_only=True)
class DriverCorrelation:
    """The correlation of the configured drivers, in model order."""

    names: tuple[str, ...]
    matrix: np.ndarray

    def pair(self, a: str, b: str) -> float:
        return float(self.matrix[self.names.index(a), self.names.index(b)])

    def with_rates(self, name: str) -> float | tuple[float, float]:
        """Correlation of driver ``name`` with the rate driver(s): a number under Hull-White,
        ``(with rates_x, with rates_y)`` under G2++."""
        if RATES_DRIVER in self.names:
            return self.pair(RATES_DRIVER, name)
        return (self.pair("rates_x", name), self.pair("rates_y", name))

    def to_json(self) -> dict[str, Any]:
        return {"drivers": list(self.names), "matrix": self.matrix.tolist()}

    @classmethod
    def from_record(cls, rec: DriverCorrelationRecord) -> DriverCorrelation:
        """From ``CalibrationRecord.driver_correlation``."""
        return cls(names=rec.drivers, matrix=np.array(rec.matrix, dtype=float))


def driver_names(config: RunConfig) -> tuple[str, ...]:
    """Drivers of the configured Gaussian parts, in model order."""
    out = [*RATES_DRIVERS[config.rates.model], *(i.name for i in config.index_specs)]
    if config.inflation is not None:
        out += [REAL_RATE_DRIVER, INFLATION_DRIVER]
    for name, section in config.parts.items():  # registered part plug-ins, in section order
        out += PART_KINDS[name].drivers(section)
    return tuple(out)


def credit_driver(rating: str) -> str:
    """Name of a rating's intensity driver in a correlation matrix: ``credit_{rating}``."""
    return f"credit_{rating}"


def _checked_matrix(config: RunConfig) -> tuple[tuple[str, ...], np.ndarray, str, dict[str, Any]]:
    """The whole matrix of the configured source (typed or file), checked or repaired."""
    if config.correlations is not None:
        names = tuple(config.correlations.drivers)
        matrix = np.array(config.correlations.matrix, dtype=float)
        where = "[correlations]"
        fit: dict[str, Any] = {"method": "typed in ([correlations])", "drivers": list(names), "repaired": False}
        if np.any(np.abs(matrix - matrix.T) > 1e-12) or np.any(np.diag(matrix) != 1.0) or np.any(np.abs(matrix) > 1.0):
            raise MarketDataError(f"{where}: the matrix must be symmetric, within [-1, 1], with a unit diagonal")
    else:
        path = config.market_file("correlations")
        if path is None:
            raise ConfigError("correlations: give [correlations] or market_data.correlations")
        data = read_correlation_matrix(path)
        names, matrix, where = data.names, data.matrix, str(path)
        fit = {"method": "from file", "drivers": list(names), "repaired": False}
    try:
        check_correlation_matrix(matrix, names=names)
    except MarketDataError as exc:
        if config.calibration.correlation_repair != "higham":
            raise MarketDataError(
                f"{where}: {exc}. Set calibration.correlation_repair = \"higham\" to use the nearest "
                "correlation matrix instead (Higham 2002), or correct the matrix."
            ) from None
        repair = nearest_correlation_matrix(matrix)
        fit.update(
            repaired=True,
            method="nearest correlation matrix (Higham 2002, alternating projections with Dykstra's correction)",
            input_matrix=matrix.tolist(),
            repaired_matrix=repair.matrix.tolist(),
            frobenius_distance=repair.frobenius_distance,
        )
        matrix = repair.matrix
    return tuple(names), np.asarray(matrix, dtype=float), where, fit


def driver_correlation(config: RunConfig, rates: RatesModel | None = None) -> tuple[DriverCorrelation, dict[str, Any]]:
    """The correlation of every configured driver, from its one source, checked. Under G2++
    the ``(rates_x, rates_y)`` entry is the model's ``rho`` (typed in or fitted to swaptions),
    whatever the matrix says."""
    needed = driver_names(config)
    if config.equity.correlation_with_rates is not None:
        rho = config.equity.correlation_with_rates
        return DriverCorrelation(names=needed, matrix=np.array([[1.0, rho], [rho, 1.0]])), {"method": "typed in"}
    names, matrix, where, fit = _checked_matrix(config)
    missing = [n for n in needed if n not in names]
    if missing:
        raise MarketDataError(
            f"{where}: driver(s) {', '.join(repr(m) for m in missing)} not in the matrix (drivers: "
            f"{', '.join(names)}); name the short-rate driver {RATES_DRIVER!r}, each index by its "
            f"name and, with [inflation], {REAL_RATE_DRIVER!r} and {INFLATION_DRIVER!r}"
        )
    pick = [names.index(n) for n in needed]
    sub = np.array(matrix[np.ix_(pick, pick)], dtype=float)
    sub = 0.5 * (sub + sub.T)
    np.fill_diagonal(sub, 1.0)
    fixed_pairs = rates.fixed_correlations() if rates is not None else {}
    label = rates.label if rates is not None else ""
    for (a, b), fixed in fixed_pairs.items():
        i, j = needed.index(a), needed.index(b)
        fit[f"{a}_{b}"] = {"from_matrix": float(sub[i, j]), "used": fixed,
                           "note": f"the {label} rho of the rates fit replaces the matrix entry"}
        sub[i, j] = sub[j, i] = fixed
    if np.linalg.eigvalsh(sub)[0] <= 1e-10:
        raise MarketDataError(
            f"{where}: the correlations of the configured drivers {list(needed)} are singular (a pair or "
            "group moves as one); the scenario density needs a positive definite matrix"
        )
    n_rates = len(RATES_DRIVERS[config.rates.model])
    fit["correlation_with_rates"] = float(sub[0, n_rates]) if n_rates == 1 else sub[:n_rates, n_rates].tolist()
    fit["used_drivers"] = list(needed)
    return DriverCorrelation(names=needed, matrix=sub), fit


def credit_correlation(config: RunConfig) -> tuple[np.ndarray | None, dict[str, Any]]:
    """Correlation of the ratings' intensity drivers (``credit_{rating}`` in the matrix), or
    ``None`` (independent ratings) when the matrix names none of them. Credit is independent of
    the market drivers in this version: non-zero entries between a credit driver and a
    configured market driver are refused rather than ignored."""
    sec = config.credit
    if sec is None:
        raise RuntimeError("credit correlations asked for a configuration without [credit]")
    independent: dict[str, Any] = {"method": "independent ratings (no credit_<rating> drivers in the matrix)"}
    if config.correlations is None and config.market_file("correlations") is None:
        return None, independent
    names, matrix, where, _ = _checked_matrix(config)
    wanted = [credit_driver(r.name) for r in sec.ratings]
    present = [w for w in wanted if w in names]
    if not present:
        return None, independent
    missing = [w for w in wanted if w not in names]
    if missing:
        raise MarketDataError(
            f"{where}: the matrix names {', '.join(present)} but not {', '.join(missing)}; name every "
            "rating's driver (credit_<rating>) or none"
        )
    idx = [names.index(w) for w in wanted]
    market = [names.index(n) for n in driver_names(config) if n in names]
    cross = matrix[np.ix_(idx, market)]
    if np.any(np.abs(cross) > 1e-12):
        i, j = np.unravel_index(int(np.argmax(np.abs(cross))), cross.shape)
        raise MarketDataError(
            f"{where}: {wanted[i]} correlates with {names[market[j]]} ({cross[i, j]:g}); credit intensities "
            "are independent of rates, indices and inflation in this version: set those entries to 0"
        )
    sub = np.array(matrix[np.ix_(idx, idx)], dtype=float)
    if len(idx) > 1 and np.linalg.eigvalsh(sub)[0] <= 1e-10:
        raise MarketDataError(f"{where}: the credit drivers' correlations are singular; the density needs them "
                              f"positive definite")
    return sub, {"method": "from the correlation matrix (credit_<rating> drivers)", "drivers": wanted,
                 "matrix": sub.tolist()}


# ------------------------------------------------------------------------------- indices


def one_quote_per_expiry(path: Any, name: str, rows: list[EquityVolRow]) -> list[EquityVolRow]:
    """The quotes a deterministic volatility fits: the only quote of an expiry, or its ATMF one
    when a smile gives several (a deterministic volatility has no skew to fit)."""
    by_expiry: dict[float, list[EquityVolRow]] = {}
    for r in rows:
        by_expiry.setdefault(r.expiry, []).append(r)
    out = []
    for t, group in by_expiry.items():
        if len(group) == 1:
            out.append(group[0])
            continue
        atmf = [r for r in group if r.is_atmf]
        if not atmf:
            raise CalibrationError(
                f"{path}: index {name!r} has {len(group)} strikes at expiry {t:g} (rows "
                f"{', '.join(str(r.row) for r in group)}) and none at the money forward: a deterministic "
                "volatility fits one quote per expiry; add an ATMF row or set volatility_model = \"heston\""
            )
        out.append(atmf[0])
    return out


def fit_index_volatility(
    path: Any,
    name: str,
    kind: str,
    rows: list[EquityVolRow],
    curve: DiscountCurve,
    rates: RatesModel,
    rho_rates: float | tuple[float, float],
    level: float,
    q: float,
) -> tuple[PiecewiseConstant, dict[str, Any], list[dict[str, Any]]]:
    """A piecewise-constant volatility bootstrapped to the index's implied volatilities (one
    bucket per quote, each repriced exactly in closed form under the rates model), its fit
    report and the option instruments the market-consistency check reprices."""
    if not rows:
        raise MarketDataError(f"{path}: no implied volatilities for index {name!r}")
    rows = one_quote_per_expiry(path, name, rows)
    try:
        report = calibrate_equity_volatility(
            curve, rates, level=level, dividend_yield=q, correlation=rho_rates,
            quotes=[EquityVolQuote(
                expiry=r.expiry, implied_vol=r.implied_vol,
                strike=None if r.moneyness is None
                else r.moneyness * level * np.exp(-q * r.expiry) / float(curve.discount(r.expiry)),
            ) for r in rows],
        )
    except MarketDataError as exc:
        raise CalibrationError(f"{path}: {exc}") from None
    ends = np.asarray(report.bucket_ends, dtype=float)
    vols = np.asarray(report.bucket_vols, dtype=float)
    schedule = PiecewiseConstant(knots=(0.0, *ends[:-1].tolist()), values=tuple(vols.tolist()))
    fit = {
        "method": "piecewise-constant volatility, bootstrapped bucket by bucket to reprice each implied "
        f"volatility exactly under {rates.label} rates (closed form)",
        "bucket_ends": ends.tolist(),
        "bucket_volatilities": vols.tolist(),
        "max_abs_vol_error": report.max_abs_vol_error,
        "rows": report.as_records(),
    }
    instruments = [
        {"index": name, "column_kind": kind, "expiry": r.expiry, "strike": r.strike, "kind": "call",
         "market_vol": r.market_vol, "market_price": r.market_price, "model_price": r.model_price}
        for r in report.rows
    ]
    return schedule, fit, instruments


def calibrate_index(
    config: RunConfig, spec: IndexSpec, curve: DiscountCurve, rates: RatesModel,
    rho_rates: float | tuple[float, float],
) -> tuple[TotalReturnIndex, float | PiecewiseConstant, dict[str, Any], list[dict[str, Any]]]:
    """One total-return index, the core equity or a further one: its parameters (with its
    correlation ``rho_rates`` with the rate driver(s)), real-world price of risk, fit report and
    option quotes."""
    files = {key: path for key in INDEX_MARKET_DATA_KEYS if (path := config.market_file(key)) is not None}
    return calibrate_index_from_files(spec, files, curve, rates, rho_rates)


#: The ``[market_data]`` keys of the indices' files (levels and yields; implied volatilities).
INDEX_MARKET_DATA_KEYS = ("equity_index", "equity_vols")


def calibrate_index_from_files(
    spec: IndexSpec, files: Mapping[str, Path], curve: DiscountCurve, rates: RatesModel,
    rho_rates: float | tuple[float, float],
) -> tuple[TotalReturnIndex, float | PiecewiseConstant, dict[str, Any], list[dict[str, Any]]]:
    """:func:`calibrate_index` from the index's files by ``[market_data]`` key
    (:data:`INDEX_MARKET_DATA_KEYS`)."""
    if spec.level is not None:
        if spec.income_yield is None:
            raise ConfigError(f"{spec.key}: level and {spec.yield_key} go together")
        level, q = spec.level, spec.income_yield
    else:
        path = files.get("equity_index")
        if path is None:
            raise ConfigError(f"{spec.key}: give level and {spec.yield_key}, or market_data.equity_index")
        rows = read_equity_indices(path)
        if spec.name not in rows:
            what = "equity index" if spec.core else "index"
            raise MarketDataError(f"{path}: no row for {what} {spec.name!r} (has: {', '.join(rows)})")
        level, q = rows[spec.name].spot_level, rows[spec.name].dividend_yield
    vol_path = files.get("equity_vols")
    quotes = [] if vol_path is None else [r for r in read_equity_vols(vol_path) if r.index == spec.name]
    fit: dict[str, Any]
    instruments: list[dict[str, Any]] = []
    if spec.volatility is not None:
        if quotes:
            raise MarketDataError(
                f"{vol_path}: has implied volatilities for {spec.name!r} and {spec.key}.volatility is typed "
                "in as well; give the volatility once"
            )
        vol: float | PiecewiseConstant = spec.volatility
        fit = {"method": "typed in"}
    else:
        if vol_path is None:
            raise ConfigError(f"{spec.key}: give volatility, or market_data.equity_vols")
        vol, fit, instruments = fit_index_volatility(
            vol_path, spec.name, spec.kind, quotes, curve, rates, rho_rates, level, q
        )
    index = TotalReturnIndex(name=spec.name, kind=spec.kind, level=level, income_yield=q, volatility=vol,
                             correlation=rho_rates)
    lam = equity_price_of_risk(spec.risk_premium, vol)
    return index, lam, fit, instruments


def index_record(
    index: TotalReturnIndex, price_of_risk: float | PiecewiseConstant, risk_premium: float | None,
    rates: RatesModel, *, core: bool,
) -> IndexRecord:
    """An index's calibration record (:class:`pqflow.storage.calibration_file.IndexRecord`):
    the core index records its correlation with the short-rate shock (and under G2++ with the
    rate factors); a further index's is in the driver correlation."""
    rho = index.correlation if core else None
    return IndexRecord(
        name=index.name, kind=index.kind, level=index.level, income_yield=index.income_yield,
        volatility=schedule_json(index.volatility), market_price_of_risk=schedule_json(price_of_risk),
        risk_premium=risk_premium,
        correlation_with_rates=None if rho is None else rates.short_rate_correlation(rho),
        correlation_with_rate_factors=rho if isinstance(rho, tuple) else None,
        core=core,
    )


def index_from_record(
    record: IndexRecord, correlation: float | tuple[float, float] | None = None
) -> tuple[TotalReturnIndex, float | PiecewiseConstant]:
    """The index of a record and its price of risk; ``correlation``: its correlation with the
    rate driver(s) when the record does not hold it (a further index: the driver correlation's)."""
    if record.core:
        factors = record.correlation_with_rate_factors
        correlation = (float(factors[0]), float(factors[1])) if factors else record.correlation_with_rates
    index = TotalReturnIndex(
        name=record.name, kind=record.kind, level=float(record.level), income_yield=float(record.income_yield),
        volatility=load_schedule(record.volatility), correlation=correlation,
    )
    return index, load_schedule(record.market_price_of_risk)


# ------------------------------------------------------------------------------- inflation
# The inflation part's calibration and calibration.json form live with its kind
# (pqflow.calibration.inflation_kind); the names stay importable from here.


# ------------------------------------------------------------------------------- credit


def calibrate_credit_part(config: RunConfig) -> tuple[CirCreditModel, dict[str, Any]]:
    """The credit model (ratings independent of each other and of the Gaussian drivers)."""
    sec = config.credit
    if sec is None:
        raise RuntimeError("the credit part asked for a configuration without [credit]")
    path = config.market_file("credit_spreads")
    from_file = read_credit_spreads(path) if path is not None else {}
    curves = []
    for r in sec.ratings:
        if r.spread_maturities is not None:
            if r.spreads_bp is None:
                raise ConfigError(f"credit.ratings {r.name!r}: spread_maturities and spreads_bp go together")
            mats, spreads = np.array(r.spread_maturities, float), np.array(r.spreads_bp, float) * 1e-4
        else:
            if r.name not in from_file:
                raise MarketDataError(f"{path}: no spreads for rating {r.name!r} (has: "
                                      f"{', '.join(from_file) or 'none'})")
            mats, spreads = from_file[r.name].maturities, from_file[r.name].spreads
        curves.append(ZeroSpreadCurve(rating=r.name, maturities=mats, spreads=spreads, recovery=r.recovery))
    unused = sorted(set(from_file) - {r.name for r in sec.ratings})
    fits = {r.name: tuple(r.fit) for r in sec.ratings}
    reports = []
    ratings = []
    for r, c in zip(sec.ratings, curves, strict=True):
        cal = calibrate_credit(
            [c],
            cir={r.name: CirParams(mean_reversion=r.mean_reversion, long_run_mean=r.long_run_mean,
                                   volatility=r.volatility, initial=r.initial)},
            bond_maturities=sec.bond_maturities, fit=fits[r.name],
            prices_of_risk={r.name: r.price_of_risk},
        )
        rating = cal.model.ratings[0]
        rep = cal.reports[0]
        if r.real_world_long_run_mean is not None:
            try:
                theta = price_of_risk_for_long_run_mean(
                    rating.cir.mean_reversion, rating.cir.long_run_mean, rating.cir.volatility,
                    real_world_mean=r.real_world_long_run_mean,
                )
                rating = replace(rating, price_of_risk=theta)
            except ValueError as exc:
                raise CalibrationError(f"credit rating {r.name}: real_world_long_run_mean: {exc}") from None
        ratings.append(rating)
        reports.append({
            "rating": r.name, "fitted": list(rep.fitted), "max_abs_error_bp": rep.max_abs_error_bp,
            "min_shift": rep.min_shift, "max_shift": rep.max_shift, "feller_ratio": rep.feller_ratio,
            "optimizer_success": rep.optimizer_success,
            "price_of_risk": rating.price_of_risk,
            "real_world_long_run_mean": real_world_cir(rating).long_run_mean,
            "market_consistent_long_run_mean": rating.cir.long_run_mean,
            "rows": [dict(vars(row)) for row in rep.rows],
        })
    corr, corr_fit = credit_correlation(config)
    model = CirCreditModel(ratings=tuple(ratings), bond_maturities=tuple(sorted(sec.bond_maturities)), correlation=corr)
    fit = {
        "method": "hazard bootstrapped from zero-coupon spreads (recovery of market value); CIR++ shift "
        "reprices every spread exactly; CIR parameters given or loosely fitted",
        "ratings": reports,
        "spread_curves_not_used": unused,
        "correlation": corr_fit,
        "substeps_per_year": sec.substeps_per_year,
    }
    return model, fit


def credit_to_json(model: CirCreditModel, substeps_per_year: int) -> dict[str, Any]:
    return {
        "bond_maturities": list(model.bond_maturities),
        "substeps_per_year": substeps_per_year,
        "correlation": None if model.correlation is None else np.asarray(model.correlation).tolist(),
        "ratings": [
            {
                "name": r.name,
                "recovery": r.recovery,
                "price_of_risk": r.price_of_risk,
                "cir": {"mean_reversion": r.cir.mean_reversion, "long_run_mean": r.cir.long_run_mean,
                        "volatility": r.cir.volatility, "initial": r.cir.initial},
                "hazard": {"knots": r.hazard.knots.tolist(), "hazards": r.hazard.hazards.tolist()},
            }
            for r in model.ratings
        ],
    }


def credit_from_record(rec: CreditRecord) -> tuple[CirCreditModel, int]:
    """The credit model and its Euler substeps per year from ``CalibrationRecord.credit``."""
    ratings = tuple(
        CreditRating(
            name=r.name, recovery=r.recovery, price_of_risk=r.price_of_risk,
            cir=CirParams(mean_reversion=r.cir.mean_reversion, long_run_mean=r.cir.long_run_mean,
                          volatility=r.cir.volatility, initial=r.cir.initial),
            hazard=HazardCurve(knots=np.array(r.hazard.knots, float), hazards=np.array(r.hazard.hazards, float)),
        )
        for r in rec.ratings
    )
    model = CirCreditModel(ratings=ratings, bond_maturities=rec.bond_maturities,
                           correlation=None if rec.correlation is None else np.array(rec.correlation, dtype=float))
    return model, rec.substeps_per_year
