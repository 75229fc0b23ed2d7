"""The risk-free curve by the Solvency II review's last-liquid-forward method, from a run
configuration and its curve file (:mod:`pqflow.market.last_liquid_forward` has the method)."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np

from pqflow.config.schema import CurveExtrapolationSection
from pqflow.errors import MarketDataError
from pqflow.market.data_files import WEIGHT_COLUMN, CurveInputFile
from pqflow.market.last_liquid_forward import (
    LastLiquidForwardCurve,
    fit_last_liquid_forward,
    periodic_par_swap_instruments,
)
from pqflow.market.smith_wilson import CurveInstruments, zero_coupon_instruments

__all__ = ["llfr_instruments", "fit_llfr_curve"]


def llfr_instruments(data: CurveInputFile, ext: CurveExtrapolationSection) -> CurveInstruments:
    """Par swaps with the configured coupon frequency, or zero-coupon bonds from zero rates (or
    discount factors, read as annually compounded zero rates), CRA deducted."""
    cra = ext.credit_risk_adjustment_bp
    if data.quantity == "par_rate":
        return periodic_par_swap_instruments(
            data.maturities, data.values, coupon_frequency=ext.coupon_frequency, credit_risk_adjustment_bp=cra
        )
    if ext.coupon_frequency != 1:
        raise MarketDataError(
            f"{data.source}: curve_extrapolation.coupon_frequency = {ext.coupon_frequency} applies to par swap "
            f"rates, but the file gives {data.quantity}"
        )
    rates = data.values if data.quantity == "zero_rate" else data.values ** (-1.0 / data.maturities) - 1.0
    return zero_coupon_instruments(data.maturities, rates, credit_risk_adjustment_bp=cra)


def fit_llfr_curve(data: CurveInputFile, ext: CurveExtrapolationSection, path: Path) -> tuple[LastLiquidForwardCurve,
                                                                                              dict[str, Any]]:
    """Fit the curve and the ``fit.curve`` entry of ``calibration.json``."""
    if data.llfr_weights is None:
        raise MarketDataError(
            f"{path}: curve_extrapolation.method = \"last_liquid_forward\" needs an {WEIGHT_COLUMN!r} column "
            "(the weights of the last liquid forward rate)"
        )
    curve, report = fit_last_liquid_forward(
        llfr_instruments(data, ext),
        ufr=ext.ultimate_forward_rate,
        llfr_weights=data.llfr_weights,
        alpha=ext.alpha,
        phase_in_year=ext.phase_in_year,
        currency=ext.currency,
        long_end=ext.long_end_years,
        where=f"{path}, column {WEIGHT_COLUMN!r}",
    )
    used = np.asarray(report.weights) > 0.0
    fit = {
        "method": "last_liquid_forward",
        "description": (
            "Solvency II review (EIOPA RFR technical documentation EIOPA-BoS-26/198, section 8): constant "
            "forwards between the liquid maturities, extrapolation from the last liquid forward rate to the UFR "
            "beyond the first smoothing point"
        ),
        "input_kind": report.input_kind,
        "coupon_frequency": ext.coupon_frequency if report.input_kind == "par_swap" else None,
        "inputs_used": report.n_instruments,
        "first_smoothing_point": report.first_smoothing_point,
        "last_liquid_forward_rate": report.last_liquid_forward_rate,
        "last_liquid_forward_rate_compounding": "continuous",
        "llfr_terms": [
            {"maturity": m, "weight": w, "forward": f, "forward_from": (m - 1.0 if m == report.first_smoothing_point
                                                                        else report.first_smoothing_point)}
            for m, w, f, u in zip(report.maturities, report.weights, report.forwards, used, strict=True) if u
        ],
        "ufr": report.ufr,
        "omega": report.omega,
        "alpha": report.alpha,
        "alpha_source": report.alpha_source,
        "credit_risk_adjustment_bp": report.credit_risk_adjustment_bp,
        "max_repricing_error": report.max_repricing_error,
        "long_end_years": curve.long_end,
    }
    return curve, fit
