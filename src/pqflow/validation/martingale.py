"""Martingale ("1 = 1") tests on the written files.

For every asset ``A`` and output time ``t > 0`` the deflated price must average to today's
price: ``E[D_t A_t] = A_0``, with ``D_t = 1 / B_t`` in the market-consistent set and
``D_t = Z_t / B_t`` (density over cash account) in the real-world set; both sets store ``D_t``
as the ``deflator`` column. Assets tested (Society of Actuaries, *Economic Scenario Generators:
A Practical Guide*, 2016, section 8.3):

* each zero-coupon bond column ``zcb_{m}y``: ``E[D_t P(t, t+m)] = P(0, t+m)``;
* each total-return index, ``equity_{name}`` and ``property_{name}``: ``E[D_t S_t] = S_0``
  (``S_0`` read from the files);
* the deflator itself, the bond maturing at ``t``: ``E[D_t] = P(0, t)``;
* any further assets passed in (:class:`pqflow.validation.assets.MartingaleAsset`: the CPI, real
  and defaultable bonds, built by :func:`pqflow.validation.assets.martingale_assets`).

Standard errors come from independent sampling units (antithetic pairs averaged first). A
cell's score (``z_score``) is the test its ``test`` column names
(:mod:`pqflow.validation.mean_tests`): the lognormal identity for the Gaussian economy's
deflated prices, the robust t for the credit claims and, when the density carries the credit
part, every real-world cell. The plain t is kept as ``z_score_plain_t`` for information;
``statistic_se`` and ``material_effect`` (5% of today's price on the statistic's scale) decide
whether the cell has the power to judge (:func:`pqflow.validation.summary.cells_summary`).
"""

from __future__ import annotations

from collections.abc import Callable, Collection, Generator, Mapping, Sequence

import numpy as np
import pandas as pd
from scipy.stats import norm

from pqflow.errors import IntegrityError
from pqflow.measure.blocks import CREDIT_PREFIX, column_drivers, density_factors
from pqflow.storage.names import bond_maturity_of, density_block_column, index_columns
from pqflow.storage.scenario_set import ScenarioSet, SetPass
from pqflow.validation.assets import MartingaleAsset
from pqflow.validation.mean_tests import MARTINGALE_DEVIATION, ROBUST, CellMoments, mean_test, rule_for_asset
from pqflow.validation.run_files import run_steps

__all__ = ["martingale_table", "martingale_steps", "restricted_blocks", "LEVELS"]

LEVELS = (0.95, 0.99)


def _column_value(c: str) -> Callable[[dict[str, np.ndarray]], np.ndarray]:
    return lambda cols: cols[c]


def _bond_reference(discount: Callable[[np.ndarray], np.ndarray], m: float) -> Callable[[np.ndarray], np.ndarray]:
    return lambda t: np.asarray(discount(np.asarray(t) + m))


def _level_reference(start: dict[str, float], c: str) -> Callable[[np.ndarray], np.ndarray]:
    return lambda t: np.full(np.shape(t), start[c])


def _builtin_assets(names: list[str], discount: Callable[[np.ndarray], np.ndarray],
                    start: dict[str, float]) -> list[MartingaleAsset]:
    """The deflator, each nominal bond and each index; an index's ``S_0`` is read into ``start``
    from the first path of the first part."""
    assets = [MartingaleAsset(
        name="deflator", description="zero bond maturing at t (deflator)", columns=(),
        value=lambda cols: np.ones_like(cols["deflator"]), reference=lambda t: np.asarray(discount(t)),
    )]
    for c in names:
        m = bond_maturity_of(c)
        if m is None:
            continue
        assets.append(MartingaleAsset(
            name=c, description=f"zero bond, {m:g} years to run", columns=(c,),
            value=_column_value(c),
            reference=_bond_reference(discount, m),
        ))
    for c in index_columns(names):
        kind = c.split("_", 1)[0]
        assets.append(MartingaleAsset(
            name=c, description=f"{kind} total-return index", columns=(c,),
            value=_column_value(c),
            reference=_level_reference(start, c),
        ))
    return assets


def _asset_weights(
    reader: ScenarioSet, assets: Sequence[MartingaleAsset], rates_drivers: Sequence[str]
) -> dict[str, tuple[str, ...]]:
    """For each asset of a real-world set, the restricted density columns whose product deflates
    it (empty: the written ``deflator``); always empty in a market-consistent set."""
    out: dict[str, tuple[str, ...]] = {a.name: () for a in assets}
    if reader.measure != "real_world":
        return out
    blocks = reader.density_blocks()
    if not blocks:
        return out
    for a in assets:
        if a.name == "deflator" or not a.columns:
            continue
        found = restricted_blocks(reader, a.columns, rates_drivers)
        out[a.name] = tuple(density_block_column("real_world", f) for f in found)
    return out


def restricted_blocks(
    reader: ScenarioSet, columns: Sequence[str], rates_drivers: Sequence[str]
) -> tuple[str, ...]:
    """The written density blocks whose product is a restricted density for a quantity built
    from ``columns`` and the cash account (:func:`pqflow.measure.blocks.density_factors`);
    empty when the set writes no blocks or none carries those drivers (use the full density).
    The same block names serve both sets: ``q_density_<block>`` in the real-world one,
    ``p_density_<block>`` in the market-consistent one."""
    blocks = reader.density_blocks()
    if not blocks:
        return ()
    inflation = ("real_rate", "inflation") if "cpi" in reader.column_names() else None
    try:
        needed = frozenset(rates_drivers).union(*(column_drivers(c, rates_drivers, inflation) for c in columns))
    except ValueError:
        return ()
    return density_factors(needed, blocks) or ()


def martingale_table(
    reader: ScenarioSet,
    discount: Callable[[np.ndarray], np.ndarray],
    extra: Sequence[MartingaleAsset] = (),
    *,
    credit_density: bool = False,
    rates_drivers: Sequence[str] = ("rates",),
    non_lognormal: Collection[str] = (),
    heston_drivers: Collection[str] = (),
    heston_unjudged: Mapping[str, str] | None = None,
) -> pd.DataFrame:
    """The table of :func:`martingale_steps` on a pass of its own over ``reader``'s parts."""
    scan = SetPass(scenario_set=reader)
    return run_steps({reader.measure: scan}, martingale_steps(
        scan, discount, extra, credit_density=credit_density, rates_drivers=rates_drivers,
        non_lognormal=non_lognormal, heston_drivers=heston_drivers, heston_unjudged=heston_unjudged))


def martingale_steps(
    scan: SetPass,
    discount: Callable[[np.ndarray], np.ndarray],
    extra: Sequence[MartingaleAsset] = (),
    *,
    credit_density: bool = False,
    rates_drivers: Sequence[str] = ("rates",),
    non_lognormal: Collection[str] = (),
    heston_drivers: Collection[str] = (),
    heston_unjudged: Mapping[str, str] | None = None,
) -> Generator[None, None, pd.DataFrame]:
    """One row per (asset, time > 0). ``discount`` is today's curve ``t -> P(0, t)``; ``extra``
    are further assets (their columns must be in the files, their names new); credit_density:
    whether the set's density carries the CIR credit part (its cells are then not lognormal);
    non_lognormal: assets judged by the robust t whatever the density (a stochastic-volatility
    index, :func:`pqflow.validation.mean_tests.stochastic_volatility_assets`); heston_drivers:
    the stochastic-volatility indices, whose part in a real-world weight (the full density, or a
    block that holds their driver) makes the cell not lognormal (robust t); heston_unjudged:
    those beyond the range in which that rule's size is measured, with the reason
    (:func:`pqflow.validation.mean_tests.unmeasured_heston_drivers`): real-world cells whose
    weight holds them are not judged (inconclusive).

    In a real-world set that carries restricted densities (:mod:`pqflow.measure.blocks`) every
    asset but the deflator itself is deflated with the density of the smallest block(s) holding
    its drivers over the cash account (column ``weight``): the identity ``E_P[w_B A_t / B_t] =
    A_0`` holds for anything the block determines, and the block's weights keep their power far
    longer than the full density's. The written ``deflator`` column (the full density over the
    cash account) is tested as the asset "deflator" (``E[D_t] = P(0, t)``) and the full density
    itself by the density check."""
    reader = scan.scenario_set
    names = reader.column_names()
    start: dict[str, float] = {}
    assets = [*_builtin_assets(names, discount, start), *extra]
    seen = [a.name for a in assets]
    if len(set(seen)) != len(seen):
        raise ValueError(f"martingale asset names must be unique, got {seen}")
    missing = sorted({c for a in extra for c in a.columns} - set(names))
    if missing:
        raise IntegrityError(f"{reader.set_dir}: columns {', '.join(missing)} are not in the files")
    indices = index_columns(names)
    weights = _asset_weights(reader, assets, rates_drivers)
    block_drivers = reader.density_blocks() if heston_drivers and reader.measure == "real_world" else {}
    factor_cols = [c for w in weights.values() for c in w]
    needed = list(dict.fromkeys(["deflator", *(c for a in assets for c in a.columns), *factor_cols,
                                 *(["cash_account"] if factor_cols else [])]))
    antithetic = reader.antithetic

    acc: dict[str, CellMoments | None] = {a.name: None for a in assets}
    last_times: list[np.ndarray] = []

    def feed(times: np.ndarray, cols: dict[str, np.ndarray]) -> None:
        for a in assets:
            factors = weights[a.name]
            if factors:
                deflator = np.prod([cols[c] for c in factors], axis=0) / cols["cash_account"]
            else:
                deflator = cols["deflator"]
            values = deflator * a.value(cols)
            prev = acc[a.name]
            m = CellMoments.of(values, antithetic, None if prev is None else prev.shift)
            acc[a.name] = m if prev is None else prev.merge(m)
        for e in indices:
            start.setdefault(e, float(cols[e][0, 0]))
        last_times[:] = [times]

    scan.add(needed, feed)
    yield
    assert last_times
    times = last_times[0]

    rows = []
    for a in assets:
        moments = acc[a.name]
        if moments is None:
            raise RuntimeError(f"no moments accumulated for asset {a.name!r} although parts were read")
        ref = np.asarray(a.reference(times), dtype=float)
        factors = weights[a.name]
        if factors:  # a restricted density: lognormal unless a credit or Heston block is among its factors
            with_credit = any(c.split("_density_", 1)[1].startswith(CREDIT_PREFIX) for c in factors)
            held = set().union(*(block_drivers.get(c.split("_density_", 1)[1], ()) for c in factors)) \
                & set(heston_drivers)
            rule = rule_for_asset(a.name, measure=reader.measure, credit_density=False, non_lognormal=non_lognormal)
            rule = ROBUST if with_credit or held else rule
        else:
            held = set(heston_drivers) if reader.measure == "real_world" else set()
            rule = rule_for_asset(a.name, measure=reader.measure, credit_density=credit_density or bool(heston_drivers),
                                  non_lognormal=non_lognormal)
        unjudged = [r for d, r in (heston_unjudged or {}).items() if d in held]
        res = mean_test(moments, ref, rule, deviation=MARTINGALE_DEVIATION, not_judged="; ".join(unjudged) or None)
        for k in range(1, times.size):
            z = res.z_score[k]
            row = {
                "asset": a.name,
                "description": a.description,
                "weight": (" * ".join(factors) + " / cash_account") if factors else "deflator",
                "time": float(times[k]),
                "expected": float(ref[k]),
                "estimate": float(res.estimate[k]),
                "std_error": float(res.std_error[k]),
                "ratio": float(res.estimate[k] / ref[k]),
                "ratio_std_error": float(res.std_error[k] / ref[k]),
                "test": str(res.test[k]),
                "z_score": float(z),
                "z_score_plain_t": float(res.z_plain[k]),
                "statistic_se": float(res.statistic_se[k]),
                "material_effect": float(res.material_effect[k]),
            }
            for level in LEVELS:
                row[f"pass_{int(round(level * 100))}"] = bool(abs(z) <= norm.ppf(0.5 + level / 2))
            rows.append(row)
    return pd.DataFrame(rows)
