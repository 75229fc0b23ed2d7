"""Credit closed forms the tests use as references (no production path uses them): the survival
probability under either measure, and defaultable bond columns built from a credit set beside an
independent rates set. The model itself: :mod:`pqflow.models.cir_credit`.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from pqflow.models.cir_credit import (
    MEASURES,
    CirCreditModel,
    CreditRating,
    cir_laplace,
    dzcb_column,
    real_world_cir,
    shift_integral,
    spread_column,
)
from pqflow.storage.names import bond_column

__all__ = ["survival_probability", "defaultable_bond_columns"]


def survival_probability(
    rating: CreditRating,
    t: np.ndarray | float,
    maturity: np.ndarray | float,
    y: np.ndarray | float,
    *,
    measure: str = "market_consistent",
) -> np.ndarray:
    """``E[exp(-int_t^{t+m} lambda) | y_t]`` under ``measure``: the probability of surviving
    to ``t + m`` given survival to ``t`` (the real-world one uses ``kappa^P, mu^P``)."""
    if measure not in MEASURES:
        raise ValueError(f"unknown measure {measure!r}: use one of {MEASURES}")
    p = rating.cir if measure == "market_consistent" else real_world_cir(rating)
    t = np.asarray(t, dtype=float)
    m = np.asarray(maturity, dtype=float)
    log_a, b = cir_laplace(p, 1.0, m)
    shift_part = shift_integral(rating, t + m) - shift_integral(rating, t)
    return np.exp(log_a - shift_part - b * np.asarray(y, dtype=float))


def defaultable_bond_columns(
    model: CirCreditModel,
    credit_columns: Mapping[str, np.ndarray],
    rates_columns: Mapping[str, np.ndarray],
) -> dict[str, np.ndarray]:
    """``dzcb_{rating}_{m}y = zcb_{m}y x exp(-m spread_{rating}_{m}y)`` from a credit set and an
    independent rates set of the same shape (``zcb_{m}y`` as the Hull-White models name them)."""
    out = {}
    for r in model.names:
        for m in model.bond_maturities:
            zcb = rates_columns.get(bond_column(m))
            if zcb is None:
                raise ValueError(f"the rates set has no column {bond_column(m)}")
            out[dzcb_column(r, m)] = zcb * np.exp(-m * credit_columns[spread_column(r, m)])
    return out
