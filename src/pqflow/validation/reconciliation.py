"""Reconciliation of the two sets: one guarantee valued three ways, and expected returns.

The guarantee is a unit-linked maturity guarantee: at maturity ``T`` the policy pays at least
the guaranteed amount ``G`` on a fund invested in the equity total-return index, so the
insurer is short the put ``max(G - S_T, 0)``. It is valued

1. in closed form: Black's formula under Hull-White rates on the total-return index (dividend
   yield 0; Brigo and Mercurio 2006; :func:`pqflow.models.equity.equity_option_price`), with
   the parameters recorded in ``calibration.json`` (the only column that uses the model);
2. from the market-consistent set: ``E_Q[max(G - S_T, 0) / B_T]``;
3. from the real-world set with its deflators: ``E_P[D_T max(G - S_T, 0)]``,
   ``D_T = q_density / B_T``.

The real-world estimate is an importance-sampling estimate whose large weights sit where the
put pays: a sample that misses them understates both its mean and its spread, so its sample
standard error is too small just when the estimate is off. Its standard error is therefore the
larger of the sample value (antithetic pairs averaged) and the value implied by the second
moment estimated from the market-consistent set, ``E_P[(D_T X)^2] = E_Q[Z_T (X/B_T)^2]`` with
``Z_T = dQ/dP = 1 / p_density`` (no credit taken for antithetic pairing: conservative).

The three agree in expectation (Girsanov's theorem: ``E_P[D_T X] = E_Q[X / B_T]``). Cells: each
Monte Carlo value against the closed form in its own standard errors, and the two sets
against each other (independent sets: ``se = sqrt(se_Q^2 + se_P^2)``); the family-wise rule
of :mod:`pqflow.validation.checks` gives the verdict.

Power (three verdicts, :mod:`pqflow.validation.summary`): the material deviation is 2% of the
guarantee's closed-form value (:data:`MATERIAL_SHARE`, common practice; the market-consistent
value when there is no closed form), on the same scale as the difference. A cell is
inconclusive when ``0.02 V / se < z_f`` (it would see a 2% error less than half the time at the
family level), or when the put pays on fewer than ``MIN_PAYING_UNITS`` sampling units of a set
it compares (a guarantee far out of the money: no normal approximation; the counts are in
``paying_units``).

Expected returns (reported): for each asset bought at time 0 and valued at horizon ``h``,
``(1/h) ln(E[A_h] / A_0)`` under each measure with its standard error (delta method): the cash
account (``A_0 = 1``), each total-return index ``equity_*`` and ``property_*`` (``A_0 = S_0``,
path by path from the files), and for each bond column ``zcb_{m}y`` the zero bond maturing at
``h + m`` (``A_0 = P(0, h + m)`` from today's curve); beside them, when the files carry it, the
consumer price index ``cpi`` (``A_0 = I_0``: expected inflation, not a traded asset). Under Q every
asset earns, in expectation, what cash does only after deflating; the undeflated expected
returns differ by measure through the prices of risk, which is what the table shows.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd

from pqflow.errors import ConfigError
from pqflow.measure.blocks import column_drivers, smallest_block
from pqflow.models.equity import equity_option_price
from pqflow.models.g2pp import G2PlusPlusParams
from pqflow.models.hull_white import HullWhiteParams
from pqflow.models.schedule import PiecewiseConstant
from pqflow.models.total_return import TotalReturnIndex
from pqflow.storage import validation_summary as vs
from pqflow.storage.calibration_file import CalibrationRecord, calibration_path, calibration_record
from pqflow.storage.names import CPI, bond_maturity_of, density_column, equity_column, index_columns
from pqflow.storage.scenario_set import PartFeed, ScenarioSet, SetPass
from pqflow.validation.checks import CheckResult, cells_entry, not_applicable_entry
from pqflow.validation.control_variates import controlled_mean
from pqflow.validation.market_consistency import MIN_PAYING_UNITS
from pqflow.validation.moments import sampling_units, spread_from_other_measure
from pqflow.validation.run_files import RunInputs, Steps, add_moments, all_steps, run_steps, set_passes, time_index
from pqflow.validation.summary import family_critical_z

__all__ = [
    "guarantee_closed_form",
    "guarantee_values",
    "expected_returns_table",
    "reconciliation_check",
    "RETURN_HORIZONS",
]

CHECK = "reconciliation"
KIND = "maturity guarantee valued in closed form, from the Q set and from the P set with deflators"
RETURN_HORIZONS = (1.0, 5.0, 10.0, 20.0)
#: Material deviation of a guarantee value: 2% of its closed-form value (common practice).
MATERIAL_SHARE = 0.02
_CPI = CPI


def guarantee_closed_form(
    inputs: RunInputs, *, maturity: float, guarantee: float, level: float, index: str | None = None
) -> float:
    """Closed-form value of ``max(G - S_T, 0)`` on the total-return index (``q = 0``), from
    the rates (Hull-White or G2++) and equity parameters recorded in ``calibration.json`` (the
    equity volatility a number or a piecewise-constant schedule): Black on the forward with the
    T-forward variance of :func:`pqflow.models.equity.equity_total_variance` (Hull-White or
    G2++ rates). ``index``: the index's name (default: the core index)."""
    cal = _record(inputs)
    eq = cal.index(index)
    g, hw = cal.g2pp, cal.hull_white
    sv = cal.stochastic_volatility.get(eq.name)
    if sv is not None:  # a Heston core equity: the semi-closed form (exact, or H1-HW when correlated)
        from pqflow.calibration.heston_parts import heston_from_record
        from pqflow.models.heston import heston_option_price

        spec = heston_from_record(sv)
        rates_sv: HullWhiteParams | G2PlusPlusParams
        corr: float | tuple[float, ...]
        if cal.rates_model == "g2pp":
            if g is None:
                raise KeyError("g2pp")
            rates_sv = G2PlusPlusParams(a=g.a, sigma=g.sigma, b=g.b, eta=g.eta, rho=g.rho)
            corr = eq.correlation_with_rate_factors or (0.0, 0.0)
        else:
            if hw is None:
                raise KeyError("hull_white")
            rates_sv = HullWhiteParams(mean_reversion=hw.mean_reversion, volatility=hw.volatility)
            if eq.correlation_with_rates is None:
                raise KeyError("correlation_with_rates")
            corr = eq.correlation_with_rates
        return float(heston_option_price(spec.params, level=level, dividend_yield=0.0,
                                         discount=float(inputs.curve.discount(maturity)), expiry=maturity,
                                         strike=guarantee, kind="put", rates=rates_sv, correlation=corr))
    vol = eq.volatility
    volatility = float(vol) if isinstance(vol, (int, float)) else PiecewiseConstant.from_json(vol)
    if g is not None:
        if eq.correlation_with_rate_factors is None:
            raise KeyError("correlation_with_rate_factors")
        rx, ry = eq.correlation_with_rate_factors
        g2 = G2PlusPlusParams(a=g.a, sigma=g.sigma, b=g.b, eta=g.eta, rho=g.rho)
        g2_equity = TotalReturnIndex(name=eq.name, kind=eq.kind, level=level, income_yield=0.0,
                                     volatility=volatility, correlation=(rx, ry))
        return equity_option_price(inputs.curve, g2, g2_equity, expiry=maturity, strike=guarantee, kind="put")
    if hw is None:
        raise KeyError("hull_white")
    rates = HullWhiteParams(mean_reversion=hw.mean_reversion, volatility=hw.volatility)
    if eq.correlation_with_rates is None:
        raise KeyError("correlation_with_rates")
    equity = TotalReturnIndex(name=eq.name, kind=eq.kind, level=level, income_yield=0.0, volatility=volatility,
                              correlation=eq.correlation_with_rates)
    return equity_option_price(inputs.curve, rates, equity, expiry=maturity, strike=guarantee, kind="put")


def _record(inputs: RunInputs) -> CalibrationRecord:
    return calibration_record(inputs.calibration, calibration_path(inputs.run_dir))


def _index_column(inputs: RunInputs, names: list[str], index: str | None = None) -> str | None:
    """The column of the named index (default: the core index) when the files carry it."""
    record = _record(inputs)
    if index is None:  # the core index: its name is all the column needs
        name = record.core_index_name
        col = None if name is None else equity_column(name)
    else:
        col = record.index(index).column
    return col if col in names else None


def density_for(reader: ScenarioSet, columns: Sequence[str], rates_drivers: Sequence[str]) -> tuple[str, str | None]:
    """The density column to weight quantities built from ``columns`` with: the smallest
    restricted block the set carries that contains every driver they depend on
    (:mod:`pqflow.measure.blocks`), or the full density. Returns ``(column, block or None)``."""
    full = density_column(reader.measure)
    needed = frozenset().union(*(column_drivers(c, rates_drivers) for c in columns))
    block = smallest_block(needed, reader.density_blocks())
    return (full if block is None else f"{full}_{block}"), block


def guarantee_values(
    inputs: RunInputs, *, maturity: float = 10.0, guarantee: float | None = None, index: str | None = None
) -> dict[str, Any] | None:
    """Values of the guarantee three ways, or ``None`` when the files cannot value it.

    maturity: years; when not an output time, the longest output time below it is used.
    guarantee: the guaranteed amount in index units (default: the index level at time 0).
    index: the total-return index the put is written on, by name (default: the core index).

    The real-world value uses the density of the smallest block that carries the rates and the
    index (the put depends on nothing else), and both sets' values use control variates from
    known martingales (:mod:`pqflow.validation.control_variates`): the deflator
    (``E[D_T] = P(0, T)``), the deflated index (``E[D_T S_T] = S_0``) and, in the real-world
    set, the density itself (``E[w_T] = 1``). The plain estimates are kept beside them.
    """
    passes = set_passes(inputs)
    return run_steps(passes, guarantee_values_steps(inputs, passes, maturity=maturity, guarantee=guarantee,
                                                           index=index))


def _put_units(
    measure: str, col: str, density: str, k: int, g: float, antithetic: bool, units: list[np.ndarray]
) -> PartFeed:
    """Per part: the sampling units of the deflated put, its second-moment term and the controls."""

    def feed(_: np.ndarray, c: dict[str, np.ndarray]) -> None:
        w = c[density][:, k]
        deflator = (w if measure == "real_world" else 1.0) / c["cash_account"][:, k]
        s_t = c[col][:, k]
        put = deflator * np.maximum(g - s_t, 0.0)
        cols = [put, put**2 / w, deflator, deflator * s_t]
        if measure == "real_world":
            cols.append(w)
        units.append(sampling_units(np.stack(cols, axis=1), antithetic))

    return feed


def guarantee_values_steps(
    inputs: RunInputs, passes: Mapping[str, SetPass], *, maturity: float = 10.0, guarantee: float | None = None,
    index: str | None = None,
) -> Steps[dict[str, Any] | None]:
    """:func:`guarantee_values` as steps on the sets' shared passes."""
    out: dict[str, Any] = {}
    rates = inputs.rates_drivers
    setup = []
    for measure in ("market_consistent", "real_world"):
        reader = passes[measure].scenario_set
        col = _index_column(inputs, reader.column_names(), index)
        if col is None:
            return None
        times0, first = reader.head([col])
        level = first[col]
        k = time_index(times0, maturity)
        if k is None:
            below = np.flatnonzero(times0 <= maturity)
            if below.size < 2:
                return None
            k = int(below[-1])
        setup.append((measure, reader, col, level, k, float(times0[k])))
    registered = []
    for measure, reader, col, level, k, t in setup:
        g = level if guarantee is None else float(guarantee)
        density, block = density_for(reader, [col, "cash_account"], rates)
        units: list[np.ndarray] = []
        passes[measure].add(["cash_account", col, density], _put_units(measure, col, density, k, g, reader.antithetic,
                                                                      units))
        registered.append((measure, reader, level, t, g, density, block, units))
    yield
    for measure, reader, level, t, g, density, block, units in registered:
        data = np.concatenate(units)
        known = [float(inputs.curve.discount(t)), level] + ([1.0] if measure == "real_world" else [])
        est = controlled_mean(data[:, :1], data[:, 2:], np.array(known))
        paths = data.shape[0] * (2 if reader.antithetic else 1)
        out[measure] = (float(est.value[0]), float(est.std_error[0]))
        out[f"{measure}_plain"] = (float(est.plain_value[0]), float(est.plain_std_error[0]))
        out[f"{measure}_density"] = density
        out[f"{measure}_block"] = block
        out[f"{measure}_controls"] = est.n_controls
        out[f"{measure}_paths"] = paths
        out[f"{measure}_paying_units"] = int(np.count_nonzero(data[:, 0]))  # units where the put pays
        if measure == "market_consistent":
            # E_P[(D_T X)^2] = E_Q[Z_T (X / B_T)^2] with Z_T = 1 / p_density (of the same block):
            # the real-world estimator's spread, estimated where its payoff is well sampled.
            out["real_world_moments_from_market_consistent"] = (
                float(np.mean(data[:, 1])), out["market_consistent_plain"][0])
        out.update(maturity=t, guarantee=g, level=level)
    value, sample_se = out["real_world"]
    plain_value, plain_se = out["real_world_plain"]
    second, first = out["real_world_moments_from_market_consistent"]
    cross_se = float(spread_from_other_measure(second, first, out["real_world_paths"]))
    # A sample that misses the large weights understates its spread: inflate both standard
    # errors by the factor the market-consistent set's second moment implies for the plain one.
    inflate = max(1.0, cross_se / plain_se) if plain_se > 0 else 1.0
    out["real_world_sample_se"] = sample_se
    out["real_world"] = (value, float(sample_se * inflate))
    out["real_world_plain"] = (plain_value, float(plain_se * inflate))
    try:
        out["closed_form"] = guarantee_closed_form(
            inputs, maturity=out["maturity"], guarantee=out["guarantee"], level=out["level"], index=index)
    except (KeyError, TypeError, ValueError, ConfigError):  # a model without a rates + equity record
        out["closed_form"] = None
    return out


def expected_returns_table(inputs: RunInputs, horizons: tuple[float, ...] = RETURN_HORIZONS) -> pd.DataFrame:
    """Annualised expected returns by asset and horizon, both measures side by side."""
    passes = set_passes(inputs)
    return run_steps(passes, expected_returns_steps(inputs, passes, horizons))


def _relative_values(assets: list[str], relative: list[str]):
    return lambda t, c: {a: c[a] / (c[a][:, :1] if a in relative else 1.0) for a in assets}


def expected_returns_steps(
    inputs: RunInputs, passes: Mapping[str, SetPass], horizons: tuple[float, ...] = RETURN_HORIZONS
) -> Steps[pd.DataFrame]:
    """:func:`expected_returns_table` as steps on the sets' shared passes."""
    per: dict[str, dict[tuple[str, float], tuple[float, float]]] = {}
    registered = []
    for measure in ("market_consistent", "real_world"):
        reader = passes[measure].scenario_set
        names = reader.column_names()
        bonds = [c for c in names if bond_maturity_of(c) is not None]
        relative = [*index_columns(names), *([_CPI] if _CPI in names else [])]  # A_h / A_0 per path
        assets = ["cash_account", *relative, *bonds]
        registered.append((measure, bonds, assets,
                           add_moments(passes[measure], assets, _relative_values(assets, relative))))
    yield
    for measure, bonds, assets, moments in registered:
        times, acc = moments()
        values: dict[tuple[str, float], tuple[float, float]] = {}
        for h in horizons:
            k = time_index(times, h)
            if k is None or k == 0:
                continue
            for a in assets:
                if a in bonds:
                    m = bond_maturity_of(a)
                    if m is None:
                        raise RuntimeError(f"{a!r} was listed as a bond column but names no maturity")
                    if h + m > inputs.curve.max_maturity:
                        continue
                    a0 = float(inputs.curve.discount(h + m))
                else:
                    a0 = 1.0
                mean, se = float(acc[a].mean[k]), float(acc[a].std_error[k])
                values[(a, h)] = (np.log(mean / a0) / h, se / mean / h)
        per[measure] = values
    rows = []
    for key in per["market_consistent"]:
        if key not in per["real_world"]:
            continue
        (q, q_se), (p, p_se) = per["market_consistent"][key], per["real_world"][key]
        asset, h = key
        m = bond_maturity_of(asset)
        what = (
            "cash account" if asset == "cash_account"
            else f"zero bond maturing at {h + m:g}y" if m is not None
            else "consumer price index (cpi): expected inflation, not a traded asset" if asset == _CPI
            else f"{asset} total return"
        )
        rows.append({
            "asset": asset, "description": what, "horizon": h,
            "market_consistent": q, "market_consistent_se": q_se,
            "real_world": p, "real_world_se": p_se, "difference": p - q,
        })
    return pd.DataFrame(rows)


def _relative_to_start(
    relative: list[str], assets: list[str]
) -> Callable[[np.ndarray, dict[str, np.ndarray]], dict[str, np.ndarray]]:
    """Each asset per path, the ``relative`` ones divided by their own start value (A_h / A_0)."""
    return lambda t, c: {a: c[a] / (c[a][:, :1] if a in relative else 1.0) for a in assets}


def reconciliation_check(
    inputs: RunInputs, *, maturity: float = 10.0, guarantee: float | None = None
) -> CheckResult:
    """The guarantee three ways (cells), and the expected-returns table."""
    passes = set_passes(inputs)
    return run_steps(passes, reconciliation_steps(inputs, passes, maturity=maturity, guarantee=guarantee))


def reconciliation_steps(
    inputs: RunInputs, passes: Mapping[str, SetPass], *, maturity: float = 10.0, guarantee: float | None = None
) -> Steps[CheckResult]:
    """:func:`reconciliation_check` as steps on the sets' shared passes
    (:func:`pqflow.validation.run_files.run_steps`)."""
    values, returns = yield from all_steps([
        guarantee_values_steps(inputs, passes, maturity=maturity, guarantee=guarantee),
        expected_returns_steps(inputs, passes),
    ])
    if values is None:
        entry = not_applicable_entry(kind=KIND, reason="no equity index or maturity in the files")
        return CheckResult(name=CHECK, summary=entry, tables={"expected_returns": returns})
    cf = values["closed_form"]
    (q, q_se), (p, p_se) = values["market_consistent"], values["real_world"]
    rows = []
    if cf is not None:
        rows += [
            {"comparison": "market-consistent set - closed form", "difference": q - cf,
             "std_error": q_se, "z_score": (q - cf) / q_se if q_se > 0 else 0.0},
            {"comparison": "real-world set with deflators - closed form", "difference": p - cf,
             "std_error": p_se, "z_score": (p - cf) / p_se if p_se > 0 else 0.0},
        ]
    both = float(np.hypot(p_se, q_se))
    rows.append({"comparison": "real-world set - market-consistent set", "difference": p - q,
                 "std_error": both, "z_score": (p - q) / both if both > 0 else 0.0})
    cells = pd.DataFrame(rows)
    # Power (module docstring): the material deviation is MATERIAL_SHARE of the guarantee's value;
    # a cell whose set(s) have the put paying on fewer than MIN_PAYING_UNITS units is not judged.
    scale = abs(cf) if cf is not None else abs(q)
    paying = {m: values[f"{m}_paying_units"] for m in ("market_consistent", "real_world")}
    both_sets = min(paying.values())
    cells["paying_units"] = ([paying["market_consistent"], paying["real_world"]] if cf is not None
                             else []) + [both_sets]
    judged = (cells["paying_units"] >= MIN_PAYING_UNITS) & (cells["std_error"] > 0)
    cells["z_normal_approximation"] = cells["z_score"]
    cells["z_score"] = np.where(judged, cells["z_score"], 0.0)
    cells["material_effect"] = np.where(judged, MATERIAL_SHARE * scale, np.nan)
    cells["statistic_se"] = cells["std_error"]
    cells["time"] = float(values["maturity"])
    crit = family_critical_z(len(cells))
    rule = (f"each difference within |z| <= {crit:.2f} standard errors (Bonferroni, family level 99%); a cell is "
            f"inconclusive when it would detect a deviation of {MATERIAL_SHARE:.0%} of the closed-form value less "
            f"than half the time at that level, or when the put pays on fewer than {MIN_PAYING_UNITS} sampling units")
    entry = cells_entry(cells, ["comparison", "difference", "z_score"], kind=KIND, rule=rule,
                        deviation=MATERIAL_SHARE)
    entry["paying_units"] = paying
    if cf is None:
        entry["warnings"].append("no closed form: calibration.json has no rates (Hull-White or G2++) and equity "
                                 "parameters")
    entry[vs.GUARANTEE] = {
        "product": "unit-linked maturity guarantee: put on the equity total-return index",
        "maturity": values["maturity"], "guaranteed_amount": values["guarantee"],
        "index_level": values["level"],
    }
    entry[vs.VALUES] = {
        "closed_form": cf,
        "market_consistent": q, "market_consistent_se": q_se,
        "real_world": p, "real_world_se": p_se,
        vs.REAL_WORLD_SAMPLE_SE: values["real_world_sample_se"],
        "market_consistent_without_controls": values["market_consistent_plain"][0],
        "market_consistent_se_without_controls": values["market_consistent_plain"][1],
        "real_world_without_controls": values["real_world_plain"][0],
        "real_world_se_without_controls": values["real_world_plain"][1],
        "real_world_density": values["real_world_density"],
        "control_variates": {m: values[f"{m}_controls"] for m in ("market_consistent", "real_world")},
    }
    values_table = pd.DataFrame([
        *([{"method": f"closed form ({'G2++' if _record(inputs).g2pp is not None else 'Hull-White'} + Black)",
            "value": cf, "std_error": 0.0}] if cf is not None else []),
        {"method": "market-consistent set (control variates)", "value": q, "std_error": q_se},
        {"method": f"real-world set with deflators ({values['real_world_density']}, control variates)",
         "value": p, "std_error": p_se},
        {"method": "market-consistent set (plain mean)", "value": values["market_consistent_plain"][0],
         "std_error": values["market_consistent_plain"][1]},
        {"method": "real-world set with deflators (q_density, plain mean)" if values["real_world_block"] is None
         else f"real-world set with deflators ({values['real_world_density']}, plain mean)",
         "value": values["real_world_plain"][0], "std_error": values["real_world_plain"][1]},
    ])
    return CheckResult(name=CHECK, summary=entry, tables={
        "reconciliation": pd.concat(
            [values_table.assign(kind="value"), cells.assign(kind="difference")], ignore_index=True
        ),
        "expected_returns": returns,
    })
