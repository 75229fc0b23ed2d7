"""A fitted curve tabulated at whole maturities, as the regulator publishes a term structure."""

from __future__ import annotations

import numpy as np

from pqflow.market.curve import DiscountCurve

__all__ = ["CURVE_TABLE_COLUMNS", "curve_table"]

CURVE_TABLE_COLUMNS = (
    "maturity_years",
    "zero_rate_annual",
    "zero_rate_continuous",
    "forward_1y_annual",
    "forward_1y_continuous",
    "discount_factor",
)


def curve_table(curve: DiscountCurve, long_end: float | None = None) -> dict[str, np.ndarray]:
    """Columns at maturities ``1, 2, ..., floor(long_end)`` (default the curve's longest), each
    ``(n,)``: the zero rate ``P^{-1/t} - 1`` (annual) and ``-ln P / t`` (continuous), the one-year
    forward from ``t - 1`` to ``t``, ``P(t-1)/P(t) - 1`` (annual) and ``ln(P(t-1)/P(t))``
    (continuous), and ``P(0, t)``."""
    top = curve.max_maturity if long_end is None else min(long_end, curve.max_maturity)
    t = np.arange(1.0, np.floor(top + 1e-9) + 1.0)
    if t.size == 0:
        raise ValueError(f"the curve ends at {curve.max_maturity:g} years, before the first whole year")
    p = np.asarray(curve.discount(t), dtype=float)
    p_prev = np.asarray(curve.discount(t - 1.0), dtype=float)
    log_ratio = np.log(p_prev / p)
    return {
        "maturity_years": t,
        "zero_rate_annual": np.expm1(-np.log(p) / t),
        "zero_rate_continuous": -np.log(p) / t,
        "forward_1y_annual": np.expm1(log_ratio),
        "forward_1y_continuous": log_ratio,
        "discount_factor": p,
    }
