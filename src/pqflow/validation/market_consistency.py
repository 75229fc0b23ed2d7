"""Market consistency: the calibration instruments repriced by Monte Carlo from the files.

The instruments are those recorded under ``calibration.json["instruments"]`` (swaptions and
equity options, each with its market quote and the calibrated model's price). Each is valued
from the scenario parts of both sets, as the mean of its deflated payoff,
``E[D_T0 payoff]`` (``D = 1/B`` in the market-consistent set, ``q_density / B`` in the
real-world set), and compared with the market (Society of Actuaries, *Economic Scenario
Generators: A Practical Guide*, 2016, s. 8.3: Monte Carlo prices of the calibration
instruments against market prices; Solvency II Delegated Regulation 2015/35, Art. 22).

Payoffs at the expiry ``T0``, from the columns of the files:

* payer swaption on an annual fixed leg of ``n`` years struck at ``K`` (receiver: ``-``):
  ``A = sum_{k=1..n} zcb_{k}y``, ``S = (1 - zcb_{n}y) / A``, payoff ``A max(S - K, 0)``;
* year-on-year inflation cap (floor) of ``N`` years struck at ``K``: annual caplets
  ``(+-(cpi_i / cpi_{i-1} - 1 - K))^+`` paid at each year ``i = 1..N``, each deflated at its
  payment time (the quotes are premiums; stated tolerance the larger of 5 bp of notional and 3%
  of the premium, plus the Monte Carlo interval);
* equity option on the price index ``S_T e^{-qT}``, with ``S`` the total-return column
  ``equity_{index}`` (or ``property_{index}``, as the instrument's ``column_kind`` says) and
  ``q`` the index's recorded income yield (the core equity's dividend yield; the typed
  index records of :mod:`pqflow.storage.calibration_file`): ``max(+-(S_T e^{-qT} - K), 0)``.

In the real-world set each payoff is deflated with the density of the smallest written block
that carries its columns (:mod:`pqflow.measure.blocks`: the rates for a swaption, the rates and
the index for an equity option) over the cash account, ``E_P[w_B X / B_T] = E_Q[X / B_T]`` for
anything the block determines; the full density's other drivers only add spread (column
``weight``). That estimate is an importance-sampling mean whose large weights sit where a put
pays: a sample that misses them has a low mean and a low standard error together, and the plain
rule then raised false alarms several times its level (measured in
``tests/test_market_power.py``). Its standard error is therefore the larger of the sample value
and the spread implied by the market-consistent set, ``Var_P(w_B Y) = E_Q[Y^2 / p_B] -
E_Q[Y]^2`` (:func:`pqflow.validation.moments.spread_from_other_measure`; columns
``sample_std_error`` and ``std_error_from_market_consistent``), as the reconciliation does.

An instrument whose expiry is not an output time, or whose bonds or index are not in the
files, is reported as not testable (with the reason) rather than guessed.

Tolerance (stated): the calibrated model need not reprice the market exactly, so a quote
passes when the Monte Carlo price lies within the market price plus a volatility tolerance,
widened by the Monte Carlo error: ``|MC - market| <= vega * tol + z * SE``, with ``tol`` 5 bp
of normal volatility, 0.5 volatility points (lognormal and shifted lognormal quotes, equity
options) and ``z`` the Bonferroni-corrected critical value at family level 99% over every
cell of the check. The cell's score is the excess over the tolerance in standard errors,
``sign(d) max(|d| - vega tol, 0) / SE``. Where the calibration also records the model's own
price, the Monte Carlo price must reproduce it within ``z * SE`` exactly (no tolerance): that
cell tests the simulation, the first tests the calibration. Implied volatilities of the Monte
Carlo prices are reported in the quote's own convention (Bachelier, Black, shifted Black),
differences in basis points of the quoted volatility (for a lognormal quote one basis point
is 0.01 volatility points).

Power (three verdicts, as the other checks: :mod:`pqflow.validation.summary`). A cell is
*inconclusive* rather than passed when its test cannot see a material deviation with at least
50% power at the family level. The material deviation is stated in the quote's own unit
(:data:`MATERIAL_VOL`, :data:`MATERIAL_PREMIUM`; common practice): 10 bp of normal volatility for
a swaption quoted in normal volatility, 1 volatility point for a lognormal or shifted-lognormal
quote (equity and index options, the Heston smile, Black swaptions), each twice the stated
tolerance (a check that forgives 5 bp must at least see 10 bp); for a quote given as a premium
(year-on-year inflation caps and floors, or an option without a volatility) the larger of 10 bp
of notional and 10% of the premium. In price it is that premium share, or the smaller of the
price moves of the quote for its volatility up and down by the material amount (the harder
side: deep out of the money a price moves less down than up). The quote cell's test only sees
what exceeds its tolerance, so its effect is ``material - tolerance`` in price and its standard
error the Monte Carlo one: the cell is
inconclusive when ``(material - tolerance) / SE < z_f`` (columns ``material_effect`` and
``statistic_se``); the model-price cell has no tolerance, effect ``material``. A cell whose
payoff is non-zero on fewer than :data:`MIN_PAYING_UNITS` sampling units (an antithetic pair is
one unit) is not judged by the normal approximation at all: its mean is a sum of a handful of
terms, its standard error says nothing (one paying path gives ``SE = mean``), so it is
inconclusive with the count shown (``paying_units``; its raw score stays in
``z_normal_approximation``). Size and power of the rule are measured in
``tests/test_market_power.py`` (printed in the test output).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from pqflow.calibration.formulas import VOL_CONVENTIONS, implied_vol, option_price
from pqflow.calibration.inflation_kind import MATERIAL_PREMIUM, YOY_TOLERANCE
from pqflow.errors import MarketDataError
from pqflow.models.parts import PartInstrumentContext, part_instruments, part_instruments_key, recorded_parts
from pqflow.storage import validation_summary as vs
from pqflow.storage.calibration_file import CalibrationRecord, calibration_path, calibration_record
from pqflow.storage.names import bond_column, density_block_column, density_column, index_columns
from pqflow.storage.scenario_set import SetPass
from pqflow.validation.checks import CheckResult, cells_entry, not_applicable_entry
from pqflow.validation.martingale import restricted_blocks
from pqflow.validation.moments import spread_from_other_measure
from pqflow.validation.run_files import RunInputs, Steps, add_moments, run_steps, set_passes, time_index
from pqflow.validation.summary import family_critical_z, inconclusive_mask

__all__ = [
    "DEFAULT_VOL_TOLERANCE",
    "PREMIUM_TOLERANCE",
    "MATERIAL_VOL",
    "MATERIAL_PREMIUM",
    "MIN_PAYING_UNITS",
    "quote_cells",
    "InstrumentSpec",
    "parse_instruments",
    "market_consistency_table",
    "market_consistency_check",
]

CHECK = "market_consistency"
KIND = "calibration instruments repriced from the files against their market quotes"
DEFAULT_VOL_TOLERANCE = {"normal": 5e-4, "lognormal": 5e-3, "shifted_lognormal": 5e-3}
#: Stated tolerance of quotes given as premiums (year-on-year inflation caps and floors): the
#: larger of 5 bp of notional and 3% of the premium (the inflation kind states it).
PREMIUM_TOLERANCE = YOY_TOLERANCE
#: Material deviation of a volatility quote (decimal volatility): twice the stated tolerance.
MATERIAL_VOL = {"normal": 1e-3, "lognormal": 1e-2, "shifted_lognormal": 1e-2}
#: Material deviation of a premium quote: the larger of 10 bp of notional and 10% of the premium
#: (``MATERIAL_PREMIUM``, stated by the inflation kind, whose caps and floors are such quotes).
#: Fewer sampling units with a non-zero payoff than this: the cell is not judged (inconclusive).
MIN_PAYING_UNITS = 20
MATERIAL_TEXT = ("10 bp normal vol (normal quotes); 1 vol point (lognormal and shifted-lognormal quotes); "
                 "max(10 bp of notional, 10% of the premium) (premium quotes)")
_BP = 1e-4
_MEASURES = ("market_consistent", "real_world")


@dataclass(frozen=True, kw_only=True)
class InstrumentSpec:
    """One calibration instrument, as the check reads it.

    kind: ``"swaption"`` or ``"equity_option"``. option: ``payer``/``receiver`` or
    ``call``/``put``. forward, annuity: today's forward (swap rate or index forward) and the
    numeraire value the quote convention uses (swap annuity or ``P(0, T)``), ``None`` when the
    curve does not reach the instrument. market_vol: decimal, ``None`` when only a price is
    given. market_price: the quote's price (from ``market_vol`` when given: the volatility is
    the quote). column_names: file columns the payoff needs. untestable: why it cannot be
    repriced from the files (``None`` when it can). income_yield: ``q`` of an equity option's
    index (dividend or rental yield), ``None`` for a swaption or when not recorded.
    """

    label: str
    kind: str
    option: str
    expiry: float
    strike: float
    convention: str
    shift: float
    tenor: float | None
    index: str | None
    forward: float | None
    annuity: float | None
    market_vol: float | None
    market_price: float | None
    stated_market_price: float | None
    model_price: float | None
    column_names: tuple[str, ...]
    untestable: str | None
    note: str | None = None
    income_yield: float | None = None
    #: a part plug-in's instrument (:class:`pqflow.models.parts.PartInstrument`): its deflated
    #: payoff ``(times, columns, deflator) -> (n_paths,)``, its tolerance and material deviation
    #: in price (``None`` for the built-in instruments)
    part_value: Callable[[np.ndarray, dict[str, np.ndarray], np.ndarray], np.ndarray] | None = None
    part_tolerance: float | None = None
    part_material: float | None = None


def _num(x: Any) -> float | None:
    return None if x is None else float(x)


def _bond(k: float) -> str:
    return bond_column(k)


def _quote_price(vol: float | None, stated: float | None, strike: float, expiry: float, convention: str, forward,
                 annuity, option, shift) -> tuple[float | None, str | None]:
    """The quote's price from its volatility, and a note when a stated price disagrees."""
    if vol is None or forward is None:
        return stated, None
    price = float(option_price(convention, forward, strike, vol, expiry,
                               annuity=annuity, kind=option, shift=shift))
    note = None
    if stated is not None and abs(stated - price) > 1e-6 * max(abs(price), 1e-12):
        note = (f"stated market_price {stated:.8g} differs from the price of market_vol "
                f"{vol:g} ({price:.8g}); the volatility (the quote) is used")
    return price, note


def _record(inputs: RunInputs) -> CalibrationRecord:
    """The run's calibration record, read through storage (version checked)."""
    return calibration_record(inputs.calibration, calibration_path(inputs.run_dir))


def _income_yields(inputs: RunInputs) -> dict[str, float]:
    """Index name -> recorded income yield: the core equity's dividend yield and each further
    index's income yield."""
    return {idx.name: idx.income_yield for idx in _record(inputs).indices}


def parse_instruments(inputs: RunInputs, columns: list[str], times: np.ndarray) -> list[InstrumentSpec]:
    """Read ``calibration.json["instruments"]`` into specs, marking what the files cannot test."""
    cal = _record(inputs)
    curve = inputs.curve
    out: list[InstrumentSpec] = []
    yields = _income_yields(inputs)
    for sw in cal.swaptions:
        expiry, tenor, strike = sw.expiry, sw.tenor, sw.strike
        convention, shift, option = sw.convention, sw.shift, sw.kind
        label = f"swaption {expiry:g}y x {tenor:g}y K={strike:.4%} {option} ({convention})"
        reason = None
        n = int(round(tenor))
        if convention not in VOL_CONVENTIONS:
            reason = f"unknown vol convention {convention!r}"
        elif abs(tenor - n) > 1e-9 or n < 1:
            reason = "tenor is not a whole number of annual fixed periods"
        needed = tuple(_bond(k) for k in range(1, max(n, 1) + 1))
        missing = [c for c in needed if c not in columns]
        if reason is None and missing:
            reason = f"not testable from the files (missing {', '.join(missing)})"
        if reason is None and time_index(times, expiry) is None:
            reason = f"not testable from the files (expiry {expiry:g} is not an output time)"
        forward = annuity = None
        if expiry + n <= curve.max_maturity:
            pay = expiry + np.arange(1, n + 1, dtype=float)
            annuity = float(np.sum(curve.discount(pay)))
            forward = float((curve.discount(expiry) - curve.discount(pay[-1])) / annuity)
        market_price, note = _quote_price(sw.market_vol, sw.market_price, strike, expiry, convention, forward,
                                          annuity, option, shift)
        out.append(InstrumentSpec(
            label=label, kind="swaption", option=option, expiry=expiry, strike=strike,
            convention=convention, shift=shift, tenor=tenor, index=None, forward=forward,
            annuity=annuity, market_vol=sw.market_vol, market_price=market_price,
            stated_market_price=sw.market_price, model_price=sw.model_price,
            column_names=needed, untestable=reason, note=note,
        ))
    for opt in cal.equity_options:
        expiry, strike = opt.expiry, opt.strike
        index = opt.index if opt.index is not None else (cal.core_index_name or "")
        option, convention, column_kind = opt.kind, opt.convention, opt.column_kind
        label = f"{column_kind} {option} {index} {expiry:g}y K={strike:g}"
        col = f"{column_kind}_{index}"
        q = yields.get(index)
        reason = None
        if column_kind not in ("equity", "property"):
            reason = f"unknown column_kind {column_kind!r} (equity or property)"
        elif col not in columns:
            reason = f"not testable from the files (missing {col})"
        elif time_index(times, expiry) is None:
            reason = f"not testable from the files (expiry {expiry:g} is not an output time)"
        elif q is None:
            reason = f"no income yield recorded for index {index!r}"
        out.append(InstrumentSpec(
            label=label, kind="equity_option", option=option, expiry=expiry, strike=strike,
            convention=convention, shift=0.0, tenor=None, index=index, forward=None,
            annuity=None, market_vol=opt.market_vol,
            market_price=opt.market_price,
            stated_market_price=opt.market_price, model_price=opt.model_price,
            column_names=(col,), untestable=reason, income_yield=q,
        ))
    out += _part_instrument_specs(cal, curve, columns, times)
    return out


def _part_instrument_lists(cal: CalibrationRecord) -> list[list[dict[str, Any]]]:
    """The recorded instruments of each registered part kind of the run (inflation's caps and
    floors, a plug-in's own)."""
    return [cal.instrument_list(part_instruments_key(kind)) for _, kind, _ in recorded_parts(cal.parameters,
                                                                                         cal.plugin_parts)]


def _part_instrument_specs(cal: CalibrationRecord, curve: Any, columns: list[str],
                           times: np.ndarray) -> list[InstrumentSpec]:
    """A part kind's instruments through its kind (:func:`pqflow.models.parts.part_instruments`):
    inflation's year-on-year caps and floors, a plug-in's own."""
    out: list[InstrumentSpec] = []
    context = PartInstrumentContext(curve=curve, columns=tuple(columns), times=times, time_index=time_index)
    for _, kind, _ in recorded_parts(cal.parameters, cal.plugin_parts):
        for inst in part_instruments(kind, cal.instrument_list(part_instruments_key(kind)), context):
            reason = inst.untestable
            missing = [c for c in inst.columns if c not in columns]
            if reason is None and missing:
                reason = f"not testable from the files (missing {', '.join(missing)})"
            if reason is None and time_index(times, inst.expiry) is None:
                reason = f"not testable from the files (expiry {inst.expiry:g} is not an output time)"
            out.append(InstrumentSpec(
                label=inst.label, kind=inst.kind, option=inst.option, expiry=inst.expiry, strike=inst.strike,
                convention=inst.convention, shift=0.0, tenor=None, index=None, forward=None, annuity=None,
                market_vol=None, market_price=inst.market_price, stated_market_price=inst.market_price,
                model_price=inst.model_price, column_names=inst.columns, untestable=reason,
                part_value=inst.value, part_tolerance=inst.tolerance, part_material=inst.material,
            ))
    return out


def _with_equity_forward(spec: InstrumentSpec, inputs: RunInputs, level: float) -> InstrumentSpec:
    """Equity quotes need today's index level (from the files) for their forward."""
    q = float(spec.income_yield or 0.0)
    if spec.expiry > inputs.curve.max_maturity:
        return spec
    df = float(inputs.curve.discount(spec.expiry))
    forward = level * np.exp(-q * spec.expiry) / df
    price, note = _quote_price(spec.market_vol, spec.stated_market_price, spec.strike, spec.expiry, spec.convention,
                               forward, df, spec.option, 0.0)
    return InstrumentSpec(**{**vars(spec), "forward": forward, "annuity": df,
                             "market_price": price, "note": note})


def _payoffs(specs: list[InstrumentSpec], times: np.ndarray, cols: dict[str, np.ndarray],
             deflators: list[np.ndarray] | None = None) -> np.ndarray:
    """Deflated payoffs ``(n_paths, n_instruments)``; ``deflators``: one ``(n_paths, n_times)``
    array per instrument (default: the written ``deflator`` column for every one)."""
    out = np.empty((cols["deflator"].shape[0], len(specs)))
    for j, s in enumerate(specs):
        deflator = cols["deflator"] if deflators is None else deflators[j]
        k = time_index(times, s.expiry)
        if k is None:
            raise RuntimeError(f"instrument expiry {s.expiry:g} is not an output time (a testable instrument must be)")
        if s.part_value is not None:  # a part kind's instrument (a year-on-year cap, a plug-in's): its payoff
            out[:, j] = s.part_value(times, cols, deflator)
            continue
        if s.kind == "swaption":
            bonds = np.stack([cols[c][:, k] for c in s.column_names], axis=1)
            annuity = bonds.sum(axis=1)
            rate = (1.0 - bonds[:, -1]) / annuity
            w = 1.0 if s.option in ("payer", "call") else -1.0
            pay = annuity * np.maximum(w * (rate - s.strike), 0.0)
        else:
            price_index = cols[s.column_names[0]][:, k] * np.exp(-float(s.income_yield or 0.0) * s.expiry)
            w = 1.0 if s.option == "call" else -1.0
            pay = np.maximum(w * (price_index - s.strike), 0.0)
        out[:, j] = deflator[:, k] * pay
    return out


def _vega(s: InstrumentSpec) -> float | None:
    if s.market_vol is None or s.forward is None or s.annuity is None:
        return None
    h = max(1e-6, 1e-4 * s.market_vol)
    lo = max(s.market_vol - h, 0.0)
    up = float(option_price(s.convention, s.forward, s.strike, s.market_vol + h, s.expiry,
                            annuity=s.annuity, kind=s.option, shift=s.shift))
    dn = float(option_price(s.convention, s.forward, s.strike, lo, s.expiry,
                            annuity=s.annuity, kind=s.option, shift=s.shift))
    return (up - dn) / (s.market_vol + h - lo)


def _implied(s: InstrumentSpec, price: float) -> float | None:
    if s.forward is None or s.annuity is None:
        return None
    try:
        return float(implied_vol(s.convention, price, s.forward, s.strike, s.expiry,
                                 annuity=s.annuity, kind=s.option, shift=s.shift))
    except (MarketDataError, ValueError):
        return None


def _material_price(s: InstrumentSpec, vega: float | None, tol: dict[str, float]) -> float | None:
    """The material deviation in price (module docstring), ``None`` without a price to scale."""
    if s.part_value is not None:  # a part plug-in's instrument states its own
        return s.part_material
    if vega is not None:
        vol = max(MATERIAL_VOL.get(s.convention, MATERIAL_VOL["lognormal"]), 2.0 * tol.get(s.convention, 0.0))
        if s.market_vol is None or s.forward is None or s.annuity is None:
            raise RuntimeError("an instrument with a vega has a market volatility, a forward and an annuity")
        fwd, ann, market_vol = s.forward, s.annuity, s.market_vol
        at = float(option_price(s.convention, fwd, s.strike, market_vol, s.expiry, annuity=ann, kind=s.option,
                                shift=s.shift))
        moves = [abs(float(option_price(s.convention, fwd, s.strike, v, s.expiry, annuity=ann, kind=s.option,
                                        shift=s.shift)) - at)
                 for v in (market_vol + vol, market_vol - vol) if v > 0]
        return min(moves) if moves else abs(vega) * vol  # the harder side of a vol move
    price = s.market_price if s.market_price is not None else s.model_price
    if price is None:
        return None
    return MATERIAL_PREMIUM["relative"] * abs(price)


def quote_cells(
    mc: Any, std_error: Any, reference: Any, tolerance: Any, material: Any, paying_units: Any,
    *, min_paying_units: int = MIN_PAYING_UNITS,
) -> pd.DataFrame:
    """The verdict columns of quote cells, vectorised over equal-length arrays.

    ``z_normal_approximation``: ``sign(d) max(|d| - tolerance, 0) / SE``, ``d = mc - reference``
    (NaN without a standard error); ``judged``: at least ``min_paying_units`` units pay and the
    standard error is positive; ``z_score``: the score where judged, 0 where not (such a cell
    cannot fail); ``material_effect``: ``max(material - tolerance, 0)`` where judged, NaN where
    not (inconclusive by :func:`pqflow.validation.summary.inconclusive_mask`); ``statistic_se``:
    the standard error; ``paying_units``.
    """
    mc, se, ref, tol, mat, pay = (np.asarray(a, dtype=float) for a in
                                  (mc, std_error, reference, tolerance, material, paying_units))
    d = mc - ref
    with np.errstate(divide="ignore", invalid="ignore"):
        z = np.where(se > 0, np.sign(d) * np.maximum(np.abs(d) - tol, 0.0) / np.where(se > 0, se, 1.0), np.nan)
    judged = (pay >= min_paying_units) & (se > 0) & np.isfinite(z)
    return pd.DataFrame({
        "z_score": np.where(judged, z, 0.0),
        "z_normal_approximation": z,
        "judged": judged,
        "material_effect": np.where(judged, np.maximum(mat - tol, 0.0), np.nan),
        "statistic_se": se,
        "paying_units": pay.astype(int),
    })


def _payoff_derive(testable: list[InstrumentSpec], antithetic: bool,
                   weight_columns: list[tuple[str, ...]] | None = None, *, restricted: bool = False,
                   spread_source: bool = False):
    """Per part: each testable instrument's deflated payoff, and whether it pays.
    restricted: deflate instrument ``j`` by the product of ``weight_columns[j]`` over the cash
    account (a real-world set's density block) instead of the written deflator; spread_source:
    also ``Y^2 / w`` at each expiry with ``w`` that product (a market-consistent set's
    ``p_density`` block), for the real-world estimate's standard error."""

    def derive(t: np.ndarray, c: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
        weights = [np.prod([c[w] for w in cols], axis=0) for cols in weight_columns or []] \
            if restricted or spread_source else []
        deflators = [w / c["cash_account"] for w in weights] if restricted else None
        v = _payoffs(testable, t, c, deflators)
        paying = (v != 0.0).astype(float)
        if antithetic:  # a pair pays when either path does: its unit mean is then exactly 1
            paying = np.repeat(np.maximum(paying[0::2], paying[1::2]), 2, axis=0)
        out = {"v": v, "paying": paying}
        if spread_source:  # Y^2 / p_density(block) at each instrument's expiry
            w = np.stack([wj[:, time_index(t, s.expiry)] for wj, s in zip(weights, testable, strict=True)], axis=1)
            out["v2_over_p"] = v * v / w
        return out

    return derive


def market_consistency_table(
    inputs: RunInputs, *, vol_tolerance: dict[str, float] | None = None,
    measures: tuple[str, ...] = _MEASURES,
) -> tuple[pd.DataFrame, list[InstrumentSpec]]:
    """One row per (testable instrument, set); and every instrument read (testable or not).
    ``measures``: the sets to reprice from (a sensitivity may have the market-consistent one only)."""
    passes = set_passes(inputs, measures)
    return run_steps(passes, market_consistency_table_steps(inputs, passes, vol_tolerance=vol_tolerance,
                                                            measures=measures))


def market_consistency_table_steps(
    inputs: RunInputs, passes: Mapping[str, SetPass], *, vol_tolerance: dict[str, float] | None = None,
    measures: tuple[str, ...] = _MEASURES,
) -> Steps[tuple[pd.DataFrame, list[InstrumentSpec]]]:
    """:func:`market_consistency_table` as steps on the sets' shared passes."""
    tol = {**DEFAULT_VOL_TOLERANCE, **(vol_tolerance or {})}
    rows: list[dict[str, Any]] = []
    specs_all: list[InstrumentSpec] = []
    pending = []
    for measure in measures:
        reader = passes[measure].scenario_set
        columns = reader.column_names()
        first_times, first = reader.head(["deflator", *index_columns(columns)])
        specs = parse_instruments(inputs, columns, first_times)
        specs = [
            _with_equity_forward(s, inputs, first[s.column_names[0]])
            if s.kind == "equity_option" and s.untestable is None else s
            for s in specs
        ]
        if measure == measures[0]:
            specs_all = specs
        testable = [s for s in specs if s.untestable is None]
        if not testable:
            continue
        # Each payoff is weighted by the density of the smallest written block that carries its
        # columns (rates for a swaption, rates and the index for an equity option): the full
        # density's other drivers add spread and nothing else.
        blocks = [restricted_blocks(reader, s.column_names, inputs.rates_drivers) for s in testable]
        full = density_column(measure)
        weight_columns = [tuple(density_block_column(measure, b) for b in bs) or ((full,) if full in columns else ())
                          for bs in blocks]
        restricted = measure == "real_world" and any(blocks)
        spread_source = measure == "market_consistent" and all(weight_columns)
        needed = ["deflator", *dict.fromkeys(c for s in testable for c in s.column_names)]
        if restricted or spread_source:
            needed += [*dict.fromkeys(c for w in weight_columns for c in w), "cash_account"]
        derive = _payoff_derive(testable, reader.antithetic, weight_columns, restricted=restricted,
                                spread_source=spread_source)
        pending.append((measure, testable, blocks, spread_source, reader.antithetic,
                        add_moments(passes[measure], needed, derive)))
    yield
    cross_moments: dict[tuple[str, tuple[str, ...]], tuple[float, float]] = {}
    for measure, testable, blocks, spread_source, antithetic, result in pending:
        _, acc = result()
        mean, se = acc["v"].mean, acc["v"].std_error
        units = int(acc["paying"].count)
        paths = units * (2 if antithetic else 1)
        paying_units = np.rint(acc["paying"].mean * units).astype(int)
        if spread_source:
            cross_moments = {(s.label, bs): (float(m2), float(m1))
                             for s, bs, m2, m1 in zip(testable, blocks, acc["v2_over_p"].mean, mean, strict=True)}
        for j, s in enumerate(testable):
            mc, err = float(mean[j]), float(se[j])
            sample_err, cross_err = err, None
            if measure == "real_world" and (s.label, blocks[j]) in cross_moments:
                # The real-world estimate weights its paths by a density; where the weights are
                # large its own standard error is unreliable (a sample that misses them has a
                # low mean and a low spread together), so it is floored by the spread the
                # market-consistent set implies for it, as the reconciliation does.
                cross_err = float(spread_from_other_measure(*cross_moments[(s.label, blocks[j])], paths))
                err = max(sample_err, cross_err)
            vega = _vega(s)
            tol_vol = tol.get(s.convention, 0.0)
            tol_price = abs(vega) * tol_vol if vega is not None else 0.0
            if s.part_tolerance is not None:  # a part kind's instrument states its tolerance
                tol_price = s.part_tolerance
            mc_vol = _implied(s, mc)
            material = _material_price(s, vega, tol)
            row: dict[str, Any] = {
                "instrument": s.label, "type": s.kind, "measure": measure,
                "expiry": s.expiry, "tenor": s.tenor, "strike": s.strike,
                "convention": s.convention, "mc_price": mc, "std_error": err,
                "market_price": s.market_price, "model_price": s.model_price,
                "market_vol": s.market_vol, "mc_implied_vol": mc_vol,
                "vol_difference_bp": (mc_vol - s.market_vol) / _BP
                if mc_vol is not None and s.market_vol is not None else None,
                "vol_std_error_bp": err / abs(vega) / _BP if vega else None,
                "vol_tolerance_bp": tol_vol / _BP,
                "z_market": (mc - s.market_price) / err if s.market_price is not None and err > 0 else None,
                "z_model": (mc - s.model_price) / err if s.model_price is not None and err > 0 else None,
                "sampling_units": units, "paying_units": int(paying_units[j]),
                "weight": (" * ".join(density_block_column(measure, b) for b in blocks[j]) + " / cash_account")
                if measure == "real_world" and blocks[j] else "deflator",
                "sample_std_error": sample_err, "std_error_from_market_consistent": cross_err,
                "tolerance_price": tol_price, "material_price": material,
            }
            if s.market_price is not None and err > 0:
                d = mc - s.market_price
                row["z_score"] = float(np.sign(d) * max(abs(d) - tol_price, 0.0) / err)
            else:
                row["z_score"] = None
            row["note"] = s.note
            rows.append(row)
    return pd.DataFrame(rows), specs_all


def market_consistency_check(
    inputs: RunInputs, *, vol_tolerance: dict[str, float] | None = None,
    measures: tuple[str, ...] = _MEASURES,
) -> CheckResult:
    """The check's table and its ``summary.json`` entry (``not_applicable`` without instruments)."""
    passes = set_passes(inputs, measures)
    return run_steps(passes, market_consistency_steps(inputs, passes, vol_tolerance=vol_tolerance,
                                                      measures=measures))


def market_consistency_steps(
    inputs: RunInputs, passes: Mapping[str, SetPass], *, vol_tolerance: dict[str, float] | None = None,
    measures: tuple[str, ...] = _MEASURES,
) -> Steps[CheckResult]:
    """:func:`market_consistency_check` as steps on the sets' shared passes
    (:func:`pqflow.validation.run_files.run_steps`)."""
    cal = _record(inputs)
    if not (cal.swaptions or cal.equity_options
            or any(_part_instrument_lists(cal))):
        return CheckResult(name=CHECK, summary=not_applicable_entry(
            kind=KIND, reason="not applicable: no instruments in calibration.json"))
    table, specs = yield from market_consistency_table_steps(inputs, passes, vol_tolerance=vol_tolerance,
                                                             measures=measures)
    untestable = [{"instrument": s.label, "reason": s.untestable} for s in specs if s.untestable]
    if table.empty:
        entry = not_applicable_entry(kind=KIND, reason="no instrument is testable from the files")
        entry[vs.NOT_TESTABLE] = untestable
        return CheckResult(name=CHECK, summary=entry)
    cells = []
    for r in table.to_dict(orient="records"):
        material = r["material_price"]
        for reference, ref_price, tol_price in (
            ("market quote within tolerance", r["market_price"], r["tolerance_price"]),
            ("model price", r["model_price"], 0.0),
        ):
            if ref_price is None or pd.isna(ref_price):
                continue
            cells.append({"instrument": r["instrument"], "measure": r["measure"], "reference": reference,
                          "time": float(r["expiry"]), "mc": r["mc_price"], "se": r["std_error"],
                          "ref": float(ref_price), "tol": float(tol_price),
                          "material": np.nan if material is None else float(material),
                          "paying": r["paying_units"]})
    labels = ["instrument", "measure", "reference", "time"]
    if cells:
        raw = pd.DataFrame(cells)
        cell_table = pd.concat([raw[labels], quote_cells(raw["mc"], raw["se"], raw["ref"], raw["tol"],
                                                         raw["material"], raw["paying"])], axis=1)
    else:
        cell_table = pd.DataFrame(columns=[*labels, "z_score", "material_effect", "statistic_se", "paying_units"])
    crit = family_critical_z(len(cell_table))
    tol = {**DEFAULT_VOL_TOLERANCE, **(vol_tolerance or {})}
    rule = (
        "each quote: |MC - market| <= vega * tolerance + z * SE, tolerance "
        f"{tol['normal'] / _BP:g} bp normal vol, {tol['lognormal'] * 100:g} vol points lognormal "
        f"and shifted lognormal; each recorded model price: |MC - model| <= z * SE; z = {crit:.2f} "
        "(Bonferroni, family level 99%); both sets, the real-world one weighted by the smallest density block "
        "carrying the payoff, its SE floored by the spread the market-consistent set implies; a cell is "
        f"inconclusive when fewer than {MIN_PAYING_UNITS} sampling units pay or when its test would detect "
        "the material deviation less than half the time at that level"
    )
    entry = cells_entry(cell_table, ["instrument", "measure", "reference", "z_score"], kind=KIND, rule=rule)
    weak = inconclusive_mask(cell_table, crit) if len(cell_table) else pd.Series(dtype=bool)
    entry["material_deviation"] = MATERIAL_TEXT
    if any(cal.instrument_list(part_instruments_key(kind)) for _, kind, _ in recorded_parts({}, cal.plugin_parts)):
        entry["material_deviation"] += ("; part plug-in instruments: the tolerance and material deviation their "
                                        "kind records")
    entry["power_rule"] = (
        "a cell is inconclusive when its payoff is non-zero on fewer than "
        f"{MIN_PAYING_UNITS} sampling units (no normal approximation), or when its test would detect the "
        "material deviation (beyond the quote's tolerance) less than half the time at the family level "
        "(material effect / standard error below the family critical z)"
    )
    thin = cell_table[~cell_table["judged"].astype(bool)] if len(cell_table) else cell_table
    entry["too_few_paying_units"] = [
        {"instrument": r["instrument"], "measure": r["measure"], "reference": r["reference"],
         "paying_units": int(r["paying_units"])} for r in thin.to_dict(orient="records")]
    entry["inconclusive"] = [
        {"instrument": r["instrument"], "measure": r["measure"], "reference": r["reference"],
         "expiry": r["time"], "paying_units": int(r["paying_units"]),
         "reason": (f"only {int(r['paying_units'])} sampling units pay (fewer than {MIN_PAYING_UNITS})"
                    if not r["judged"] else "cannot detect the material deviation with 50% power")}
        for r in cell_table[weak].to_dict(orient="records")] if len(cell_table) else []
    entry["instruments"] = len(specs)
    entry["instruments_tested"] = len(specs) - len(untestable)
    entry[vs.NOT_TESTABLE] = untestable
    entry["vol_tolerance"] = tol
    entry["rows"] = [
        {k: r[k] for k in ("instrument", "measure", "mc_price", "std_error", "market_price",
                           "model_price", "vol_difference_bp", "z_score", "z_model", "paying_units",
                           "material_price")}
        for r in table.to_dict(orient="records")
    ]
    entry["warnings"] = [f"{u['instrument']}: {u['reason']}" for u in untestable] + [
        f"{r['instrument']}: {r['note']}" for r in table.to_dict(orient="records")
        if r.get("note") and r["measure"] == measures[0]
    ]
    return CheckResult(name=CHECK, summary=entry, tables={"market_consistency": table})
