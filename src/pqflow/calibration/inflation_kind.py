"""The inflation part (Jarrow-Yildirim) as a part kind: its calibration, its ``calibration.json``
form, its instruments' repricing and its rows in the report and in ``pqflow compare``.

The part predates the part plug-ins, so its kind declares where its pieces have always lived:
its configuration is the top-level ``[inflation]`` table (``config_key``), its entry is
``parameters.inflation`` of ``calibration.json`` (``json_key``, with its prices of risk inside),
its fit record ``fit.inflation``, its year-on-year caps and floors ``instruments.inflation_caps``,
its market-data files ``market_data.inflation_swaps`` and ``market_data.inflation_caps``
(``market_data_keys``), its quotes the "Inflation quotes" group of ``pqflow compare``. It is
registered in :mod:`pqflow.calibration.part_kinds`.

The closed forms are in :mod:`pqflow.models.jarrow_yildirim` and
:mod:`pqflow.calibration.inflation` (the cap/floor fit); the model side is
:class:`pqflow.models.inflation.InflationPart`.
"""

from __future__ import annotations

import re
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from pqflow.calibration.inflation import (
    YoYCapFloorQuote,
    ZeroCouponInflationSwapQuote,
    calibrate_jarrow_yildirim,
    real_curve_from_zc_inflation_swaps,
)
from pqflow.config.schema import InflationSection, RunConfig
from pqflow.errors import CalibrationError, ConfigError, IntegrityError, MarketDataError
from pqflow.market.curve import DiscountCurve, LogDiscountCurve
from pqflow.market.data_files import read_inflation_caps, read_inflation_swaps
from pqflow.market.serialize import curve_from_json, curve_to_json
from pqflow.models.economy import GaussianPart
from pqflow.models.hull_white import HullWhiteParams
from pqflow.models.inflation import INFLATION_DRIVER, REAL_RATE_DRIVER, InflationPart
from pqflow.models.jarrow_yildirim import JarrowYildirimParams
from pqflow.models.parts import PartAsset, PartContext, PartFit, PartInstrument, PartInstrumentContext
from pqflow.models.rates import RatesModel
from pqflow.storage.calibration_file import CALIBRATION_FILE
from pqflow.storage.names import CPI, REAL_BOND_PREFIX, REAL_SHORT_RATE

__all__ = [
    "InflationKind",
    "MATERIAL_PREMIUM",
    "YOY_TOLERANCE",
    "MARKET_DATA_KEYS",
    "calibrate_inflation",
    "calibrate_inflation_section",
    "inflation_from_json",
    "inflation_to_json",
    "real_bond_maturity_of",
    "YoYOptionQuote",
    "yoy_option_quotes",
]

#: The ``[market_data]`` keys of the inflation part's files.
MARKET_DATA_KEYS = ("inflation_swaps", "inflation_caps")
#: Stated tolerance of a year-on-year cap or floor quote (a premium): the larger of 5 bp of
#: notional and 3% of the premium (common practice, chosen here).
YOY_TOLERANCE = {"absolute": 5e-4, "relative": 0.03}
#: Material deviation of a premium quote: the larger of 10 bp of notional (year-on-year caps and
#: floors; an option without a volatility has none) and 10% of the premium.
MATERIAL_PREMIUM = {"absolute": 1e-3, "relative": 0.10}
RATES_DRIVER = HullWhiteParams.drivers[0]
_REAL_BOND = re.compile(rf"^{REAL_BOND_PREFIX}(?P<m>[0-9.eE+-]+)y$")


def _flat_breakeven_curve(nominal: DiscountCurve, maturities: np.ndarray, rates: np.ndarray) -> LogDiscountCurve:
    """Real curve through the quotes, and beyond the last one with its breakeven held flat,
    yearly pillars to the end of the nominal curve."""
    last = float(maturities[-1])
    extra = np.arange(np.floor(last) + 1.0, np.floor(nominal.max_maturity) + 1.0)
    if extra.size and extra[-1] < nominal.max_maturity:
        extra = np.append(extra, nominal.max_maturity)
    t = np.concatenate([maturities, extra])
    k = np.concatenate([rates, np.full(extra.size, rates[-1])])
    return LogDiscountCurve(maturities=t, discount_factors=np.asarray(nominal.discount(t)) * (1.0 + k) ** t)


def calibrate_inflation(
    config: RunConfig,
    curve: DiscountCurve,
    rates: RatesModel,
    correlation: Any,
) -> tuple[InflationPart, dict[str, float], dict[str, Any], list[dict[str, Any]]]:
    """The inflation part, its prices of risk (by driver), the fit report and the year-on-year
    cap/floor instruments (empty when the volatilities are typed in), from ``[inflation]`` and
    the files ``[market_data]`` names for it (``correlation``: a
    :class:`pqflow.calibration.parts.DriverCorrelation`)."""
    sec = config.inflation
    if sec is None:
        raise RuntimeError("the inflation part asked for a configuration without [inflation]")
    files = {key: path for key in MARKET_DATA_KEYS if (path := config.market_file(key)) is not None}
    return calibrate_inflation_section(sec, files, curve, rates, correlation.pair)


def calibrate_inflation_section(
    sec: InflationSection,
    files: Mapping[str, Path],
    curve: DiscountCurve,
    rates: RatesModel,
    pair: Callable[[str, str], float],
) -> tuple[InflationPart, dict[str, float], dict[str, Any], list[dict[str, Any]]]:
    """:func:`calibrate_inflation` from the section and its files by ``[market_data]`` key
    (``inflation_swaps``, ``inflation_caps``); ``pair``: the correlation of two drivers."""
    if sec.swap_maturities is not None:
        if sec.swap_rates is None:
            raise ConfigError("inflation: swap_maturities and swap_rates go together")
        mats, zc, source = np.array(sec.swap_maturities, float), np.array(sec.swap_rates, float), "typed in"
    else:
        path = files.get("inflation_swaps")
        if path is None:
            raise ConfigError("inflation: give swap_maturities and swap_rates, or market_data.inflation_swaps")
        rows = read_inflation_swaps(path)
        mats, zc, source = np.array([r.maturity for r in rows]), np.array([r.rate for r in rows]), str(path)
    try:
        quoted = real_curve_from_zc_inflation_swaps(
            curve, [ZeroCouponInflationSwapQuote(maturity=float(t), rate=float(k)) for t, k in zip(mats, zc,
                                                                                                   strict=True)]
        )
    except MarketDataError as exc:
        raise MarketDataError(f"{source}: {exc}") from None
    real_curve = _flat_breakeven_curve(curve, mats, zc)
    real = HullWhiteParams(mean_reversion=sec.real_mean_reversion, volatility=sec.real_volatility)
    sigma_i = sec.inflation_volatility
    fit: dict[str, Any] = {
        "method": "real curve P_r(0,T) = P_n(0,T) (1 + k(T))^T at each zero-coupon inflation swap; breakeven "
        "flat beyond the last quote; Jarrow-Yildirim volatilities "
        + (f"{', '.join(sec.fit)} fitted to year-on-year caps and floors (closed form), the rest typed in" if sec.fit
           else "typed in"),
        "source": source,
        "max_abs_difference_bp": quoted.max_abs_difference_bp,
        "rows": quoted.as_records(),
        "inflation_drift_adjustment": sec.inflation_drift_adjustment,
    }
    instruments: list[dict[str, Any]] = []
    if sec.fit:
        if not isinstance(rates, HullWhiteParams):  # the schema refuses a fit under G2++
            raise ConfigError("inflation.fit: the inflation volatilities are fitted under Hull-White rates only")
        cap_path = files.get("inflation_caps")
        if cap_path is None:
            raise ConfigError("inflation.fit: needs market_data.inflation_caps")
        caps = read_inflation_caps(cap_path)
        initial = JarrowYildirimParams(
            nominal=rates, real=real, inflation_volatility=sigma_i,
            correlation_nominal_real=pair(RATES_DRIVER, REAL_RATE_DRIVER),
            correlation_nominal_inflation=pair(RATES_DRIVER, INFLATION_DRIVER),
            correlation_real_inflation=pair(REAL_RATE_DRIVER, INFLATION_DRIVER),
        )
        try:
            report = calibrate_jarrow_yildirim(
                curve, real_curve,
                [YoYCapFloorQuote(maturity=c.maturity, strike=c.strike, kind=c.kind, price=c.premium, weight=c.weight)
                 for c in caps],
                initial=initial, fit=tuple(sec.fit),
            )
        except (MarketDataError, CalibrationError) as exc:
            raise CalibrationError(f"{cap_path}: {exc}") from None
        if not report.success:
            raise CalibrationError(f"{cap_path}: the inflation volatility fit did not converge ({report.message})")
        real, sigma_i = report.params.real, report.params.inflation_volatility
        fit["caps"] = {
            "fitted": list(report.fitted), "at_bound": list(report.at_bound), "price_rmse_bp": report.price_rmse_bp,
            "inflation_volatility": sigma_i, "real_mean_reversion": real.mean_reversion,
            "real_volatility": real.volatility, "rows": [dict(vars(r)) for r in report.rows],
        }
        instruments = [
            {"maturity": r.maturity, "strike": r.strike, "kind": r.kind, "market_price": r.market_price,
             "model_price": r.model_price}
            for r in report.rows
        ]
    part = InflationPart(
        real_curve=real_curve,
        real=real,
        inflation_volatility=sigma_i,
        cpi_base=sec.cpi_base,
        real_bond_maturities=tuple(sorted(sec.real_bond_maturities)),
    )
    lams = {REAL_RATE_DRIVER: sec.real_rate_price_of_risk, INFLATION_DRIVER: sec.inflation_drift_adjustment / sigma_i}
    return part, lams, fit, instruments


def inflation_to_json(part: InflationPart) -> dict[str, Any]:
    return {
        "real_curve": curve_to_json(part.real_curve),
        "real_mean_reversion": part.real.mean_reversion,
        "real_volatility": part.real.volatility,
        "inflation_volatility": part.inflation_volatility,
        "cpi_base": part.cpi_base,
        "real_bond_maturities": list(part.real_bond_maturities),
    }


def inflation_from_json(data: dict[str, Any]) -> InflationPart:
    return InflationPart(
        real_curve=curve_from_json(data["real_curve"]),
        real=HullWhiteParams(mean_reversion=float(data["real_mean_reversion"]),
                             volatility=float(data["real_volatility"])),
        inflation_volatility=float(data["inflation_volatility"]),
        cpi_base=float(data["cpi_base"]),
        real_bond_maturities=tuple(float(m) for m in data["real_bond_maturities"]),
    )


# ------------------------------------------------------------------------------- the kind


def real_bond_maturity_of(column: str) -> float | None:
    """``real_zcb_10y`` -> 10.0; ``None`` for any other column."""
    match = _REAL_BOND.match(column)
    return float(match.group("m")) if match else None


def _num(x: Any) -> float | None:
    return None if x is None else float(x)


@dataclass(frozen=True, kw_only=True)
class YoYOptionQuote:
    """One recorded year-on-year cap or floor (``instruments.inflation_caps[i]``, this kind's
    own form): maturity in years, strike, ``cap`` or ``floor``, the market premium and the
    model's (``None`` when not recorded)."""

    maturity: float
    strike: float
    kind: str
    market_price: float | None = None
    model_price: float | None = None


def yoy_option_quotes(records: list[dict[str, Any]],
                      where: str = "instruments.inflation_caps") -> tuple[YoYOptionQuote, ...]:
    """The recorded caps and floors, typed; a missing maturity, strike or kind names the file and key."""
    out = []
    for i, raw in enumerate(records):
        def need(key: str, raw: Mapping[str, Any] = raw, i: int = i) -> Any:
            if not isinstance(raw, Mapping) or raw.get(key) is None:
                raise ConfigError(f"{CALIBRATION_FILE}: not a pqflow calibration file (no {where}[{i}].{key})")
            return raw[key]

        out.append(YoYOptionQuote(maturity=float(need("maturity")), strike=float(need("strike")),
                                  kind=str(need("kind")), market_price=_num(raw.get("market_price")),
                                  model_price=_num(raw.get("model_price"))))
    return tuple(out)


def _yoy_value(n: int, strike: float, option: str, time_index: Callable[[np.ndarray, float], int | None]):
    """The deflated payoff of a year-on-year cap (floor): annual caplets
    ``tau (I_i / I_{i-1} - 1 - K)^+`` paid at ``i = 1..n``, ``tau = 1`` (Mercurio 2005's
    year-on-year caplet, from memory), each deflated at its payment date."""

    def value(times: np.ndarray, cols: dict[str, np.ndarray], deflator: np.ndarray) -> np.ndarray:
        cpi = cols[CPI]
        w = 1.0 if option == "cap" else -1.0
        ks = [time_index(times, float(i)) for i in range(n + 1)]
        total = np.zeros(deflator.shape[0])
        for k0, k1 in zip(ks[:-1], ks[1:], strict=True):
            if k0 is None or k1 is None:
                raise RuntimeError(f"a caplet date of the {float(n):g}-year cap is not an output time "
                                   "(a testable cap has all of them)")
            total += deflator[:, k1] * np.maximum(w * (cpi[:, k1] / cpi[:, k0] - 1.0 - strike), 0.0)
        return total

    return value


class InflationKind:
    """The Jarrow-Yildirim inflation part as a part kind (module docstring: where its pieces live)."""

    section = "inflation"
    config_model = InflationSection
    #: legacy locations: the top-level ``[inflation]`` table and ``parameters.inflation``
    config_key = "inflation"
    json_key = "inflation"
    fit_key = "inflation"
    instruments_key = "inflation_caps"
    market_data_keys = MARKET_DATA_KEYS
    compare_group = "inflation"

    def drivers(self, section: InflationSection) -> tuple[str, ...]:
        return (REAL_RATE_DRIVER, INFLATION_DRIVER)

    def build(self, section: InflationSection, context: PartContext) -> GaussianPart:
        """The part from typed-in swap rates and volatilities (no market file, no cap fit)."""
        return self.calibrate(section, {}, context).part

    def calibrate(self, section: InflationSection, files: Mapping[str, Path], context: PartContext) -> PartFit:
        part, lams, fit, instruments = calibrate_inflation_section(section, files, context.curve, context.rates,
                                                                   context.correlation)
        return PartFit(part=part, fit=fit, instruments=instruments, prices_of_risk=lams)

    def prices_of_risk(self, section: InflationSection) -> dict[str, float]:
        """With typed-in volatilities (a fit changes the inflation driver's: :class:`PartFit`)."""
        return {REAL_RATE_DRIVER: section.real_rate_price_of_risk,
                INFLATION_DRIVER: section.inflation_drift_adjustment / section.inflation_volatility}

    def to_json(self, part: GaussianPart) -> dict[str, Any]:
        if not isinstance(part, InflationPart):
            raise TypeError(f"not an inflation part: {type(part).__name__}")
        return inflation_to_json(part)

    def from_json(self, data: dict[str, Any]) -> GaussianPart:
        return inflation_from_json(data)

    def column_drivers(self, column: str) -> frozenset[str] | None:
        """``None``: its columns load on the rate drivers too; :meth:`column_drivers_on`."""
        return None

    def column_drivers_on(self, column: str, rates_drivers: Sequence[str]) -> frozenset[str] | None:
        """Its columns (``cpi``, ``real_short_rate``, ``real_zcb_<m>y``) load on the rate drivers
        (the CPI's drift is the nominal minus the real short rate) and on both inflation drivers;
        ``None``: not one of its columns."""
        if column in (CPI, REAL_SHORT_RATE) or column.startswith(REAL_BOND_PREFIX):
            return frozenset(rates_drivers) | {REAL_RATE_DRIVER, INFLATION_DRIVER}
        return None

    def martingale_assets(self, part: GaussianPart, curve: DiscountCurve, columns: Any) -> list[PartAsset]:
        """The CPI and each real zero bond in ``columns`` (none without a ``cpi`` column): ``I_t``
        is the currency value of a claim on the index, ``E[D_t I_t] = I_0 P_r(0, t)``; a real
        zero bond's currency price is ``I_t P_r(t, t + m)``, ``E[D_t I_t P_r(t, t + m)] =
        I_0 P_r(0, t + m)`` (Jarrow and Yildirim 2003)."""
        if not isinstance(part, InflationPart):
            raise TypeError(f"not an inflation part: {type(part).__name__}")
        real_bonds = sorted((m, c) for c in columns if (m := real_bond_maturity_of(c)) is not None)
        if CPI not in columns:
            if real_bonds:
                raise IntegrityError(
                    f"the files carry real bonds ({', '.join(c for _, c in real_bonds)}) but no {CPI!r} "
                    "column: their currency prices cannot be formed"
                )
            return []
        real_curve, cpi_base = part.real_curve, part.cpi_base

        def cpi_value(cols: dict[str, np.ndarray]) -> np.ndarray:
            return cols[CPI]

        out = [PartAsset(
            name=CPI,
            description="consumer price index: E[D_t I_t] = I_0 P_r(0, t)",
            columns=(CPI,),
            value=cpi_value,
            reference=lambda t: cpi_base * np.asarray(real_curve.discount(t)),
        )]
        for m, col in real_bonds:
            def value(cols: dict[str, np.ndarray], col: str = col) -> np.ndarray:
                return cols[CPI] * cols[col]

            def reference(t: np.ndarray, m: float = m) -> np.ndarray:
                return cpi_base * np.asarray(real_curve.discount(np.asarray(t) + m))

            out.append(PartAsset(
                name=col,
                description=f"real zero bond in currency (cpi x {col}), {m:g} years to run",
                columns=(CPI, col),
                value=value,
                reference=reference,
            ))
        return out

    def describe(self, section: InflationSection) -> str:
        return (f"Jarrow-Yildirim inflation (a_r {section.real_mean_reversion:g}, sigma_r {section.real_volatility:g}, "
                f"sigma_I {section.inflation_volatility:g})")

    # -- its instruments: year-on-year caps and floors on the CPI column

    def instruments(self, records: list[dict[str, Any]], context: PartInstrumentContext) -> list[PartInstrument]:
        out = []
        for quote in yoy_option_quotes(records, f"instruments.{self.instruments_key}"):
            n, strike, option = int(round(quote.maturity)), quote.strike, quote.kind
            reason = None
            if CPI not in context.columns:
                reason = f"not testable from the files (missing {CPI})"
            else:
                off_grid = [i for i in range(n + 1) if context.time_index(context.times, float(i)) is None]
                if off_grid:
                    reason = f"not testable from the files (years {off_grid[:3]} are not output times)"
            market, model = quote.market_price, quote.model_price
            price = market if market is not None else model
            out.append(PartInstrument(
                label=f"year-on-year inflation {option} {n}y K={strike:.2%}", kind="yoy_option", option=option,
                expiry=float(n), strike=strike, columns=(CPI,), value=_yoy_value(n, strike, option, context.time_index),
                market_price=market, model_price=model,
                tolerance=max(YOY_TOLERANCE["absolute"], YOY_TOLERANCE["relative"] * market)
                if market is not None else 0.0,
                material=None if price is None else max(MATERIAL_PREMIUM["absolute"],
                                                         MATERIAL_PREMIUM["relative"] * abs(price)),
                untestable=reason,
            ))
        return out

    # -- its rows in the report, ``pqflow calibrate`` and ``pqflow compare`` (fmt: report.numbers)

    def report_rows(self, entry: dict[str, Any], fit: dict[str, Any], fmt: Any) -> list[dict[str, str]]:
        caps = fit.get("caps") or {}
        fit_text = []
        if "max_abs_difference_bp" in fit:
            fit_text.append(f"swaps repriced to {fmt.bp(fit['max_abs_difference_bp'], 2)}")
        if "price_rmse_bp" in caps:
            fit_text.append(f"caps/floors RMSE {fmt.bp(caps['price_rmse_bp'], 2)} of notional")
        return [{"part": "inflation, Jarrow-Yildirim",
                 "values": f"a_r {fmt.plain(entry.get('real_mean_reversion'))}, σ_r "
                           f"{fmt.bp(1e4 * float(entry.get('real_volatility', 'nan')), 1)}, "
                           f"σ_I {fmt.vol_points(entry.get('inflation_volatility'))} pts",
                 "fit": "; ".join(fit_text) or "typed in"}]

    def fit_lines(self, entry: dict[str, Any], fit: dict[str, Any], fmt: Any) -> list[str]:
        if not fit:
            return []
        out = [f"inflation (Jarrow-Yildirim): real curve from {len(fit['rows'])} zero-coupon inflation swaps, "
               f"max repricing error {fmt.bp(fit['max_abs_difference_bp'], 2)}; a_r = "
               f"{fmt.plain(entry['real_mean_reversion'])}, "
               f"sigma_r = {fmt.bp(1e4 * entry['real_volatility'])}, sigma_I = "
               f"{fmt.vol_points(entry['inflation_volatility'])} pts"]
        if caps := fit.get("caps"):
            out.append(f"  fitted {', '.join(caps['fitted'])} to {len(caps['rows'])} year-on-year caps/floors: "
                       f"price RMSE {fmt.bp(caps['price_rmse_bp'], 2)} of notional")
        return out

    def compare_quotes(self, instruments: list[dict[str, Any]], fit: dict[str, Any],
                       fmt: Any) -> dict[str, tuple[Any, str]]:
        out: dict[str, tuple[Any, str]] = {}
        for c in yoy_option_quotes(instruments, f"instruments.{self.instruments_key}"):
            out[f"year-on-year {c.kind} {fmt.years(c.maturity)}y strike "
                f"{fmt.percent(c.strike, 2)} (premium)"] = (1e4 * float(c.market_price), "bp")  # type: ignore[arg-type]
        for r in fit.get("rows") or []:
            out[f"zero-coupon inflation swap {fmt.years(r.get('maturity'))}y"] = (r.get("market_rate"), "rate")
        return out

    def compare_parameters(self, parameters: dict[str, Any]) -> dict[str, tuple[Any, str]]:
        return {"inflation real-rate mean reversion a_r": (parameters.get("real_mean_reversion"), "plain"),
                "inflation real-rate volatility sigma_r": (parameters.get("real_volatility"), "rate"),
                "inflation CPI volatility sigma_I": (parameters.get("inflation_volatility"), "vol")}
