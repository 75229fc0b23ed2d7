"""One shared calibration, from typed-in parameters or the quarter's market-data files.

Each quantity has one source (the configuration's schema makes sure): the curve is typed in as
pillars or fitted from par/zero rates with Smith-Wilson extrapolation; Hull-White ``(a, sigma)``
is typed in or fitted to swaptions (Jamshidian); every total-return index, the core equity
first, is fitted by one path (:func:`pqflow.calibration.parts.calibrate_index`: its volatility
typed in or bootstrapped bucket by bucket from implied volatilities under the run's rates); the correlation
is typed in or read from a checked (optionally Higham-repaired) matrix. The volatility
parameters are shared by both measures; the real-world set differs only in drift, through the
market prices of risk derived from the house view. A configuration whose real-world
volatilities differ from the market-consistent ones describes two singular measures: no density
exists, and we refuse.
"""

from __future__ import annotations

import hashlib
import json
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from pqflow import __version__
from pqflow.calibration.g2pp_swaptions import calibrate_g2pp_to_swaptions
from pqflow.calibration.heston_parts import fit_heston_indices, heston_indices_from_records, heston_to_json
from pqflow.calibration.index_kind import INDEX_SECTION
from pqflow.calibration.llfr_curve import fit_llfr_curve
from pqflow.calibration.parts import (
    RATES_DRIVER,
    DriverCorrelation,
    calibrate_credit_part,
    credit_from_record,
    credit_to_json,
    driver_correlation,
    load_schedule,
    schedule_json,
)
from pqflow.calibration.swaptions import SwaptionQuote, calibrate_hull_white_to_swaptions
from pqflow.config.schema import RunConfig
from pqflow.errors import CalibrationError, ConfigError, MarketDataError, MeasureError
from pqflow.market.curve import DiscountCurve, LogDiscountCurve
from pqflow.market.data_files import (
    read_correlation_matrix,
    read_credit_spreads,
    read_curve_inputs,
    read_equity_indices,
    read_equity_vols,
    read_inflation_caps,
    read_inflation_swaps,
    read_swaption_quotes,
)
from pqflow.market.serialize import curve_from_json, curve_to_json
from pqflow.market.smith_wilson import fit_smith_wilson
from pqflow.measure.house_view import (
    model_target_value,
    rates_price_of_risk_for_path,
    target_path,
    today_value,
)
from pqflow.measure.prices_of_risk import (
    PricesOfRisk,
    expected_short_rate,
    rates_price_of_risk_for_target,
    real_world_factor_mean,
)
from pqflow.models.cir_credit import CirCreditModel
from pqflow.models.economy import EconomyModel, GaussianPart, InflationPart, TotalReturnIndex
from pqflow.models.g2pp import G2PlusPlusParams
from pqflow.models.heston import HestonIndex
from pqflow.models.hull_white import HullWhiteParams
from pqflow.models.parts import (
    PART_KINDS,
    PartContext,
    calibrate_part,
    entry_kind,
    part_entry_list,
    part_fit_key,
    part_fit_records,
    part_instruments_key,
    part_market_files,
    recorded_parts,
)
from pqflow.models.rates import RatesModel, rates_from_json
from pqflow.models.schedule import PiecewiseConstant, as_schedule
from pqflow.storage.calibration_file import (
    CALIBRATION_FILE,
    PLUGIN_PARTS_KEY,
    CalibrationRecord,
    IndexRecord,
    calibration_document,
    calibration_path,
    plugin_part_entry,
    plugin_part_fields,
    read_calibration_file,
)
from pqflow.storage.parquet import file_sha256

__all__ = [
    "Calibration", "assemble_calibration", "build_model", "fit_curve", "load_calibration", "RATES_DRIVER",
    "curve_from_calibration_file",
]

_REL_TOL = 1e-12
_schedule_json = schedule_json
_load_schedule = load_schedule


@dataclass(frozen=True, kw_only=True)
class Calibration:
    """Every parameter both scenario sets use, with the inputs they came from and how well
    they fit. ``real_world_view`` describes the rate target (for the expected-path report)."""

    valuation_date: str
    curve: DiscountCurve
    rates: RatesModel
    #: Every total-return index of the run, the core equity first (:attr:`core_index`), each
    #: with its correlation with the rate driver(s); their real-world prices of risk are in
    #: ``extra_prices_of_risk`` and their risk premia in ``index_risk_premia`` (by index name).
    indices: tuple[TotalReturnIndex, ...]
    #: The rates price of risk (the house view's); every other driver's is in ``extra_prices_of_risk``.
    prices_of_risk: PricesOfRisk
    inputs: dict[str, Any]
    inputs_hash: str
    horizon_years: float
    fit: dict[str, Any] = field(default_factory=dict)
    instruments: dict[str, list[dict[str, Any]]] = field(
        default_factory=lambda: {"swaptions": [], "equity_options": []}
    )
    real_world_view: dict[str, Any] = field(default_factory=dict)
    #: Real-world prices of risk of the drivers beyond rates (every index, ``real_rate``,
    #: ``inflation``, part plug-ins), by driver name.
    extra_prices_of_risk: dict[str, float | PiecewiseConstant] = field(default_factory=dict)
    index_risk_premia: dict[str, float] = field(default_factory=dict)
    #: Correlation of every driver (``None``: only rates and the core index, whose
    #: ``correlation`` it is).
    correlation: DriverCorrelation | None = None
    inflation: InflationPart | None = None
    credit: CirCreditModel | None = None
    credit_substeps_per_year: int = 12
    #: Indices with stochastic (Heston) variance, by name (:mod:`pqflow.simulation.heston_part`).
    stochastic_volatility: dict[str, HestonIndex] = field(default_factory=dict)
    #: Registered part plug-ins (:mod:`pqflow.models.parts`) by section, in model order after
    #: the built-in parts; their prices of risk are in ``extra_prices_of_risk``.
    plugin_parts: dict[str, GaussianPart] = field(default_factory=dict)

    @property
    def rates_model(self) -> str:
        return self.rates.model

    @property
    def core_index(self) -> TotalReturnIndex:
        """The core equity (``[equity]``): the first index, the default underlying of the
        liabilities and the checks."""
        if not self.indices:
            raise RuntimeError("a calibration without its core index")
        return self.indices[0]

    @property
    def further_indices(self) -> tuple[TotalReturnIndex, ...]:
        """The indices beside the core one (``[[indices]]``), in model order."""
        return self.indices[1:]

    @property
    def driver_correlation(self) -> DriverCorrelation:
        if self.correlation is not None:
            return self.correlation
        core = self.core_index
        rho = self.rates.short_rate_correlation(core.rates_correlation)
        return DriverCorrelation(names=(RATES_DRIVER, core.name), matrix=np.array([[1.0, rho], [rho, 1.0]]))

    def index_records(self) -> tuple[IndexRecord, ...]:
        """Every index as its calibration record (core first), by the index kind."""
        return _registered(INDEX_SECTION).records(self.indices, self.extra_prices_of_risk, self.index_risk_premia,
                                                  self.rates)

    def _zero_factor_mean(self, t: np.ndarray) -> np.ndarray | tuple[np.ndarray, np.ndarray]:
        """The market-consistent mean of the rate factor(s) (zero), in the form the house-view
        functions take: one array (Hull-White) or a pair (G2++)."""
        return self.rates.zero_factor_mean(t)

    def expected_paths(self) -> dict[str, Any]:
        """Expected short rate (and the house-view target) under both measures, yearly."""
        top = min(self.horizon_years, self.curve.max_maturity)
        times = np.arange(0.0, np.floor(top) + 1.0)
        if times[-1] < top:
            times = np.append(times, top)
        rates = self.rates
        out: dict[str, Any] = {
            "time": times.tolist(),
            "market_consistent": expected_short_rate(
                self.curve, rates, self.prices_of_risk, times, measure="market_consistent"
            ).tolist(),
            "real_world": expected_short_rate(
                self.curve, rates, self.prices_of_risk, times, measure="real_world"
            ).tolist(),
        }
        view = self.real_world_view
        if view.get("kind") == "path":
            target, maturity = view["target"], view.get("target_maturity")
            top_t = times if target == "short_rate" else times[times + maturity <= self.curve.max_maturity]
            mean_p = real_world_factor_mean(rates, self.prices_of_risk.rates_schedule, top_t)
            out["target"] = {
                "quantity": target if target == "short_rate" else f"zero yield, {maturity:g} years (continuous)",
                "time": top_t.tolist(),
                "house_view": target_path(view["start"], view["long_run_level"], view["speed"], top_t).tolist(),
                "real_world": model_target_value(
                    self.curve, rates, top_t, mean_p, target=target, maturity=maturity
                ).tolist(),
                "market_consistent": model_target_value(
                    self.curve, rates, top_t, self._zero_factor_mean(top_t), target=target, maturity=maturity
                ).tolist(),
            }
        return out

    def to_json(self) -> dict[str, Any]:
        """The content of ``calibration.json``."""
        core_json, further_json = _registered(INDEX_SECTION).parameters_json(self.index_records(),
                                                                             self.prices_of_risk.rates)
        return calibration_document(
            pqflow_version=__version__,
            valuation_date=self.valuation_date,
            horizon_years=self.horizon_years,
            inputs_sha256=self.inputs_hash,
            inputs=self.inputs,
            parameters={
                "curve": curve_to_json(self.curve),
                "rates_model": self.rates_model,
                **self.rates.to_json(),
                **core_json,
                "real_world_view": self.real_world_view,
                **self._parts_json(further_json),
            },
            fit=self.fit,
            instruments=self.instruments,
            expected_short_rate=self.expected_paths(),
        )


    def _own_entry_parts(self) -> dict[str, GaussianPart]:
        """The parts of the kinds with an entry of their own (``json_key``; today inflation), by
        section; their ``Calibration`` field is the one binding left here (``_OWN_ENTRY_FIELDS``)."""
        return {name: part for name, field_name in _OWN_ENTRY_FIELDS.items()
                if (part := getattr(self, field_name)) is not None}

    def _parts_json(self, further_indices: dict[str, Any]) -> dict[str, Any]:
        out: dict[str, Any] = {}
        if self.correlation is not None:
            out["driver_correlation"] = self.correlation.to_json()
        out.update(further_indices)
        for name, part in self._own_entry_parts().items():  # kinds with an entry of their own (inflation)
            kind = _registered(name)
            out[kind.json_key] = {
                **entry_kind(kind).to_json(part),
                "market_prices_of_risk": {d: _schedule_json(self.extra_prices_of_risk.get(d, 0.0))
                                          for d in part.drivers},
            }
        if self.credit is not None:
            out["credit"] = credit_to_json(self.credit, self.credit_substeps_per_year)
        if self.stochastic_volatility:
            out["stochastic_volatility"] = heston_to_json(self.stochastic_volatility)
        if self.plugin_parts:
            out[PLUGIN_PARTS_KEY] = {
                name: plugin_part_entry(
                    entry_kind(_registered(name)).to_json(part),
                    {d: _schedule_json(self.extra_prices_of_risk.get(d, 0.0)) for d in part.drivers},
                )
                for name, part in self.plugin_parts.items()
            }
        return out


#: A kind with an entry of its own (``json_key``) by section -> the ``Calibration`` field holding its part.
_OWN_ENTRY_FIELDS = {"inflation": "inflation"}


def _indices_of(parts: tuple[GaussianPart, ...]) -> tuple[TotalReturnIndex, ...]:
    """The index kind's parts (the core first), checked to be indices."""
    if not parts:
        raise RuntimeError("the index kind built no index (a run always has its core equity)")
    for part in parts:
        if not isinstance(part, TotalReturnIndex):
            raise TypeError(f"the index kind built a {type(part).__name__}")
    return tuple(p for p in parts if isinstance(p, TotalReturnIndex))


def _registered(name: str) -> Any:
    kind = PART_KINDS.get(name)
    if kind is None:
        raise ConfigError(f"part {name!r}: no part kind of that name is registered (known: "
                          f"{', '.join(sorted(PART_KINDS)) or 'none'})")
    return kind


def _parts_from_json(par: dict[str, Any], record: CalibrationRecord,
                     source: str | Path = CALIBRATION_FILE) -> dict[str, Any]:
    out: dict[str, Any] = {"extra_prices_of_risk": {}, "index_risk_premia": {}}
    dc = record.driver_correlation
    correlation = DriverCorrelation.from_record(dc) if dc is not None else None
    if correlation is not None:
        out["correlation"] = correlation
    out["indices"], index_lams, index_premia = _registered(INDEX_SECTION).from_records(
        record.indices, None if correlation is None else correlation.with_rates)  # the core index first
    out["extra_prices_of_risk"].update(index_lams)
    out["index_risk_premia"].update(index_premia)
    for name, kind, entry in recorded_parts(par, {}):  # kinds with an entry of their own (inflation)
        out[_OWN_ENTRY_FIELDS[name]] = entry_kind(kind).from_json(entry)
        for k, v in entry["market_prices_of_risk"].items():
            out["extra_prices_of_risk"][k] = _load_schedule(v)
    if (credit := record.credit) is not None:
        out["credit"], out["credit_substeps_per_year"] = credit_from_record(credit)
    if record.stochastic_volatility:
        out["stochastic_volatility"] = heston_indices_from_records(record.stochastic_volatility)
    plugged: dict[str, GaussianPart] = {}
    for name, entry in (par.get(PLUGIN_PARTS_KEY) or {}).items():
        form, lams = plugin_part_fields(entry, source, name)
        plugged[name] = entry_kind(_registered(name)).from_json(form)
        for d, v in lams.items():
            out["extra_prices_of_risk"][d] = _load_schedule(v)
    if plugged:
        out["plugin_parts"] = plugged
    return out


def load_calibration(path: str | Path) -> Calibration:
    """Read a stored ``calibration.json`` back into a :class:`Calibration` (no refitting)."""
    path = Path(path)
    record = read_calibration_file(path)  # the version checked, the file named in every error
    try:
        par = record.required_parameters
        _refuse_non_finite(path, {"horizon_years": record.horizon_years, "parameters": par})
        return Calibration(
            valuation_date=record.required("valuation_date"),
            horizon_years=record.horizon_years,
            curve=curve_from_json(record.curve),
            rates=rates_from_json(par),
            prices_of_risk=PricesOfRisk(rates=_load_schedule(record.rates_price_of_risk)),
            inputs=record.required("inputs"),
            inputs_hash=record.required("inputs_sha256"),
            fit=dict(record.fit),
            instruments=dict(record.instruments) if record.has_instruments else {"swaptions": [], "equity_options": []},
            real_world_view=par.get("real_world_view", {}),
            **_parts_from_json(par, record, path),
        )
    except FileNotFoundError:
        raise ConfigError(f"{path}: calibration file not found") from None
    except (KeyError, TypeError, ValueError, json.JSONDecodeError) as exc:
        raise ConfigError(f"{path}: not a pqflow calibration file ({exc!r})") from None


def curve_from_calibration_file(run_dir: str | Path) -> DiscountCurve:
    """Today's curve as recorded in the run's ``calibration.json`` (an input, not the model)."""
    return curve_from_json(read_calibration_file(calibration_path(run_dir)).curve)


def _non_finite_key(value: Any, key: str) -> str | None:
    """The dotted key of the first NaN or infinite number in a JSON value, or None."""
    if isinstance(value, float) and not math.isfinite(value):
        return key
    if isinstance(value, dict):
        items = ((f"{key}.{k}", v) for k, v in value.items())
    elif isinstance(value, list):
        items = ((f"{key}[{i}]", v) for i, v in enumerate(value))
    else:
        return None
    for sub_key, sub in items:
        if (found := _non_finite_key(sub, sub_key)) is not None:
            return found
    return None


def _refuse_non_finite(path: Path, data: dict[str, Any]) -> None:
    for key, value in data.items():
        if (found := _non_finite_key(value, key)) is not None:
            raise ConfigError(f"{path}: {found} is not a finite number; a stored calibration holds numbers only")


def check_calibration_fits(calibration: Calibration, config: RunConfig, *, source: str) -> None:
    """A stored calibration must cover the run: same indices, a curve long enough."""
    core, want_core = calibration.core_index.name, config.index_specs[0].name
    if core != want_core:
        raise ConfigError(
            f"{source}: calibration is for equity index {core!r} but the configuration names {want_core!r}"
        )
    if calibration.rates_model != config.rates.model:
        raise ConfigError(
            f"{source}: calibration is for rates model {calibration.rates_model!r} but the configuration "
            f"names {config.rates.model!r}"
        )
    have = [i.name for i in calibration.further_indices]
    want = [i.name for i in config.index_specs[1:]]
    if have != want:
        raise ConfigError(f"{source}: calibration has indices {have} but the configuration names {want}")
    if list(calibration.plugin_parts) != list(config.parts):
        raise ConfigError(f"{source}: calibration has parts {list(calibration.plugin_parts)} but the configuration "
                          f"names {list(config.parts)} ([parts.<name>])")
    from pqflow.calibration.heston_parts import heston_indices

    have_sv, want_sv = sorted(calibration.stochastic_volatility), sorted(heston_indices(config))
    if have_sv != want_sv:
        raise ConfigError(
            f"{source}: calibration has Heston indices {have_sv} but the configuration sets volatility_model = "
            f"\"heston\" on {want_sv}"
        )
    for label, has, wants in (
        ("[inflation]", calibration.inflation is not None, config.inflation is not None),
        ("[credit]", calibration.credit is not None, config.credit is not None),
    ):
        if has != wants:
            raise ConfigError(
                f"{source}: the calibration {'has' if has else 'has no'} {label} part but the configuration "
                f"{'configures' if wants else 'does not configure'} it"
            )
    if config.inflation is not None and calibration.inflation is not None:
        if tuple(sorted(config.inflation.real_bond_maturities)) != calibration.inflation.real_bond_maturities:
            raise ConfigError(f"{source}: calibration real bond maturities differ from inflation.real_bond_maturities")
    if config.credit is not None and calibration.credit is not None:
        if [r.name for r in config.credit.ratings] != list(calibration.credit.names) or tuple(
            sorted(config.credit.bond_maturities)
        ) != calibration.credit.bond_maturities:
            raise ConfigError(f"{source}: calibration credit ratings or bond maturities differ from [credit]")
    longest = max([*config.outputs.bond_maturities, *(config.inflation.real_bond_maturities if config.inflation
                                                      else [])])
    need = config.simulation.max_horizon_years + longest
    if need > calibration.curve.max_maturity + 1e-9:
        raise ConfigError(
            f"{source}: the calibrated curve ends at {calibration.curve.max_maturity:g} years but the "
            f"run needs {need:g} (horizon plus longest bond)"
        )
    if calibration.valuation_date != config.run.valuation_date.isoformat():
        raise ConfigError(
            f"{source}: calibration valuation date {calibration.valuation_date} differs from "
            f"run.valuation_date {config.run.valuation_date}"
        )


# --------------------------------------------------------------------------------------------
# Fitting steps
# --------------------------------------------------------------------------------------------


def _check_equivalence(config: RunConfig) -> None:
    rw = config.real_world
    if config.rates.model == "g2pp" and rw.rates_volatility is not None:
        raise MeasureError(
            "real_world.rates_volatility confirms a Hull-White volatility; with rates.model = \"g2pp\" "
            "the real-world volatilities are the G2++ ones (Girsanov changes drifts only). Remove it."
        )
    pairs = [
        ("real_world.rates_volatility", rw.rates_volatility, "hull_white.volatility",
         config.hull_white.volatility if config.hull_white else None),
        ("real_world.equity_volatility", rw.equity_volatility, "equity.volatility",
         config.index_specs[0].volatility),
    ]
    for rw_key, rw_val, q_key, q_val in pairs:
        if rw_val is None:
            continue
        if q_val is None:
            raise MeasureError(
                f"{rw_key} is given but {q_key} is fitted to market quotes, and may be piecewise in "
                "time: real-world volatilities are the market-consistent ones (Girsanov changes "
                f"drifts only). Remove {rw_key}."
            )
        if abs(rw_val - q_val) > _REL_TOL * max(abs(q_val), 1.0):
            raise MeasureError(
                f"{rw_key} = {rw_val:g} differs from {q_key} = {q_val:g}. Measures with different "
                "volatilities are singular (Girsanov changes drifts only), so no density of one "
                "set with respect to the other exists and pqflow will not write density weights. "
                f"Remove {rw_key} or set it equal to {q_key}."
            )


def _curve(config: RunConfig) -> tuple[DiscountCurve, dict[str, Any]]:
    curve: DiscountCurve
    if config.curve is not None:
        c = config.curve
        if c.kind == "zero_rates":
            curve = LogDiscountCurve.from_zero_rates(np.array(c.maturities), np.array(c.values),
                                                     compounding=c.compounding)
        else:
            curve = LogDiscountCurve(maturities=np.array(c.maturities), discount_factors=np.array(c.values))
        return curve, {"method": "typed-in pillars, monotone cubic on -ln P(0,t)"}
    ext = config.curve_extrapolation
    path = config.market_file("curve")
    if ext is None or path is None:
        raise ConfigError("curve: give [curve] pillars, or market_data.curve with [curve_extrapolation]")
    data = read_curve_inputs(path)
    if ext.method == "last_liquid_forward":
        return fit_llfr_curve(data, ext, path)
    if data.llfr_weights is not None:
        raise MarketDataError(
            f"{path}: the file has an 'llfr_weight' column but curve_extrapolation.method is \"smith_wilson\"; "
            "the weights belong to method = \"last_liquid_forward\""
        )
    llp = ext.last_liquid_point if ext.last_liquid_point is not None else float(data.maturities[-1])
    keep = data.maturities <= llp + 1e-9
    if not keep.any():
        raise MarketDataError(f"{path}: no input maturity at or below the last liquid point {llp:g}")
    dropped = data.maturities[~keep].tolist()
    liquid = type(data)(source=data.source, quantity=data.quantity, maturities=data.maturities[keep],
                        values=data.values[keep])
    instruments = liquid.instruments(credit_risk_adjustment_bp=ext.credit_risk_adjustment_bp)
    curve, report = fit_smith_wilson(
        instruments,
        ufr=ext.ultimate_forward_rate,
        alpha_min=ext.alpha_floor,
        tolerance_bp=ext.convergence_tolerance_bp,
        convergence_point_years=ext.convergence_point_years,
        long_end=ext.long_end_years,
    )
    if not report.converged:
        raise CalibrationError(
            f"{path}: Smith-Wilson did not reach the UFR within {report.tolerance_bp:g} bp at the "
            f"convergence point {report.convergence_point:g} (gap {report.gap_bp:.3f} bp)"
        )
    fit = {
        "method": "Smith-Wilson (EIOPA technical documentation of the risk-free rate term structure)",
        "input_kind": report.input_kind,
        "inputs_used": int(keep.sum()),
        "inputs_beyond_llp_ignored": dropped,
        "ufr": report.ufr,
        "omega": report.omega,
        "last_liquid_point": report.llp,
        "alpha": report.alpha,
        "alpha_floor": report.alpha_min,
        "alpha_searched": report.alpha_searched,
        "convergence_point": report.convergence_point,
        "forward_at_convergence": report.forward_at_convergence,
        "gap_to_omega_bp": report.gap_bp,
        "tolerance_bp": report.tolerance_bp,
        "credit_risk_adjustment_bp": report.credit_risk_adjustment_bp,
        "max_repricing_error": report.max_repricing_error,
    }
    return curve, fit


def fit_curve(config: RunConfig) -> tuple[DiscountCurve, dict[str, Any]]:
    """Today's risk-free curve of a run and its fit report (the ``fit.curve`` entry): typed-in
    pillars, or the curve file extrapolated by the configured method."""
    return _curve(config)


def _rates(config: RunConfig, curve: DiscountCurve) -> tuple[HullWhiteParams | G2PlusPlusParams, dict[str, Any],
                                                             list[dict[str, Any]]]:
    g2 = config.rates.model == "g2pp"
    if config.hull_white is not None:
        hw = HullWhiteParams(mean_reversion=config.hull_white.mean_reversion, volatility=config.hull_white.volatility)
        return hw, {"method": "typed in"}, []
    if config.g2pp is not None:
        return G2PlusPlusParams(**config.g2pp.model_dump()), {"method": "typed in"}, []
    path = config.market_file("swaptions")
    if path is None:
        raise ConfigError(f"{config.rates.model}: give the parameters, or market_data.swaptions to fit them")
    rows = read_swaption_quotes(path)
    quotes = [SwaptionQuote(expiry=r.expiry, tenor=r.tenor, vol=r.vol, convention=r.convention, shift=r.shift,
                            weight=r.weight) for r in rows]
    report: Any
    if g2:
        g2_opts = config.calibration.g2pp
        report = calibrate_g2pp_to_swaptions(
            curve,
            quotes,
            objective=g2_opts.objective,
            initial=G2PlusPlusParams(**g2_opts.initial.model_dump()) if g2_opts.initial is not None else None,
            mean_reversion_bounds=g2_opts.mean_reversion_bounds,
            volatility_bounds=g2_opts.volatility_bounds,
            fixed={str(k): v for k, v in g2_opts.fixed.items()},
        )
        method = ("G2++ (a, sigma, b, eta, rho) to ATM swaptions, one-dimensional integral (Brigo and "
                  "Mercurio 2006, ch. 4.2), weighted least squares; rates_x is the factor with a >= b")
    else:
        opts = config.calibration.hull_white
        report = calibrate_hull_white_to_swaptions(
            curve,
            quotes,
            objective=opts.objective,
            mean_reversion_bounds=opts.mean_reversion_bounds,
            volatility_bounds=opts.volatility_bounds,
            fix_mean_reversion=opts.fix_mean_reversion,
        )
        method = "Hull-White (a, sigma) to ATM swaptions, Jamshidian's decomposition, weighted least squares"
    if not report.success:
        raise CalibrationError(f"{path}: the {'G2++' if g2 else 'Hull-White'} fit did not converge ({report.message})")
    fit = {
        "method": method,
        "objective": report.objective,
        "fitted": list(report.fitted),
        "at_bound": list(report.at_bound),
        "rmse_bp": report.rmse_bp,
        "price_rmse_bp": report.price_rmse_bp,
        "rows": report.as_records(),
    }
    instruments = [
        {
            "expiry": r.expiry,
            "tenor": r.tenor,
            "strike": r.forward_rate,
            "convention": r.convention,
            "shift": r.shift,
            "market_vol": r.market_vol / 1e4 if r.convention == "normal" else r.market_vol,
            "market_price": r.market_price,
            "model_price": r.model_price,
            "weight": r.weight,
        }
        for r in report.rows
    ]
    return report.params, fit, instruments


def _real_world(config: RunConfig, curve: DiscountCurve, rates: RatesModel) -> tuple[PricesOfRisk, dict[str, Any]]:
    """The rates price of risk from the house view, and the view as recorded (the indices'
    prices of risk come with their fit, :func:`pqflow.calibration.parts.calibrate_index`)."""
    hw = rates
    rw = config.real_world
    horizon = config.simulation.max_horizon_years
    view: dict[str, Any]
    if rw.rates_market_price_of_risk is not None:
        lam_r: float | PiecewiseConstant = rw.rates_market_price_of_risk
        view = {"kind": "constant_price_of_risk", "value": lam_r}
    elif rw.target_short_rate is not None:
        target_time = rw.target_year or horizon
        lam_r = rates_price_of_risk_for_target(curve, hw, target_short_rate=rw.target_short_rate,
                                               target_time=target_time)
        view = {"kind": "short_rate_at_year", "target_short_rate": rw.target_short_rate, "target_year": target_time}
    else:
        if rw.long_run_level is None or rw.speed is None:
            raise ConfigError("real_world: give target_short_rate and target_year, or long_run_level and speed")
        maturity = rw.target_maturity if rw.target == "zero_yield" else None
        if maturity is not None and horizon + maturity > curve.max_maturity:
            raise ConfigError(
                f"real_world.target_maturity {maturity:g} plus the horizon {horizon:g} runs beyond the curve "
                f"({curve.max_maturity:g} years)"
            )
        lam_r = rates_price_of_risk_for_path(
            curve, hw, long_run_level=rw.long_run_level, speed=rw.speed, horizon=horizon,
            target=rw.target, maturity=maturity,
        )
        view = {
            "kind": "path",
            "target": rw.target,
            "target_maturity": maturity,
            "start": today_value(curve, hw, target=rw.target, maturity=maturity),
            "long_run_level": rw.long_run_level,
            "speed": rw.speed,
            "half_life_years": float(np.log(2.0) / rw.speed),
        }
    view["equity_risk_premium"] = rw.equity_risk_premium
    return PricesOfRisk(rates=lam_r), view


def _inputs(config: RunConfig) -> dict[str, Any]:
    sections = ("curve", "rates", "hull_white", "g2pp", "equity", "real_world", "market_data", "curve_extrapolation",
                "calibration", "correlations", "inflation", "credit")
    inputs: dict[str, Any] = {}
    for name in sections:
        value = getattr(config, name)
        if value is not None:
            inputs[name] = value.model_dump(mode="json")
    if config.indices:
        inputs["indices"] = [i.model_dump(mode="json") for i in config.indices]
    if config.parts:
        inputs["parts"] = {name: section.model_dump(mode="json") for name, section in config.parts.items()}
    inputs["simulation_horizon_years"] = config.simulation.max_horizon_years
    files = {}
    if config.market_data is not None:
        for kind in ("curve", "swaptions", "equity_index", "equity_vols", "correlations", "inflation_swaps",
                     "inflation_caps", "credit_spreads"):
            path = config.market_file(kind)
            if path is not None:
                if not path.is_file():
                    raise MarketDataError(f"{path}: market-data file not found (market_data.{kind})")
                files[kind] = {"path": getattr(config.market_data, kind), "sha256": file_sha256(path)}
    for name, section in config.parts.items():  # a part plug-in's own files, named in its section
        for key, rel in part_market_files(PART_KINDS[name], section).items():
            path = config.base_dir / rel
            if not path.is_file():
                raise MarketDataError(f"{path}: market-data file not found (parts.{name}.{key})")
            files[f"{name}.{key}"] = {"path": rel, "sha256": file_sha256(path)}
    inputs["files"] = files
    return inputs


def assemble_calibration(config: RunConfig) -> Calibration:
    """Check every input, then fit (or assemble) the one parameter set of a run."""
    _check_equivalence(config)
    inputs = _inputs(config)  # also checks every market-data file exists, before any fitting
    for kind, reader in (("curve", read_curve_inputs), ("swaptions", read_swaption_quotes),
                         ("equity_index", read_equity_indices), ("equity_vols", read_equity_vols),
                         ("correlations", read_correlation_matrix), ("inflation_swaps", read_inflation_swaps),
                         ("inflation_caps", read_inflation_caps),
                         ("credit_spreads", read_credit_spreads)):
        path = config.market_file(kind)
        if path is not None:
            reader(path)  # every file checked in full before anything is fitted
    curve, curve_fit = _curve(config)
    rates, rates_fit, swaptions = _rates(config, curve)
    correlation, corr_fit = driver_correlation(config, rates)
    fit: dict[str, Any] = {"curve": curve_fit, "correlation": corr_fit, config.rates.model: rates_fit}
    extra_lams: dict[str, float | PiecewiseConstant] = {}
    premia: dict[str, float] = {}
    prices_of_risk, view = _real_world(config, curve, rates)
    context = PartContext(curve=curve, rates=rates, correlation=correlation.pair)
    own_parts: dict[str, GaussianPart] = {}
    listed_parts: dict[str, tuple[GaussianPart, ...]] = {}
    own_instruments: dict[str, list[dict[str, Any]]] = {}
    for name, own_kind in PART_KINDS.items():  # kinds with a configuration of their own (indices, inflation)
        config_key = getattr(own_kind, "config_key", None)
        own_section = getattr(config, config_key) if config_key is not None else None
        if own_section is None:
            continue
        own_files = {key: path for key in getattr(own_kind, "market_data_keys", ())
                     if (path := config.market_file(key)) is not None}
        if part_entry_list(own_kind):  # one part per element (the indices, the core first)
            fits = [calibrate_part(own_kind, element, own_files, context) for element in own_section]
            listed_parts[name] = tuple(f.part for f in fits)
            fit.update(part_fit_records(own_kind, own_section, [f.fit for f in fits]))
            own_instruments[part_instruments_key(own_kind)] = [i for f in fits for i in f.instruments]
            for element, f in zip(own_section, fits, strict=True):
                extra_lams.update(f.prices_of_risk if f.prices_of_risk is not None
                                  else own_kind.prices_of_risk(element))
                premia.update(f.risk_premia or {})
            continue
        own_fit = calibrate_part(own_kind, own_section, own_files, context)
        own_parts[name] = own_fit.part
        fit[part_fit_key(own_kind)] = own_fit.fit
        if own_fit.instruments:
            own_instruments[part_instruments_key(own_kind)] = own_fit.instruments
        extra_lams.update(own_fit.prices_of_risk if own_fit.prices_of_risk is not None
                          else own_kind.prices_of_risk(own_section))
    indices = _indices_of(listed_parts.get(INDEX_SECTION, ()))
    core = indices[0]
    equity_options = own_instruments.pop(part_instruments_key(_registered(INDEX_SECTION)))
    inflation = own_parts.get("inflation")
    if inflation is not None and not isinstance(inflation, InflationPart):
        raise TypeError(f"the inflation kind built a {type(inflation).__name__}")
    credit = None
    if config.credit is not None:
        credit, fit["credit"] = calibrate_credit_part(config)
    spots = {i.name: (i.level, i.income_yield, i.kind) for i in indices}
    driver_lams = {**_rates_prices_of_risk(rates, prices_of_risk.rates), **extra_lams}
    heston, heston_fits, heston_options = fit_heston_indices(config, curve, rates, correlation, spots, driver_lams)
    if heston_fits:
        fit["heston"] = heston_fits
        # a Heston index is repriced at every quoted strike, not at its ATMF quotes
        equity_options = [o for o in equity_options if o["index"] not in heston] + heston_options
    plugin_parts: dict[str, GaussianPart] = {}
    part_instruments: dict[str, list[dict[str, Any]]] = {}
    if config.parts:
        for name, part_section in config.parts.items():
            part_kind = PART_KINDS[name]
            part_files = {key: config.base_dir / rel for key, rel in part_market_files(part_kind, part_section).items()}
            part_fit = calibrate_part(part_kind, part_section, part_files, context)
            plugin_parts[name] = part_fit.part
            if part_fit.fit:
                fit[part_fit_key(part_kind)] = part_fit.fit
            if part_fit.instruments:
                part_instruments[part_instruments_key(part_kind)] = part_fit.instruments
            extra_lams.update(part_kind.prices_of_risk(part_section))
    canon = json.dumps(inputs, sort_keys=True, separators=(",", ":")).encode("utf-8")
    return Calibration(
        valuation_date=config.run.valuation_date.isoformat(),
        horizon_years=config.simulation.max_horizon_years,
        curve=curve,
        rates=rates,
        indices=indices,
        prices_of_risk=prices_of_risk,
        inputs=inputs,
        inputs_hash=hashlib.sha256(canon).hexdigest(),
        fit=fit,
        instruments={"swaptions": swaptions, "equity_options": equity_options,
                     **own_instruments, **part_instruments},
        real_world_view=view,
        extra_prices_of_risk=extra_lams,
        index_risk_premia=premia,
        correlation=correlation if correlation.names != (RATES_DRIVER, core.name) else None,
        inflation=inflation,
        credit=credit,
        credit_substeps_per_year=config.credit.substeps_per_year if config.credit is not None else 12,
        stochastic_volatility=heston,
        plugin_parts=plugin_parts,
    )


def _rates_prices_of_risk(rates: RatesModel, lam: float | PiecewiseConstant) -> dict[str, float | PiecewiseConstant]:
    """The rates price of risk by driver: on ``rates`` (Hull-White), or split between ``rates_x``
    and ``rates_y`` as the price of the short-rate shock (G2++, :func:`g2_driver_weights`)."""
    return rates.split_price_of_risk(lam)


def build_model(calibration: Calibration, bond_maturities: tuple[float, ...]) -> EconomyModel:
    """The Gaussian scenario model both sets are simulated from (credit is simulated beside it,
    :mod:`pqflow.simulation.credit`)."""
    lams = {
        **_rates_prices_of_risk(calibration.rates, calibration.prices_of_risk.rates),
        **calibration.extra_prices_of_risk,
    }
    corr = calibration.driver_correlation
    for name in calibration.stochastic_volatility:
        # A Heston index's Gaussian stand-in is not written (the Heston part writes the index and
        # carries its premium). Its price of risk is the one the other drivers imply for it, so its
        # own independent shock is not shifted and adds nothing to the density's variance.
        lams[name] = _implied_price_of_risk(name, corr, lams, set(calibration.stochastic_volatility))
    return EconomyModel(
        curve=calibration.curve,
        rates=calibration.rates,
        parts=(*calibration.indices, *((calibration.inflation,) if calibration.inflation is not None else ()),
               *calibration.plugin_parts.values()),
        correlation=corr.matrix,
        prices_of_risk=lams,
        bond_maturities=tuple(bond_maturities),
    )


def _implied_price_of_risk(
    name: str, corr: DriverCorrelation, lams: dict[str, float | PiecewiseConstant], heston: set[str]
) -> PiecewiseConstant:
    """``sum_j beta_j lambda_j(t)``: the regression of driver ``name`` on the other drivers
    (Heston ones left out), ``beta = C_OO^{-1} C_O,name``, applied to their prices of risk."""
    names = list(corr.names)
    others = [j for j, n in enumerate(names) if n != name and n not in heston]
    i = names.index(name)
    if not others:
        return PiecewiseConstant.constant(0.0)
    beta = np.linalg.solve(corr.matrix[np.ix_(others, others)], corr.matrix[others, i])
    scheds = [as_schedule(lams.get(names[j], 0.0)) for j in others]
    knots = sorted({k for s in scheds for k in s.knots})
    values = [float(sum(b * float(s(k)) for b, s in zip(beta, scheds, strict=True))) for k in knots]
    return PiecewiseConstant(knots=tuple(knots), values=tuple(values))
