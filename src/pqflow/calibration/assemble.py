"""One shared calibration, assembled from the run configuration.

The volatility parameters are shared by both measures; the real-world set differs only in drift,
through the market prices of risk. A configuration whose real-world volatilities differ from the
market-consistent ones describes two singular measures: no density exists, and we refuse.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from pqflow import __version__
from pqflow.config.schema import RunConfig
from pqflow.errors import MeasureError
from pqflow.market.curve import LogDiscountCurve
from pqflow.measure.prices_of_risk import (
    PricesOfRisk,
    equity_price_of_risk,
    expected_short_rate,
    rates_price_of_risk_for_target,
)
from pqflow.models.equity import EquityParams
from pqflow.models.hull_white import HullWhiteParams
from pqflow.models.hull_white_equity import HullWhiteEquityModel

__all__ = ["Calibration", "assemble_calibration", "build_model", "load_calibration"]

_REL_TOL = 1e-12


@dataclass(frozen=True, kw_only=True)
class Calibration:
    """Every parameter both scenario sets use, with the inputs they came from."""

    valuation_date: str
    curve: LogDiscountCurve
    rates: HullWhiteParams
    equity: EquityParams
    prices_of_risk: PricesOfRisk
    inputs: dict[str, Any]
    inputs_hash: str

    def to_json(self) -> dict[str, Any]:
        """The content of ``calibration.json``."""
        horizon = [1.0, 5.0, 10.0, 20.0, 30.0]
        horizon = [t for t in horizon if t <= self.curve.max_maturity]
        return {
            "pqflow_version": __version__,
            "valuation_date": self.valuation_date,
            "inputs_sha256": self.inputs_hash,
            "inputs": self.inputs,
            "parameters": {
                "curve": {
                    "interpolation": "monotone cubic (PCHIP) on -ln P(0,t), node (0, 0)",
                    "maturities": self.curve.maturities.tolist(),
                    "discount_factors": self.curve.discount_factors.tolist(),
                },
                "hull_white": {
                    "mean_reversion": self.rates.mean_reversion,
                    "volatility": self.rates.volatility,
                },
                "equity": {
                    "name": self.equity.name,
                    "level": self.equity.level,
                    "dividend_yield": self.equity.dividend_yield,
                    "volatility": self.equity.volatility,
                    "correlation_with_rates": self.equity.correlation,
                },
                "market_prices_of_risk": {
                    "rates": self.prices_of_risk.rates,
                    "equity": self.prices_of_risk.equity,
                    "note": "constant in time; W^Q = W^P + lambda t on each correlated driver",
                },
            },
            "expected_short_rate": {
                "time": horizon,
                "market_consistent": expected_short_rate(
                    self.curve, self.rates, self.prices_of_risk, np.array(horizon),
                    measure="market_consistent",
                ).tolist(),
                "real_world": expected_short_rate(
                    self.curve, self.rates, self.prices_of_risk, np.array(horizon),
                    measure="real_world",
                ).tolist(),
            },
        }


def load_calibration(path: str | Path) -> Calibration:
    """Read a stored ``calibration.json`` back into a :class:`Calibration` (no refitting)."""
    from pqflow.errors import ConfigError
    from pqflow.storage.jsonio import read_json

    path = Path(path)
    try:
        data = read_json(path)
        par = data["parameters"]
        cal = Calibration(
            valuation_date=data["valuation_date"],
            curve=LogDiscountCurve(
                maturities=np.array(par["curve"]["maturities"], dtype=float),
                discount_factors=np.array(par["curve"]["discount_factors"], dtype=float),
            ),
            rates=HullWhiteParams(
                mean_reversion=par["hull_white"]["mean_reversion"],
                volatility=par["hull_white"]["volatility"],
            ),
            equity=EquityParams(
                name=par["equity"]["name"],
                level=par["equity"]["level"],
                dividend_yield=par["equity"]["dividend_yield"],
                volatility=par["equity"]["volatility"],
                correlation=par["equity"]["correlation_with_rates"],
            ),
            prices_of_risk=PricesOfRisk(
                rates=par["market_prices_of_risk"]["rates"],
                equity=par["market_prices_of_risk"]["equity"],
            ),
            inputs=data["inputs"],
            inputs_hash=data["inputs_sha256"],
        )
    except FileNotFoundError:
        raise ConfigError(f"{path}: calibration file not found") from None
    except (KeyError, TypeError, ValueError) as exc:
        raise ConfigError(f"{path}: not a pqflow calibration file ({exc!r})") from None
    return cal


def _check_equivalence(config: RunConfig) -> None:
    rw = config.real_world
    pairs = [
        ("real_world.rates_volatility", rw.rates_volatility, "hull_white.volatility",
         config.hull_white.volatility),
        ("real_world.equity_volatility", rw.equity_volatility, "equity.volatility",
         config.equity.volatility),
    ]
    for rw_key, rw_val, q_key, q_val in pairs:
        if rw_val is not None and abs(rw_val - q_val) > _REL_TOL * max(abs(q_val), 1.0):
            raise MeasureError(
                f"{rw_key} = {rw_val:g} differs from {q_key} = {q_val:g}. Measures with different "
                "volatilities are singular (Girsanov changes drifts only), so no density of one "
                "set with respect to the other exists and pqflow will not write density weights. "
                f"Remove {rw_key} or set it equal to {q_key}."
            )


def assemble_calibration(config: RunConfig) -> Calibration:
    """Check and assemble the parameters of a run from its configuration."""
    _check_equivalence(config)
    c = config.curve
    if c.kind == "zero_rates":
        curve = LogDiscountCurve.from_zero_rates(
            np.array(c.maturities), np.array(c.values), compounding=c.compounding
        )
    else:
        curve = LogDiscountCurve(
            maturities=np.array(c.maturities), discount_factors=np.array(c.values)
        )
    rates = HullWhiteParams(
        mean_reversion=config.hull_white.mean_reversion, volatility=config.hull_white.volatility
    )
    e = config.equity
    equity = EquityParams(
        name=e.name,
        level=e.level,
        dividend_yield=e.dividend_yield,
        volatility=e.volatility,
        correlation=e.correlation_with_rates,
    )
    rw = config.real_world
    if rw.rates_market_price_of_risk is not None:
        lam_r = rw.rates_market_price_of_risk
    else:
        assert rw.target_short_rate is not None
        lam_r = rates_price_of_risk_for_target(
            curve,
            rates,
            target_short_rate=rw.target_short_rate,
            target_time=rw.target_year or config.simulation.horizon_years,
        )
    lam_s = equity_price_of_risk(rw.equity_risk_premium, e.volatility)
    inputs = {
        "curve": c.model_dump(mode="json"),
        "hull_white": config.hull_white.model_dump(mode="json"),
        "equity": e.model_dump(mode="json"),
        "real_world": rw.model_dump(mode="json"),
        "simulation_horizon_years": config.simulation.horizon_years,
    }
    canon = json.dumps(inputs, sort_keys=True, separators=(",", ":")).encode("utf-8")
    return Calibration(
        valuation_date=config.run.valuation_date.isoformat(),
        curve=curve,
        rates=rates,
        equity=equity,
        prices_of_risk=PricesOfRisk(rates=lam_r, equity=lam_s),
        inputs=inputs,
        inputs_hash=hashlib.sha256(canon).hexdigest(),
    )


def build_model(calibration: Calibration, bond_maturities: tuple[float, ...]) -> HullWhiteEquityModel:
    """The scenario model both sets are simulated from."""
    return HullWhiteEquityModel(
        curve=calibration.curve,
        rates=calibration.rates,
        equity=calibration.equity,
        prices_of_risk=calibration.prices_of_risk,
        bond_maturities=tuple(bond_maturities),
    )
