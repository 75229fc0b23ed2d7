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

from collections.abc import Callable, Sequence
from typing import Any

import numpy as np
import pandas as pd

from pqflow.measure.blocks import column_drivers, smallest_block
from pqflow.models.equity import EquityParams, equity_option_price
from pqflow.models.g2pp import G2PlusPlusParams
from pqflow.models.g2pp_equity import G2EquityParams
from pqflow.models.g2pp_equity import equity_option_price as g2_equity_option_price
from pqflow.models.hull_white import HullWhiteParams
from pqflow.models.jarrow_yildirim import CPI_COLUMN
from pqflow.models.schedule import PiecewiseConstant
from pqflow.validation.checks import CheckResult, cells_entry, not_applicable_entry
from pqflow.validation.control_variates import controlled_mean
from pqflow.validation.market_consistency import MIN_PAYING_UNITS
from pqflow.validation.martingale import bond_maturity_of, index_columns
from pqflow.validation.moments import sampling_units
from pqflow.validation.reader import ScenarioSetReader
from pqflow.validation.run_files import RunInputs, stream_moments, time_index
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
_CPI = CPI_COLUMN


def guarantee_closed_form(inputs: RunInputs, *, maturity: float, guarantee: float, level: float) -> float:
    """Closed-form value of ``max(G - S_T, 0)`` on the total-return index (``q = 0``), from
    the rates (Hull-White or G2++) and equity parameters recorded in ``calibration.json`` (the
    equity volatility a number or a piecewise-constant schedule): Black on the forward with the
    T-forward variance of :func:`pqflow.models.equity.equity_total_variance` or, under G2++,
    :func:`pqflow.models.g2pp_equity.equity_total_variance`."""
    par = inputs.parameters
    eq = par["equity"]
    sv = (par.get("stochastic_volatility") or {}).get(eq["name"])
    if sv is not None:  # a Heston core equity: the semi-closed form (exact, or H1-HW when correlated)
        from pqflow.models.heston import heston_indices_from_json as heston_from_json
        from pqflow.models.heston import heston_option_price

        spec = heston_from_json({eq["name"]: sv})[eq["name"]]
        rates_sv: HullWhiteParams | G2PlusPlusParams
        corr: float | tuple[float, ...]
        if par.get("rates_model") == "g2pp":
            g = par["g2pp"]
            rates_sv = G2PlusPlusParams(a=float(g["a"]), sigma=float(g["sigma"]), b=float(g["b"]), eta=float(g["eta"]),
                                        rho=float(g["rho"]))
            corr = tuple(float(c) for c in eq.get("correlation_with_rate_factors", (0.0, 0.0)))
        else:
            hw = par["hull_white"]
            rates_sv = HullWhiteParams(mean_reversion=float(hw["mean_reversion"]), volatility=float(hw["volatility"]))
            corr = float(eq["correlation_with_rates"])
        return float(heston_option_price(spec.params, level=level, dividend_yield=0.0,
                                         discount=float(inputs.curve.discount(maturity)), expiry=maturity,
                                         strike=guarantee, kind="put", rates=rates_sv, correlation=corr))
    vol = eq["volatility"]
    volatility = float(vol) if isinstance(vol, (int, float)) else PiecewiseConstant.from_json(vol)
    if "g2pp" in par:
        g = par["g2pp"]
        rx, ry = (float(v) for v in eq["correlation_with_rate_factors"])
        g2 = G2PlusPlusParams(**{k: float(g[k]) for k in ("a", "sigma", "b", "eta", "rho")})
        g2_equity = G2EquityParams(name=str(eq["name"]), level=level, dividend_yield=0.0, volatility=volatility,
                                   correlation_x=rx, correlation_y=ry)
        return g2_equity_option_price(inputs.curve, g2, g2_equity, expiry=maturity, strike=guarantee, kind="put")
    hw = par["hull_white"]
    rates = HullWhiteParams(mean_reversion=float(hw["mean_reversion"]), volatility=float(hw["volatility"]))
    equity = EquityParams(
        name=str(eq["name"]), level=level, dividend_yield=0.0, volatility=volatility,
        correlation=float(eq["correlation_with_rates"]),
    )
    return equity_option_price(inputs.curve, rates, equity, expiry=maturity, strike=guarantee, kind="put")


def _equity_column(inputs: RunInputs, names: list[str]) -> str | None:
    col = f"equity_{inputs.parameters.get('equity', {}).get('name')}"
    return col if col in names else None


def density_for(reader: ScenarioSetReader, columns: Sequence[str], rates_drivers: Sequence[str]) -> tuple[str,
                                                                                                          str | None]:
    """The density column to weight quantities built from ``columns`` with: the smallest
    restricted block the set carries that contains every driver they depend on
    (:mod:`pqflow.measure.blocks`), or the full density. Returns ``(column, block or None)``."""
    full = "q_density" if reader.measure == "real_world" else "p_density"
    needed = frozenset().union(*(column_drivers(c, rates_drivers) for c in columns))
    block = smallest_block(needed, reader.density_blocks())
    return (full if block is None else f"{full}_{block}"), block


def guarantee_values(
    inputs: RunInputs, *, maturity: float = 10.0, guarantee: float | None = None
) -> dict[str, Any] | None:
    """Values of the guarantee three ways, or ``None`` when the files cannot value it.

    maturity: years; when not an output time, the longest output time below it is used.
    guarantee: the guaranteed amount in index units (default: the index level at time 0).

    The real-world value uses the density of the smallest block that carries the rates and the
    index (the put depends on nothing else), and both sets' values use control variates from
    known martingales (:mod:`pqflow.validation.control_variates`): the deflator
    (``E[D_T] = P(0, T)``), the deflated index (``E[D_T S_T] = S_0``) and, in the real-world
    set, the density itself (``E[w_T] = 1``). The plain estimates are kept beside them.
    """
    out: dict[str, Any] = {}
    rates = inputs.rates_drivers
    for measure in ("market_consistent", "real_world"):
        reader = inputs.reader(measure)
        col = _equity_column(inputs, reader.column_names())
        if col is None:
            return None
        times0, first = next(reader.iter_arrays([col]))
        level = float(first[col][0, 0])
        k = time_index(times0, maturity)
        if k is None:
            below = np.flatnonzero(times0 <= maturity)
            if below.size < 2:
                return None
            k = int(below[-1])
        t = float(times0[k])
        g = level if guarantee is None else float(guarantee)
        density, block = density_for(reader, [col, "cash_account"], rates)
        units: list[np.ndarray] = []
        for _, c in reader.iter_arrays(["cash_account", col, density]):
            w = c[density][:, k]
            deflator = (w if measure == "real_world" else 1.0) / c["cash_account"][:, k]
            s_t = c[col][:, k]
            put = deflator * np.maximum(g - s_t, 0.0)
            cols = [put, put**2 / w, deflator, deflator * s_t]
            if measure == "real_world":
                cols.append(w)
            units.append(sampling_units(np.stack(cols, axis=1), reader.antithetic))
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
            second = float(np.mean(data[:, 1]))
            out["real_world_sd_from_market_consistent"] = float(
                np.sqrt(max(second - out["market_consistent_plain"][0] ** 2, 0.0)))
        out.update(maturity=t, guarantee=g, level=level)
    value, sample_se = out["real_world"]
    plain_value, plain_se = out["real_world_plain"]
    cross_se = out["real_world_sd_from_market_consistent"] / np.sqrt(out["real_world_paths"])
    # A sample that misses the large weights understates its spread: inflate both standard
    # errors by the factor the market-consistent set's second moment implies for the plain one.
    inflate = max(1.0, cross_se / plain_se) if plain_se > 0 else 1.0
    out["real_world_sample_se"] = sample_se
    out["real_world"] = (value, float(sample_se * inflate))
    out["real_world_plain"] = (plain_value, float(plain_se * inflate))
    try:
        out["closed_form"] = guarantee_closed_form(
            inputs, maturity=out["maturity"], guarantee=out["guarantee"], level=out["level"])
    except (KeyError, TypeError, ValueError):  # a model without a rates + equity record
        out["closed_form"] = None
    return out


def expected_returns_table(inputs: RunInputs, horizons: tuple[float, ...] = RETURN_HORIZONS) -> pd.DataFrame:
    """Annualised expected returns by asset and horizon, both measures side by side."""
    per: dict[str, dict[tuple[str, float], tuple[float, float]]] = {}
    for measure in ("market_consistent", "real_world"):
        reader = inputs.reader(measure)
        names = reader.column_names()
        bonds = [c for c in names if bond_maturity_of(c) is not None]
        relative = [*index_columns(names), *([_CPI] if _CPI in names else [])]  # A_h / A_0 per path
        assets = ["cash_account", *relative, *bonds]
        times, acc = stream_moments(
            reader, assets,
            _relative_to_start(relative, assets),
        )
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
    values = guarantee_values(inputs, maturity=maturity, guarantee=guarantee)
    returns = expected_returns_table(inputs)
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
    entry["guarantee"] = {
        "product": "unit-linked maturity guarantee: put on the equity total-return index",
        "maturity": values["maturity"], "guaranteed_amount": values["guarantee"],
        "index_level": values["level"],
    }
    entry["values"] = {
        "closed_form": cf,
        "market_consistent": q, "market_consistent_se": q_se,
        "real_world": p, "real_world_se": p_se,
        "real_world_sample_se": values["real_world_sample_se"],
        "market_consistent_without_controls": values["market_consistent_plain"][0],
        "market_consistent_se_without_controls": values["market_consistent_plain"][1],
        "real_world_without_controls": values["real_world_plain"][0],
        "real_world_se_without_controls": values["real_world_plain"][1],
        "real_world_density": values["real_world_density"],
        "control_variates": {m: values[f"{m}_controls"] for m in ("market_consistent", "real_world")},
    }
    values_table = pd.DataFrame([
        *([{"method": f"closed form ({'G2++' if 'g2pp' in inputs.parameters else 'Hull-White'} + Black)", "value": cf,
            "std_error": 0.0}] if cf is not None else []),
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
