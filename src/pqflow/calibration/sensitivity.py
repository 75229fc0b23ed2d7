"""The calibration of a sensitivity that keeps the base calibration's volatility parameters.

Only the curve is refitted (from the shocked curve inputs, by the configured method), and what
hangs on it: the rates price of risk that meets the house view on the new curve, and the real
curve of inflation (the inflation swaps' breakevens over the new nominal curve, with the base
Jarrow-Yildirim volatilities). Rates, index and credit parameters, the correlation and the
index prices of risk are the base ones. The volatilities were not fitted to this sensitivity's
market, so its market quotes are not recorded as instruments; the base swaptions are recorded
at the money on the new curve with the kept model's closed-form price only (no market quote),
so the market-consistency check still tests that the set reprices the rates model it was
simulated from. Equity options, inflation caps and a part plug-in's instruments are not recorded for such a set;
a part plug-in its kind fitted (a fit record) keeps the base part, one built from its section is
rebuilt on the new curve.
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Callable
from dataclasses import replace
from typing import Any

from pqflow.calibration.assemble import Calibration, _inputs, _real_world, fit_curve
from pqflow.calibration.g2pp_swaptions import g2pp_swaption_price
from pqflow.calibration.parts import calibrate_inflation
from pqflow.calibration.swaptions import forward_swap_rate, hull_white_swaption_price
from pqflow.config.schema import RunConfig
from pqflow.market.curve import DiscountCurve
from pqflow.measure.prices_of_risk import equity_price_of_risk
from pqflow.models.parts import PART_KINDS, PartContext, part_fit_key
from pqflow.models.rates import RatesModel
from pqflow.storage.calibration_sections import SwaptionQuoteRecord, instrument_quotes

__all__ = ["curve_only_calibration"]


def curve_only_calibration(base: Calibration, config: RunConfig) -> Calibration:
    """``base`` with the curve of ``config`` (the shocked configuration) and what depends on it."""
    curve, curve_fit = fit_curve(config)
    prices_of_risk, view = _real_world(config, curve, base.rates)
    extra = dict(base.extra_prices_of_risk)
    core = config.index_specs[0]  # the core index's premium as configured, on the base volatility
    extra[core.name] = equity_price_of_risk(core.risk_premium, base.core_index.volatility)
    fit = {**base.fit, "curve": curve_fit}
    inflation = base.inflation
    if config.inflation is not None and base.inflation is not None:
        kept = config.inflation.model_copy(update={
            "fit": [],
            "real_mean_reversion": base.inflation.real.mean_reversion,
            "real_volatility": base.inflation.real.volatility,
            "inflation_volatility": base.inflation.inflation_volatility,
        })
        inflation, lams, fit["inflation"], _ = calibrate_inflation(
            config.model_copy(update={"inflation": kept}), curve, base.rates, base.driver_correlation
        )
        extra.update(lams)
    plugin_parts = dict(base.plugin_parts)
    if config.parts:  # a part plug-in is built from its (typed-in) section on the shocked curve; a
        # part its kind fits keeps the base calibration's fitted part (its volatility parameters)
        context = PartContext(curve=curve, rates=base.rates, correlation=base.driver_correlation.pair)
        plugin_parts = {name: base.plugin_parts[name] if base.fit.get(part_fit_key(PART_KINDS[name]))
                        and name in base.plugin_parts else PART_KINDS[name].build(section, context)
                        for name, section in config.parts.items()}
    fit["volatility_parameters"] = {
        "kept_from_base_calibration": base.inputs_hash,
        "note": "rates, index, inflation and credit volatility parameters are the base calibration's; only the "
        "curve and what depends on it were refitted",
    }
    inputs = {**_inputs(config), "volatility_parameters_kept_from": base.inputs_hash}
    canon = json.dumps(inputs, sort_keys=True, separators=(",", ":")).encode("utf-8")
    return replace(
        base,
        curve=curve,
        prices_of_risk=prices_of_risk,
        real_world_view={**view},
        inflation=inflation,
        plugin_parts=plugin_parts,
        extra_prices_of_risk=extra,
        index_risk_premia={**base.index_risk_premia, core.name: core.risk_premium},
        fit=fit,
        inputs=inputs,
        inputs_hash=hashlib.sha256(canon).hexdigest(),
        instruments={"swaptions": _model_swaptions(instrument_quotes(base.instruments, "the base calibration")[0],
                                                   curve, base.rates),
                     "equity_options": []},
    )


#: The closed-form swaption price of each rates model, by its key (Jamshidian's decomposition, G2++'s integral).
_SWAPTION_PRICE: dict[str, Callable[..., float]] = {
    "hull_white": hull_white_swaption_price,
    "g2pp": g2pp_swaption_price,
}


def _model_swaptions(
    quotes: tuple[SwaptionQuoteRecord, ...], curve: DiscountCurve, rates: RatesModel
) -> list[dict[str, Any]]:
    """The base swaptions at the money on ``curve``, priced by the kept rates model (Jamshidian's
    decomposition, or G2++'s integral); no market quote."""
    price = _SWAPTION_PRICE[rates.model]
    out = []
    for q in quotes:
        expiry, tenor = q.expiry, q.tenor
        if expiry + tenor > curve.max_maturity:
            continue
        strike = forward_swap_rate(curve, expiry, tenor)
        out.append({
            "expiry": expiry, "tenor": tenor, "strike": strike, "convention": q.convention,
            "shift": q.shift, "market_vol": None, "market_price": None,
            "model_price": float(price(curve, rates, expiry=expiry, tenor=tenor, strike=strike)),
            "weight": q.weight,
            "note": "model price only: volatility parameters kept from the base calibration",
        })
    return out
