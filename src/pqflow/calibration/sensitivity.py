"""The calibration of a sensitivity that keeps the base calibration's volatility parameters.

Only the curve is refitted (from the shocked curve inputs, by the configured method), and what
hangs on it: the rates price of risk that meets the house view on the new curve, and the real
curve of inflation (the inflation swaps' breakevens over the new nominal curve, with the base
Jarrow-Yildirim volatilities). Rates, index and credit parameters, the correlation and the
index prices of risk are the base ones. The calibration instruments are not recorded: the
volatilities were not fitted to this sensitivity's market, so repricing the base quotes on it
would test nothing the set claims.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import replace

from pqflow.calibration.assemble import Calibration, _inputs, _real_world, fit_curve
from pqflow.calibration.parts import calibrate_inflation
from pqflow.config.schema import RunConfig

__all__ = ["curve_only_calibration"]


def curve_only_calibration(base: Calibration, config: RunConfig) -> Calibration:
    """``base`` with the curve of ``config`` (the shocked configuration) and what depends on it."""
    curve, curve_fit = fit_curve(config)
    prices_of_risk, view = _real_world(config, curve, base.rates, base.equity.volatility)
    extra = dict(base.extra_prices_of_risk)
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
        extra_prices_of_risk=extra,
        fit=fit,
        inputs=inputs,
        inputs_hash=hashlib.sha256(canon).hexdigest(),
        instruments={"swaptions": [], "equity_options": []},
    )
