"""Heston smiles for a run: which indices have ``volatility_model = "heston"``, their fit to the
smile rows of ``market_data.equity_vols`` and their ``calibration.json`` form.

The fit itself is :func:`pqflow.calibration.heston_fit.calibrate_heston`, under the run's
rates and each index's correlation with the rate driver(s) from the driver correlation.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np

from pqflow.calibration.heston_fit import HestonBounds, HestonQuote, calibrate_heston
from pqflow.config.schema import RunConfig
from pqflow.errors import CalibrationError, MarketDataError
from pqflow.market.curve import DiscountCurve
from pqflow.market.data_files import read_equity_vols
from pqflow.measure.heston_density import heston_prices_of_risk
from pqflow.models.g2pp import G2PlusPlusParams
from pqflow.models.heston import (
    HestonIndex,
    HestonParams,
    HestonPricesOfRisk,
    heston_indices_to_json,
)
from pqflow.models.hull_white import HullWhiteParams
from pqflow.models.schedule import as_schedule
from pqflow.storage.calibration_sections import HestonIndexRecord
from pqflow.storage.names import index_column

__all__ = ["heston_indices", "fit_heston_indices", "heston_to_json", "heston_from_record",
           "heston_indices_from_records"]

RATES_DRIVER = "rates"


def heston_indices(config: RunConfig) -> tuple[str, ...]:
    """Names of the indices (core equity first) configured with ``volatility_model = "heston"``."""
    return tuple(i.name for i in config.index_specs if i.volatility_model == "heston")


def recoverable_drivers(config: RunConfig, rates) -> tuple[str, ...]:
    """The Gaussian drivers whose increments a Heston index can read from the economy's columns
    (:mod:`pqflow.simulation.heston_part`): the Hull-White driver and every deterministic-
    volatility index."""
    return (*rates.recoverable_drivers, *(i.name for i in config.index_specs if i.volatility_model != "heston"))


def projection(name: str, correlation, recoverable: tuple[str, ...], path_hint: str) -> tuple[tuple[tuple[str, float],
                                                                                                    ...], float]:
    """``(loadings, explained)``: the index driver's projection ``sum_j beta_j B_j`` on the
    recoverable drivers, ``beta = C_GG^{-1} rho_SG``, and its variance share. Every other entry
    of the index's row must be the implied ``sum_j beta_j C_jk`` (else a CalibrationError saying
    which values would do)."""
    names = list(correlation.names)
    i = names.index(name)
    g = [names.index(d) for d in recoverable if d in names]
    c = correlation.matrix
    rho_g = c[i, g]
    beta = np.linalg.solve(c[np.ix_(g, g)], rho_g) if g else np.zeros(0)
    explained = float(rho_g @ beta) if g else 0.0
    others = [k for k in range(len(names)) if k != i and k not in g]
    implied = {k: float(beta @ c[g, k]) if g else 0.0 for k in others}
    bad = [(names[k], float(c[i, k]), implied[k]) for k in others if abs(c[i, k] - implied[k]) > 1e-6]
    if bad:
        want = ", ".join(f"{n} {v:+.6g} (given {gv:+.6g})" for n, gv, v in bad)
        raise CalibrationError(
            f"{path_hint}: the correlations of Heston index {name!r} cannot all be simulated. Its driver is "
            f"built from the drivers whose increments the economy gives ({', '.join(names[j] for j in g) or 'none'}) "
            f"and an independent part, so its correlation with any other driver is implied by those; set {want}"
        )
    return tuple((names[j], float(b)) for j, b in zip(g, beta, strict=True) if b != 0.0), explained


def fit_heston_indices(
    config: RunConfig,
    curve: DiscountCurve,
    rates: HullWhiteParams | G2PlusPlusParams,
    correlation,
    spots: dict[str, tuple[float, float, str]],
    driver_prices_of_risk: dict[str, Any] | None = None,
) -> tuple[dict[str, HestonIndex], dict[str, Any], list[dict[str, Any]]]:
    """Each Heston index (by name), its fit report (JSON form) and the option instruments the
    market-consistency check reprices (every smile quote).

    correlation: the run's :class:`pqflow.calibration.parts.DriverCorrelation`; spots:
    ``(level, income yield, kind)`` by index name; driver_prices_of_risk: the Gaussian drivers'
    real-world prices of risk by driver name (the premium the projection inherits)."""
    driver_prices_of_risk = driver_prices_of_risk or {}
    names = heston_indices(config)
    if not names:
        return {}, {}, []
    path = config.market_file("equity_vols")
    if path is None:  # the configuration rules refuse this; kept for direct callers
        raise CalibrationError("volatility_model = \"heston\" needs market_data.equity_vols")
    rows = read_equity_vols(path)
    lower, upper, initial = config.calibration.heston.lower_upper_initial()
    try:
        bounds = HestonBounds(lower=lower, upper=upper, initial=initial)  # type: ignore[arg-type]
    except ValueError as exc:
        raise CalibrationError(f"calibration.heston: {exc}") from None
    specs = {i.name: i for i in config.index_specs}
    corr_source = str(config.market_file("correlations") or "[correlations]")
    out, fits, instruments = {}, {}, []
    for name in names:
        section = specs[name]
        premium = section.risk_premium
        mine = [r for r in rows if r.index == name]
        if not mine:
            raise MarketDataError(f"{path}: no implied volatilities for index {name!r} (volatility_model = \"heston\")")
        loadings, explained = projection(name, correlation, recoverable_drivers(config, rates), corr_source)
        # the simulation reads back only the recoverable rate drivers: with none, no rate correlation
        rho_r = float(correlation.with_rates(name)) if rates.recoverable_drivers else 0.0
        # the leverage correlation can only be what the Gaussian drivers leave: rho^2 < 1 - explained
        room = float(np.sqrt(max(1.0 - explained, 0.0))) - 0.01
        lo_i, hi_i = list(bounds.lower), list(bounds.upper)
        lo_i[4], hi_i[4] = max(lo_i[4], -room), min(hi_i[4], room)
        if not lo_i[4] < hi_i[4]:
            raise CalibrationError(
                f"index {name!r}: the other drivers explain {explained:.3f} of its variance, leaving no room for the "
                f"correlation of its variance within calibration.heston.rho_bounds "
                f"{bounds.lower[4]:g}..{bounds.upper[4]:g}"
            )
        init = list(bounds.initial)
        init[4] = min(max(init[4], lo_i[4]), hi_i[4])
        index_bounds = HestonBounds(lower=tuple(lo_i), upper=tuple(hi_i), initial=tuple(init))  # type: ignore[arg-type]
        quotes = [HestonQuote(expiry=r.expiry, moneyness=1.0 if r.moneyness is None else r.moneyness,
                              implied_vol=r.implied_vol, weight=r.weight) for r in mine]
        level, q, kind = spots[name]
        report = calibrate_heston(curve, rates, level=level, dividend_yield=q, correlation=correlation.with_rates(name),
                                  quotes=quotes, bounds=index_bounds, label=f"{path}: index {name!r}")
        p = report.params
        try:
            horizon = config.simulation.max_horizon_years
            inherited = sum(b * float(as_schedule(driver_prices_of_risk.get(d, 0.0))(horizon)) for d, b in loadings)
            lam = heston_prices_of_risk(kappa=p.kappa, theta=p.theta, xi=p.xi, equity_risk_premium=float(premium
                                                                                                         or 0.0),
                                        real_world_long_run_volatility=section.real_world_long_run_volatility,
                                        rho=p.rho, explained=explained, inherited=inherited)
            spec = HestonIndex(name=name, column=index_column(kind, name), level=level, income_yield=q, params=p,
                               prices_of_risk=lam, loadings=loadings, explained=explained, rates_correlation=rho_r,
                               substeps_per_year=section.variance_substeps_per_year)
        except ValueError as exc:
            raise CalibrationError(f"index {name!r}: {exc}") from None
        out[name] = spec
        fits[name] = {**report.to_json(), "real_world": vars(lam), "driver_loadings": dict(loadings),
                      "rho_bounds_used": [lo_i[4], hi_i[4]],
                      "explained_by_gaussian_drivers": explained, "substeps_per_year": spec.substeps_per_year}
        instruments += [
            {"index": name, "column_kind": kind, "expiry": r.expiry, "strike": r.strike, "kind": r.kind,
             "moneyness": r.moneyness, "market_vol": r.market_vol, "market_price": r.market_price,
             "model_price": r.model_price}
            for r in report.rows
        ]
    return out, fits, instruments


heston_to_json = heston_indices_to_json


def heston_from_record(rec: HestonIndexRecord) -> HestonIndex:
    """A Heston index from its typed ``calibration.json`` record (``CalibrationRecord.
    stochastic_volatility``; ``ValueError`` if the values do not make a Heston index)."""
    lam = rec.prices_of_risk
    return HestonIndex(
        name=rec.name, column=rec.column, level=rec.level, income_yield=rec.income_yield,
        params=HestonParams(v0=rec.v0, kappa=rec.kappa, theta=rec.theta, xi=rec.xi, rho=rec.rho),
        prices_of_risk=HestonPricesOfRisk(equity=lam.equity, variance=lam.variance,
                                          kappa_real_world=lam.kappa_real_world,
                                          theta_real_world=lam.theta_real_world),
        loadings=rec.loadings, explained=rec.explained, rates_correlation=rec.rates_correlation,
        substeps_per_year=rec.substeps_per_year,
    )


def heston_indices_from_records(records: Mapping[str, HestonIndexRecord]) -> dict[str, HestonIndex]:
    """Every Heston index of ``CalibrationRecord.stochastic_volatility``, by name."""
    return {name: heston_from_record(rec) for name, rec in records.items()}
