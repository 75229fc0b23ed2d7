"""Heston smiles for a run: which indices have ``volatility_model = "heston"``, their fit to the
smile rows of ``market_data.equity_vols`` and their ``calibration.json`` form.

The fit itself is :func:`pqflow.calibration.heston_fit.calibrate_heston`, under the run's
rates and each index's correlation with the rate driver(s) from the driver correlation.
"""

from __future__ import annotations

from typing import Any

from pqflow.calibration.heston_fit import HestonBounds, HestonQuote, calibrate_heston, heston_params_from_json
from pqflow.config.schema import RunConfig
from pqflow.errors import CalibrationError, MarketDataError
from pqflow.market.curve import DiscountCurve
from pqflow.market.data_files import read_equity_vols
from pqflow.models.g2pp import G2PlusPlusParams
from pqflow.models.heston import HestonParams
from pqflow.models.hull_white import HullWhiteParams

__all__ = ["heston_indices", "fit_heston_indices", "heston_to_json", "heston_from_json"]


def heston_indices(config: RunConfig) -> tuple[str, ...]:
    """Names of the indices (core equity first) configured with ``volatility_model = "heston"``."""
    out = [config.equity.name] if config.equity.volatility_model == "heston" else []
    return tuple(out + [i.name for i in config.indices if i.volatility_model == "heston"])


def fit_heston_indices(
    config: RunConfig,
    curve: DiscountCurve,
    rates: HullWhiteParams | G2PlusPlusParams,
    rates_correlation: dict[str, float | tuple[float, float]],
    spots: dict[str, tuple[float, float]],
) -> tuple[dict[str, HestonParams], dict[str, Any]]:
    """Each Heston index's parameters and fit report (JSON form), by name.

    rates_correlation: each index's correlation with the rate driver(s); spots: ``(level,
    income yield)`` by index name."""
    names = heston_indices(config)
    if not names:
        return {}, {}
    path = config.market_file("equity_vols")
    if path is None:  # the configuration rules refuse this; kept for direct callers
        raise CalibrationError("volatility_model = \"heston\" needs market_data.equity_vols")
    rows = read_equity_vols(path)
    lower, upper, initial = config.calibration.heston.lower_upper_initial()
    try:
        bounds = HestonBounds(lower=lower, upper=upper, initial=initial)  # type: ignore[arg-type]
    except ValueError as exc:
        raise CalibrationError(f"calibration.heston: {exc}") from None
    params, fits = {}, {}
    for name in names:
        mine = [r for r in rows if r.index == name]
        if not mine:
            raise MarketDataError(f"{path}: no implied volatilities for index {name!r} (volatility_model = \"heston\")")
        quotes = [HestonQuote(expiry=r.expiry, moneyness=1.0 if r.moneyness is None else r.moneyness,
                              implied_vol=r.implied_vol, weight=r.weight) for r in mine]
        level, q = spots[name]
        report = calibrate_heston(curve, rates, level=level, dividend_yield=q, correlation=rates_correlation[name],
                                  quotes=quotes, bounds=bounds, label=f"{path}: index {name!r}")
        params[name] = report.params
        fits[name] = report.to_json()
    return params, fits


def heston_to_json(params: dict[str, HestonParams]) -> dict[str, Any]:
    return {name: {"model": "heston", **p.as_dict()} for name, p in params.items()}


def heston_from_json(data: dict[str, Any]) -> dict[str, HestonParams]:
    out = {}
    for name, entry in data.items():
        if entry.get("model") != "heston":
            raise ValueError(f"stochastic_volatility.{name}: unknown model {entry.get('model')!r}")
        out[name] = heston_params_from_json(entry)
    return out
