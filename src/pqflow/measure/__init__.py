"""The change of measure: market prices of risk, density weights and deflators."""

from __future__ import annotations

from pqflow.measure.density import density_coefficients, log_density_increments
from pqflow.measure.prices_of_risk import (
    PricesOfRisk,
    equity_price_of_risk,
    expected_short_rate,
    rates_price_of_risk_for_target,
)

__all__ = [
    "PricesOfRisk",
    "density_coefficients",
    "equity_price_of_risk",
    "expected_short_rate",
    "log_density_increments",
    "rates_price_of_risk_for_target",
]
