"""The rates-model interface every part of a run uses instead of asking which model it holds.

Hull-White one-factor (:class:`pqflow.models.hull_white.HullWhiteParams`) and G2++
(:class:`pqflow.models.g2pp.G2PlusPlusParams`) are both Gaussian short-rate models fitted to
today's curve, ``r_t = sum_f f_t + shift(t)``, each factor ``df = -k_f f dt + s_f dW_f`` on its
own driver (Brigo and Mercurio, *Interest Rate Models - Theory and Practice*, 2nd ed., 2006,
ch. 3.3 and 4.2). Everything the economy, the calibration, the Heston parts and the
calibration.json form need from "the rates" is a method of :class:`RatesModel`; a third
Gaussian short-rate model is one class implementing it plus one line in :data:`RATES_MODELS`.
"""

from __future__ import annotations

from typing import Any, ClassVar, Protocol

import numpy as np

from pqflow.market.curve import DiscountCurve
from pqflow.models.g2pp import G2PlusPlusParams
from pqflow.models.hull_white import HullWhiteParams
from pqflow.models.schedule import PiecewiseConstant

__all__ = ["RatesModel", "RATES_MODELS", "RATES_DRIVERS", "rates_from_json"]


class RatesModel(Protocol):
    """A Gaussian short-rate model fitted to today's curve (module docstring).

    model: its key in configuration and calibration.json (``"hull_white"``, ``"g2pp"``); label:
    its name for people; drivers: the Brownian drivers of its factors, in factor order;
    factor_names: the state names of the factors; recoverable_drivers: the drivers whose
    increments can be read back from the ``short_rate`` and ``cash_account`` columns.
    """

    model: ClassVar[str]
    label: ClassVar[str]
    drivers: ClassVar[tuple[str, ...]]
    factor_names: ClassVar[tuple[str, ...]]
    recoverable_drivers: ClassVar[tuple[str, ...]]

    def factor_rates(self) -> tuple[tuple[float, float, str], ...]:
        """``(mean reversion k_f, volatility s_f, driver)`` of each factor."""
        ...

    def integrated_variance(self, u: np.ndarray | float) -> np.ndarray:
        """``V(u)``: variance of ``int_0^u r ds`` from the factors at zero (any shape)."""
        ...

    def short_rate_shift(self, curve: DiscountCurve, t: np.ndarray | float) -> np.ndarray:
        """The deterministic shift (``alpha`` or ``phi``): the short rate with every factor at 0."""
        ...

    def bond_exponents(
        self, curve: DiscountCurve, times: np.ndarray, maturities: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray]:
        """``ln A(t, m)`` ``(n_bonds, n_times)`` and the factor loadings ``B_f(m)``
        ``(n_bonds, n_factors)`` of ``P(t, t+m) = A(t, m) exp(-sum_f B_f(m) f_t)``."""
        ...

    def fixed_correlations(self) -> dict[tuple[str, str], float]:
        """Correlations between its own drivers that the model fixes (G2++: ``rho``)."""
        ...

    def equity_correlation(self, correlation: Any, *, strict: bool | None) -> Any:
        """An index's correlation with the rate drivers in this model's form (one number, or
        one per factor), checked: ``strict`` True for a fit (strictly inside (-1, 1), a positive
        definite matrix), False for a price (closed ranges), None for the shape only."""
        ...

    def equity_loadings(self, correlation: Any) -> tuple[tuple[float, float], ...]:
        """``[(rho_f s_f, k_f)]``: the index-correlated loadings of a forward index price on the
        rate drivers, from a checked :meth:`equity_correlation`."""
        ...

    def describe_with_equity(self, correlation: Any) -> str:
        """The parameters and an index's correlation, for an error message."""
        ...

    def short_rate_correlation(self, correlation: Any) -> float:
        """An index's correlation with the short-rate shock."""
        ...

    def split_price_of_risk(self, lam: float | PiecewiseConstant) -> dict[str, float | PiecewiseConstant]:
        """The rates price of risk (of the short-rate shock) by driver."""
        ...

    def price_of_risk_weights(self) -> tuple[float, ...]:
        """``w_f`` per factor: the one rates price of risk ``lambda`` (of the short-rate shock)
        shifts factor ``f``'s driver by ``w_f lambda`` (Hull-White: ``(1,)``; G2++:
        :meth:`pqflow.models.g2pp.G2PlusPlusParams.driver_weights`)."""
        ...

    def log_bond_constant(self, curve: DiscountCurve, t: np.ndarray, maturity: float) -> np.ndarray:
        """``ln A(t, M)``: ``ln P(t, t + M)`` with every factor at zero (shape of ``t``)."""
        ...

    def zero_factor_mean(self, t: np.ndarray) -> Any:
        """The market-consistent factor mean (zero) in the form :mod:`pqflow.measure.house_view`
        takes: one array for a one-factor model, else one per factor."""
        ...

    def to_json(self) -> dict[str, Any]:
        """``{model: parameters}``, the calibration.json form."""
        ...


#: Every rates model by its key (one line per model).
RATES_MODELS: dict[str, type[HullWhiteParams] | type[G2PlusPlusParams]] = {
    HullWhiteParams.model: HullWhiteParams,
    G2PlusPlusParams.model: G2PlusPlusParams,
}

#: The drivers of each rates model, by key.
RATES_DRIVERS: dict[str, tuple[str, ...]] = {key: cls.drivers for key, cls in RATES_MODELS.items()}


def rates_from_json(parameters: dict[str, Any]) -> RatesModel:
    """The rates model recorded in calibration.json's ``parameters`` (written by ``to_json``)."""
    for key, cls in RATES_MODELS.items():
        if key != HullWhiteParams.model and key in parameters:
            return cls.from_json(parameters[key])
    return HullWhiteParams.from_json(parameters[HullWhiteParams.model])
